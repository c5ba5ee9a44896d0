//! Multi-start search for competing minima.
//!
//! The search refits the problem from many starting points spread over a box
//! that fits the problem, in batches until enough starts have run, sets
//! aside the degenerate ends, groups the others into distinct minima and
//! tells whether the fit from the study's start is the best of them.
//!
//! # Rules
//!
//! **Sampling box** (per parameter, see [`sampling_box`]; built from what the
//! study says about scale, never from the standard errors of a fit that may
//! be local or degenerate). A fixed parameter stays at its value. A
//! parameter with two finite bounds is sampled over its bounds. Otherwise:
//!
//! - a *position* on an x axis (read from the formula: the parameter is
//!   subtracted from or compared with a data column, e.g. `wl - mu`) gets
//!   that column's data range widened by [`POSITION_MARGIN`] of the range
//!   on each side;
//! - a *sign-definite* parameter (a bound at or beyond 0: `min >= 0` or
//!   `max <= 0`) gets [`DECADES`] decades on each side of its start's
//!   magnitude (the data's largest `|y|` for a start of 0);
//! - any other parameter gets `start +- 3 |start|` ([`BOX_FACTOR`]; the
//!   data's largest `|y|` for a start of 0).
//!
//! The study's start always lies in the box; the value of the fit from the
//! start joins a position or default box only when it lies within the box's
//! half-width of the start, and never widens the decades of a sign-definite
//! one (a fit that ran off does not stretch the box); the one finite bound,
//! if any, cuts it. When `settings.multistart.log_uniform` is on, a
//! positive box (`low >= 0`, `high > 0`) that is not a position and spans
//! more than a decade is sampled uniformly in the logarithm; a positive box
//! that starts at 0 is sampled over its top three decades (`[high * 1e-3,
//! high]`, lowered to the smallest positive start or value when that is
//! smaller), and `box_bounds` reports the range actually sampled.
//!
//! **Design and batches.** Batch `b` is one Latin hypercube of
//! `settings.multistart.starts` points over the free parameters
//! ([`super::sampling::latin_hypercube`]), drawn in full from
//! `rng::stream(seed, Stream::Multistart, b)` before any refit of the
//! batch. After each batch the endpoints so far are summarised; the search
//! stops when the estimated probability of a missed minimum (below) is at
//! most `settings.multistart.missed_target` (`stopped = "estimate-small"`),
//! or when one more batch would exceed `settings.multistart.max_starts`
//! (`stopped = "cap-reached"`; the cap is never below the first batch).
//! Starts do not depend on the thread count and the fits (deterministic
//! refits, collected in start order) do not either.
//!
//! **Refits.** Every start is refitted by [`crate::fit::Refitter::refit`]
//! with the free mask of the study (one workspace per rayon worker).
//!
//! **Early merging** (`settings.multistart.merge_early`, off by default).
//! From the second batch on, each start is first polished for
//! [`POLISH_ITERATIONS`] iterations; if the polished point already matches
//! a minimum found in the earlier batches (the same-minimum rule below) it
//! is counted for that minimum (`merged_early`) without finishing its refit;
//! otherwise the refit continues from the polished point. The minima known
//! to a batch come only from earlier batches, so the result stays
//! independent of the thread count.
//!
//! **Degenerate ends** are no minima: they get no basin share, are never
//! the best minimum and are counted by kind in `degenerate` (their total is
//! `failed`). In order ([`classify_end`]): a non-finite end (not converged);
//! a *runaway* (the refit's end-point test says a parameter ran away, or a
//! free parameter lies more than [`RUNAWAY_WIDTHS`] box widths outside its
//! box); a *vanished column* (the end-point test found a plateau, or a free
//! parameter not on a bound changes the weighted model by at most
//! [`VANISHED_COLUMN`] times the norm of the weighted data over its box
//! width); any other refit that did not converge; a *rank drop* (the
//! active parameters' weighted Jacobian is more rank-deficient than at the
//! least deficient other end, so a structural deficiency shared by every
//! end does not count). Merged-early starts are not degenerate.
//!
//! **Same minimum.** Two endpoints are the same minimum when their
//! chi-squared values agree within
//! `max(1e-6 * max(chi2_a, chi2_b), 1e-3 * u)` ([`CHI2_REL_TOL`],
//! [`CHI2_ABS_TOL`]) and every parameter agrees within `0.1` standard errors
//! of the base fit ([`PARAM_TOL_SE`]); for a parameter without a standard
//! error the tolerance is `1e-3` relative ([`PARAM_REL_TOL`]). `u`, the unit
//! of chi-squared, is 1 when the covariance is absolute (sigma known) and the
//! best reduced chi-squared found when it is scaled by chi2/dof (sigma
//! unknown), so that the same rules hold whatever the units of `y`. The
//! endpoints are taken in order of increasing chi-squared; each joins the
//! first minimum whose representative (its lowest-chi-squared endpoint) it
//! matches, or founds a new one.
//!
//! **Equivalent minima.** Two minima with the same chi-squared (tolerance
//! above) are equivalent when some permutation of the free parameters maps
//! one onto the other within the parameter tolerance (for a pair of
//! parameters the larger of their two tolerances). This covers swapping two
//! parameters, swapping two pairs (the components of a two-exponential
//! model, `(a1, k1) <-> (a2, k2)`) and any other relabelling; the search is a
//! backtracking match that tries to keep each parameter in place first.
//! Equivalent minima are merged into one: counts add up, the representative
//! is the lowest-chi-squared endpoint, and `equivalent_permutations` lists
//! the cycles (for a swap, the two names) of each permutation found, without
//! repeats.
//!
//! **Same fit.** Two minima with the same chi-squared whose weighted model
//! values agree (`sum_i ((f_a,i - f_b,i) / sigma_i)^2` within the chi-squared
//! tolerance) are one minimum too: their parameters differ only along
//! directions the data do not see (for instance the frequency and phase of a
//! sinusoid whose amplitude sits on a bound at 0). They are merged like
//! equivalent minima but list no permutation.
//!
//! **Distinguishable.** A minimum is distinguishable from the best when its
//! delta chi-squared exceeds `u * q`, `q` the chi-squared quantile with one
//! degree of freedom at `settings.level` (for 0.6827, q = 1). One degree of
//! freedom is the choice of the profile-likelihood rule for one parameter:
//! a rival is reported as distinguishable when it would lie outside the
//! one-parameter confidence region of the best minimum along the line that
//! joins them.
//!
//! **Base fit.** `base_is_best` is false when the best minimum has a
//! chi-squared lower than the base fit's by more than the clustering
//! tolerance and by more than `u * q`.
//!
//! **Missed minima.** Boender & Rinnooy Kan (1987), "Bayesian stopping rules
//! for multistart global optimization methods", Math. Programming 37:59-80,
//! see [`boender_rinnooy_kan`], with `n` the starts that ended at a minimum
//! (degenerate ends left out, merged-early ones counted) and `w` the
//! distinct minima: `missed_minimum_estimate` is the posterior probability
//! that some minimum was not found, `unseen_share` the expected share of
//! the box in basins not found, `expected_minima` the expected number of
//! minima.

