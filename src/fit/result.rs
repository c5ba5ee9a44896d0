//! The full fit: checks, the optimiser with restarts, and the analysis at
//! the solution (covariance, rank, leverage, chi-squared probability).

use super::covariance::{analyse_jacobian, significant};
use super::refitter::{eval_into, Refitter};
use super::{CovarianceScaling, DataView, EndCheck, Likelihood, Problem, Refit, StopReason};
use crate::data::Dataset;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, Normal, StudentsT};

/// Which distribution the coverage factor of the analytic interval
/// `value +- k u` comes from (JCGM 100:2008, section 6 and annex G).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum CoverageBasis {
    /// Stated sigma, absolute covariance: the normal quantile.
    Normal,
    /// Covariance scaled by `s^2 = chi2 / dof`: Student's t with the fit's
    /// degrees of freedom.
    StudentT,
}

/// Coverage factor `k` of the two-sided interval `value +- k u` at
/// `level`: the normal quantile `z_{(1+level)/2}`, or Student's t quantile
/// with `dof` degrees of freedom when `dof` is given (estimated sigma).
pub fn coverage_factor(level: f64, dof: Option<usize>) -> f64 {
    if !(level > 0.0 && level < 1.0) {
        return f64::NAN;
    }
    let p = 0.5 * (1.0 + level);
    match dof {
        Some(d) if d > 0 => StudentsT::new(0.0, 1.0, d as f64)
            .map(|t| t.inverse_cdf(p))
            .unwrap_or(f64::NAN),
        _ => Normal::new(0.0, 1.0)
            .map(|z| z.inverse_cdf(p))
            .unwrap_or(f64::NAN),
    }
}

/// Something at the end point that the user must know: why a fit did not
/// converge, or why its minimum is not an ordinary one.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum EndIssue {
    /// Steps or chi2 changes became negligible short of a minimum: the
    /// Gauss-Newton step still promises a reduction of chi2 above the
    /// optimality tolerance.
    Stalled {
        /// Predicted reduction of chi2.
        gn_decrease: f64,
        /// The tolerance it exceeds.
        tolerance: f64,
    },
    /// The model no longer depends on the parameter at the end point
    /// (its Jacobian column vanished).
    Plateau {
        /// The parameter.
        parameter: String,
        /// Its value at the end point.
        value: f64,
    },
    /// The parameter ran off by many orders of magnitude and the data do
    /// not determine it there.
    Runaway {
        /// The parameter.
        parameter: String,
        /// Its start value.
        start: f64,
        /// Its value at the end point.
        value: f64,
    },
    /// The weighted Jacobian of the estimated parameters is rank-deficient
    /// at the end point: the minimum is not unique (see `undetermined`).
    RankDeficient {
        /// Numerical rank.
        rank: usize,
        /// Estimated parameters (columns).
        estimated: usize,
    },
}

/// Result of a full fit: the solution, its uncertainties and the
/// diagnostics of the linearised problem at the solution.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct FitResult {
    /// The error model the fit minimised (`gaussian` or `poisson`).
    #[serde(default)]
    pub likelihood: Likelihood,
    /// Name of the goodness-of-fit statistic in `chi2`: `"chi2"` (Gaussian)
    /// or `"deviance"` (Poisson).
    #[serde(default = "default_statistic")]
    pub statistic: String,
    /// For a Poisson fit, how many counts are small (the chi-squared
    /// approximation of the deviance's distribution is then doubtful).
    #[serde(default)]
    pub small_counts: Option<SmallCounts>,
    /// The data carry `sigma_x` (errors in x): `chi2` is the
    /// effective-variance chi-squared `sum (y - f)^2 / (sigma^2 + (df/dx)^2
    /// sigma_x^2)` and `residuals` are normalised by the effective sigma.
    #[serde(default)]
    pub errors_in_x: bool,
    /// True only when the end point passed the first-order optimality test
    /// (the Gauss-Newton step promises no chi2 reduction above
    /// [`super::OPTIMALITY_TOLERANCE`]^2 chi2 units) and no parameter is on
    /// a plateau or ran away.
    pub converged: bool,
    /// Why the optimiser stopped.
    pub stop_reason: StopReason,
    /// Iterations (trial steps) taken, over all restarts.
    pub iterations: usize,
    /// Model evaluations.
    pub evaluations: usize,
    /// Chi-squared at the solution (for a Poisson fit the deviance, see
    /// `statistic`).
    pub chi2: f64,
    /// Degrees of freedom: points minus parameters not fixed.
    pub dof: usize,
    /// `chi2 / dof` (0 when `dof` is 0); without sigma this is the
    /// residual variance `s^2` in the squared units of y.
    pub reduced_chi2: f64,
    /// `P(chi2_dof > chi2)` (1 when `dof` is 0); `None` without sigma,
    /// where chi2 is a plain sum of squares and has no chi-squared
    /// distribution in known units.
    pub p_value: Option<f64>,
    /// Whether the noise level is known: the data state sigma, or the
    /// fit is a Poisson fit (the variance of a count is its mean).
    pub sigma_given: bool,
    /// Confidence level of the analytic interval.
    pub level: f64,
    /// Coverage factor `k` of `value +- k u` at `level`.
    pub coverage_factor: f64,
    /// Where `k` comes from: normal with stated sigma, Student's t with
    /// `dof` degrees of freedom when the covariance is scaled.
    pub coverage_basis: CoverageBasis,
    /// The end-point test of the optimiser's last run.
    pub end: EndCheck,
    /// What is unusual at the end point (empty for an ordinary minimum).
    pub end_issues: Vec<EndIssue>,
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

