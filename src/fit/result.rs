//! The full fit: checks, the optimiser with restarts, and the analysis at
//! the solution (covariance, rank, leverage, chi-squared probability).

use super::covariance::{analyse_jacobian, significant};
use super::refitter::{eval_into, Refitter};
use super::{CovarianceScaling, DataView, Problem, Refit, StopReason};
use crate::data::Dataset;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Result of a full fit: the solution, its uncertainties and the
/// diagnostics of the linearised problem at the solution.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FitResult {
    /// False for the iteration cap or non-finite model values.
    pub converged: bool,
    /// Why the optimiser stopped.
    pub stop_reason: StopReason,
    /// Iterations (trial steps) taken, over all restarts.
    pub iterations: usize,
    /// Model evaluations.
    pub evaluations: usize,
    /// Chi-squared at the solution.
    pub chi2: f64,
    /// Degrees of freedom: points minus parameters not fixed.
    pub dof: usize,
    /// `chi2 / dof` (0 when `dof` is 0).
    pub reduced_chi2: f64,
    /// `P(chi2_dof > chi2)` (1 when `dof` is 0).
    pub p_value: f64,
    /// One entry per parameter, in the problem's order.
    pub parameters: Vec<ParamResult>,
    /// `m x m` over all parameters; rows and columns of fixed, at-bound or
    /// undetermined parameters are 0.
    pub covariance: Vec<Vec<f64>>,
    /// Same shape; diagonal 1 for estimated parameters, 0 otherwise.
    pub correlation: Vec<Vec<f64>>,
    /// True when the covariance was scaled by `chi2 / dof`.
    pub covariance_scaled: bool,
    /// Singular-value ratio of the weighted Jacobian over the free,
    /// not-at-bound parameters, with its columns scaled to unit norm (so
    /// that it does not depend on the parameters' units); `f64::MAX` when
    /// the Jacobian is exactly singular, 1 when nothing is estimated.
    pub condition_number: f64,
    /// Numerical rank of that Jacobian.
    pub rank: usize,
    /// For a rank-deficient problem, each null-space direction as
    /// `(parameter name, component)` in the unit-column coordinates: the
    /// named parameters are only determined together.
    pub undetermined: Vec<Vec<(String, f64)>>,
    /// Model values at the solution.
    pub fitted: Vec<f64>,
    /// Normalised residuals `(y - f) / sigma`.
    pub residuals: Vec<f64>,
    /// Diagonal of the hat matrix of the weighted Jacobian (estimated
    /// parameters).
    pub leverage: Vec<f64>,
}

/// One parameter of a [`FitResult`].
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct ParamResult {
    /// Name.
    pub name: String,
    /// Value at the solution.
    pub value: f64,
    /// Standard error; `None` when fixed, on a bound or undetermined.
    pub std_error: Option<f64>,
    /// The value lies on its lower or upper bound.
    pub at_bound: bool,
    /// The parameter was fixed.
    pub fixed: bool,
}