use super::sampling::{latin_hypercube, Interval, Scale};
use super::{Fitted, Progress};
use crate::fit::{DataView, ParamSpec, Problem, Refitter};
use crate::rng::{self, Stream};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// A parameter value by name.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NamedValue {
    /// Parameter name.
    pub name: String,
    /// Value.
    pub value: f64,
}

/// One distinct minimum.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Minimum {
    /// Chi-squared.
    pub chi2: f64,
    /// Chi-squared minus the best minimum's.
    pub delta_chi2: f64,
    /// Share of the starts that ended at a minimum (degenerate ends left
    /// out) that ended here.
    pub fraction: f64,
    /// Starts that ended here.
    pub count: usize,
    /// Whether delta chi-squared exceeds the chi-squared quantile.
    pub distinguishable: bool,
    /// Parameter permutations that map this minimum onto others with the
    /// same chi-squared, as lists of swapped parameter names.
    pub equivalent_permutations: Vec<Vec<String>>,
    /// Representative parameters.
    pub parameters: Vec<NamedValue>,
}

/// Why an end point is not a minimum (rules in the module documentation).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum EndKind {
    /// The refit did not converge, or ended on a non-finite chi-squared.
    NotConverged,
    /// A free parameter ran far outside its sampling box.
    Runaway,
    /// The Jacobian column of a free parameter vanished: the model no
    /// longer depends on it.
    VanishedColumn,
    /// The Jacobian lost rank compared with the other end points.
    RankDrop,
}

/// Degenerate ends by kind.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct DegenerateEnds {
    /// Refits that did not converge.
    pub not_converged: usize,
    /// Ends with a runaway parameter.
    pub runaway: usize,
    /// Ends with a vanished Jacobian column.
    pub vanished_column: usize,
    /// Ends whose Jacobian lost rank.
    pub rank_drop: usize,
}

impl DegenerateEnds {
    /// All degenerate ends.
    pub fn total(&self) -> usize {
        self.not_converged + self.runaway + self.vanished_column + self.rank_drop
    }

    fn add(&mut self, kind: EndKind) {
        match kind {
            EndKind::NotConverged => self.not_converged += 1,
            EndKind::Runaway => self.runaway += 1,
            EndKind::VanishedColumn => self.vanished_column += 1,
            EndKind::RankDrop => self.rank_drop += 1,
        }
    }
}

/// Why the search stopped adding batches.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopRule {
    /// The estimated probability of a missed minimum fell to the target.
    EstimateSmall,
    /// Another batch would exceed the cap on starts.
    CapReached,
}

/// One start and where it ended.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StartRun {
    /// Starting point.
    pub start: Vec<f64>,
    /// End point.
    pub end: Vec<f64>,
    /// Chi-squared at the end.
    pub chi2: f64,
    /// Whether the fit converged.
    pub converged: bool,
    /// Index into `minima`, None for degenerate ends.
    pub minimum: Option<usize>,
    /// Why the end is not a minimum; None for a minimum.
    pub degenerate: Option<EndKind>,
    /// Free parameters not on a bound at the end minus the numerical rank
    /// of the weighted Jacobian there.
    pub rank_deficiency: usize,
    /// Batch of the start (0 for the first).
    pub batch: usize,
    /// The start was counted for a minimum already found after a short
    /// polish, without finishing its refit (`merge_early`).
    pub merged_early: bool,
}

/// Result of the multi-start search.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MultistartResult {
    /// Starts run, over all batches.
    pub starts: usize,
    /// Batches run (each of `settings.multistart.starts` starts).
    pub batches: usize,
    /// Why no further batch was run.
    pub stopped: StopRule,
    /// Starts whose end is not a minimum (every degenerate end).
    pub failed: usize,
    /// Degenerate ends by kind; they sum to `failed`.
    pub degenerate: DegenerateEnds,
    /// Starts counted for a minimum after a short polish (`merge_early`).
    pub merged_early: usize,
    /// Chi-squared of the fit from the study's start.
    pub base_chi2: f64,
    /// False when a minimum with a clearly lower chi-squared exists.
    pub base_is_best: bool,
    /// Whether the audited fit is the best minimum found: `base_is_best`,
    /// or true when the audit was re-based at the best minimum.
    pub audited_is_best: bool,
    /// Distinct minima, best first.
    pub minima: Vec<Minimum>,
    /// Posterior probability (Boender & Rinnooy Kan 1987) that at least one
    /// minimum was not found.
    pub missed_minimum_estimate: f64,
    /// Posterior expected share of the search region in basins not found.
    pub unseen_share: f64,
    /// Posterior expected total number of minima under the same rule.
    pub expected_minima: f64,
    /// Sampling box per parameter `[low, high]`.
    pub box_bounds: Vec<[f64; 2]>,
    /// Every start, for the figures.
    pub runs: Vec<StartRun>,
}

