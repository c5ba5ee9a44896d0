//! Shared result type and statistics of the resampling diagnostics
//! (bootstrap and Monte Carlo): per-parameter summaries, percentile and BCa
//! intervals, comparison with the analytic standard errors, and the
//! parallel replicate engine both diagnostics run on.
//!
//! # Conventions
//!
//! - **Parameters.** `parameters`, `correlation` and the columns of
//!   `estimates` follow the problem's parameter vector, fixed parameters
//!   included, so that they line up with [`crate::fit::FitResult::parameters`].
//!   A fixed parameter is reported with its estimate as mean and both
//!   interval ends, `std = 0`, no BCa interval, no ratio, and
//!   `fixed = true`; its correlation with every other parameter is reported
//!   as 0 (1 on the diagonal).
//! - **Failures.** A replicate whose refit did not converge or ended with a
//!   non-finite chi-squared or parameter is excluded from every statistic
//!   and listed in `failures`; `failed` counts them.
//! - **Percentile interval.** Central interval at `level`: the
//!   `(1 - level)/2` and `(1 + level)/2` sample quantiles of the successful
//!   replicates, by linear interpolation between order statistics
//!   (Hyndman & Fan 1996, "Sample quantiles in statistical packages",
//!   Am. Stat. 50:361, definition 7).
//! - **BCa interval** (Efron 1987, "Better bootstrap confidence intervals",
//!   JASA 82:171): bias correction `z0 = Phi^-1(share of replicates below
//!   the estimate)` (ties count half, common practice), acceleration from
//!   the jackknife, `a = sum d_i^3 / (6 (sum d_i^2)^(3/2))` with
//!   `d_i = mean(theta_(.)) - theta_(i)` over the leave-one-point-out
//!   values of the linearised fit (`influence.rs`: one pass over the data,
//!   no refits; [`jackknife`] keeps the refitted version), then the quantiles at
//!   `Phi(z0 + (z0 + z_q) / (1 - a (z0 + z_q)))`. The same formula serves
//!   the bootstrap only (the Monte Carlo has the intervals of JCGM 101).
//!   BCa is withheld (`None`, with the reason in `bca_withheld`) when a
//!   leave-one-out value failed (listed in `jackknife_failures`), when every
//!   replicate lies on one side of the estimate, when the bias correction
//!   or the acceleration is degenerate (`|z0| >` [`BCA_Z0_LIMIT`], `|a| >`
//!   [`BCA_ACCELERATION_LIMIT`] or `1 - a (z0 + z_q) <= 0`), when an end
//!   would be read beyond the [`BCA_TAIL_REPLICATES`]-th replicate from
//!   either extreme, or when the interval has zero width or does not
//!   contain the estimate.
//! - **Monte Carlo intervals** (JCGM 101:2008, 5.3 and 7.7): the
//!   probabilistically symmetric interval `[y_(r), y_(r+q)]` with `q = pM`
//!   rounded as in 7.7.2 and `r = (M - q)/2` (rounded up), and the
//!   shortest coverage interval, the `[y_(r), y_(r+q)]` of least width over
//!   `r` (7.7.3), both from the `M` sorted successful trials.
//! - **Ratio.** `sd_ratio = std / analytic standard error`, with standard
//!   uncertainty `sd_ratio / sqrt(2 (B - 1))` (the standard error of a
//!   normal-sample standard deviation), `B` the successful replicates.
//! - **Robust spread.** `robust_std` is half the width of the central
//!   68.27 % interval of the replicates (quantiles at `Phi(-1)` and
//!   `Phi(1)`, the standard deviation for normal estimates), so that a few
//!   runaway refits cannot move it; `robust_ratio = robust_std / u`. Its
//!   distribution when the quoted `u` is right is summarised by `null_dof`:
//!   `robust_ratio^2 * null_dof` is then approximately chi-squared with
//!   `null_dof` degrees of freedom, `null_dof = 1 / (2 c / B + 1 / dof)`,
//!   where `c = p (1 - 2p) / (2 phi(1)^2) = 0.925` (`p = Phi(-1)`) is the
//!   relative variance of the half-width times `B` (asymptotic variance
//!   and covariance of sample quantiles, Serfling 1980, "Approximation
//!   Theorems of Mathematical Statistics", 2.3.3, from memory) and the
//!   `1 / dof` term is present only when the spread follows the observed
//!   residual scatter while `u` is absolute (bootstrap with stated sigma:
//!   `chi2/dof` then scatters with relative variance `2 / dof`). The
//!   approximation matches the two relative variances (Satterthwaite 1946,
//!   Biometrics Bull. 2:110). Whether a difference counts is decided by
//!   [`crate::diagnostics::verdict`].
//! - **Runaways.** Replicates farther from the replicate median than
//!   [`RUNAWAY_SPREADS`] robust spreads are counted in `runaways`; they
//!   stay in every statistic (the robust spread ignores them).
//! - **Percentile sanity.** `percentile_excludes_estimate` is true when
//!   the base estimate lies outside the percentile interval: the fit is
//!   unstable under resampling. Below [`SANITY_LEVEL`] the check reads
//!   the interval at that level instead (a central interval of, say, 10 %
//!   excludes the estimate by chance alone).
//! - With fewer than two successful replicates the statistics are NaN
//!   (serialised as null): there is nothing to summarise, and the failure
//!   share makes the verdict fail.

use std::ops::Range;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, Normal};

use super::{Fitted, Progress};
use crate::fit::{DataView, Refit, Refitter, StopReason};

/// A replicate whose refit failed and was excluded (visibly).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FailedReplicate {
    /// Replicate index (its random stream); for a jackknife refit, the
    /// index of the left-out point.
    pub index: usize,
    /// Why: "not-converged" (iteration cap), "non-finite" (the model, the
    /// chi-squared or a parameter was not finite) or "no-residuals" (residual
    /// bootstrap with every leverage 1).
    pub reason: String,
}