fn default_statistic() -> String {
    "chi2".to_string()
}

/// Counts below this are small for the warning of [`SmallCounts`]
/// (common practice for the chi-squared approximation, e.g. the rule of
/// thumb that expected counts should be at least 5; no single source).
pub const SMALL_COUNT: f64 = 5.0;

/// The share of small counts above which the deviance's p-value is
/// flagged as unreliable (our documented rule: more than 20 % of the bins
/// below [`SMALL_COUNT`]).
pub const SMALL_COUNT_SHARE: f64 = 0.2;

/// The small-count check of a Poisson fit's goodness of fit.
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq)]
pub struct SmallCounts {
    /// Bins with a count below [`SMALL_COUNT`].
    pub below: usize,
    /// All bins.
    pub bins: usize,
    /// `below / bins`.
    pub share: f64,
    /// `share > SMALL_COUNT_SHARE`: the p-value of the deviance from the
    /// chi-squared approximation may be far off.
    pub warning: bool,
}

impl SmallCounts {
    /// The check of the counts `y`.
    pub fn of(y: &[f64]) -> SmallCounts {
        let below = y.iter().filter(|&&v| v < SMALL_COUNT).count();
        let bins = y.len();
        let share = if bins > 0 { below as f64 / bins as f64 } else { 0.0 };
        SmallCounts {
            below,
            bins,
            share,
            warning: share > SMALL_COUNT_SHARE,
        }
    }
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
    /// `k * std_error` with `k` the fit's coverage factor (JCGM 100:2008,
    /// section 6).
    pub expanded_uncertainty: Option<f64>,
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
    /// A count of a Poisson fit that is negative or not an integer.
    #[error("data point {} has count {value}; counts must be whole numbers >= 0", point + 1)]
    InvalidCount {
        /// 0-based point index.
        point: usize,
        /// The offending value.
        value: f64,
    },
    /// A Poisson fit was given sigma (the counts' variance is their mean).
    #[error("a Poisson fit takes no sigma: the variance of a count is its mean")]
    SigmaWithCounts,
    /// Errors in x with more or fewer than one x column.
    #[error("errors in x (sigma_x) need exactly one x column; the data have {columns}")]
    XErrorsNeedOneX {
        /// Number of x columns.
        columns: usize,
    },
    /// Errors in x in a Poisson fit.
    #[error("errors in x (sigma_x) apply to Gaussian fits only, not to a Poisson fit")]
    XErrorsWithCounts,
    /// Errors in x without sigma of y.
    #[error("errors in x (sigma_x) need the standard uncertainty of y (sigma) too")]
    XErrorsNeedSigma,
    /// A sigma_x that is negative or not finite.
    #[error("data point {} has sigma_x {value}; sigma_x must be finite and >= 0", point + 1)]
    InvalidSigmaX {
        /// 0-based point index.
        point: usize,
        /// The offending value.
        value: f64,
    },
    /// The model has no exact x-slope (a native model without
    /// [`crate::model::ModelFn::eval_x_slope`]).
    #[error("the model gives no df/dx, which errors in x (sigma_x) need; use a formula or implement ModelFn::eval_x_slope")]
    NoXSlope,
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
    // The full fit iterates to its tolerances and refines to rounding.
    let precise = Problem {
        model: problem.model,
        params: problem.params.clone(),
        options: super::FitOptions {
            stop_at_optimality: false,
            ..problem.options.clone()
        },
    };
    let problem = &precise;
    let sigma = data.sigma_or_ones();
    let inv_sigma: Vec<f64> = sigma.iter().map(|s| 1.0 / s).collect();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
        sigma_x: data.sigma_x.as_deref().unwrap_or(&[]),
    };
    let m = problem.params.len();
    // The start must be finite.
    let mut values = vec![0.0; data.len()];
    let mut resid = vec![0.0; data.len()];
    let mut scratch = Vec::new();
    let mut aux = super::refitter::ErrorBuffers::default();
    eval_into(
        problem.model,
        &view,
        problem.options.likelihood,
        &inv_sigma,
        start,
        &mut values,
        &mut resid,
        None,
        &mut aux,
        &mut scratch,
    )
    .map_err(|e| FitError::NotFiniteAtStart { point: e.point })?;
    let free = vec![true; m];
    let mut rf = Refitter::new(problem, data.len());
    let mut total = rf.refit(problem, &view, start, &free);
    // The start of the whole fit, for the plateau and runaway tests at
    // the very end (restarts see only their own starts).
    let start_point = rf.start_point().to_vec();
    let start_columns = rf.start_columns().to_vec();
    let mut current = rf.params().to_vec();
    let mut holds_current = true;
    // `max_iterations` caps the whole fit: restarts and the polish share
    // what the first run left.
    let cap = problem.options.max_iterations;
    let budget = |used: usize| Problem {
        model: problem.model,
        params: problem.params.clone(),
        options: super::FitOptions {
            max_iterations: cap.saturating_sub(used),
            ..problem.options.clone()
        },
    };
    for _ in 0..MAX_RESTARTS {
        if total.stop == StopReason::Gradient || total.stop == StopReason::NonFinite {
            break;
        }
        if total.iterations >= cap {
            break;
        }
        let before = total.chi2;
        let again = rf.refit(&budget(total.iterations), &view, &current, &free);
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
            // No progress from a fresh start: the endpoint is the answer
            // (the end-point test below decides whether it converged).
            break;
        }
    }
    if total.converged && problem.options.method == super::Method::Lm {
        // Refine the best endpoint (back into the workspace first when the
        // last restart ended elsewhere).
        let mut ok = total.iterations < cap;
        if ok && !holds_current {
            let again = rf.refit(&budget(total.iterations), &view, &current, &free);
            total.iterations += again.iterations;
            total.evaluations += again.evaluations;
            ok = again.chi2 <= total.chi2 + rf.chi2_noise(&data.y);
        }
        if ok {
            let before = rf.evaluations;
            let left = cap.saturating_sub(total.iterations);
            let (steps, chi2) = super::lm::polish(&mut rf, problem, &view, left);
            total.iterations += steps;
            total.evaluations += rf.evaluations - before;
            current.copy_from_slice(rf.params());
            total.chi2 = chi2;
        }
    }
    // The end-point test of the whole fit, at the answer, against the
    // original start: converged means a verified minimum, whichever stop
    // rule fired last.
    if total.chi2.is_finite() {
        if let Ok(end) = rf.check_at(problem, &view, &current, &start_point, &start_columns) {
            total.end = end;
            match end.failure() {
                None if total.stop != StopReason::NonFinite => {
                    total.converged = true;
                    if !total.stop.is_convergence() {
                        total.stop = StopReason::Gradient;
                    }
                }
                None => total.converged = false,
                // Not a verified minimum. A plateau or a runaway is the
                // most specific cause, whichever rule stopped the search;
                // a stall replaces only a stop that claimed convergence.
                Some(StopReason::Stalled) => {
                    total.converged = false;
                    if total.stop.is_convergence() {
                        total.stop = StopReason::Stalled;
                    }
                }
                Some(stop) => {
                    total.converged = false;
                    total.stop = stop;
                }
            }
        }
    }
    let flags = rf.end_flags().to_vec();
    let mut result = analyse(problem, data, &current, &total)?;
    result.end_issues = end_issues(problem, &total.end, Some(&flags), &start_point, &current, &result);
    Ok(result)
}