/// Relative chi-squared tolerance of "same minimum".
pub const CHI2_REL_TOL: f64 = 1e-6;
/// Absolute chi-squared tolerance of "same minimum", in units of the
/// chi-squared unit `u` (see the module documentation).
pub const CHI2_ABS_TOL: f64 = 1e-3;
/// Parameter tolerance of "same minimum", in standard errors of the base fit.
pub const PARAM_TOL_SE: f64 = 0.1;
/// Relative parameter tolerance when the base fit has no standard error.
pub const PARAM_REL_TOL: f64 = 1e-3;
/// Half-width of the default box in units of the start's magnitude.
pub const BOX_FACTOR: f64 = 3.0;
/// Margin added on each side of a data column's range for a position on
/// that axis, as a share of the range.
pub const POSITION_MARGIN: f64 = 0.1;
/// Decades on each side of the start for a sign-definite parameter.
pub const DECADES: i32 = 2;
/// Decades sampled at the top of a positive box that starts at zero.
pub const LOG_ZERO_DECADES: i32 = 3;
/// An end point farther outside its box than this many box widths is a
/// runaway.
pub const RUNAWAY_WIDTHS: f64 = 100.0;
/// A Jacobian column whose change over the box width is below this share
/// of the weighted data's norm has vanished.
pub const VANISHED_COLUMN: f64 = 1e-8;
/// Iterations of the short polish of `merge_early`.
pub const POLISH_ITERATIONS: usize = 8;
/// Backtracking steps allowed when matching two minima by a permutation.
const PERMUTATION_BUDGET: usize = 20_000;

/// What the data and the model say about the scale of one parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScaleHint {
    /// The range `[min, max]` of the data column this parameter is a
    /// position on (read from the formula), if any.
    pub position: Option<[f64; 2]>,
    /// Magnitude used when the start is 0: the largest `|y|` of the data
    /// (1 when that is 0 or not finite).
    pub magnitude: f64,
}

impl Default for ScaleHint {
    fn default() -> Self {
        ScaleHint {
            position: None,
            magnitude: 1.0,
        }
    }
}

/// The scale hints of every parameter of a fitted problem.
pub fn scale_hints(ctx: &Fitted) -> Vec<ScaleHint> {
    let ymax = ctx
        .data
        .y
        .iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    let magnitude = if ymax > 0.0 && ymax.is_finite() { ymax } else { 1.0 };
    let positions = ctx.problem.model.positions();
    (0..ctx.problem.params.len())
        .map(|j| {
            let position = positions.get(j).copied().flatten().and_then(|k| {
                let col = ctx.data.x.get(k)?;
                let lo = col.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = col.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                (lo.is_finite() && hi.is_finite() && hi > lo).then_some([lo, hi])
            });
            ScaleHint { position, magnitude }
        })
        .collect()
}

/// The sampling range of one parameter (rules in the module documentation).
///
/// `value` is the fit's value from the study's start; it widens the box
/// only when it lies within the box's half-width of the start.
pub fn sampling_box(spec: &ParamSpec, value: f64, hint: &ScaleHint, log_uniform: bool) -> Interval {
    if spec.fixed {
        return Interval::point(value);
    }
    let (lo_bound, hi_bound) = (spec.min, spec.max);
    let start = if spec.start.is_finite() {
        spec.start.clamp(lo_bound.min(hi_bound), hi_bound.max(lo_bound))
    } else {
        value
    };
    let hull = |low: f64, high: f64| -> (f64, f64) {
        let half = 0.5 * (high - low);
        let (mut low, mut high) = (low.min(start), high.max(start));
        if value.is_finite() && (value - start).abs() <= half {
            low = low.min(value);
            high = high.max(value);
        }
        (low.max(lo_bound), high.min(hi_bound))
    };
    let mut log_ok = true;
    let (low, high) = if lo_bound.is_finite() && hi_bound.is_finite() {
        (lo_bound, hi_bound)
    } else if let Some([xl, xh]) = hint.position {
        log_ok = false;
        let m = POSITION_MARGIN * (xh - xl);
        hull(xl - m, xh + m)
    } else if lo_bound >= 0.0 || hi_bound <= 0.0 {
        let a = if start != 0.0 {
            start.abs()
        } else {
            hint.magnitude.abs().max(f64::MIN_POSITIVE)
        };
        let (near, far) = (a * 10f64.powi(-DECADES), a * 10f64.powi(DECADES));
        // The decades already hold the start (a start of 0 on the bound
        // does not pull the box onto 0), and the fit's value never widens
        // them: a value decades away is a fit that slid off.
        if lo_bound >= 0.0 {
            (near.max(lo_bound), far.min(hi_bound))
        } else {
            log_ok = false;
            ((-far).max(lo_bound), (-near).min(hi_bound))
        }
    } else {
        log_ok = false;
        let a = if start != 0.0 {
            start.abs()
        } else {
            hint.magnitude.abs()
        };
        let h = BOX_FACTOR * a;
        hull(start - h, start + h)
    };
    if !(low.is_finite() && high.is_finite()) || high <= low {
        return Interval::point(value);
    }
    if log_uniform && log_ok && low >= 0.0 && high > 0.0 {
        if low > 0.0 {
            if high / low > 10.0 {
                return Interval {
                    low,
                    high,
                    scale: Scale::Log,
                };
            }
        } else {
            let mut floor = high * 10f64.powi(-LOG_ZERO_DECADES);
            for v in [start, value] {
                if v > 0.0 && v < floor {
                    floor = v;
                }
            }
            return Interval {
                low: floor,
                high,
                scale: Scale::Log,
            };
        }
    }
    Interval {
        low,
        high,
        scale: Scale::Linear,
    }
}