/// Per-parameter summary of the replicate estimates.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResampledParameter {
    /// Parameter name.
    pub name: String,
    /// Base-fit value.
    pub estimate: f64,
    /// Mean of the replicate estimates.
    pub mean: f64,
    /// Mean minus base-fit value.
    pub bias: f64,
    /// Standard deviation of the replicate estimates.
    pub std: f64,
    /// Percentile interval, lower end, at the study's level.
    pub lower: f64,
    /// Percentile interval, upper end.
    pub upper: f64,
    /// BCa interval, lower end (None when it cannot be computed).
    pub bca_lower: Option<f64>,
    /// BCa interval, upper end.
    pub bca_upper: Option<f64>,
    /// Analytic standard error of the base fit (None when undetermined).
    pub analytic_std_error: Option<f64>,
    /// std / analytic standard error.
    pub sd_ratio: Option<f64>,
    /// Standard uncertainty of that ratio (SE of an SD ~ SD / sqrt(2(B-1))).
    pub sd_ratio_uncertainty: Option<f64>,
    /// Interval asymmetry: (upper - estimate) / (estimate - lower); 1 is symmetric.
    pub asymmetry: Option<f64>,
    /// Held fixed in the study (reported with std 0, not resampled).
    pub fixed: bool,
    /// Jackknife acceleration of the BCa interval (None when not computed).
    pub acceleration: Option<f64>,
    /// Bias correction z0 of the BCa interval (None when not computed).
    pub bias_correction: Option<f64>,
    /// Why the BCa interval is absent (None when it is given).
    pub bca_withheld: Option<BcaWithheld>,
    /// Half-width of the central 68.27 % interval of the replicates (a
    /// robust standard deviation).
    pub robust_std: f64,
    /// `robust_std` / analytic standard error.
    pub robust_ratio: Option<f64>,
    /// Degrees of freedom of the approximate chi-squared law of
    /// `robust_ratio^2 * null_dof` when the quoted uncertainty is right.
    pub null_dof: Option<f64>,
    /// Replicates farther than [`RUNAWAY_SPREADS`] robust spreads from the median.
    pub runaways: usize,
    /// The base estimate lies outside the percentile interval.
    pub percentile_excludes_estimate: bool,
    /// Shortest coverage interval at the level, lower end (Monte Carlo only).
    pub shortest_lower: Option<f64>,
    /// Shortest coverage interval, upper end (Monte Carlo only).
    pub shortest_upper: Option<f64>,
}

/// Why a BCa interval is not given.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BcaWithheld {
    /// Not requested (no jackknife), or a Monte Carlo (BCa belongs to the bootstrap).
    NotRequested,
    /// A jackknife refit failed.
    JackknifeFailed,
    /// Every replicate lies on one side of the estimate.
    OneSided,
    /// `|z0|` beyond [`BCA_Z0_LIMIT`].
    BiasCorrection,
    /// `|a|` beyond [`BCA_ACCELERATION_LIMIT`] or `1 - a (z0 + z) <= 0`.
    Acceleration,
    /// An end would be read among the outermost [`BCA_TAIL_REPLICATES`] replicates.
    ExtremeQuantile,
    /// The interval has zero width.
    ZeroWidth,
    /// The interval does not contain the estimate.
    ExcludesEstimate,
    /// Too few successful replicates.
    TooFewReplicates,
}

/// A bias correction beyond this (more than 84 % of the replicates on one
/// side of the estimate) is degenerate: BCa theory takes `z0` small
/// (Efron 1987, sec. 2). The limit is common practice, without a source.
pub const BCA_Z0_LIMIT: f64 = 1.0;

/// An acceleration beyond this is degenerate (Efron 1987 takes `a` of
/// order `n^-1/2`). Common practice, without a source.
pub const BCA_ACCELERATION_LIMIT: f64 = 0.25;

/// A BCa end read within this many replicates of either extreme rests on
/// too few replicates to be trusted (common practice, without a source).
pub const BCA_TAIL_REPLICATES: f64 = 5.0;

/// Lowest level at which the percentile sanity check reads the resampled
/// interval (68.27 %, one standard deviation): at a lower audit level the
/// check uses this one, so that its false-alarm rate is the one measured at
/// the default level (README, "Verdicts").
pub const SANITY_LEVEL: f64 = crate::fit::DEFAULT_LEVEL;

/// Replicates farther than this many robust spreads from the median are
/// runaways (for normal estimates the chance is below 1e-20).
pub const RUNAWAY_SPREADS: f64 = 10.0;

/// Relative variance of the 68.27 % central half-width times the number
/// of replicates, for normal estimates: `p (1 - 2p) / (2 phi(1)^2)`,
/// `p = Phi(-1)` (see the module documentation).
pub fn half_width_variance_factor() -> f64 {
    let nd = std_normal();
    let p = nd.cdf(-1.0);
    let phi = (-0.5f64).exp() / (2.0 * std::f64::consts::PI).sqrt();
    p * (1.0 - 2.0 * p) / (2.0 * phi * phi)
}

/// `null_dof` for `b` replicates and, when the residual scatter enters,
/// its degrees of freedom.
pub fn null_dof(b: usize, scatter_dof: Option<usize>) -> Option<f64> {
    if b < 2 {
        return None;
    }
    let scatter = scatter_dof.filter(|&d| d > 0).map_or(0.0, |d| 1.0 / d as f64);
    Some(1.0 / (2.0 * half_width_variance_factor() / b as f64 + scatter))
}

/// Half-width of the central 68.27 % interval of sorted values.
pub fn robust_spread(sorted: &[f64]) -> f64 {
    let nd = std_normal();
    let p = nd.cdf(-1.0);
    0.5 * (quantile_sorted(sorted, 1.0 - p) - quantile_sorted(sorted, p))
}

/// Replicates farther than [`RUNAWAY_SPREADS`] `spread`s from the median.
pub fn count_runaways(sorted: &[f64], spread: f64) -> usize {
    if !(spread.is_finite() && spread > 0.0) {
        return 0;
    }
    let median = quantile_sorted(sorted, 0.5);
    sorted
        .iter()
        .filter(|v| (*v - median).abs() > RUNAWAY_SPREADS * spread)
        .count()
}

