//! Coverage of the study's own intervals, simulated at the fit.
//!
//! If the world were as fitted, how often would an interval computed the
//! way this study's was contain the truth? Replicate `k` draws a data set
//! at the fitted values with the study's error model, the generator of the
//! Monte Carlo ([`super::monte_carlo::Noise`]: `f(x_i; a_hat) + s sigma_i
//! e_i`, the stated sigma or `s` without sigma, normal or Student-t noise),
//! from `rng::stream(seed, Stream::Coverage, k)`, refits it through
//! [`crate::fit::Refitter`] warm-started from `a_hat`, analyses the refit
//! ([`crate::fit::analyse`]: its own covariance, `k` and chi-squared scale)
//! and computes per free parameter:
//!
//! - `analytic`: `value +- k u` of the replicate's fit;
//! - `profile`: the replicate's profile interval, the crossing search of
//!   [`super::profile::crossing_ends`] on both sides, warm-started from the
//!   replicate's fit. An end the profile does not reach (a bound or the
//!   scan limit) is *open* and counts as covering on that side; open ends
//!   are counted. An end whose refits failed leaves the replicate without a
//!   profile interval (counted as unavailable);
//! - `quote`: the interval [`super::verdict::decide`] would quote on the
//!   replicate with its fit and its profile (the bootstrap and Monte Carlo
//!   are not nested inside each replicate); replicates where no interval is
//!   quoted are counted by reason.
//!
//! Each is checked for containing `a_hat` (the simulation's truth). The
//! coverage of a kind is the share of replicates with that interval that
//! contain it, with its binomial standard error `sqrt(c (1 - c) / n)`; the
//! standard error under the nominal level, `sqrt(L (1 - L) / n)`, is what
//! the verdict rule tests against.
//!
//! Assumptions: the fitted values are the truth and the error model is the
//! stated one; the simulation says how the intervals behave near the fit,
//! not that the model or the sigma are right.
//!
//! **Shards.** [`outcomes`] computes the replicates of any index range
//! (each from its own stream), and [`summarise`] turns outcomes into the
//! result without touching the data: shards may compute contiguous ranges
//! separately and concatenate their outcomes in index order before
//! summarising; the result equals the one-piece run.

use std::collections::BTreeMap;
use std::ops::Range;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

use super::monte_carlo::Noise;
use super::profile::{self, EndStatus, ParameterProfile, ProfileResult};
use super::resample::failure_reason;
use super::verdict::{self, NoQuote, QuoteKind, VerdictInputs};
use super::{Fitted, Progress};
use crate::data::Dataset;
use crate::fit::{self, DataView, Problem, Refitter};
use crate::rng::{self, Stream};

/// Replicates handed to one rayon task.
const CHUNK: usize = 4;

/// The interval kinds whose coverage is simulated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CoverageKind {
    /// `value +- k u`.
    Analytic,
    /// The chi-squared profile interval.
    Profile,
    /// The interval the verdicts would quote.
    Quote,
}

/// One replicate's profile interval of one parameter.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ProfileEnds {
    /// Lower end (meaningless when `open_below`).
    pub lower: f64,
    /// Upper end (meaningless when `open_above`).
    pub upper: f64,
    /// The profile did not cross below (a bound or the scan limit).
    pub open_below: bool,
    /// The profile did not cross above.
    pub open_above: bool,
}

/// One replicate's intervals of one free parameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplicateIntervals {
    /// `[value - k u, value + k u]`; `None` without a standard error.
    pub analytic: Option<[f64; 2]>,
    /// The profile interval; `None` when its search failed.
    pub profile: Option<ProfileEnds>,
    /// The quoted interval and its kind; `None` when none is quoted.
    pub quote: Option<(QuoteKind, [f64; 2])>,
    /// Why no interval is quoted.
    pub no_quote: Option<NoQuote>,
}

