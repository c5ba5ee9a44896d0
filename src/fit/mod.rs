//! The refit primitive: weighted least squares by Levenberg-Marquardt or
//! steepest descent, with bounds, fixed parameters and covariance.
//!
//! OWNER NOTE (scaffold): the types and signatures below are the pinned API
//! that every diagnostic calls. Implementation goes in submodules.

use serde::{Deserialize, Serialize};

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
}