/// The starting points of the first batch: row `k` is start `k`. One Latin
/// hypercube over the free parameters (in parameter order), drawn from
/// `rng::stream(seed, Stream::Multistart, 0)`; fixed parameters keep
/// `values[j]`. Same as [`design_batch`] with batch 0.
pub fn design(boxes: &[Interval], free: &[bool], values: &[f64], n: usize, seed: u64) -> Vec<Vec<f64>> {
    design_batch(boxes, free, values, n, seed, 0)
}

/// The starting points of batch `batch`: a Latin hypercube of its own,
/// drawn from `rng::stream(seed, Stream::Multistart, batch)`.
pub fn design_batch(
    boxes: &[Interval],
    free: &[bool],
    values: &[f64],
    n: usize,
    seed: u64,
    batch: usize,
) -> Vec<Vec<f64>> {
    let axes: Vec<usize> = (0..boxes.len()).filter(|&j| free[j]).collect();
    let mut rng = rng::stream(seed, Stream::Multistart, batch as u64);
    let unit = latin_hypercube(n, axes.len(), &mut rng);
    unit.iter()
        .map(|u| {
            let mut start = values.to_vec();
            for (d, &j) in axes.iter().enumerate() {
                start[j] = boxes[j].map(u[d]);
            }
            start
        })
        .collect()
}

/// The Boender & Rinnooy Kan (1987) estimates after `n` starts that ended
/// at a minimum and found `w` distinct minima.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BrkEstimate {
    /// Posterior probability that there are more than `w` minima.
    pub missed: f64,
    /// Posterior expected share of the region in basins not found.
    pub unseen_share: f64,
    /// Posterior expected number of minima.
    pub expected: f64,
}

/// Boender & Rinnooy Kan (1987), Math. Programming 37:59-80. Their model:
/// `K` minima with a flat prior on `K`, basin shares uniform on the
/// simplex given `K`, starts landing in basins in proportion to the
/// shares. With `n` starts that found `w` distinct minima the posterior is
/// `P(K | n, w) ~ K! / (K - w)! * (K - 1)! / (n + K - 1)!` for `K >= w`, and:
///
/// * `missed` = `1 - prod_{i=1..w} (n - 1 - i) / (n - 1 + i)` = `1 - P(K = w)`,
///   the probability that at least one minimum was not found;
/// * `unseen_share` = `w (w + 1) / (n (n - 1))`, the expected share of the
///   search region covered by basins not found;
/// * `expected` = `w (n - 1) / (n - w - 2)`, the expected number of minima.
///
/// The closed forms are quoted from memory and checked against the series
/// of the posterior in the tests. They need `n > w + 2`; otherwise (too few
/// starts to say anything) the result is `missed = unseen_share = 1` and
/// `expected = max(n, w)`: certainly incomplete, with a finite stand-in for
/// an unbounded expectation (results must stay finite for JSON).
pub fn boender_rinnooy_kan(n: usize, w: usize) -> BrkEstimate {
    if n <= w + 2 {
        return BrkEstimate {
            missed: 1.0,
            unseen_share: 1.0,
            expected: n.max(w) as f64,
        };
    }
    let (nf, wf) = (n as f64, w as f64);
    let all_found: f64 = (1..=w)
        .map(|i| (nf - 1.0 - i as f64) / (nf - 1.0 + i as f64))
        .product();
    BrkEstimate {
        missed: (1.0 - all_found).clamp(0.0, 1.0),
        unseen_share: (wf * (wf + 1.0) / (nf * (nf - 1.0))).clamp(0.0, 1.0),
        expected: wf * (nf - 1.0) / (nf - wf - 2.0),
    }
}

/// What the endpoints are judged against: the base fit and the rules'
/// inputs.
#[derive(Debug, Clone, PartialEq)]
pub struct Reference {
    /// Parameter names, in parameter order.
    pub names: Vec<String>,
    /// Which parameters were free.
    pub free: Vec<bool>,
    /// Standard errors of the base fit.
    pub std_errors: Vec<Option<f64>>,
    /// Chi-squared of the base fit.
    pub base_chi2: f64,
    /// Degrees of freedom of the base fit.
    pub dof: usize,
    /// Whether the base fit's covariance was scaled by chi2/dof.
    pub scaled: bool,
    /// Confidence level of the distinguishability threshold.
    pub level: f64,
    /// Estimated probability of a missed minimum at which the search stops.
    pub missed_target: f64,
}

impl Reference {
    /// The reference of a fitted problem.
    pub fn from_fitted(ctx: &Fitted) -> Self {
        Reference {
            names: ctx.problem.params.iter().map(|p| p.name.clone()).collect(),
            free: ctx.free_mask(),
            std_errors: ctx.fit.parameters.iter().map(|p| p.std_error).collect(),
            base_chi2: ctx.fit.chi2,
            dof: ctx.fit.dof,
            scaled: ctx.fit.covariance_scaled,
            level: ctx.settings.level,
            missed_target: ctx.settings.multistart.missed_target,
        }
    }
}