/// The outcome of one replicate: its intervals, or why its refit failed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplicateOutcome {
    /// Replicate index (its random stream).
    pub index: usize,
    /// Why the refit failed (`not-converged`, `non-finite`, `analysis`).
    pub failed: Option<String>,
    /// One entry per free parameter, in parameter order (empty when failed).
    pub parameters: Vec<ReplicateIntervals>,
    /// Refits spent (the refit and the profile searches).
    pub refits: usize,
}

/// What [`summarise`] needs besides the outcomes (no data, no model).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CoverageSetup {
    /// Names of the free parameters, in parameter order.
    pub names: Vec<String>,
    /// Their fitted values: the simulation's truth.
    pub truth: Vec<f64>,
    /// Confidence level of the intervals.
    pub level: f64,
    /// Replicates requested.
    pub replicates: usize,
    /// `"normal"`, `"student-t"` or `"poisson"` (counts drawn at the
    /// fitted means, for a Poisson fit).
    pub noise: String,
    /// Degrees of freedom of the Student-t noise.
    pub student_t_dof: Option<f64>,
    /// The noise factor `s` (as the Monte Carlo's).
    pub noise_scale: f64,
    /// Errors in x: the observed x are drawn off the fitted x too.
    #[serde(default)]
    pub moves_x: bool,
}

/// Coverage of one interval kind of one parameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IntervalCoverage {
    /// Which interval.
    pub kind: CoverageKind,
    /// Share of the `counted` replicates whose interval contains the truth
    /// (NaN, i.e. null, when none was counted).
    pub coverage: f64,
    /// Binomial standard error of `coverage`, `sqrt(c (1 - c) / counted)`.
    pub std_error: f64,
    /// Standard error at the nominal level, `sqrt(L (1 - L) / counted)`:
    /// the scatter of `coverage` if the interval were exact.
    pub null_std_error: f64,
    /// Replicates with this interval.
    pub counted: usize,
    /// Of those, how many contain the truth.
    pub covered: usize,
    /// Misses with the truth below the lower end.
    pub missed_below: usize,
    /// Misses with the truth above the upper end.
    pub missed_above: usize,
    /// Successful replicates without this interval (no standard error, a
    /// failed profile search, no quote).
    pub unavailable: usize,
    /// Profile only: replicates whose profile did not cross below (counted
    /// as covering on that side).
    pub open_below: usize,
    /// Profile only: the same above.
    pub open_above: usize,
    /// Quote only: replicates per quoted kind (`analytic`, `profile`) or
    /// reason for none (`none: <reason>`).
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub quotes: BTreeMap<String, usize>,
}

/// Coverage of one parameter's intervals.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParameterCoverage {
    /// Parameter name.
    pub name: String,
    /// Fitted value: the truth of the simulation.
    pub truth: f64,
    /// One entry per kind: analytic, profile, quote.
    pub intervals: Vec<IntervalCoverage>,
}

impl ParameterCoverage {
    /// The entry of one kind.
    pub fn kind(&self, kind: CoverageKind) -> Option<&IntervalCoverage> {
        self.intervals.iter().find(|i| i.kind == kind)
    }
}

/// Result of the coverage simulation.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CoverageResult {
    /// Replicates requested.
    pub replicates: usize,
    /// Replicates run.
    pub run: usize,
    /// Replicates whose refit failed (excluded from every coverage).
    pub failed: usize,
    /// Failed replicates by reason.
    pub failures: BTreeMap<String, usize>,
    /// Nominal level of every interval.
    pub level: f64,
    /// `"normal"`, `"student-t"` or `"poisson"` (counts drawn at the
    /// fitted means, for a Poisson fit).
    pub noise: String,
    /// Degrees of freedom of Student-t noise (`null` for normal and
    /// Poisson).
    pub student_t_dof: Option<f64>,
    /// The noise factor `s` of `s sigma_i e_i`.
    pub noise_scale: f64,
    /// Errors in x (`data.sigma_x`): each data set's x were drawn too, `x_i
    /// + s sigma_x,i e_i`, the curve staying at the fitted x.
    #[serde(default)]
    pub moves_x: bool,
    /// Refits spent over all replicates.
    pub refits: usize,
    /// One entry per free parameter.
    pub parameters: Vec<ParameterCoverage>,
}