/// The number `q` of JCGM 101:2008, 7.7.2: `pM` when an integer, else
/// the integer part of `pM + 1/2`.
fn jcgm_q(m: usize, level: f64) -> usize {
    let pm = level * m as f64;
    let q = if (pm - pm.round()).abs() < 1e-9 {
        pm.round()
    } else {
        (pm + 0.5).floor()
    };
    (q as usize).min(m.saturating_sub(1))
}

/// Probabilistically symmetric coverage interval of sorted values (JCGM
/// 101:2008, 7.7.2): `[y_(r), y_(r+q)]`, `r = (M - q)/2` when an
/// integer, else `(M - q + 1)/2` (1-based order statistics).
pub fn symmetric_interval(sorted: &[f64], level: f64) -> (f64, f64) {
    let m = sorted.len();
    if m < 2 {
        return (f64::NAN, f64::NAN);
    }
    let q = jcgm_q(m, level);
    let r = (m - q).div_ceil(2).max(1);
    (sorted[r - 1], sorted[(r + q - 1).min(m - 1)])
}

/// Shortest coverage interval of sorted values (JCGM 101:2008, 7.7.3):
/// the `[y_(r), y_(r+q)]` of least width over `r = 1, ..., M - q`.
pub fn shortest_interval(sorted: &[f64], level: f64) -> (f64, f64) {
    let m = sorted.len();
    if m < 2 {
        return (f64::NAN, f64::NAN);
    }
    let q = jcgm_q(m, level);
    let mut best = (f64::INFINITY, 0usize);
    for r in 0..(m - q) {
        let w = sorted[r + q] - sorted[r];
        if w < best.0 {
            best = (w, r);
        }
    }
    (sorted[best.1], sorted[best.1 + q])
}

/// Result of a resampling diagnostic.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResampleResult {
    /// Scheme: "case", "residual", "wild" (bootstrap) or "normal",
    /// "student-t" (Monte Carlo).
    pub scheme: String,
    /// Replicates requested (the maximum when adaptive).
    pub replicates: usize,
    /// Replicates run.
    pub run: usize,
    /// Replicates whose refit failed, excluded from the statistics.
    pub failed: usize,
    /// The failed replicates.
    pub failures: Vec<FailedReplicate>,
    /// Confidence level of the intervals.
    pub level: f64,
    /// Per-parameter statistics.
    pub parameters: Vec<ResampledParameter>,
    /// Correlation matrix of the replicate estimates.
    pub correlation: Vec<Vec<f64>>,
    /// Estimates of the successful replicates, one row per replicate in
    /// replicate order, one column per parameter.
    pub estimates: Vec<Vec<f64>>,
    /// Whether the adaptive rule (Monte Carlo) reached stability.
    pub adaptive_stable: Option<bool>,
    /// Leave-one-point-out values computed for the BCa acceleration (one
    /// per point, from the linearised fit; 0 when the BCa interval was not
    /// requested).
    pub jackknife_refits: usize,
    /// The leave-one-out values that failed (index = left-out point); any
    /// failure disables the BCa interval.
    pub jackknife_failures: Vec<FailedReplicate>,
    /// Monte Carlo only: the factor `s` of the simulated noise
    /// `s * sigma_i * e_i` (1 for absolute sigma, sqrt(chi2/dof) when the
    /// covariance is scaled, e.g. when the data have no sigma).
    pub noise_scale: Option<f64>,
}

/// Why a refit is excluded: `None` when it is usable.
pub fn failure_reason(refit: &Refit, params: &[f64]) -> Option<&'static str> {
    if !refit.converged {
        return Some(match refit.stop {
            StopReason::NonFinite => "non-finite",
            _ => "not-converged",
        });
    }
    if !refit.chi2.is_finite() || params.iter().any(|v| !v.is_finite()) {
        return Some("non-finite");
    }
    None
}

