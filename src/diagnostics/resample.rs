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
//!   the Monte Carlo (the jackknife is on the data in both cases). BCa is
//!   `None` when a leave-one-out value failed (listed in
//!   `jackknife_failures`), when every replicate lies on one side of the
//!   estimate, or when `1 - a (z0 + z_q) <= 0`.
//! - **Ratio.** `sd_ratio = std / analytic standard error`, with standard
//!   uncertainty `sd_ratio / sqrt(2 (B - 1))` (the standard error of a
//!   normal-sample standard deviation), `B` the successful replicates.
//!   Whether a difference counts is decided by
//!   [`crate::diagnostics::verdict`].
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
}

impl Sample {
    /// A sample of `n` points with `n_vars` independent variables.
    pub fn new(n_vars: usize, n: usize) -> Sample {
        Sample {
            x: vec![vec![0.0; n]; n_vars],
            y: vec![0.0; n],
            sigma: vec![0.0; n],
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
                (
                    Refitter::new(&ctx.problem, n_points),
                    Sample::new(if own_x { n_vars } else { 0 }, n_points),
                )
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
            });
            continue;
        }
        let mut col: Vec<f64> = rows.iter().map(|r| r[j]).collect();
        let (mean, std) = mean_std(&col);
        col.sort_by(f64::total_cmp);
        let (lower, upper) = if b >= 2 {
            percentile_interval(&col, level)
        } else {
            (f64::NAN, f64::NAN)
        };
        let acceleration = jackknife.and_then(|jk| {
            let vals: Vec<f64> = jk.iter().map(|r| r[j]).collect();
            jackknife_acceleration(&vals)
        });
        let z0 = if b >= 2 {
            bias_correction(&col, estimate)
        } else {
            None
        };
        let bca = match (acceleration, z0) {
            (Some(a), Some(z0)) => bca_probabilities(z0, a, level)
                .map(|(pl, pu)| (quantile_sorted(&col, pl), quantile_sorted(&col, pu))),
            _ => None,
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
    let usable_jack = jack_rows.filter(|r| jackknife_failures.is_empty() && r.len() >= 2);
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
}