/// Student-t degrees of freedom of the simulated noise: the coverage
/// setting, else the Monte Carlo's.
fn student_t_dof(ctx: &Fitted) -> Option<f64> {
    ctx.settings
        .coverage
        .student_t_dof
        .or(ctx.settings.monte_carlo.student_t_dof)
}

/// The setup of `ctx`'s simulation.
pub fn setup(ctx: &Fitted) -> CoverageSetup {
    let free = ctx.free_mask();
    let values = ctx.values();
    let noise = super::monte_carlo::noise_name(ctx, student_t_dof(ctx));
    // Counts are drawn from the Poisson law whatever the Student-t setting.
    let dof = student_t_dof(ctx).filter(|_| noise != "poisson");
    CoverageSetup {
        names: (0..free.len())
            .filter(|&j| free[j])
            .map(|j| ctx.problem.params[j].name.clone())
            .collect(),
        truth: (0..free.len()).filter(|&j| free[j]).map(|j| values[j]).collect(),
        level: ctx.settings.level,
        replicates: ctx.settings.coverage.replicates,
        noise: noise.to_string(),
        moves_x: ctx.data.sigma_x.is_some(),
        student_t_dof: dof,
        noise_scale: super::monte_carlo::noise_scale(ctx),
    }
}

/// Runs the coverage simulation with the study's settings.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> CoverageResult {
    let r = ctx.settings.coverage.replicates;
    progress.start("coverage", r as u64);
    let out = outcomes(ctx, 0..r, progress);
    progress.finish();
    summarise(&setup(ctx), &out)
}

/// One worker's scratch: its refitter and its copy of the data.
struct Worker {
    refitter: Refitter,
    data: Dataset,
}

/// Computes replicates `indices` in parallel (outcomes in index order,
/// whatever the thread count).
pub fn outcomes(ctx: &Fitted, indices: Range<usize>, progress: &dyn Progress) -> Vec<ReplicateOutcome> {
    let noise = Noise::new(ctx, student_t_dof(ctx));
    let chunks: Vec<Range<usize>> = indices
        .clone()
        .step_by(CHUNK)
        .map(|s| s..(s + CHUNK).min(indices.end))
        .collect();
    let per_chunk: Vec<Vec<ReplicateOutcome>> = chunks
        .into_par_iter()
        .map_init(
            || Worker {
                refitter: Refitter::new(&ctx.problem, ctx.data.len()),
                data: ctx.data.clone(),
            },
            |w, range| {
                let out: Vec<ReplicateOutcome> =
                    range.clone().map(|k| replicate(ctx, &noise, w, k)).collect();
                progress.advance(range.len() as u64);
                out
            },
        )
        .collect();
    per_chunk.into_iter().flatten().collect()
}