/// What can go wrong setting up or analysing a fit. Point numbers are
/// 1-based, as a user counts data rows.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    /// The model is not finite at the start.
    #[error("model is not finite at the start, at data point {}", point + 1)]
    NotFiniteAtStart {
        /// 0-based point index.
        point: usize,
    },
    /// The model is not finite at the parameters to analyse.
    #[error("model is not finite at the given parameters, at data point {}", point + 1)]
    NotFinite {
        /// 0-based point index.
        point: usize,
    },
    /// Fewer points than free parameters.
    #[error("{points} data points cannot determine {free} free parameters")]
    TooFewPoints {
        /// Number of points.
        points: usize,
        /// Number of free parameters.
        free: usize,
    },
    /// Two lengths that must agree do not.
    #[error("{what}: expected {expected}, found {found}")]
    DimensionMismatch {
        /// What was counted.
        what: String,
        /// Expected length.
        expected: usize,
        /// Actual length.
        found: usize,
    },
    /// A data value is not finite.
    #[error("data point {} has a non-finite {column}", point + 1)]
    NonFiniteData {
        /// 0-based point index.
        point: usize,
        /// Column name.
        column: String,
    },
    /// A sigma is not finite and positive.
    #[error("data point {} has sigma {value}; sigma must be finite and positive", point + 1)]
    InvalidSigma {
        /// 0-based point index.
        point: usize,
        /// The offending value.
        value: f64,
    },
    /// Bounds in the wrong order, or not numbers.
    #[error("parameter {name}: bounds [{min}, {max}] are not an interval")]
    InvalidBounds {
        /// Parameter name.
        name: String,
        /// Lower bound.
        min: f64,
        /// Upper bound.
        max: f64,
    },
    /// A start value outside its bounds or not finite.
    #[error("parameter {name}: start {start} is not finite or lies outside [{min}, {max}]")]
    InvalidStart {
        /// Parameter name.
        name: String,
        /// Start value.
        start: f64,
        /// Lower bound.
        min: f64,
        /// Upper bound.
        max: f64,
    },
}

/// Full fit with covariance from the specs' starts.
pub fn fit(problem: &Problem, data: &Dataset) -> Result<FitResult, FitError> {
    let start: Vec<f64> = problem.params.iter().map(|p| p.start).collect();
    fit_from(problem, data, &start)
}

/// Most restarts of the optimiser from its own endpoint in a full fit.
pub const MAX_RESTARTS: usize = 8;

/// Full fit from a given start (same as [`fit`] otherwise).
///
/// Strategy (generic, the same for every problem): run the optimiser; while
/// it stopped for any reason other than a small gradient and the last run
/// still lowered chi2 by more than its rounding noise, restart it from its
/// endpoint (fresh scaling and trust region), at most [`MAX_RESTARTS`]
/// times. A converged Levenberg-Marquardt fit then takes undamped
/// Gauss-Newton steps while they contract, which resolves the minimiser
/// more finely than chi2 itself can. Errors: bad lengths, non-finite data,
/// sigma not positive, bounds not an interval, a start outside its bounds,
/// fewer points than free parameters, a model not finite at the start.
pub fn fit_from(problem: &Problem, data: &Dataset, start: &[f64]) -> Result<FitResult, FitError> {
    check(problem, data, start)?;
    let sigma = data.sigma_or_ones();
    let inv_sigma: Vec<f64> = sigma.iter().map(|s| 1.0 / s).collect();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
    };
    let m = problem.params.len();
    // The start must be finite.
    let mut values = vec![0.0; data.len()];
    let mut resid = vec![0.0; data.len()];
    let mut scratch = Vec::new();
    eval_into(
        problem.model,
        &view,
        &inv_sigma,
        start,
        &mut values,
        &mut resid,
        None,
        &mut scratch,
    )
    .map_err(|e| FitError::NotFiniteAtStart { point: e.point })?;
    let free = vec![true; m];
    let mut rf = Refitter::new(problem, data.len());
    let mut total = rf.refit(problem, &view, start, &free);
    let mut current = rf.params().to_vec();
    let mut holds_current = true;
    for _ in 0..MAX_RESTARTS {
        if total.stop == StopReason::Gradient || total.stop == StopReason::NonFinite {
            break;
        }
        let before = total.chi2;
        let again = rf.refit(problem, &view, &current, &free);
        total.iterations += again.iterations;
        total.evaluations += again.evaluations;
        holds_current = again.chi2 <= before;
        if holds_current {
            current.copy_from_slice(rf.params());
            total.chi2 = again.chi2;
            total.stop = again.stop;
            total.converged = again.converged;
        }
        let improved = again.chi2 < before - rf.chi2_noise(&data.y);
        if !improved {
            // No progress from a fresh start: the endpoint is the answer; it
            // counts as converged unless the last run hit the cap without
            // any decrease to show for it.
            if again.converged {
                total.converged = true;
            }
            break;
        }
    }
    if total.converged && problem.options.method == super::Method::Lm {
        // Refine the best endpoint (back into the workspace first when the
        // last restart ended elsewhere).
        let mut ok = true;
        if !holds_current {
            let again = rf.refit(problem, &view, &current, &free);
            total.iterations += again.iterations;
            total.evaluations += again.evaluations;
            ok = again.chi2 <= total.chi2 + rf.chi2_noise(&data.y);
        }
        if ok {
            let before = rf.evaluations;
            let (steps, chi2) = super::lm::polish(&mut rf, problem, &view);
            total.iterations += steps;
            total.evaluations += rf.evaluations - before;
            current.copy_from_slice(rf.params());
            total.chi2 = chi2;
        }
    }
    analyse(problem, data, &current, &total)
}

