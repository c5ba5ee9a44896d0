//! Shared result type and statistics of the resampling diagnostics
//! (bootstrap and Monte Carlo): per-parameter summaries, percentile and BCa
//! intervals, comparison with the analytic standard errors.

use serde::{Deserialize, Serialize};

/// A replicate whose refit failed and was excluded (visibly).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FailedReplicate {
    /// Replicate index (its random stream).
    pub index: usize,
    /// Why: "not-converged", "non-finite", ...
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
}
