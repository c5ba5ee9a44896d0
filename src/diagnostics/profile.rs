//! Chi-squared profile scans per parameter.

use serde::{Deserialize, Serialize};

/// Profile of one parameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParameterProfile {
    /// Parameter name.
    pub name: String,
    /// Base-fit value.
    pub estimate: f64,
    /// Analytic standard error (None when undetermined).
    pub std_error: Option<f64>,
    /// Lower end of the profile interval (the last value scanned when not found).
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// Whether the profile crossed the threshold below the estimate.
    pub lower_found: bool,
    /// Whether it crossed above.
    pub upper_found: bool,
    /// Scanned points `[a_j, chi2_min(a_j)]`, sorted by `a_j`.
    pub points: Vec<[f64; 2]>,
    /// Re-optimised parameter vectors at each point (all parameters).
    pub others: Vec<Vec<f64>>,
    /// The covariance parabola `[a_j, chi2_min + ((a_j - a)/se)^2]` at the same abscissae.
    pub parabola: Vec<[f64; 2]>,
    /// (upper - estimate) / (estimate - lower) when both ends were found.
    pub asymmetry: Option<f64>,
    /// Refits at grid points that failed.
    pub failed: usize,
}

/// Result of the profile scans.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ProfileResult {
    /// Confidence level.
    pub level: f64,
    /// Threshold above the minimum: chi-squared quantile, 1 degree of freedom.
    pub threshold: f64,
    /// Chi-squared of the base fit.
    pub chi2_min: f64,
    /// One entry per free parameter.
    pub parameters: Vec<ParameterProfile>,
    /// Failed refits over all profiles.
    pub failed: usize,
}

use super::{Fitted, Progress};

/// Runs the profile scans (STUB).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ProfileResult {
    let _ = (ctx, progress);
    unimplemented!("profiles not built yet")
}