fn check(problem: &Problem, data: &Dataset, start: &[f64]) -> Result<(), FitError> {
    let m = problem.params.len();
    let n = data.len();
    let mismatch = |what: &str, expected: usize, found: usize| FitError::DimensionMismatch {
        what: what.to_string(),
        expected,
        found,
    };
    if problem.model.n_params() != m {
        return Err(mismatch("model parameters", m, problem.model.n_params()));
    }
    if start.len() != m {
        return Err(mismatch("start values", m, start.len()));
    }
    if data.x.len() != data.x_names.len() {
        return Err(mismatch(
            "independent-variable names",
            data.x.len(),
            data.x_names.len(),
        ));
    }
    for (col, name) in data.x.iter().zip(data.x_names.iter()) {
        if col.len() != n {
            return Err(mismatch(&format!("length of column {name}"), n, col.len()));
        }
        if let Some(point) = col.iter().position(|v| !v.is_finite()) {
            return Err(FitError::NonFiniteData {
                point,
                column: name.clone(),
            });
        }
    }
    if let Some(point) = data.y.iter().position(|v| !v.is_finite()) {
        return Err(FitError::NonFiniteData {
            point,
            column: data.y_name.clone(),
        });
    }
    if let Some(s) = &data.sigma {
        if s.len() != n {
            return Err(mismatch("length of sigma", n, s.len()));
        }
        if let Some(point) = s.iter().position(|v| !(v.is_finite() && *v > 0.0)) {
            return Err(FitError::InvalidSigma {
                point,
                value: s[point],
            });
        }
    }
    for (p, &s) in problem.params.iter().zip(start.iter()) {
        if p.min.is_nan() || p.max.is_nan() || p.min > p.max {
            return Err(FitError::InvalidBounds {
                name: p.name.clone(),
                min: p.min,
                max: p.max,
            });
        }
        if !s.is_finite() || (!p.fixed && (s < p.min || s > p.max)) {
            return Err(FitError::InvalidStart {
                name: p.name.clone(),
                start: s,
                min: p.min,
                max: p.max,
            });
        }
    }
    let free = problem.params.iter().filter(|p| !p.fixed).count();
    if n < free {
        return Err(FitError::TooFewPoints { points: n, free });
    }
    Ok(())
}

