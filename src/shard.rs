//! Exact shards: the work of an audit split into slices that separate
//! machines compute, and joined again into the single-machine result.
//!
//! Every random draw comes from `rng::stream(seed, diagnostic, index)` and
//! every unit of work is computed on its own, so the work splits exactly:
//!
//! | work | item | slice of shard `K/N` |
//! |---|---|---|
//! | bootstrap | replicate `k` | replicates `[(K-1) B / N, K B / N)` |
//! | Monte Carlo | trial `k` | trials `[(K-1) M / N, K M / N)` (adaptive: `M` is the cap) |
//! | profile | one free parameter's profile | that slice of the free parameters |
//! | contours | one pair's map | that slice of the pairs |
//!
//! A shard keeps the raw outcome of every item of its slice ([`Work`]:
//! replicate estimates, profiles, maps), never a summary; the pure summary
//! step ([`crate::audit::summarise`]) reads the joined items in index
//! order, so the sums run in the same order as on one machine. A single
//! run is the merge of one part: [`crate::audit::run`] computes the whole
//! slice `1/1` and summarises it through the same function.
//!
//! The multi-start search is not split: the re-basing of the whole battery
//! depends on its result, so every shard runs it in full (it is
//! deterministic) before its slice, and the merge takes it from the parts.
//!
//! Adding replicate-indexed work (for example a coverage simulation): give
//! [`Work`] a `Pieces<T>` field for its per-item outcome `T`, compute the
//! slice in [`crate::audit::compute`] with [`Slice::range`] of its item
//! count, and summarise the joined items in [`crate::audit::summarise`];
//! [`Work::join`] must join the new field like the others.

use std::ops::Range;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use crate::diagnostics::contour::ContourResult;
use crate::diagnostics::multistart::MultistartResult;
use crate::diagnostics::profile::ParameterProfile;
use crate::diagnostics::resample::Outcome;

/// Shard `k` of `n` (1-based, as on the command line: `--shard K/N`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct Slice {
    /// Which slice, 1 to `n`.
    pub k: usize,
    /// How many slices.
    pub n: usize,
}

impl Slice {
    /// All the work in one slice: `1/1`.
    pub fn whole() -> Slice {
        Slice { k: 1, n: 1 }
    }

    /// Whether this is `1/1`.
    pub fn is_whole(self) -> bool {
        self.n == 1
    }

    /// The items of this slice among `total`: `[(k-1) total / n, k total / n)`.
    /// The slices of `1/n .. n/n` cover `0..total` once, in order.
    pub fn range(self, total: usize) -> Range<usize> {
        let at = |k: usize| ((k as u128 * total as u128) / self.n as u128) as usize;
        at(self.k - 1)..at(self.k)
    }
}

impl std::fmt::Display for Slice {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}/{}", self.k, self.n)
    }
}

impl FromStr for Slice {
    type Err = String;

    fn from_str(s: &str) -> Result<Slice, String> {
        let bad = || format!("'{s}' is not a shard K/N with 1 <= K <= N (for example 2/8)");
        let (k, n) = s.trim().split_once('/').ok_or_else(bad)?;
        let k: usize = k.trim().parse().map_err(|_| bad())?;
        let n: usize = n.trim().parse().map_err(|_| bad())?;
        if n == 0 || k == 0 || k > n {
            return Err(bad());
        }
        Ok(Slice { k, n })
    }
}

/// The items `start .. start + items.len()` of a list of `total` items.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Pieces<T> {
    /// Items of the whole list.
    pub total: usize,
    /// Index of the first item held.
    pub start: usize,
    /// The items held, in index order.
    pub items: Vec<T>,
}

impl<T> Pieces<T> {
    /// The pieces of slice `range` of `total` items.
    pub fn new(total: usize, range: Range<usize>, items: Vec<T>) -> Pieces<T> {
        Pieces {
            total,
            start: range.start,
            items,
        }
    }