/// Outcome of one replicate refit.
#[derive(Debug, Clone, PartialEq)]
pub enum Outcome {
    /// The refit's parameter vector.
    Ok(Vec<f64>),
    /// The refit failed for this reason.
    Failed(&'static str),
}

/// The data of one replicate, filled by a scheme. `x` is used only by
/// schemes that resample the independent variables (case bootstrap,
/// jackknife); the others refit on the base data's `x`.
#[derive(Debug, Clone)]
pub struct Sample {
    /// Independent-variable columns (own-x schemes only).
    pub x: Vec<Vec<f64>>,
    /// Responses.
    pub y: Vec<f64>,
    /// Standard uncertainties.
    pub sigma: Vec<f64>,
    /// Standard uncertainties of x (errors in x; empty when x is exact).
    /// Set to the base data's by [`refit_replicates`]; a scheme that
    /// reorders points (case, jackknife) overwrites it.
    pub sigma_x: Vec<f64>,
}

impl Sample {
    /// A sample of `n` points with `n_vars` independent variables.
    pub fn new(n_vars: usize, n: usize) -> Sample {
        Sample {
            x: vec![vec![0.0; n]; n_vars],
            y: vec![0.0; n],
            sigma: vec![0.0; n],
            sigma_x: Vec::new(),
        }
    }
}

/// Replicates handed to one rayon task (progress is advanced per chunk).
const CHUNK: usize = 16;

/// Refits replicates `indices` in parallel, each from the base-fit values
/// with the study's free mask, one [`Refitter`] per worker.
///
/// `fill(k, sample)` writes replicate `k`'s data (`n_points` points); when
/// `own_x` is false the refit uses the base data's `x`. Results come back
/// in replicate order whatever the thread count; `fill` must draw its
/// randomness only from replicate `k`'s own stream.
pub fn refit_replicates<F>(
    ctx: &Fitted,
    indices: Range<usize>,
    n_points: usize,
    own_x: bool,
    progress: &dyn Progress,
    fill: F,
) -> Vec<Outcome>
where
    F: Fn(usize, &mut Sample) + Sync,
{
    let start = ctx.values();
    let free = ctx.free_mask();
    let base_x = ctx.data.x_slices();
    let n_vars = ctx.data.x.len();
    let chunks: Vec<Range<usize>> = indices
        .clone()
        .step_by(CHUNK)
        .map(|s| s..(s + CHUNK).min(indices.end))
        .collect();
    let per_chunk: Vec<Vec<Outcome>> = chunks
        .into_par_iter()
        .map_init(
            || {
                let mut sample = Sample::new(if own_x { n_vars } else { 0 }, n_points);
                if let Some(sx) = &ctx.data.sigma_x {
                    sample.sigma_x = if sx.len() == n_points {
                        sx.clone()
                    } else {
                        vec![0.0; n_points]
                    };
                }
                (Refitter::new(&ctx.problem, n_points), sample)
            },
            |(refitter, sample), range| {
                let mut out = Vec::with_capacity(range.len());
                for k in range.clone() {
                    fill(k, sample);
                    let own: Vec<&[f64]>;
                    let x: &[&[f64]] = if own_x {
                        own = sample.x.iter().map(|c| c.as_slice()).collect();
                        &own
                    } else {
                        &base_x
                    };
                    let view = DataView {
                        x,
                        y: &sample.y,
                        sigma: &sample.sigma,
                        sigma_x: &sample.sigma_x,
                    };
                    let refit = refitter.refit(&ctx.problem, &view, &start, &free);
                    let params = refitter.params();
                    out.push(match failure_reason(&refit, params) {
                        None => Outcome::Ok(params.to_vec()),
                        Some(reason) => Outcome::Failed(reason),
                    });
                }
                progress.advance(range.len() as u64);
                out
            },
        )
        .collect();
    per_chunk.into_iter().flatten().collect()
}

/// Leave-one-point-out refits of the base data (one per point, in point
/// order), warm-started from the base fit, for the BCa acceleration.
pub fn jackknife(ctx: &Fitted, progress: &dyn Progress) -> Vec<Outcome> {
    let data = ctx.data;
    let n = data.len();
    if n < 2 {
        return Vec::new();
    }
    let sigma = data.sigma_or_ones();
    refit_replicates(ctx, 0..n, n - 1, true, progress, |left_out, s| {
        for (o, i) in (0..n).filter(|&i| i != left_out).enumerate() {
            for (c, col) in data.x.iter().enumerate() {
                s.x[c][o] = col[i];
            }
            s.y[o] = data.y[i];
            s.sigma[o] = sigma[i];
            if let Some(sx) = &data.sigma_x {
                s.sigma_x[o] = sx[i];
            }
        }
    })
}

/// Sample quantile of sorted values at probability `p` (Hyndman & Fan
/// 1996, definition 7: linear interpolation between order statistics).
/// NaN for an empty slice.
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let n = sorted.len();
    if n == 0 || !p.is_finite() {
        return f64::NAN;
    }
    let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(n - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Central percentile interval at `level` of sorted values.
pub fn percentile_interval(sorted: &[f64], level: f64) -> (f64, f64) {
    let q = 0.5 * (1.0 - level);
    (quantile_sorted(sorted, q), quantile_sorted(sorted, 1.0 - q))
}

/// Mean and sample standard deviation (denominator `n - 1`); NaN when
/// fewer than two values (the standard deviation) or none (the mean).
pub fn mean_std(values: &[f64]) -> (f64, f64) {
    let n = values.len();
    if n == 0 {
        return (f64::NAN, f64::NAN);
    }
    let mean = values.iter().sum::<f64>() / n as f64;
    if n < 2 {
        return (mean, f64::NAN);
    }
    let ss: f64 = values.iter().map(|v| (v - mean) * (v - mean)).sum();
    (mean, (ss / (n - 1) as f64).sqrt())
}

fn std_normal() -> Normal {
    Normal::standard()
}

/// Jackknife acceleration (Efron 1987, eq. 6.6):
/// `a = sum d_i^3 / (6 (sum d_i^2)^(3/2))`, `d_i = mean - theta_(i)`.
/// Zero when every jackknife value is equal; None for fewer than 2 values.
pub fn jackknife_acceleration(jack: &[f64]) -> Option<f64> {
    if jack.len() < 2 {
        return None;
    }
    let mean = jack.iter().sum::<f64>() / jack.len() as f64;
    let (mut s2, mut s3) = (0.0, 0.0);
    for v in jack {
        let d = mean - v;
        s2 += d * d;
        s3 += d * d * d;
    }
    if s2 == 0.0 {
        return Some(0.0);
    }
    let a = s3 / (6.0 * s2.powf(1.5));
    a.is_finite().then_some(a)
}

/// Bias correction `z0 = Phi^-1(share below the estimate)`, ties counting
/// half; None when the share is 0 or 1.
pub fn bias_correction(sorted: &[f64], estimate: f64) -> Option<f64> {
    let n = sorted.len();
    if n == 0 {
        return None;
    }
    let below = sorted.partition_point(|&v| v < estimate);
    let not_above = sorted.partition_point(|&v| v <= estimate);
    let share = (below as f64 + 0.5 * (not_above - below) as f64) / n as f64;
    if share <= 0.0 || share >= 1.0 {
        return None;
    }
    Some(std_normal().inverse_cdf(share))
}

/// The two probabilities at which the BCa interval reads the replicate
/// quantiles (Efron 1987, eq. 2.3 with the acceleration of section 6).
pub fn bca_probabilities(z0: f64, acceleration: f64, level: f64) -> Option<(f64, f64)> {
    let nd = std_normal();
    let q = 0.5 * (1.0 - level);
    let adjust = |p: f64| {
        let z = nd.inverse_cdf(p);
        let den = 1.0 - acceleration * (z0 + z);
        (den > 0.0).then(|| nd.cdf(z0 + (z0 + z) / den))
    };
    let lo = adjust(q)?;
    let hi = adjust(1.0 - q)?;
    (lo.is_finite() && hi.is_finite() && lo < hi).then_some((lo, hi))
}

/// BCa interval of sorted replicate values at `level`.
pub fn bca_interval(sorted: &[f64], estimate: f64, acceleration: f64, level: f64) -> Option<(f64, f64)> {
    let z0 = bias_correction(sorted, estimate)?;
    let (lo, hi) = bca_probabilities(z0, acceleration, level)?;
    Some((quantile_sorted(sorted, lo), quantile_sorted(sorted, hi)))
}

/// The BCa interval of sorted replicates with its sanity checks (see the
/// module documentation): the interval, or why it is withheld.
pub fn checked_bca(
    sorted: &[f64],
    estimate: f64,
    z0: Option<f64>,
    acceleration: Option<f64>,
    level: f64,
) -> (Option<(f64, f64)>, Option<BcaWithheld>) {
    let Some(a) = acceleration else {
        return (None, Some(BcaWithheld::JackknifeFailed));
    };
    let Some(z0) = z0 else {
        return (None, Some(BcaWithheld::OneSided));
    };
    if z0.abs() > BCA_Z0_LIMIT {
        return (None, Some(BcaWithheld::BiasCorrection));
    }
    if a.abs() > BCA_ACCELERATION_LIMIT {
        return (None, Some(BcaWithheld::Acceleration));
    }
    let Some((pl, pu)) = bca_probabilities(z0, a, level) else {
        return (None, Some(BcaWithheld::Acceleration));
    };
    let tail = BCA_TAIL_REPLICATES / sorted.len() as f64;
    if pl < tail || pu > 1.0 - tail {
        return (None, Some(BcaWithheld::ExtremeQuantile));
    }
    let (lo, hi) = (quantile_sorted(sorted, pl), quantile_sorted(sorted, pu));
    if hi.is_nan() || lo.is_nan() || hi <= lo {
        return (None, Some(BcaWithheld::ZeroWidth));
    }
    if estimate < lo || estimate > hi {
        return (None, Some(BcaWithheld::ExcludesEstimate));
    }
    (Some((lo, hi)), None)
}

/// Pearson correlation matrix of the columns of `rows` (every row the same
/// length). Columns listed in `constant` (or of zero variance) get 0 off
/// the diagonal and 1 on it.
pub fn correlation_matrix(rows: &[Vec<f64>], m: usize, constant: &[bool]) -> Vec<Vec<f64>> {
    let n = rows.len();
    let mut c = vec![vec![0.0; m]; m];
    let means: Vec<f64> = (0..m)
        .map(|j| rows.iter().map(|r| r[j]).sum::<f64>() / n.max(1) as f64)
        .collect();
    let mut cov = vec![vec![0.0; m]; m];
    for r in rows {
        for a in 0..m {
            let da = r[a] - means[a];
            for b in a..m {
                cov[a][b] += da * (r[b] - means[b]);
            }
        }
    }
    for a in 0..m {
        c[a][a] = 1.0;
        for b in (a + 1)..m {
            let skip = constant.get(a).copied().unwrap_or(false) || constant.get(b).copied().unwrap_or(false);
            let den = (cov[a][a] * cov[b][b]).sqrt();
            let v = if skip || den.is_nan() || den <= 0.0 || n < 2 {
                0.0
            } else {
                (cov[a][b] / den).clamp(-1.0, 1.0)
            };
            c[a][b] = v;
            c[b][a] = v;
        }
    }
    c
}

/// What [`summarise`] needs to know about the parameters.
#[derive(Debug, Clone, Copy)]
pub struct ParameterInfo<'a> {
    /// Names, in parameter-vector order.
    pub names: &'a [String],
    /// Base-fit values.
    pub estimates: &'a [f64],
    /// Analytic standard errors.
    pub std_errors: &'a [Option<f64>],
    /// Which parameters were refitted (not fixed).
    pub free: &'a [bool],
    /// Degrees of freedom of the residual scatter when the resampled spread
    /// follows the observed residuals while the analytic standard errors are
    /// absolute (bootstrap with stated sigma): the ratio then carries the
    /// chance fluctuation of chi2/dof, relative uncertainty 1/sqrt(2 dof),
    /// besides that of the replicate count. None otherwise.
    pub scatter_dof: Option<usize>,
    /// Monte Carlo: intervals of JCGM 101:2008 (probabilistically
    /// symmetric and shortest), no BCa. Bootstrap: percentile and BCa.
    pub jcgm: bool,
}

/// Per-parameter statistics and correlation of the successful replicates
/// (`rows`, one per replicate), with BCa from `jackknife` rows (one per
/// left-out point) when given.
pub fn summarise(
    info: &ParameterInfo,
    rows: &[Vec<f64>],
    jackknife: Option<&[Vec<f64>]>,
    level: f64,
) -> (Vec<ResampledParameter>, Vec<Vec<f64>>) {
    let m = info.names.len();
    let b = rows.len();
    let mut out = Vec::with_capacity(m);
    for j in 0..m {
        let estimate = info.estimates[j];
        let se = info.std_errors.get(j).copied().flatten();
        if !info.free[j] {
            out.push(ResampledParameter {
                name: info.names[j].clone(),
                estimate,
                mean: estimate,
                bias: 0.0,
                std: 0.0,
                lower: estimate,
                upper: estimate,
                bca_lower: None,
                bca_upper: None,
                analytic_std_error: se,
                sd_ratio: None,
                sd_ratio_uncertainty: None,
                asymmetry: None,
                fixed: true,
                acceleration: None,
                bias_correction: None,
                bca_withheld: None,
                robust_std: 0.0,
                robust_ratio: None,
                null_dof: None,
                runaways: 0,
                percentile_excludes_estimate: false,
                shortest_lower: None,
                shortest_upper: None,
            });
            continue;
        }
        let mut col: Vec<f64> = rows.iter().map(|r| r[j]).collect();
        let (mean, std) = mean_std(&col);
        col.sort_by(f64::total_cmp);
        let (lower, upper) = match (b >= 2, info.jcgm) {
            (false, _) => (f64::NAN, f64::NAN),
            (true, true) => symmetric_interval(&col, level),
            (true, false) => percentile_interval(&col, level),
        };
        let (shortest_lower, shortest_upper) = if info.jcgm && b >= 2 {
            let (l, h) = shortest_interval(&col, level);
            (Some(l), Some(h))
        } else {
            (None, None)
        };
        let acceleration = jackknife.filter(|_| !info.jcgm).and_then(|jk| {
            let vals: Vec<f64> = jk.iter().map(|r| r[j]).collect();
            jackknife_acceleration(&vals)
        });
        let z0 = if b >= 2 && !info.jcgm {
            bias_correction(&col, estimate)
        } else {
            None
        };
        let (bca, bca_withheld) = if info.jcgm || jackknife.is_none() {
            (None, Some(BcaWithheld::NotRequested))
        } else if b < 2 {
            (None, Some(BcaWithheld::TooFewReplicates))
        } else {
            checked_bca(&col, estimate, z0, acceleration, level)
        };
        let sd_ratio = match se {
            Some(s) if s > 0.0 && s.is_finite() && std.is_finite() => Some(std / s),
            _ => None,
        };
        let scatter = info
            .scatter_dof
            .filter(|&d| d > 0)
            .map_or(0.0, |d| 1.0 / (2.0 * d as f64));
        let sd_ratio_uncertainty =
            sd_ratio.and_then(|r| (b >= 2).then(|| r * (1.0 / (2.0 * (b - 1) as f64) + scatter).sqrt()));
        let robust_std = if b >= 2 { robust_spread(&col) } else { f64::NAN };
        let robust_ratio = match se {
            Some(s) if s > 0.0 && s.is_finite() && robust_std.is_finite() => Some(robust_std / s),
            _ => None,
        };
        let runaways = count_runaways(&col, robust_std);
        // The sanity check reads the interval at the level, but never at
        // less than SANITY_LEVEL: a narrower central interval excludes the
        // estimate by chance, its ends lying within the sampling error of
        // the replicates' median.
        let (sane_lower, sane_upper) = match (b >= 2 && level < SANITY_LEVEL, info.jcgm) {
            (false, _) => (lower, upper),
            (true, true) => symmetric_interval(&col, SANITY_LEVEL),
            (true, false) => percentile_interval(&col, SANITY_LEVEL),
        };
        let below = estimate - lower;
        let asymmetry = (below > 0.0 && (upper - estimate).is_finite()).then(|| (upper - estimate) / below);
        out.push(ResampledParameter {
            name: info.names[j].clone(),
            estimate,
            mean,
            bias: mean - estimate,
            std,
            lower,
            upper,
            bca_lower: bca.map(|x| x.0),
            bca_upper: bca.map(|x| x.1),
            analytic_std_error: se,
            sd_ratio,
            sd_ratio_uncertainty,
            asymmetry,
            fixed: false,
            acceleration,
            bias_correction: z0,
            bca_withheld,
            robust_std,
            robust_ratio,
            null_dof: robust_ratio.and_then(|_| null_dof(b, info.scatter_dof)),
            runaways,
            percentile_excludes_estimate: b >= 2 && (estimate < sane_lower || estimate > sane_upper),
            shortest_lower,
            shortest_upper,
        });
    }
    let constant: Vec<bool> = info.free.iter().map(|f| !f).collect();
    let corr = correlation_matrix(rows, m, &constant);
    (out, corr)
}

/// Sorts outcomes into successful rows (replicate order) and failures;
/// `first` is the replicate index of `outcomes[0]`.
pub fn split_outcomes(outcomes: Vec<Outcome>, first: usize) -> (Vec<Vec<f64>>, Vec<FailedReplicate>) {
    let mut rows = Vec::with_capacity(outcomes.len());
    let mut failures = Vec::new();
    for (i, o) in outcomes.into_iter().enumerate() {
        match o {
            Outcome::Ok(p) => rows.push(p),
            Outcome::Failed(reason) => failures.push(FailedReplicate {
                index: first + i,
                reason: reason.to_string(),
            }),
        }
    }
    (rows, failures)
}

/// Everything [`assemble`] needs besides the context.
#[derive(Debug, Clone)]
pub struct Assembly {
    /// Scheme name.
    pub scheme: String,
    /// Replicates requested.
    pub replicates: usize,
    /// Outcomes of the replicates run, in replicate order from 0.
    pub outcomes: Vec<Outcome>,
    /// Jackknife outcomes (None when BCa was not requested).
    pub jackknife: Option<Vec<Outcome>>,
    /// Adaptive stability (Monte Carlo).
    pub adaptive_stable: Option<bool>,
    /// Monte Carlo noise factor.
    pub noise_scale: Option<f64>,
    /// See [`ParameterInfo::scatter_dof`].
    pub scatter_dof: Option<usize>,
    /// See [`ParameterInfo::jcgm`].
    pub jcgm: bool,
}

/// Builds the [`ResampleResult`] from replicate and jackknife outcomes.
pub fn assemble(ctx: &Fitted, a: Assembly) -> ResampleResult {
    let names: Vec<String> = ctx.problem.params.iter().map(|p| p.name.clone()).collect();
    let estimates = ctx.values();
    let std_errors: Vec<Option<f64>> = ctx.fit.parameters.iter().map(|p| p.std_error).collect();
    let free = ctx.free_mask();
    let info = ParameterInfo {
        names: &names,
        estimates: &estimates,
        std_errors: &std_errors,
        free: &free,
        scatter_dof: a.scatter_dof,
        jcgm: a.jcgm,
    };
    let run = a.outcomes.len();
    let (rows, failures) = split_outcomes(a.outcomes, 0);
    let (jackknife_refits, jack_rows, jackknife_failures) = match a.jackknife {
        Some(j) => {
            let n = j.len();
            let (r, f) = split_outcomes(j, 0);
            (n, Some(r), f)
        }
        None => (0, None, Vec::new()),
    };
    // A failed jackknife leaves no usable rows: BCa is then withheld as such.
    let usable_jack = jack_rows.map(|r| {
        if jackknife_failures.is_empty() && r.len() >= 2 {
            r
        } else {
            Vec::new()
        }
    });
    let (parameters, correlation) = summarise(&info, &rows, usable_jack.as_deref(), ctx.settings.level);
    ResampleResult {
        scheme: a.scheme,
        replicates: a.replicates,
        run,
        failed: failures.len(),
        failures,
        level: ctx.settings.level,
        parameters,
        correlation,
        estimates: rows,
        adaptive_stable: a.adaptive_stable,
        jackknife_refits,
        jackknife_failures,
        noise_scale: a.noise_scale,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantile_definition_7() {
        // Hyndman & Fan (1996), definition 7: Q(p) = x_(floor(h)+1) + frac(h) * (...),
        // h = (n - 1) p; for 1..=5 the median is 3 and Q(0.1) = 1.4 (identity).
        let x = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!(quantile_sorted(&x, 0.5), 3.0);
        assert!((quantile_sorted(&x, 0.1) - 1.4).abs() < 1e-12);
        assert_eq!(quantile_sorted(&x, 0.0), 1.0);
        assert_eq!(quantile_sorted(&x, 1.0), 5.0);
        assert!(quantile_sorted(&[], 0.5).is_nan());
    }

    #[test]
    fn acceleration_of_the_mean_is_skewness_over_six_root_n() {
        // Identity (Efron & Tibshirani 1993, "An Introduction to the
        // Bootstrap", eq. 14.15): for the sample mean the jackknife
        // acceleration equals g1 / (6 sqrt(n)), g1 = m3 / m2^(3/2).
        let y = [0.3, 1.9, 0.2, 4.7, 1.1, 0.8, 2.6, 0.05, 9.0, 1.4];
        let n = y.len() as f64;
        let mean = y.iter().sum::<f64>() / n;
        let jack: Vec<f64> = y.iter().map(|v| (n * mean - v) / (n - 1.0)).collect();
        let m2 = y.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
        let m3 = y.iter().map(|v| (v - mean).powi(3)).sum::<f64>() / n;
        let expected = m3 / m2.powf(1.5) / (6.0 * n.sqrt());
        let a = jackknife_acceleration(&jack).unwrap();
        assert!(
            (a - expected).abs() < 1e-12 * expected.abs().max(1.0),
            "{a} vs {expected}"
        );
        assert!(a > 0.0, "right-skewed data give a positive acceleration");
        assert_eq!(jackknife_acceleration(&[2.0, 2.0, 2.0]), Some(0.0));
    }

    #[test]
    fn bca_reduces_to_percentile_without_bias_or_acceleration() {
        // Identity (Efron 1987, eq. 2.3): with z0 = 0 and a = 0 the BCa
        // probabilities are the percentile probabilities.
        let (lo, hi) = bca_probabilities(0.0, 0.0, 0.6827).unwrap();
        assert!(
            (lo - 0.15865).abs() < 1e-9 && (hi - 0.84135).abs() < 1e-9,
            "{lo} {hi}"
        );
        // With a = 0 only: the bias-corrected percentile Phi(2 z0 + z_q).
        let nd = Normal::standard();
        let z0 = 0.2;
        let (lo, hi) = bca_probabilities(z0, 0.0, 0.9).unwrap();
        assert!((lo - nd.cdf(2.0 * z0 + nd.inverse_cdf(0.05))).abs() < 1e-12);
        assert!((hi - nd.cdf(2.0 * z0 + nd.inverse_cdf(0.95))).abs() < 1e-12);
        // A positive acceleration moves both probabilities up (Efron 1987, sec. 2).
        let (la, ha) = bca_probabilities(0.0, 0.1, 0.9).unwrap();
        assert!(la > 0.05 && ha > 0.95);
        // Denominator 1 - a (z0 + z) <= 0: no interval.
        assert!(bca_probabilities(0.0, 1.0, 0.9).is_none());
    }

    #[test]
    fn bias_correction_from_share_below() {
        // Share below 0.5 exactly -> z0 = 0 (identity); all on one side -> None.
        let s = [1.0, 2.0, 3.0, 4.0];
        assert_eq!(bias_correction(&s, 2.5), Some(0.0));
        assert!(bias_correction(&s, 0.5).is_none());
        assert!(bias_correction(&s, 9.0).is_none());
        // 3 of 4 below: Phi^-1(0.75) = 0.6745 (normal table, from memory).
        assert!((bias_correction(&s, 3.5).unwrap() - 0.6745).abs() < 1e-4);
    }

    #[test]
    fn correlation_of_exact_linear_relation() {
        // Identity: columns b = 2a + 1 and c = -a correlate +1 and -1.
        let rows: Vec<Vec<f64>> = (0..10)
            .map(|i| {
                let a = (i as f64).sin();
                vec![a, 2.0 * a + 1.0, -a, 5.0]
            })
            .collect();
        let c = correlation_matrix(&rows, 4, &[false, false, false, true]);
        assert!((c[0][1] - 1.0).abs() < 1e-12 && (c[0][2] + 1.0).abs() < 1e-12);
        assert_eq!(c[0][3], 0.0);
        assert_eq!(c[3][3], 1.0);
    }

    #[test]
    fn summary_of_known_rows() {
        let names = vec!["a".to_string(), "b".to_string()];
        let rows: Vec<Vec<f64>> = (1..=5).map(|i| vec![i as f64, 7.0]).collect();
        let info = ParameterInfo {
            names: &names,
            estimates: &[3.0, 7.0],
            std_errors: &[Some(2.0), None],
            free: &[true, false],
            scatter_dof: None,
            jcgm: false,
        };
        let (p, c) = summarise(&info, &rows, None, 0.8);
        // With the residual scatter's own fluctuation (dof 10): r * sqrt(1/8 + 1/20).
        let with_scatter = ParameterInfo {
            scatter_dof: Some(10),
            ..info
        };
        let (q, _) = summarise(&with_scatter, &rows, None, 0.8);
        let r = q[0].sd_ratio.unwrap();
        assert!((q[0].sd_ratio_uncertainty.unwrap() - r * (1.0f64 / 8.0 + 1.0 / 20.0).sqrt()).abs() < 1e-12);
        // 1..5: mean 3, sample SD sqrt(2.5) (identity), Q(0.1) = 1.4, Q(0.9) = 4.6.
        assert_eq!(p[0].mean, 3.0);
        assert!((p[0].std - 2.5f64.sqrt()).abs() < 1e-12);
        assert!((p[0].lower - 1.4).abs() < 1e-12 && (p[0].upper - 4.6).abs() < 1e-12);
        assert!((p[0].sd_ratio.unwrap() - 2.5f64.sqrt() / 2.0).abs() < 1e-12);
        assert!((p[0].sd_ratio_uncertainty.unwrap() - p[0].sd_ratio.unwrap() / 8f64.sqrt()).abs() < 1e-12);
        assert!((p[0].asymmetry.unwrap() - 1.0).abs() < 1e-12);
        assert!(p[0].bca_lower.is_none(), "no jackknife, no BCa");
        assert!(p[1].fixed && p[1].std == 0.0 && p[1].lower == 7.0 && p[1].sd_ratio.is_none());
        assert_eq!(c, vec![vec![1.0, 0.0], vec![0.0, 1.0]]);
    }

    #[test]
    fn jcgm_coverage_intervals() {
        // JCGM 101:2008, 7.7.2 (from memory): M = 10, p = 0.8 -> q = 8,
        // r = (10 - 8)/2 = 1: [y_(1), y_(9)]; p = 0.75 -> pM = 7.5, q = 8.
        let y: Vec<f64> = (1..=10).map(f64::from).collect();
        assert_eq!(symmetric_interval(&y, 0.8), (1.0, 9.0));
        assert_eq!(symmetric_interval(&y, 0.75), (1.0, 9.0));
        // p = 0.7 -> q = 7, (M - q)/2 = 1.5 not an integer -> r = 2: [y_(2), y_(9)].
        assert_eq!(symmetric_interval(&y, 0.7), (2.0, 9.0));
        // 7.7.3: the shortest of [y_(r), y_(r+q)]; a skewed sample puts it low.
        let skew = [0.0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 2.0, 5.0, 9.0];
        assert_eq!(shortest_interval(&skew, 0.7), (0.0, 2.0));
        assert_eq!(symmetric_interval(&skew, 0.7), (0.1, 5.0));
    }

    #[test]
    fn robust_spread_and_its_null_variance() {
        // p (1 - 2p) / (2 phi(1)^2) with p = Phi(-1) = 0.158655, phi(1) =
        // 0.241971 (normal table, from memory): 0.92496.
        assert!((half_width_variance_factor() - 0.92496).abs() < 1e-4);
        // Without residual scatter nu = B / (2 c); with it 1/(2c/B + 1/dof).
        let c = half_width_variance_factor();
        assert!((null_dof(1000, None).unwrap() - 1000.0 / (2.0 * c)).abs() < 1e-9);
        assert!((null_dof(1000, Some(20)).unwrap() - 1.0 / (2.0 * c / 1000.0 + 0.05)).abs() < 1e-9);
        assert!(null_dof(1, None).is_none());
        // Normal quantiles at Phi(-1), Phi(1) of a large normal sample: the
        // half-width estimates the SD (identity); one runaway leaves it alone.
        let mut rng = crate::rng::stream(5, crate::rng::Stream::Other(91), 0);
        let mut v: Vec<f64> = (0..20_000)
            .map(|_| rand::Rng::sample(&mut rng, rand_distr::StandardNormal))
            .collect();
        v.push(1e6);
        v.sort_by(f64::total_cmp);
        let hw = robust_spread(&v);
        // SD of the half-width 0.96 / sqrt(20000) = 0.0068; 4 of them.
        assert!((hw - 1.0).abs() < 0.028, "{hw}");
        assert_eq!(count_runaways(&v, hw), 1);
        assert!(mean_std(&v).1 > 5.0, "the plain SD is ruined by the runaway");
    }

    #[test]
    fn bca_is_withheld_with_its_reason() {
        let y: Vec<f64> = (0..1000).map(|i| i as f64 / 999.0).collect();
        // All replicates above the estimate.
        assert_eq!(
            checked_bca(&y, -1.0, bias_correction(&y, -1.0), Some(0.0), 0.6827).1,
            Some(BcaWithheld::OneSided)
        );
        // 95 % below the estimate: z0 = 1.64 is degenerate.
        let est = 0.95;
        assert_eq!(
            checked_bca(&y, est, bias_correction(&y, est), Some(0.0), 0.6827).1,
            Some(BcaWithheld::BiasCorrection)
        );
        assert_eq!(
            checked_bca(&y, 0.5, bias_correction(&y, 0.5), Some(0.4), 0.6827).1,
            Some(BcaWithheld::Acceleration)
        );
        assert_eq!(
            checked_bca(&y, 0.5, bias_correction(&y, 0.5), None, 0.6827).1,
            Some(BcaWithheld::JackknifeFailed)
        );
        // At 50 %, z_q = -0.674: with 80 % below the estimate z0 = 0.842 and
        // the lower end reads Phi(2 z0 - 0.674) = 0.844 > 0.8, above the
        // estimate: the interval excludes it.
        let est = 0.8;
        let z0 = bias_correction(&y, est);
        assert_eq!(
            checked_bca(&y, est, z0, Some(0.0), 0.5).1,
            Some(BcaWithheld::ExcludesEstimate)
        );
        // Constant replicates: zero width.
        let flat = vec![1.0; 100];
        assert_eq!(
            checked_bca(&flat, 1.0, Some(0.0), Some(0.0), 0.6827).1,
            Some(BcaWithheld::ZeroWidth)
        );
        // A sound case: given.
        let (iv, why) = checked_bca(&y, 0.5, bias_correction(&y, 0.5), Some(0.01), 0.6827);
        assert!(why.is_none() && iv.unwrap().0 < 0.5 && iv.unwrap().1 > 0.5);
    }
}