/// Covariance/derived quantities at a given parameter vector without
/// optimising (used after refits). `refit` supplies the optimiser's
/// report (convergence, stop reason, counts). Parameters count as
/// estimated unless `spec.fixed` or on a bound.
pub fn analyse(
    problem: &Problem,
    data: &Dataset,
    params: &[f64],
    refit: &Refit,
) -> Result<FitResult, FitError> {
    check(problem, data, params).or_else(|e| match e {
        // A refit may end exactly on a bound; other start errors matter.
        FitError::InvalidStart { .. } => Ok(()),
        other => Err(other),
    })?;
    let n = data.len();
    let m = problem.params.len();
    let sigma = data.sigma_or_ones();
    let inv_sigma: Vec<f64> = sigma.iter().map(|s| 1.0 / s).collect();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
    };
    let mut values = vec![0.0; n];
    let mut resid = vec![0.0; n];
    let mut jac = vec![0.0; n * m];
    let mut scratch = Vec::new();
    let chi2 = eval_into(
        problem.model,
        &view,
        &inv_sigma,
        params,
        &mut values,
        &mut resid,
        Some(&mut jac),
        &mut scratch,
    )
    .map_err(|e| FitError::NotFinite { point: e.point })?;
    if let Some(idx) = jac.iter().position(|v| !v.is_finite()) {
        return Err(FitError::NotFinite {
            point: idx % n.max(1),
        });
    }

    let at_bound: Vec<bool> = problem
        .params
        .iter()
        .zip(params.iter())
        .map(|(p, &v)| !p.fixed && (v <= p.min || v >= p.max))
        .collect();
    let estimated: Vec<usize> = (0..m)
        .filter(|&j| !problem.params[j].fixed && !at_bound[j])
        .collect();
    let k = estimated.len();
    let mut sub = Vec::with_capacity(n * k);
    for &j in &estimated {
        sub.extend_from_slice(&jac[j * n..(j + 1) * n]);
    }
    let an = analyse_jacobian(&sub, n, k);

    let n_free = problem.params.iter().filter(|p| !p.fixed).count();
    let dof = n.saturating_sub(n_free);
    let reduced_chi2 = if dof > 0 { chi2 / dof as f64 } else { 0.0 };
    let p_value = if dof > 0 {
        ChiSquared::new(dof as f64).map(|d| d.sf(chi2)).unwrap_or(1.0)
    } else {
        1.0
    };
    let scaled = match problem.options.covariance {
        CovarianceScaling::Auto => !data.has_sigma(),
        CovarianceScaling::Scaled => true,
        CovarianceScaling::Absolute => false,
    };
    let factor = if scaled { reduced_chi2 } else { 1.0 };

    let mut covariance = vec![vec![0.0; m]; m];
    let mut correlation = vec![vec![0.0; m]; m];
    for (a, &ja) in estimated.iter().enumerate() {
        if an.undetermined[a] {
            continue;
        }
        for (b, &jb) in estimated.iter().enumerate() {
            if an.undetermined[b] {
                continue;
            }
            covariance[ja][jb] = factor * an.cov[a][b];
            let den = (an.cov[a][a] * an.cov[b][b]).sqrt();
            correlation[ja][jb] = if a == b {
                1.0
            } else if den > 0.0 && den.is_finite() {
                (an.cov[a][b] / den).clamp(-1.0, 1.0)
            } else {
                0.0
            };
        }
    }
    let mut parameters = Vec::with_capacity(m);
    for (j, spec) in problem.params.iter().enumerate() {
        let est = estimated.iter().position(|&e| e == j);
        let std_error = match est {
            Some(a) if !an.undetermined[a] => {
                let v = covariance[j][j];
                if v.is_finite() && v >= 0.0 {
                    Some(v.sqrt())
                } else {
                    None
                }
            }
            _ => None,
        };
        parameters.push(ParamResult {
            name: spec.name.clone(),
            value: params[j],
            std_error,
            at_bound: at_bound[j],
            fixed: spec.fixed,
        });
    }
    let undetermined = an
        .null
        .iter()
        .map(|dir| {
            significant(dir)
                .map(|(a, c)| (problem.params[estimated[a]].name.clone(), c))
                .collect()
        })
        .collect();
    Ok(FitResult {
        converged: refit.converged,
        stop_reason: refit.stop,
        iterations: refit.iterations,
        evaluations: refit.evaluations,
        chi2,
        dof,
        reduced_chi2,
        p_value,
        parameters,
        covariance,
        correlation,
        covariance_scaled: scaled,
        condition_number: an.condition,
        rank: an.rank,
        undetermined,
        fitted: values,
        residuals: resid.iter().map(|r| -r).collect(),
        leverage: an.leverage,
    })
}
