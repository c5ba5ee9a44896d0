//! Pointwise confidence and prediction bands of the fitted curve, on the
//! grid of [`crate::audit::Curve`] (one independent variable only).
//!
//! With `g(x) = df(x; a)/da` at the solution and `C` the covariance of the
//! fit (rows and columns of fixed, at-bound or undetermined parameters are
//! 0), at every grid point:
//!
//! - **standard error of the curve** `u_f(x) = sqrt(g^T C g)` (the law of
//!   propagation, JCGM 100:2008, 5.2, applied to the model value);
//! - **confidence band** `f(x) +- k u_f(x)`, `k` the fit's coverage factor
//!   (normal quantile with stated sigma, Student's t with the fit's degrees
//!   of freedom when the covariance is scaled);
//! - **prediction band** `f(x) +- k sqrt(u_f(x)^2 + s_new(x)^2)`, the
//!   variance of one new observation added: `s_new^2 = sigma(x)^2` with
//!   `sigma(x)` interpolated linearly in x between the data's sigma (the
//!   nearest end value beyond them), times `chi2/dof` when the covariance
//!   is scaled (without sigma every sigma is 1, so `s_new^2 = s^2`).
//!
//! For a straight line fitted without sigma these are the textbook forms
//! `f +- t s sqrt(1/n + (x - mean x)^2 / Sxx)` and `f +- t s sqrt(1 + 1/n +
//! (x - mean x)^2 / Sxx)` (N. R. Draper and H. Smith, *Applied Regression
//! Analysis*, 3rd ed., 1998, ch. 3).
//!
//! **Resampled bands.** The bootstrap and Monte Carlo percentile bands are
//! the pointwise `(1 - level)/2` and `(1 + level)/2` sample quantiles
//! (Hyndman and Fan definition 7, as for the parameters) of
//! `f(x; a*)` over the successful replicate estimates `a*` already kept in
//! the resampling results. They are confidence bands (the spread of the
//! fitted curve), to be compared with the analytic confidence band. The
//! grid is processed in blocks of [`BLOCK`] points, so at most
//! `replicates x BLOCK` model values are held per worker, never every curve.

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::data::Dataset;
use crate::diagnostics::resample::{quantile_sorted, ResampleResult};
use crate::fit::{CoverageBasis, FitResult};
use crate::model::ModelFn;

/// Grid points evaluated together for the resampled bands.
pub const BLOCK: usize = 25;

/// Where the variance of a new observation in the prediction band comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NewObservation {
    /// The data's sigma interpolated at x (absolute covariance).
    InterpolatedSigma,
    /// The data's sigma interpolated at x, times `chi2/dof` (covariance
    /// scaled with stated sigma: the sigma are relative weights).
    ScaledSigma,
    /// No sigma: the residual variance `s^2 = chi2/dof`.
    ResidualVariance,
    /// A Poisson fit: a new count has variance equal to its mean, the
    /// fitted value (times `deviance/dof` when the covariance is scaled).
    PoissonCount,
}

/// A pointwise percentile band of the replicate curves.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ResampledBand {
    /// Replicate estimates used (the successful replicates).
    pub replicates: usize,
    /// Lower end at each grid point.
    pub lower: Vec<f64>,
    /// Upper end at each grid point.
    pub upper: Vec<f64>,
}

/// Confidence and prediction bands on the curve grid.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Bands {
    /// Confidence level.
    pub level: f64,
    /// Coverage factor `k` of the analytic bands.
    pub coverage_factor: f64,
    /// Where `k` comes from.
    pub coverage_basis: CoverageBasis,
    /// Where the new observation's variance comes from.
    pub new_observation: NewObservation,
    /// Grid abscissae (those of `curve`).
    pub x: Vec<f64>,
    /// Model values at the fit.
    pub y: Vec<f64>,
    /// Standard uncertainty of the model value, `sqrt(g^T C g)`.
    pub std_error: Vec<f64>,
    /// Standard uncertainty of one new observation at x.
    pub new_observation_std: Vec<f64>,
    /// `y - k std_error`.
    pub confidence_lower: Vec<f64>,
    /// `y + k std_error`.
    pub confidence_upper: Vec<f64>,
    /// `y - k sqrt(std_error^2 + new_observation_std^2)`.
    pub prediction_lower: Vec<f64>,
    /// `y + k sqrt(std_error^2 + new_observation_std^2)`.
    pub prediction_upper: Vec<f64>,
    /// Bootstrap percentile band, when the bootstrap ran.
    pub bootstrap: Option<ResampledBand>,
    /// Monte Carlo percentile band, when the Monte Carlo ran.
    pub monte_carlo: Option<ResampledBand>,
}

