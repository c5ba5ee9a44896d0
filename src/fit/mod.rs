//! The refit primitive: weighted least squares by Levenberg-Marquardt or
//! steepest descent, with bounds, fixed parameters and covariance.
//!
//! The types and signatures in this module are the pinned API that every
//! diagnostic calls. The work is done in submodules:
//!
//! - `refitter`: the reusable workspace [`Refitter`] (no allocation in the
//!   loop) and the evaluation helpers;
//! - `lm`: Levenberg-Marquardt with a trust region, More's scaling and
//!   optional geodesic acceleration;
//! - `steepest`: steepest descent with a backtracking Armijo rule;
//! - `linalg`: Householder QR and Jacobi SVD over caller buffers;
//! - `covariance`: covariance, rank and null space from the SVD;
//! - `result`: [`fit`], [`fit_from`], [`analyse`] and their result types.

use crate::model::ModelFn;
use serde::{Deserialize, Serialize};

mod covariance;
mod linalg;
mod lm;
mod refitter;
mod result;
mod steepest;

pub use covariance::{RANK_TOLERANCE, UNDETERMINED_WEIGHT};
pub use refitter::{poisson_residual, Refitter};
pub use result::{
    analyse, coverage_factor, fit, fit_from, CoverageBasis, EndIssue, FitError, FitResult, ParamResult,
    SmallCounts, MAX_RESTARTS, SMALL_COUNT, SMALL_COUNT_SHARE,
};

/// Minimisation method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Levenberg-Marquardt with a trust region (the default).
    #[default]
    Lm,
    /// Steepest descent on chi-squared with a decrease-guaranteeing step rule.
    Steepest,
}

/// One parameter of the problem: name, start, bounds, fixed flag.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParamSpec {
    /// Parameter name as written in the formula.
    pub name: String,
    /// Starting value.
    pub start: f64,
    /// Lower bound (`-inf` when none).
    pub min: f64,
    /// Upper bound (`+inf` when none).
    pub max: f64,
    /// Held at `start` when true.
    pub fixed: bool,
}

impl ParamSpec {
    /// A free, unbounded parameter.
    pub fn free(name: &str, start: f64) -> Self {
        ParamSpec {
            name: name.to_string(),
            start,
            min: f64::NEG_INFINITY,
            max: f64::INFINITY,
            fixed: false,
        }
    }
}

/// The error model of the fit: what the weighted residuals minimised by
/// the refit primitive are.
///
/// Every variant reduces the fit to minimising a sum of squared weighted
/// residuals `sum r_i(a)^2`, so Levenberg-Marquardt, steepest descent, the
/// end-point test and every diagnostic work unchanged on top of it; the
/// residuals and their exact Jacobian are computed in one evaluation
/// helper of [`Refitter`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum Likelihood {
    /// Normal errors of known (or common unknown) sigma in y:
    /// `r_i = (f_i - y_i) / sigma_i`, `sum r_i^2` is chi-squared. With
    /// `sigma_x` in the data (errors in x), the effective variance
    /// `sigma_i^2 + (df/dx)^2 sigma_x,i^2` replaces `sigma_i^2`.
    #[default]
    Gaussian,
    /// Counts: the signed deviance residuals of the Poisson likelihood
    /// (Baker and Cousins, NIM 221 (1984) 437),
    /// `r_i = sign(mu_i - n_i) sqrt(2 (mu_i - n_i + n_i ln(n_i / mu_i)))`
    /// (`sqrt(2 mu_i)` for `n_i = 0`), so `sum r_i^2` is the deviance.
    Poisson,
}

impl Likelihood {
    /// Name of the goodness-of-fit statistic `sum r_i^2`: `"chi2"` or
    /// `"deviance"`.
    pub fn statistic(self) -> &'static str {
        match self {
            Likelihood::Gaussian => "chi2",
            Likelihood::Poisson => "deviance",
        }
    }
}

/// How the covariance is scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum CovarianceScaling {
    /// Scale by chi2/dof when the data have no sigma, absolute otherwise.
    #[default]
    Auto,
    /// Always scale by chi2/dof.
    Scaled,
    /// Never scale.
    Absolute,
}

/// Settings of the optimiser.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitOptions {
    /// Method.
    pub method: Method,
    /// Iteration cap.
    pub max_iterations: usize,
    /// Relative chi2 change tolerance.
    pub ftol: f64,
    /// Relative step tolerance.
    pub xtol: f64,
    /// Scaled gradient tolerance.
    pub gtol: f64,
    /// Geodesic acceleration (Transtrum & Sethna 2012) for LM.
    pub geodesic: bool,
    /// Covariance scaling.
    pub covariance: CovarianceScaling,
    /// Confidence level of the analytic interval `value +- k u` (the
    /// coverage factor `k` of [`FitResult::coverage_factor`]); the audit's
    /// `level`.
    #[serde(default = "default_level")]
    pub level: f64,
    /// Stop a Levenberg-Marquardt run as soon as the end-point optimality
    /// test passes (the Gauss-Newton step would move the parameters by
    /// less than [`OPTIMALITY_TOLERANCE`] standard errors), rather than
    /// iterating until a step, chi2-change or gradient tolerance fires.
    /// True for the refits of the diagnostics; the full fit
    /// ([`fit`], [`fit_from`]) always iterates to the tolerances and then
    /// refines to rounding, whatever this says.
    #[serde(default = "default_true")]
    pub stop_at_optimality: bool,
    /// The error model (Gaussian by default; Poisson for counts).
    #[serde(default)]
    pub likelihood: Likelihood,
}