/// Replicate `k`: simulate, refit, analyse, and compute its intervals.
fn replicate(ctx: &Fitted, noise: &Noise, w: &mut Worker, k: usize) -> ReplicateOutcome {
    let mut rng = rng::stream(ctx.settings.seed, Stream::Coverage, k as u64);
    noise.draw(&mut rng, &mut w.data.y);
    if noise.moves_x() {
        noise.draw_x(&mut rng, &mut w.data.x[0]);
    }
    let failed = |why: &str, refits: usize| ReplicateOutcome {
        index: k,
        failed: Some(why.to_string()),
        parameters: Vec::new(),
        refits,
    };
    let start = ctx.values();
    let free = ctx.free_mask();
    let xs = w.data.x_slices();
    let sigma = w.data.sigma_or_ones();
    let view = DataView {
        x: &xs,
        y: &w.data.y,
        sigma: &sigma,
        sigma_x: w.data.sigma_x.as_deref().unwrap_or(&[]),
    };
    let refit = w.refitter.refit(&ctx.problem, &view, &start, &free);
    let params = w.refitter.params().to_vec();
    if let Some(why) = failure_reason(&refit, &params) {
        return failed(why, 1);
    }
    let Ok(rep_fit) = fit::analyse(&ctx.problem, &w.data, &params, &refit) else {
        return failed("analysis", 1);
    };
    let rep = Fitted {
        problem: Problem {
            model: ctx.problem.model,
            params: ctx.problem.params.clone(),
            options: ctx.problem.options.clone(),
        },
        data: &w.data,
        fit: &rep_fit,
        settings: ctx.settings,
    };
    let level = ctx.settings.level;
    let kf = verdict::coverage_factor(&rep_fit, level);
    let mut refits = 1;
    let mut analytic = Vec::new();
    let mut profiles = Vec::new();
    let mut pps = Vec::new();
    for (j, p) in rep_fit.parameters.iter().enumerate().filter(|(j, _)| free[*j]) {
        analytic.push(
            p.std_error
                .map(|u| [p.value - kf * u, p.value + kf * u])
                .filter(|[a, b]| a.is_finite() && b.is_finite()),
        );
        let e = profile::crossing_ends(&rep, j);
        refits += e.refits;
        let resolved = e.lower_status != EndStatus::Unresolved && e.upper_status != EndStatus::Unresolved;
        profiles.push(resolved.then_some(ProfileEnds {
            lower: e.lower,
            upper: e.upper,
            open_below: e.lower_status != EndStatus::Found,
            open_above: e.upper_status != EndStatus::Found,
        }));
        pps.push(ParameterProfile {
            name: p.name.clone(),
            estimate: p.value,
            std_error: p.std_error,
            lower: e.lower,
            upper: e.upper,
            lower_found: e.lower_status == EndStatus::Found,
            upper_found: e.upper_status == EndStatus::Found,
            lower_status: e.lower_status,
            upper_status: e.upper_status,
            non_identifiable: e.lower_status == EndStatus::ScanLimit
                || e.upper_status == EndStatus::ScanLimit,
            failed: e.failed,
            refits: e.refits,
            ..ParameterProfile::default()
        });
    }
    let pr = ProfileResult {
        level,
        threshold: profile::threshold_for(&rep_fit, level),
        chi2_min: rep_fit.chi2,
        failed: pps.iter().map(|p| p.failed).sum(),
        parameters: pps,
        chi2_scale: super::profile_scan::chi2_scale(&rep_fit),
        base_not_minimum: false,
    };
    let verdicts = verdict::decide(&VerdictInputs {
        fit: &rep_fit,
        bootstrap: None,
        monte_carlo: None,
        profile: Some(&pr),
        multistart: None,
        tolerance: ctx.settings.tolerance,
        sigma_given: ctx.data.has_sigma(),
        level,
    });
    let parameters = analytic
        .into_iter()
        .zip(profiles)
        .zip(verdicts)
        .map(|((analytic, profile), v)| ReplicateIntervals {
            analytic,
            profile,
            quote: v.quote.map(|q| (q.kind, [q.lower, q.upper])),
            no_quote: v.no_quote,
        })
        .collect();
    ReplicateOutcome {
        index: k,
        failed: None,
        parameters,
        refits,
    }
}