/// `sigma(x)` interpolated linearly between the data's `(x, sigma)`
/// sorted by x; the nearest end value beyond them. `None` when the data
/// have no sigma or no point.
pub fn interpolated_sigma(data: &Dataset, at: &[f64]) -> Option<Vec<f64>> {
    let sigma = data.sigma.as_ref()?;
    let xs = data.x.first()?;
    let mut pts: Vec<(f64, f64)> = xs
        .iter()
        .copied()
        .zip(sigma.iter().copied())
        .filter(|(x, s)| x.is_finite() && s.is_finite())
        .collect();
    if pts.is_empty() {
        return None;
    }
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    Some(
        at.iter()
            .map(|&x| {
                let i = pts.partition_point(|p| p.0 < x);
                if i == 0 {
                    pts[0].1
                } else if i == pts.len() {
                    pts[pts.len() - 1].1
                } else {
                    let (x0, s0) = pts[i - 1];
                    let (x1, s1) = pts[i];
                    if x1 > x0 {
                        s0 + (s1 - s0) * (x - x0) / (x1 - x0)
                    } else {
                        s1
                    }
                }
            })
            .collect(),
    )
}

/// The analytic bands at `x` (no resampled parts), or `None` when the
/// model has no single independent variable or cannot be evaluated.
pub fn analytic(model: &dyn ModelFn, data: &Dataset, fit: &FitResult, x: &[f64]) -> Option<Bands> {
    if data.x.len() != 1 || x.is_empty() {
        return None;
    }
    let m = model.n_params();
    let n = x.len();
    let params: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    if params.len() != m || fit.covariance.len() != m {
        return None;
    }
    let mut y = vec![0.0; n];
    let mut jac = vec![0.0; n * m];
    let mut scratch = Vec::new();
    // Non-finite points stay non-finite in the bands (serialised as null).
    let _ = model.eval(&params, &[x], &mut y, Some(&mut jac), &mut scratch);
    let c = &fit.covariance;
    let std_error: Vec<f64> = (0..n)
        .map(|i| {
            let mut v = 0.0;
            for a in 0..m {
                let ga = jac[a * n + i];
                if ga == 0.0 {
                    continue;
                }
                for (b, cab) in c[a].iter().enumerate() {
                    v += ga * cab * jac[b * n + i];
                }
            }
            v.max(0.0).sqrt()
        })
        .collect();
    let scale = if fit.covariance_scaled {
        fit.reduced_chi2
    } else {
        1.0
    };
    let poisson = fit.likelihood == crate::fit::Likelihood::Poisson;
    let (new_observation, sigma) = match interpolated_sigma(data, x) {
        _ if poisson => (
            NewObservation::PoissonCount,
            y.iter().map(|f| f.max(0.0).sqrt()).collect(),
        ),
        Some(s) if fit.covariance_scaled => (NewObservation::ScaledSigma, s),
        Some(s) => (NewObservation::InterpolatedSigma, s),
        None => (NewObservation::ResidualVariance, vec![1.0; n]),
    };
    let new_observation_std: Vec<f64> = sigma.iter().map(|s| s * scale.sqrt()).collect();
    let k = fit.coverage_factor;
    let half_p: Vec<f64> = std_error
        .iter()
        .zip(&new_observation_std)
        .map(|(u, s)| k * (u * u + s * s).sqrt())
        .collect();
    Some(Bands {
        level: fit.level,
        coverage_factor: k,
        coverage_basis: fit.coverage_basis,
        new_observation,
        confidence_lower: y.iter().zip(&std_error).map(|(f, u)| f - k * u).collect(),
        confidence_upper: y.iter().zip(&std_error).map(|(f, u)| f + k * u).collect(),
        prediction_lower: y.iter().zip(&half_p).map(|(f, h)| f - h).collect(),
        prediction_upper: y.iter().zip(&half_p).map(|(f, h)| f + h).collect(),
        x: x.to_vec(),
        y,
        std_error,
        new_observation_std,
        bootstrap: None,
        monte_carlo: None,
    })
}