fn default_true() -> bool {
    true
}

fn default_level() -> f64 {
    DEFAULT_LEVEL
}

/// The default confidence level, one standard deviation of a normal
/// distribution (68.27 %).
pub const DEFAULT_LEVEL: f64 = 0.6827;

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            method: Method::Lm,
            max_iterations: 1000,
            ftol: 1e-15,
            xtol: 1e-15,
            gtol: 1e-15,
            geodesic: false,
            covariance: CovarianceScaling::Auto,
            level: DEFAULT_LEVEL,
            stop_at_optimality: true,
            likelihood: Likelihood::Gaussian,
        }
    }
}

/// A fitting problem: the model, its parameters and the optimiser settings.
/// The data are passed separately so that diagnostics can refit the same
/// problem on resampled or re-simulated data.
pub struct Problem<'a> {
    /// The model.
    pub model: &'a dyn ModelFn,
    /// Parameters in the order of the model's parameter vector.
    pub params: Vec<ParamSpec>,
    /// Optimiser settings.
    pub options: FitOptions,
}

/// Borrowed data for one refit. `sigma` always has one entry per point (all
/// ones when the study gives none).
#[derive(Debug, Clone, Copy)]
pub struct DataView<'a> {
    /// One column per independent variable.
    pub x: &'a [&'a [f64]],
    /// Responses.
    pub y: &'a [f64],
    /// Standard uncertainties.
    pub sigma: &'a [f64],
    /// Standard uncertainties of the one x column (errors in x: the
    /// effective variance); empty when x is exact.
    pub sigma_x: &'a [f64],
}

/// Why the optimiser stopped.
///
/// `Gradient`, `ChiSquaredChange` and `Step` are the stops of a converged
/// run: whichever rule fired, the end point then passed the first-order
/// optimality test of [`EndCheck`]. Every other reason means
/// `converged = false`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The scaled gradient fell below `gtol` (converged).
    Gradient,
    /// The relative chi-squared change fell below `ftol` (converged).
    ChiSquaredChange,
    /// The relative step fell below `xtol` (converged).
    Step,
    /// The iteration cap was reached (not converged).
    IterationLimit,
    /// The model was not finite and no step could avoid it (not converged).
    NonFinite,
    /// Steps or chi-squared changes became negligible, but the end point
    /// fails the optimality test: the search stalled short of a minimum
    /// (not converged).
    Stalled,
    /// The model no longer depends on a parameter at the end point: its
    /// Jacobian column vanished (not converged).
    Plateau,
    /// A parameter ran off by many orders of magnitude and is not
    /// determined at the end point (not converged).
    Runaway,
}

impl StopReason {
    /// True for the stops of a converged run.
    pub fn is_convergence(self) -> bool {
        matches!(
            self,
            StopReason::Gradient | StopReason::ChiSquaredChange | StopReason::Step
        )
    }
}

/// What the end-point test found (first-order optimality, vanished
/// columns, runaway parameters, rank). Computed after every refit from the
/// weighted Jacobian at the end point.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
pub struct EndCheck {
    /// The reduction of chi2 that a full Gauss-Newton step from the end
    /// point predicts, over the directions the data determine
    /// (`|P_J r|^2`); 0 at an exact minimum.
    pub gn_decrease: f64,
    /// The bound it was compared with: [`OPTIMALITY_TOLERANCE`] squared
    /// times the chi2 unit (1, or `chi2 / dof` when that is smaller),
    /// or a multiple of the rounding noise of chi2 when that is larger.
    pub tolerance: f64,
    /// `gn_decrease <= tolerance`.
    pub optimal: bool,
    /// First parameter (index) whose Jacobian column vanished.
    pub plateau: Option<usize>,
    /// First parameter (index) that ran away.
    pub runaway: Option<usize>,
    /// Numerical rank of the weighted Jacobian of the active parameters.
    pub rank: usize,
    /// Number of active parameters (varying and not held on a bound).
    pub active: usize,
}

impl EndCheck {
    /// Why the end point is not a verified minimum, most specific cause
    /// first: a plateau, a runaway, or (failing the optimality test) a
    /// stall; None for a verified minimum.
    pub fn failure(&self) -> Option<StopReason> {
        if self.plateau.is_some() {
            Some(StopReason::Plateau)
        } else if self.runaway.is_some() {
            Some(StopReason::Runaway)
        } else if !self.optimal {
            Some(StopReason::Stalled)
        } else {
            None
        }
    }
}

/// Tolerance of the first-order optimality test: the Gauss-Newton step
/// from a converged end point moves the parameters by less than this many
/// standard errors (in the Mahalanobis metric of the covariance), i.e.
/// promises a chi2 reduction below its square times the chi2 unit.
pub const OPTIMALITY_TOLERANCE: f64 = 1e-3;

/// Outcome of one refit; the solution itself is [`Refitter::params`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Refit {
    /// Chi-squared at the solution.
    pub chi2: f64,
    /// True only when the end point passed the optimality test
    /// ([`EndCheck`]) and no parameter is on a plateau or ran away.
    pub converged: bool,
    /// Why it stopped.
    pub stop: StopReason,
    /// Iterations taken.
    pub iterations: usize,
    /// Model evaluations (values, with or without Jacobian).
    pub evaluations: usize,
    /// The end-point test.
    pub end: EndCheck,
}