/// The end issues of a fit from its end-point test; `flags` (per
/// parameter: 1 plateau, 2 runaway) lists every parameter, otherwise the
/// test's first of each kind is named.
fn end_issues(
    problem: &Problem,
    end: &EndCheck,
    flags: Option<&[u8]>,
    start: &[f64],
    params: &[f64],
    fit: &FitResult,
) -> Vec<EndIssue> {
    let mut out = Vec::new();
    let m = problem.params.len();
    let flag_of = |j: usize| -> u8 {
        match flags {
            Some(f) if f.len() == m => f[j],
            _ => {
                if end.plateau == Some(j) {
                    1
                } else if end.runaway == Some(j) {
                    2
                } else {
                    0
                }
            }
        }
    };
    let has_test = end.active > 0 || end.gn_decrease > 0.0 || end.tolerance > 0.0;
    if has_test && !end.optimal {
        out.push(EndIssue::Stalled {
            gn_decrease: end.gn_decrease,
            tolerance: end.tolerance,
        });
    }
    for (j, (spec, &value)) in problem.params.iter().zip(params).enumerate() {
        match flag_of(j) {
            1 => out.push(EndIssue::Plateau {
                parameter: spec.name.clone(),
                value,
            }),
            2 => out.push(EndIssue::Runaway {
                parameter: spec.name.clone(),
                start: start.get(j).copied().unwrap_or(f64::NAN),
                value,
            }),
            _ => {}
        }
    }
    let estimated = fit.parameters.iter().filter(|p| !p.fixed && !p.at_bound).count();
    if fit.rank < estimated {
        out.push(EndIssue::RankDeficient {
            rank: fit.rank,
            estimated,
        });
    }
    out
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
    if problem.options.likelihood == Likelihood::Poisson {
        if let Some(point) = data.y.iter().position(|v| !(*v >= 0.0 && v.fract() == 0.0)) {
            return Err(FitError::InvalidCount {
                point,
                value: data.y[point],
            });
        }
        if data.sigma.is_some() {
            return Err(FitError::SigmaWithCounts);
        }
    }
    if let Some(sx) = &data.sigma_x {
        if data.x.len() != 1 {
            return Err(FitError::XErrorsNeedOneX {
                columns: data.x.len(),
            });
        }
        if problem.options.likelihood == Likelihood::Poisson {
            return Err(FitError::XErrorsWithCounts);
        }
        if data.sigma.is_none() {
            return Err(FitError::XErrorsNeedSigma);
        }
        if sx.len() != n {
            return Err(mismatch("length of sigma_x", n, sx.len()));
        }
        if let Some(point) = sx.iter().position(|v| !(v.is_finite() && *v >= 0.0)) {
            return Err(FitError::InvalidSigmaX {
                point,
                value: sx[point],
            });
        }
        let mut slope = vec![0.0; n];
        let mut scratch = Vec::new();
        let xs = data.x_slices();
        if problem
            .model
            .eval_x_slope(start, &xs, &mut slope, None, &mut scratch)
            .is_none()
        {
            return Err(FitError::NoXSlope);
        }
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
        sigma_x: data.sigma_x.as_deref().unwrap_or(&[]),
    };
    let mut values = vec![0.0; n];
    let mut resid = vec![0.0; n];
    let mut jac = vec![0.0; n * m];
    let mut scratch = Vec::new();
    let mut aux = super::refitter::ErrorBuffers::default();
    let likelihood = problem.options.likelihood;
    let chi2 = eval_into(
        problem.model,
        &view,
        likelihood,
        &inv_sigma,
        params,
        &mut values,
        &mut resid,
        Some(&mut jac),
        &mut aux,
        &mut scratch,
    )
    .map_err(|e| FitError::NotFinite { point: e.point })?;
    if likelihood == Likelihood::Poisson {
        // The covariance comes from the Fisher information
        // `J^T diag(1/mu) J` of the Poisson likelihood, not from the
        // Jacobian of the deviance residuals (which equals it only where
        // mu = n): rows `d f / d a / sqrt(mu)`.
        for j in 0..m {
            for i in 0..n {
                let col = jac[j * n + i] / aux.dres[i];
                jac[j * n + i] = col / values[i].sqrt();
            }
        }
    }
    if !view.sigma_x.is_empty() {
        // Errors in x: the covariance from the effective-variance weights
        // at the solution, rows `d f / d a / sqrt(V)` (Orear 1982); the
        // parameter dependence of V shapes the minimum, not the curvature
        // used for the standard errors.
        let mut raw = vec![0.0; n * m];
        let mut v = vec![0.0; n];
        problem
            .model
            .eval(params, &xs, &mut v, Some(&mut raw), &mut scratch)
            .map_err(|e| FitError::NotFinite { point: e.point })?;
        for j in 0..m {
            for i in 0..n {
                jac[j * n + i] = raw[j * n + i] * aux.dres[i];
            }
        }
    }
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
    let poisson = likelihood == Likelihood::Poisson;
    // Counts state their variance (the mean): the noise level is known.
    let sigma_given = data.has_sigma() || poisson;
    let p_value = if !sigma_given {
        None
    } else if dof > 0 {
        Some(ChiSquared::new(dof as f64).map(|d| d.sf(chi2)).unwrap_or(1.0))
    } else {
        Some(1.0)
    };
    let scaled = match problem.options.covariance {
        CovarianceScaling::Auto => !sigma_given,
        CovarianceScaling::Scaled => true,
        CovarianceScaling::Absolute => false,
    };
    let factor = if scaled { reduced_chi2 } else { 1.0 };
    // With a scaled covariance and no degrees of freedom there is no
    // estimate of sigma, hence no uncertainty.
    let no_scale = scaled && dof == 0;
    let level = problem.options.level;
    let (coverage_factor_k, coverage_basis) = if scaled && dof > 0 {
        (coverage_factor(level, Some(dof)), CoverageBasis::StudentT)
    } else {
        (coverage_factor(level, None), CoverageBasis::Normal)
    };

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
            Some(a) if !an.undetermined[a] && !no_scale => {
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
            expanded_uncertainty: std_error.map(|u| coverage_factor_k * u),
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
    let small_counts = poisson.then(|| SmallCounts::of(&data.y));
    let mut result = FitResult {
        likelihood,
        statistic: likelihood.statistic().to_string(),
        small_counts,
        errors_in_x: !view.sigma_x.is_empty(),
        converged: refit.converged,
        stop_reason: refit.stop,
        iterations: refit.iterations,
        evaluations: refit.evaluations,
        chi2,
        dof,
        reduced_chi2,
        p_value,
        sigma_given,
        level,
        coverage_factor: coverage_factor_k,
        coverage_basis,
        end: refit.end,
        end_issues: Vec::new(),
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
    };
    let start: Vec<f64> = problem.params.iter().map(|p| p.start).collect();
    result.end_issues = end_issues(problem, &refit.end, None, &start, params, &result);
    Ok(result)
}

#[cfg(test)]
mod tests {
    use super::coverage_factor;

    #[test]
    fn coverage_factors_of_the_normal_table() {
        // GUM (JCGM 100:2008) table G.1: p = 95 % -> k = 1.960, p = 99 % ->
        // k = 2.576, p = 68.27 % -> k = 1.
        assert!((coverage_factor(0.95, None) - 1.959_964).abs() < 1e-5);
        assert!((coverage_factor(0.99, None) - 2.575_829).abs() < 1e-5);
        assert!((coverage_factor(0.6827, None) - 1.0).abs() < 1e-3);
        assert!(coverage_factor(1.0, None).is_nan());
        assert!(coverage_factor(0.0, Some(5)).is_nan());
    }

    #[test]
    fn student_t_quantiles_of_the_e_handbook_table() {
        // NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.2
        // "Critical values of the Student's t distribution" (upper-tail
        // probabilities 0.10, 0.05, 0.025, 0.01, 0.005 = two-sided levels
        // 0.80, 0.90, 0.95, 0.98, 0.99), three decimals as printed there.
        let table: [(usize, [f64; 5]); 5] = [
            (1, [3.078, 6.314, 12.706, 31.821, 63.657]),
            (5, [1.476, 2.015, 2.571, 3.365, 4.032]),
            (10, [1.372, 1.812, 2.228, 2.764, 3.169]),
            (30, [1.310, 1.697, 2.042, 2.457, 2.750]),
            (100, [1.290, 1.660, 1.984, 2.364, 2.626]),
        ];
        let levels = [0.80, 0.90, 0.95, 0.98, 0.99];
        for (dof, row) in table {
            for (level, want) in levels.iter().zip(row) {
                let k = coverage_factor(*level, Some(dof));
                assert!((k - want).abs() <= 5.1e-4, "t({dof}) at {level}: {k} vs {want}");
            }
        }
    }
}