/// The pointwise percentile band at `level` of the model evaluated at
/// every replicate estimate of `rs` on `x`; `None` with fewer than two
/// replicates or estimates that are not full parameter vectors.
pub fn resampled(model: &dyn ModelFn, rs: &ResampleResult, x: &[f64], level: f64) -> Option<ResampledBand> {
    let m = model.n_params();
    let rows = &rs.estimates;
    if rows.len() < 2 || rows.iter().any(|r| r.len() != m) {
        return None;
    }
    let q = 0.5 * (1.0 - level);
    let blocks: Vec<(Vec<f64>, Vec<f64>)> = x
        .par_chunks(BLOCK)
        .map(|xb| {
            let nb = xb.len();
            // Values by grid point, each with one value per replicate.
            let mut by_point: Vec<Vec<f64>> = vec![Vec::with_capacity(rows.len()); nb];
            let mut vals = vec![0.0; nb];
            let mut scratch = Vec::new();
            for r in rows {
                let _ = model.eval(r, &[xb], &mut vals, None, &mut scratch);
                for (col, v) in by_point.iter_mut().zip(&vals) {
                    if v.is_finite() {
                        col.push(*v);
                    }
                }
            }
            let mut lo = Vec::with_capacity(nb);
            let mut hi = Vec::with_capacity(nb);
            for col in &mut by_point {
                if col.len() < 2 {
                    lo.push(f64::NAN);
                    hi.push(f64::NAN);
                    continue;
                }
                col.sort_by(f64::total_cmp);
                lo.push(quantile_sorted(col, q));
                hi.push(quantile_sorted(col, 1.0 - q));
            }
            (lo, hi)
        })
        .collect();
    let mut lower = Vec::with_capacity(x.len());
    let mut upper = Vec::with_capacity(x.len());
    for (lo, hi) in blocks {
        lower.extend(lo);
        upper.extend(hi);
    }
    Some(ResampledBand {
        replicates: rows.len(),
        lower,
        upper,
    })
}

/// The bands of an audit: analytic on the curve grid, plus the percentile
/// bands of whichever resampling diagnostics ran.
pub fn compute(
    model: &dyn ModelFn,
    data: &Dataset,
    fit: &FitResult,
    x: &[f64],
    bootstrap: Option<&ResampleResult>,
    monte_carlo: Option<&ResampleResult>,
) -> Option<Bands> {
    let mut b = analytic(model, data, fit, x)?;
    b.bootstrap = bootstrap.and_then(|rs| resampled(model, rs, x, rs.level));
    b.monte_carlo = monte_carlo.and_then(|rs| resampled(model, rs, x, rs.level));
    Some(b)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sigma_is_interpolated_linearly_and_held_beyond_the_ends() {
        // Identity: linear interpolation between (0, 1) and (2, 3).
        let d = Dataset::single("x", vec![2.0, 0.0], "y", vec![0.0, 0.0], Some(vec![3.0, 1.0]));
        let s = interpolated_sigma(&d, &[-1.0, 0.0, 0.5, 2.0, 5.0]).unwrap();
        assert_eq!(s, vec![1.0, 1.0, 1.5, 3.0, 3.0]);
        let none = Dataset::single("x", vec![0.0], "y", vec![0.0], None);
        assert!(interpolated_sigma(&none, &[0.0]).is_none());
    }
}