    /// Joins pieces of one list into the whole list, in index order. The
    /// pieces must cover `0..total` exactly once; the last may stop short
    /// of `total` only when it is the only piece (an adaptive run that
    /// stopped early on one machine).
    pub fn join(mut parts: Vec<Pieces<T>>, what: &str) -> Result<Vec<T>, String> {
        parts.sort_by_key(|p| p.start);
        let total = parts.first().map_or(0, |p| p.total);
        if parts.len() == 1 {
            let p = parts.pop().unwrap_or(Pieces {
                total: 0,
                start: 0,
                items: Vec::new(),
            });
            if p.start != 0 || p.items.len() > p.total {
                return Err(format!("{what}: the items held do not start at 0"));
            }
            return Ok(p.items);
        }
        let mut out = Vec::with_capacity(total);
        for p in parts {
            if p.total != total {
                return Err(format!(
                    "{what}: parts count {} and {} items in all",
                    total, p.total
                ));
            }
            if p.start != out.len() {
                return Err(format!(
                    "{what}: items {}..{} missing or held twice",
                    out.len().min(p.start),
                    out.len().max(p.start)
                ));
            }
            out.extend(p.items);
        }
        if out.len() != total {
            return Err(format!("{what}: items {}..{total} missing", out.len()));
        }
        Ok(out)
    }
}

/// One replicate's outcome as stored in a part: the refit's parameter
/// vector, or why it failed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum StoredOutcome {
    /// The parameter vector.
    Ok(Vec<f64>),
    /// The failure reason (as in `failures` of results.json).
    Failed(String),
}

/// The failure reasons a refit can give (see [`crate::diagnostics::resample::FailedReplicate`]).
const REASONS: [&str; 3] = ["not-converged", "non-finite", "no-residuals"];

impl StoredOutcome {
    /// The stored form of an outcome.
    pub fn store(o: &Outcome) -> StoredOutcome {
        match o {
            Outcome::Ok(p) => StoredOutcome::Ok(p.clone()),
            Outcome::Failed(r) => StoredOutcome::Failed((*r).to_string()),
        }
    }

    /// Back to an outcome; an unknown failure reason is an error.
    pub fn load(self) -> Result<Outcome, String> {
        match self {
            StoredOutcome::Ok(p) => Ok(Outcome::Ok(p)),
            StoredOutcome::Failed(r) => REASONS
                .iter()
                .find(|k| **k == r)
                .map(|k| Outcome::Failed(k))
                .ok_or_else(|| format!("unknown failure reason '{r}'")),
        }
    }
}

/// The raw outcomes of one slice of one study's work (or, joined, of all
/// of it): what a part carries and what the summary step reads.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Work {
    /// The multi-start search, in full, before re-basing (when run).
    pub multistart: Option<MultistartResult>,
    /// Bootstrap replicate outcomes (when run).
    pub bootstrap: Option<Pieces<StoredOutcome>>,
    /// Monte Carlo trial outcomes (when run).
    pub monte_carlo: Option<Pieces<StoredOutcome>>,
    /// Profiles, one per free parameter (when run).
    pub profile: Option<Pieces<ParameterProfile>>,
    /// Contour maps, one per pair (when run).
    pub contours: Option<Pieces<ContourResult>>,
}

/// A study's work joined from all its slices.
#[derive(Debug, Clone, PartialEq)]
pub struct Joined {
    /// The multi-start search (before re-basing).
    pub multistart: Option<MultistartResult>,
    /// Bootstrap outcomes of replicates `0..B`.
    pub bootstrap: Option<Vec<Outcome>>,
    /// Monte Carlo outcomes of trials `0..M` (or up to an early stop).
    pub monte_carlo: Option<Vec<Outcome>>,
    /// Every free parameter's profile.
    pub profile: Option<Vec<ParameterProfile>>,
    /// Every pair's map.
    pub contours: Option<Vec<ContourResult>>,
}

fn join_opt<T>(parts: Vec<Option<Pieces<T>>>, what: &str) -> Result<Option<Vec<T>>, String> {
    let present = parts.iter().filter(|p| p.is_some()).count();
    if present == 0 {
        return Ok(None);
    }
    if present != parts.len() {
        return Err(format!("{what} is present in some parts only"));
    }
    Pieces::join(parts.into_iter().flatten().collect(), what).map(Some)
}