/// Serialised kebab-case name of an enumeration value.
fn code<T: Serialize>(x: T) -> String {
    serde_json::to_value(x)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

/// A tally of one kind while summarising.
struct Tally {
    counted: usize,
    covered: usize,
    below: usize,
    above: usize,
    unavailable: usize,
    open_below: usize,
    open_above: usize,
    quotes: BTreeMap<String, usize>,
}

impl Tally {
    fn new() -> Tally {
        Tally {
            counted: 0,
            covered: 0,
            below: 0,
            above: 0,
            unavailable: 0,
            open_below: 0,
            open_above: 0,
            quotes: BTreeMap::new(),
        }
    }

    /// Adds an interval (`None` ends are open) or its absence.
    fn add(&mut self, iv: Option<(Option<f64>, Option<f64>)>, truth: f64) {
        let Some((lo, hi)) = iv else {
            self.unavailable += 1;
            return;
        };
        self.counted += 1;
        if lo.is_some_and(|l| truth < l) {
            self.below += 1;
        } else if hi.is_some_and(|h| truth > h) {
            self.above += 1;
        } else {
            self.covered += 1;
        }
    }

    fn finish(self, kind: CoverageKind, level: f64) -> IntervalCoverage {
        let n = self.counted as f64;
        let c = self.covered as f64 / n;
        IntervalCoverage {
            kind,
            coverage: c,
            std_error: (c * (1.0 - c) / n).sqrt(),
            null_std_error: (level * (1.0 - level) / n).sqrt(),
            counted: self.counted,
            covered: self.covered,
            missed_below: self.below,
            missed_above: self.above,
            unavailable: self.unavailable,
            open_below: self.open_below,
            open_above: self.open_above,
            quotes: self.quotes,
        }
    }
}

/// The coverage of every kind from replicate outcomes (any order of
/// indices; no refits, no data): the pure summary step.
pub fn summarise(setup: &CoverageSetup, outcomes: &[ReplicateOutcome]) -> CoverageResult {
    let mut failures: BTreeMap<String, usize> = BTreeMap::new();
    for o in outcomes {
        if let Some(why) = &o.failed {
            *failures.entry(why.clone()).or_default() += 1;
        }
    }
    let ok: Vec<&ReplicateOutcome> = outcomes
        .iter()
        .filter(|o| o.failed.is_none() && o.parameters.len() == setup.names.len())
        .collect();
    let parameters = setup
        .names
        .iter()
        .zip(&setup.truth)
        .enumerate()
        .map(|(j, (name, &t))| {
            let mut an = Tally::new();
            let mut pr = Tally::new();
            let mut qu = Tally::new();
            for o in &ok {
                let p = &o.parameters[j];
                an.add(p.analytic.map(|[a, b]| (Some(a), Some(b))), t);
                if let Some(e) = &p.profile {
                    pr.open_below += usize::from(e.open_below);
                    pr.open_above += usize::from(e.open_above);
                }
                pr.add(
                    p.profile.map(|e| {
                        (
                            (!e.open_below).then_some(e.lower),
                            (!e.open_above).then_some(e.upper),
                        )
                    }),
                    t,
                );
                let key = match (&p.quote, p.no_quote) {
                    (Some((kind, _)), _) => code(kind),
                    (None, Some(why)) => format!("none: {}", code(why)),
                    (None, None) => "none".to_string(),
                };
                *qu.quotes.entry(key).or_default() += 1;
                qu.add(p.quote.map(|(_, [a, b])| (Some(a), Some(b))), t);
            }
            ParameterCoverage {
                name: name.clone(),
                truth: t,
                intervals: vec![
                    an.finish(CoverageKind::Analytic, setup.level),
                    pr.finish(CoverageKind::Profile, setup.level),
                    qu.finish(CoverageKind::Quote, setup.level),
                ],
            }
        })
        .collect();
    CoverageResult {
        replicates: setup.replicates,
        run: outcomes.len(),
        failed: outcomes.len() - ok.len(),
        failures,
        level: setup.level,
        noise: setup.noise.clone(),
        student_t_dof: setup.student_t_dof,
        noise_scale: setup.noise_scale,
        moves_x: setup.moves_x,
        refits: outcomes.iter().map(|o| o.refits).sum(),
        parameters,
    }
}

/// The width factor of a coverage `c` at level `L`: `z_L / z_c` with
/// `z_p` the normal quantile at `(1 + p) / 2`. For a normal estimate it is
/// the factor by which `u` would have to be multiplied for `value +- k u`
/// to cover at the level (1 when `c = L`; below 1 when the interval
/// over-covers, above 1 when it under-covers). 0 at `c = 1`, infinite at
/// `c = 0`, NaN when `c` or `L` is not a probability.
pub fn width_factor(coverage: f64, level: f64) -> f64 {
    if !((0.0..=1.0).contains(&coverage) && level > 0.0 && level < 1.0) {
        return f64::NAN;
    }
    let Ok(nd) = Normal::new(0.0, 1.0) else {
        return f64::NAN;
    };
    let z = |p: f64| nd.inverse_cdf(0.5 * (1.0 + p));
    if coverage >= 1.0 {
        return 0.0;
    }
    if coverage <= 0.0 {
        return f64::INFINITY;
    }
    z(level) / z(coverage)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn setup_of(level: f64) -> CoverageSetup {
        CoverageSetup {
            names: vec!["a".into()],
            truth: vec![1.0],
            level,
            replicates: 4,
            noise: "normal".into(),
            student_t_dof: None,
            noise_scale: 1.0,
            moves_x: false,
        }
    }

    fn outcome(index: usize, analytic: [f64; 2], profile: ProfileEnds) -> ReplicateOutcome {
        ReplicateOutcome {
            index,
            failed: None,
            parameters: vec![ReplicateIntervals {
                analytic: Some(analytic),
                profile: Some(profile),
                quote: Some((QuoteKind::Analytic, analytic)),
                no_quote: None,
            }],
            refits: 3,
        }
    }

    #[test]
    fn counts_covers_misses_and_open_ends() {
        let closed = |lo, hi| ProfileEnds {
            lower: lo,
            upper: hi,
            open_below: false,
            open_above: false,
        };
        let out = vec![
            outcome(0, [0.5, 1.5], closed(0.6, 1.4)),
            outcome(1, [1.1, 2.0], closed(1.2, 2.0)),
            outcome(2, [0.0, 0.9], closed(0.0, 0.95)),
            // The profile's upper end is open: covering on that side.
            outcome(
                3,
                [0.2, 0.8],
                ProfileEnds {
                    lower: 0.3,
                    upper: 0.5,
                    open_below: false,
                    open_above: true,
                },
            ),
            ReplicateOutcome {
                index: 4,
                failed: Some("not-converged".into()),
                parameters: Vec::new(),
                refits: 1,
            },
        ];
        let r = summarise(&setup_of(0.5), &out);
        assert_eq!((r.run, r.failed, r.refits), (5, 1, 13));
        assert_eq!(r.failures.get("not-converged"), Some(&1));
        let a = r.parameters[0].kind(CoverageKind::Analytic).unwrap();
        assert_eq!(
            (a.counted, a.covered, a.missed_below, a.missed_above),
            (4, 1, 1, 2)
        );
        // 1 of 4: c = 0.25, se = sqrt(0.25 * 0.75 / 4); null se sqrt(0.25 / 4).
        assert!((a.coverage - 0.25).abs() < 1e-15);
        assert!((a.std_error - (0.1875f64 / 4.0).sqrt()).abs() < 1e-15);
        assert!((a.null_std_error - 0.25).abs() < 1e-15);
        let p = r.parameters[0].kind(CoverageKind::Profile).unwrap();
        assert_eq!((p.counted, p.covered, p.open_above, p.open_below), (4, 2, 1, 0));
        let q = r.parameters[0].kind(CoverageKind::Quote).unwrap();
        assert_eq!(q.quotes.get("analytic"), Some(&4));
        // Summaries of split index ranges concatenated equal the whole.
        let mut parts = out[..2].to_vec();
        parts.extend_from_slice(&out[2..]);
        assert_eq!(summarise(&setup_of(0.5), &parts), r);
    }

    #[test]
    fn width_factor_inverts_normal_coverage() {
        // For a normal estimate with sd sigma and quoted u = sigma / w,
        // +- z_L u covers 2 Phi(z_L / w) - 1 (identity): w comes back.
        let nd = Normal::new(0.0, 1.0).unwrap();
        for (level, w) in [(0.6827, 1.25), (0.95, 0.8), (0.5, 2.0)] {
            let z = nd.inverse_cdf(0.5 * (1.0 + level));
            let c = 2.0 * nd.cdf(z / w) - 1.0;
            assert!((width_factor(c, level) - w).abs() < 1e-9, "{level} {w}");
        }
        assert_eq!(width_factor(0.6827, 0.6827), 1.0);
        assert_eq!(width_factor(1.0, 0.6827), 0.0);
        assert!(width_factor(0.0, 0.6827).is_infinite());
        assert!(width_factor(f64::NAN, 0.6827).is_nan());
    }
}