/// The chi-squared quantile with one degree of freedom at `level`.
pub fn threshold(level: f64) -> f64 {
    // The square of the normal quantile z_{(1+level)/2} (chi-squared with
    // one degree of freedom is a squared standard normal).
    if level > 0.0 && level < 1.0 {
        crate::fit::coverage_factor(level, None).powi(2)
    } else {
        f64::INFINITY
    }
}

/// Tolerances of the clustering.
struct Rules<'a> {
    reference: &'a Reference,
    unit: f64,
}

impl Rules<'_> {
    fn chi2_tol(&self, a: f64, b: f64) -> f64 {
        (CHI2_REL_TOL * a.abs().max(b.abs())).max(CHI2_ABS_TOL * self.unit)
    }

    fn chi2_close(&self, a: f64, b: f64) -> bool {
        (a - b).abs() <= self.chi2_tol(a, b)
    }

    fn se(&self, j: usize) -> Option<f64> {
        self.reference
            .std_errors
            .get(j)
            .copied()
            .flatten()
            .filter(|s| s.is_finite() && *s > 0.0)
    }

    /// Whether value `x` of parameter `k` and value `y` of parameter `l`
    /// agree (k == l for the plain comparison).
    fn param_close(&self, k: usize, l: usize, x: f64, y: f64) -> bool {
        let tol = match (self.se(k), self.se(l)) {
            (Some(a), Some(b)) => PARAM_TOL_SE * a.max(b),
            (Some(a), None) | (None, Some(a)) => PARAM_TOL_SE * a,
            (None, None) => PARAM_REL_TOL * x.abs().max(y.abs()),
        };
        (x - y).abs() <= tol
    }

    fn same_point(&self, a: &[f64], b: &[f64]) -> bool {
        a.iter()
            .zip(b)
            .enumerate()
            .all(|(j, (&x, &y))| self.param_close(j, j, x, y))
    }

    /// A permutation `p` of the free parameters with `a[p[k]] ~ b[k]` for
    /// every k, trying the identity first at each position.
    fn permutation(&self, a: &[f64], b: &[f64]) -> Option<Vec<usize>> {
        let m = a.len();
        let free = &self.reference.free;
        let mut perm = vec![usize::MAX; m];
        let mut used = vec![false; m];
        for k in 0..m {
            if !free.get(k).copied().unwrap_or(true) {
                if !self.param_close(k, k, a[k], b[k]) {
                    return None;
                }
                perm[k] = k;
                used[k] = true;
            }
        }
        let order: Vec<usize> = (0..m).filter(|&k| perm[k] == usize::MAX).collect();
        let mut budget = PERMUTATION_BUDGET;
        if self.extend(a, b, &order, 0, &mut perm, &mut used, &mut budget) {
            Some(perm)
        } else {
            None
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn extend(
        &self,
        a: &[f64],
        b: &[f64],
        order: &[usize],
        depth: usize,
        perm: &mut [usize],
        used: &mut [bool],
        budget: &mut usize,
    ) -> bool {
        if depth == order.len() {
            return true;
        }
        let k = order[depth];
        let candidates = std::iter::once(k).chain(order.iter().copied().filter(|&l| l != k));
        for l in candidates {
            if used[l] || !self.param_close(l, k, a[l], b[k]) {
                continue;
            }
            if *budget == 0 {
                return false;
            }
            *budget -= 1;
            perm[k] = l;
            used[l] = true;
            if self.extend(a, b, order, depth + 1, perm, used, budget) {
                return true;
            }
            used[l] = false;
            perm[k] = usize::MAX;
        }
        false
    }
}

/// The cycles (length >= 2) of a permutation, each as parameter names
/// starting from its lowest index.
fn cycles(perm: &[usize], names: &[String]) -> Vec<Vec<String>> {
    let mut seen = vec![false; perm.len()];
    let mut out = Vec::new();
    for s in 0..perm.len() {
        if seen[s] || perm[s] == s {
            seen[s] = true;
            continue;
        }
        let mut cycle = Vec::new();
        let mut k = s;
        while !seen[k] {
            seen[k] = true;
            cycle.push(names.get(k).cloned().unwrap_or_else(|| format!("#{k}")));
            k = perm[k];
        }
        out.push(cycle);
    }
    out
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

/// Weighted model values `f(x_i; a) / sigma_i` at a parameter vector, None
/// when the model is not finite there.
pub type Predict<'a> = dyn Fn(&[f64]) -> Option<Vec<f64>> + 'a;

/// Clusters the endpoints of `runs` into minima, merges equivalent ones and
/// fills in every summary field (rules in the module documentation). Sets
/// `runs[k].minimum`. `predict` gives the weighted model values of an
/// endpoint, for the same-fit rule.
pub fn summarise(
    reference: &Reference,
    mut runs: Vec<StartRun>,
    box_bounds: Vec<[f64; 2]>,
    predict: &Predict,
) -> MultistartResult {
    // Degenerate ends: not converged (unless merged early), non-finite,
    // then a rank drop against the least rank-deficient other end.
    for r in runs.iter_mut() {
        r.minimum = None;
        if r.degenerate == Some(EndKind::RankDrop) {
            r.degenerate = None;
        }
        let finite = r.chi2.is_finite() && r.end.iter().all(|v| v.is_finite());
        if r.degenerate.is_none() && (!finite || !(r.converged || r.merged_early)) {
            r.degenerate = Some(EndKind::NotConverged);
        }
    }
    let least_deficient = runs
        .iter()
        .filter(|r| r.degenerate.is_none())
        .map(|r| r.rank_deficiency)
        .min()
        .unwrap_or(0);
    let mut degenerate = DegenerateEnds::default();
    for r in runs.iter_mut() {
        if r.degenerate.is_none() && r.rank_deficiency > least_deficient {
            r.degenerate = Some(EndKind::RankDrop);
        }
        if let Some(kind) = r.degenerate {
            degenerate.add(kind);
        }
    }
    let mut ok: Vec<usize> = (0..runs.len())
        .filter(|&k| runs[k].degenerate.is_none())
        .collect();
    ok.sort_by(|&a, &b| runs[a].chi2.total_cmp(&runs[b].chi2).then(a.cmp(&b)));

    let best_seen = ok
        .first()
        .map(|&k| runs[k].chi2)
        .unwrap_or(f64::INFINITY)
        .min(reference.base_chi2);
    let unit = chi2_unit(reference, best_seen);
    let rules = Rules { reference, unit };
    let q = unit * threshold(reference.level);

    // Clusters of endpoints, each a list of run indices, lowest chi2 first.
    let mut clusters: Vec<Vec<usize>> = Vec::new();
    for &k in &ok {
        let r = &runs[k];
        let home = clusters.iter().position(|c| {
            let rep = &runs[c[0]];
            rules.chi2_close(rep.chi2, r.chi2) && rules.same_point(&rep.end, &r.end)
        });
        match home {
            Some(c) => clusters[c].push(k),
            None => clusters.push(vec![k]),
        }
    }

    // Merge clusters that are images of each other under a permutation.
    let nc = clusters.len();
    let mut parent: Vec<usize> = (0..nc).collect();
    for i in 0..nc {
        for j in i + 1..nc {
            let (a, b) = (&runs[clusters[i][0]], &runs[clusters[j][0]]);
            if find(&mut parent, i) == find(&mut parent, j) || !rules.chi2_close(a.chi2, b.chi2) {
                continue;
            }
            if rules.permutation(&a.end, &b.end).is_some() {
                let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                parent[rj.max(ri)] = ri.min(rj);
            }
        }
    }
    // Merge clusters that are the same fit: equal chi2 and equal weighted
    // model values, parameters apart along a direction the data do not see.
    let mut fitted: Vec<Option<Option<Vec<f64>>>> = vec![None; nc];
    for i in 0..nc {
        for j in i + 1..nc {
            let (a, b) = (&runs[clusters[i][0]], &runs[clusters[j][0]]);
            if find(&mut parent, i) == find(&mut parent, j) || !rules.chi2_close(a.chi2, b.chi2) {
                continue;
            }
            for (c, r) in [(i, a), (j, b)] {
                if fitted[c].is_none() {
                    fitted[c] = Some(predict(&r.end));
                }
            }
            if let (Some(Some(fa)), Some(Some(fb))) = (&fitted[i], &fitted[j]) {
                let d2: f64 = fa.iter().zip(fb).map(|(x, y)| (x - y) * (x - y)).sum();
                if fa.len() == fb.len() && d2 <= rules.chi2_tol(a.chi2, b.chi2) {
                    let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                    parent[rj.max(ri)] = ri.min(rj);
                }
            }
        }
    }
    // Clusters are in order of increasing chi2, so the lowest index of a
    // group holds the group's best endpoint.
    let mut groups: Vec<Vec<usize>> = Vec::new();
    let mut group_of = vec![usize::MAX; nc];
    for c in 0..nc {
        let root = find(&mut parent, c);
        if group_of[root] == usize::MAX {
            group_of[root] = groups.len();
            groups.push(Vec::new());
        }
        group_of[c] = group_of[root];
        groups[group_of[c]].push(c);
    }

    let n_ok = ok.len();
    let mut minima: Vec<(Minimum, Vec<usize>)> = groups
        .iter()
        .map(|g| {
            let rep = &runs[clusters[g[0]][0]];
            let mut perms: Vec<Vec<String>> = Vec::new();
            for &c in &g[1..] {
                if let Some(p) = rules.permutation(&rep.end, &runs[clusters[c][0]].end) {
                    for cy in cycles(&p, &reference.names) {
                        if !perms.contains(&cy) {
                            perms.push(cy);
                        }
                    }
                }
            }
            let count: usize = g.iter().map(|&c| clusters[c].len()).sum();
            let members: Vec<usize> = g.iter().flat_map(|&c| clusters[c].iter().copied()).collect();
            let m = Minimum {
                chi2: rep.chi2,
                delta_chi2: 0.0,
                fraction: count as f64 / n_ok as f64,
                count,
                distinguishable: false,
                equivalent_permutations: perms,
                parameters: reference
                    .names
                    .iter()
                    .zip(&rep.end)
                    .map(|(n, &v)| NamedValue {
                        name: n.clone(),
                        value: v,
                    })
                    .collect(),
            };
            (m, members)
        })
        .collect();
    minima.sort_by(|a, b| a.0.chi2.total_cmp(&b.0.chi2));
    let best = minima.first().map(|m| m.0.chi2);
    for (i, (m, members)) in minima.iter_mut().enumerate() {
        m.delta_chi2 = m.chi2 - best.unwrap_or(m.chi2);
        m.distinguishable = m.delta_chi2 > q;
        for &k in members.iter() {
            runs[k].minimum = Some(i);
        }
    }
    let minima: Vec<Minimum> = minima.into_iter().map(|(m, _)| m).collect();

    let base_is_best = match best {
        Some(b) => {
            let gain = reference.base_chi2 - b;
            !(gain > rules.chi2_tol(reference.base_chi2, b) && gain > q)
        }
        None => true,
    };
    let brk = boender_rinnooy_kan(n_ok, minima.len());
    MultistartResult {
        starts: runs.len(),
        batches: runs.iter().map(|r| r.batch + 1).max().unwrap_or(0),
        stopped: if brk.missed <= reference.missed_target {
            StopRule::EstimateSmall
        } else {
            StopRule::CapReached
        },
        failed: runs.len() - n_ok,
        degenerate,
        merged_early: runs
            .iter()
            .filter(|r| r.merged_early && r.degenerate.is_none())
            .count(),
        base_chi2: reference.base_chi2,
        base_is_best,
        audited_is_best: base_is_best,
        minima,
        missed_minimum_estimate: brk.missed,
        unseen_share: brk.unseen_share,
        expected_minima: brk.expected,
        box_bounds,
        runs,
    }
}

/// Facts about one end point, for [`classify_end`].
#[derive(Debug, Clone, PartialEq)]
pub struct EndFacts<'a> {
    /// Whether the refit converged with a finite chi-squared.
    pub converged: bool,
    /// The refit's end-point test found a parameter that ran away.
    pub runaway: bool,
    /// The refit's end-point test found a vanished Jacobian column.
    pub plateau: bool,
    /// The end point.
    pub end: &'a [f64],
    /// Which parameters were free.
    pub free: &'a [bool],
    /// Which parameters ended on a bound.
    pub at_bound: &'a [bool],
    /// Sampling box per parameter.
    pub boxes: &'a [[f64; 2]],
    /// Norm of each weighted Jacobian column at the end (empty when the
    /// Jacobian could not be evaluated).
    pub column_norms: &'a [f64],
    /// Norm of the weighted data `y / sigma`.
    pub data_norm: f64,
}

/// Why an end point is no minimum, apart from the rank drop (which needs
/// the other ends and is judged in [`summarise`]), in this order: a
/// non-finite end is not converged; a runaway (the refit's end-point test
/// says so, or a free parameter lies farther outside its box than
/// [`RUNAWAY_WIDTHS`] box widths); a vanished column (the refit's
/// end-point test found a plateau, or a free parameter not on a bound has a
/// column norm times its box width of at most [`VANISHED_COLUMN`] times the
/// data norm); any other refit that did not converge. None for an end
/// that may be a minimum.
pub fn classify_end(f: &EndFacts) -> Option<EndKind> {
    if f.end.iter().any(|v| !v.is_finite()) {
        return Some(EndKind::NotConverged);
    }
    let free = |j: usize| f.free.get(j).copied().unwrap_or(false);
    if f.runaway {
        return Some(EndKind::Runaway);
    }
    for (j, &v) in f.end.iter().enumerate() {
        let Some(&[lo, hi]) = f.boxes.get(j) else { continue };
        if free(j) && hi > lo && (v - v.clamp(lo, hi)).abs() > RUNAWAY_WIDTHS * (hi - lo) {
            return Some(EndKind::Runaway);
        }
    }
    if f.plateau {
        return Some(EndKind::VanishedColumn);
    }
    if f.column_norms.len() < f.end.len() {
        return Some(EndKind::NotConverged);
    }
    let scale = if f.data_norm > 0.0 && f.data_norm.is_finite() {
        f.data_norm
    } else {
        1.0
    };
    for j in 0..f.end.len() {
        let Some(&[lo, hi]) = f.boxes.get(j) else { continue };
        let on_bound = f.at_bound.get(j).copied().unwrap_or(false);
        if free(j) && !on_bound && hi > lo && f.column_norms[j] * (hi - lo) <= VANISHED_COLUMN * scale {
            return Some(EndKind::VanishedColumn);
        }
    }
    if !f.converged {
        return Some(EndKind::NotConverged);
    }
    None
}

/// What one start's refit gives: the run, classified apart from the rank drop.
#[allow(clippy::too_many_arguments)] // one start's facts, passed apart to keep the closure small
fn finish_run(
    ctx: &Fitted,
    view: &DataView,
    boxes: &[[f64; 2]],
    data_norm: f64,
    start: Vec<f64>,
    end: Vec<f64>,
    out: &crate::fit::Refit,
    batch: usize,
) -> StartRun {
    let free = ctx.free_mask();
    let n = view.y.len();
    let m = end.len();
    let at_bound: Vec<bool> = ctx
        .problem
        .params
        .iter()
        .zip(&end)
        .map(|(p, &v)| v <= p.min || v >= p.max)
        .collect();
    let mut values = vec![0.0; n];
    let mut jac = vec![0.0; n * m];
    let mut scratch = Vec::new();
    let column_norms: Vec<f64> =
        match ctx
            .problem
            .model
            .eval(&end, view.x, &mut values, Some(&mut jac), &mut scratch)
        {
            Ok(()) => (0..m)
                .map(|j| {
                    jac[j * n..(j + 1) * n]
                        .iter()
                        .zip(view.sigma)
                        .map(|(d, s)| (d / s) * (d / s))
                        .sum::<f64>()
                        .sqrt()
                })
                .collect(),
            Err(_) => Vec::new(),
        };
    let converged = out.converged && out.chi2.is_finite();
    let degenerate = classify_end(&EndFacts {
        converged,
        runaway: out.end.runaway.is_some(),
        plateau: out.end.plateau.is_some(),
        end: &end,
        free: &free,
        at_bound: &at_bound,
        boxes,
        column_norms: &column_norms,
        data_norm,
    });
    // The refit's end-point test: rank of the active (varying, not held on
    // a bound) parameters' weighted Jacobian.
    let rank_deficiency = if degenerate.is_none() {
        out.end.active.saturating_sub(out.end.rank)
    } else {
        0
    };
    StartRun {
        start,
        end,
        chi2: out.chi2,
        converged: out.converged,
        minimum: None,
        degenerate,
        rank_deficiency,
        batch,
        merged_early: false,
    }
}

/// Runs the multi-start search (rules in the module documentation): the
/// first batch of `settings.multistart.starts` refits from a Latin
/// hypercube design, then further batches of the same size while the
/// estimated probability of a missed minimum exceeds
/// `settings.multistart.missed_target` and the next batch fits under
/// `settings.multistart.max_starts`.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> MultistartResult {
    let ms = &ctx.settings.multistart;
    let n = ms.starts.max(1);
    let cap = ms.max_starts.max(n);
    let free = ctx.free_mask();
    let values = ctx.values();
    let hints = scale_hints(ctx);
    let boxes: Vec<Interval> = ctx
        .problem
        .params
        .iter()
        .zip(&ctx.fit.parameters)
        .zip(&hints)
        .map(|((spec, p), hint)| sampling_box(spec, p.value, hint, ms.log_uniform))
        .collect();
    let box_bounds: Vec<[f64; 2]> = boxes.iter().map(|b| [b.low, b.high]).collect();

    let x = ctx.data.x_slices();
    let sigma = ctx.data.sigma_or_ones();
    let view = DataView {
        x: &x,
        y: &ctx.data.y,
        sigma: &sigma,
        sigma_x: ctx.data.sigma_x.as_deref().unwrap_or(&[]),
    };
    let n_points = ctx.data.len();
    let data_norm = ctx
        .data
        .y
        .iter()
        .zip(&sigma)
        .map(|(y, s)| (y / s) * (y / s))
        .sum::<f64>()
        .sqrt();
    let predict = |a: &[f64]| -> Option<Vec<f64>> {
        let mut values = vec![0.0; n_points];
        let mut scratch = Vec::new();
        ctx.problem
            .model
            .eval(a, &x, &mut values, None, &mut scratch)
            .ok()?;
        Some(values.iter().zip(&sigma).map(|(f, s)| f / s).collect())
    };
    let polish = Problem {
        model: ctx.problem.model,
        params: ctx.problem.params.clone(),
        options: crate::fit::FitOptions {
            max_iterations: POLISH_ITERATIONS,
            ..ctx.problem.options.clone()
        },
    };
    let reference = Reference::from_fitted(ctx);
    let unit_of = |r: &MultistartResult| -> f64 {
        let best = r
            .minima
            .first()
            .map(|m| m.chi2)
            .unwrap_or(f64::INFINITY)
            .min(reference.base_chi2);
        chi2_unit(&reference, best)
    };

    let mut runs: Vec<StartRun> = Vec::new();
    let mut batch = 0usize;
    loop {
        let starts = design_batch(&boxes, &free, &values, n, ctx.settings.seed, batch);
        // Minima known before this batch, for the early merge.
        let (known, unit): (Vec<(f64, Vec<f64>)>, f64) = if ms.merge_early && batch > 0 {
            let r = summarise(&reference, runs.clone(), box_bounds.clone(), &predict);
            let known = r
                .minima
                .iter()
                .map(|m| (m.chi2, m.parameters.iter().map(|p| p.value).collect()))
                .collect();
            (known, unit_of(&r))
        } else {
            (Vec::new(), 1.0)
        };
        let rules = Rules {
            reference: &reference,
            unit,
        };
        let stage = if batch == 0 {
            "multi-start".to_string()
        } else {
            format!("multi-start (batch {})", batch + 1)
        };
        progress.start(&stage, n as u64);
        let fresh: Vec<StartRun> = starts
            .into_par_iter()
            .map_init(
                || Refitter::new(&ctx.problem, n_points),
                |refitter, start| {
                    let mut from = start.clone();
                    if !known.is_empty() {
                        let out = refitter.refit(&polish, &view, &start, &free);
                        let end = refitter.params().to_vec();
                        if out.converged {
                            let run = finish_run(ctx, &view, &box_bounds, data_norm, start, end, &out, batch);
                            progress.advance(1);
                            return run;
                        }
                        if out.chi2.is_finite() {
                            let hit = known
                                .iter()
                                .any(|(c, p)| rules.chi2_close(*c, out.chi2) && rules.same_point(p, &end));
                            if hit {
                                progress.advance(1);
                                return StartRun {
                                    start,
                                    end,
                                    chi2: out.chi2,
                                    converged: false,
                                    minimum: None,
                                    degenerate: None,
                                    rank_deficiency: 0,
                                    batch,
                                    merged_early: true,
                                };
                            }
                            from = end;
                        }
                    }
                    let out = refitter.refit(&ctx.problem, &view, &from, &free);
                    let end = refitter.params().to_vec();
                    let run = finish_run(ctx, &view, &box_bounds, data_norm, start, end, &out, batch);
                    progress.advance(1);
                    run
                },
            )
            .collect();
        progress.finish();
        runs.extend(fresh);
        let r = summarise(&reference, runs.clone(), box_bounds.clone(), &predict);
        if r.stopped == StopRule::EstimateSmall || runs.len() + n > cap {
            return r;
        }
        batch += 1;
    }
}

/// The chi-squared unit `u` of the rules (module documentation), given the
/// lowest chi-squared seen.
fn chi2_unit(reference: &Reference, best_seen: f64) -> f64 {
    if reference.scaled && reference.dof > 0 {
        let u = best_seen / reference.dof as f64;
        if u.is_finite() && u > 0.0 {
            return u;
        }
    }
    1.0
}