fn load_all(v: Option<Vec<StoredOutcome>>) -> Result<Option<Vec<Outcome>>, String> {
    v.map(|v| v.into_iter().map(StoredOutcome::load).collect())
        .transpose()
}

impl Work {
    /// Joins the slices of one study's work (in any order).
    pub fn join(parts: Vec<Work>) -> Result<Joined, String> {
        let mut ms = Vec::new();
        let (mut b, mut m, mut p, mut c) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for w in parts {
            ms.push(w.multistart);
            b.push(w.bootstrap);
            m.push(w.monte_carlo);
            p.push(w.profile);
            c.push(w.contours);
        }
        let multistart = ms.first().cloned().flatten();
        if ms.iter().any(|x| *x != multistart) {
            return Err("the parts' multi-start searches differ (built from different code?)".into());
        }
        Ok(Joined {
            multistart,
            bootstrap: load_all(join_opt(b, "bootstrap")?)?,
            monte_carlo: load_all(join_opt(m, "Monte Carlo")?)?,
            profile: join_opt(p, "profile")?,
            contours: join_opt(c, "contours")?,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slices_cover_every_item_once_in_order() {
        // Identity: the ranges of 1/n .. n/n partition 0..total.
        for total in [0usize, 1, 5, 7, 100, 2001] {
            for n in [1usize, 2, 3, 7, 16] {
                let mut next = 0;
                for k in 1..=n {
                    let r = Slice { k, n }.range(total);
                    assert_eq!(r.start, next);
                    next = r.end;
                }
                assert_eq!(next, total);
            }
        }
        assert_eq!(Slice { k: 2, n: 3 }.range(10), 3..6);
    }

    #[test]
    fn parses_k_of_n() {
        assert_eq!("3/7".parse::<Slice>(), Ok(Slice { k: 3, n: 7 }));
        for bad in ["0/3", "4/3", "1/0", "3", "a/b", ""] {
            assert!(bad.parse::<Slice>().is_err(), "{bad}");
        }
    }

    #[test]
    fn part_encoding_keeps_every_f64_bit_for_bit() {
        // CBOR (RFC 8949) stores binary64 floats; NaN and the infinities,
        // which JSON cannot hold, come back too.
        let values = vec![
            0.1 + 0.2,
            -0.0,
            f64::MIN_POSITIVE,
            5e-324,
            1.0e308,
            std::f64::consts::PI,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        let p = Pieces::new(
            9,
            0..2,
            vec![
                StoredOutcome::Ok(values.clone()),
                StoredOutcome::Failed("non-finite".into()),
            ],
        );
        let nan = Pieces::new(1, 0..1, vec![f64::NAN]);
        let mut bytes = Vec::new();
        ciborium::into_writer(&(p.clone(), nan), &mut bytes).unwrap();
        let (back, nan_back): (Pieces<StoredOutcome>, Pieces<f64>) =
            ciborium::from_reader(bytes.as_slice()).unwrap();
        let StoredOutcome::Ok(v) = &back.items[0] else {
            panic!("outcome kind lost")
        };
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(v), bits(&values));
        assert_eq!(back.items[1], StoredOutcome::Failed("non-finite".into()));
        assert!(nan_back.items[0].is_nan());
        assert_eq!(back.items[1].clone().load(), Ok(Outcome::Failed("non-finite")));
        assert!(StoredOutcome::Failed("other".into()).load().is_err());
    }

    #[test]
    fn join_refuses_gaps_and_overlaps() {
        let p = |s: usize, v: Vec<u8>| Pieces {
            total: 4,
            start: s,
            items: v,
        };
        assert_eq!(
            Pieces::join(vec![p(2, vec![3, 4]), p(0, vec![1, 2])], "x"),
            Ok(vec![1, 2, 3, 4])
        );
        assert!(Pieces::join(vec![p(0, vec![1]), p(2, vec![3, 4])], "x").is_err());
        assert!(Pieces::join(vec![p(0, vec![1, 2]), p(1, vec![2, 3, 4])], "x").is_err());
        assert!(Pieces::join(vec![p(0, vec![1, 2]), p(2, vec![3])], "x").is_err());
    }
}
