//! Multi-start search for competing minima.

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
    /// Share of the converged starts that ended here.
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
    /// Index into `minima`, None for failed starts.
    pub minimum: Option<usize>,
}

/// Result of the multi-start search.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MultistartResult {
    /// Starts run.
    pub starts: usize,
    /// Starts whose fit failed.
    pub failed: usize,
    /// Chi-squared of the base fit.
    pub base_chi2: f64,
    /// False when a minimum with a clearly lower chi-squared exists.
    pub base_is_best: bool,
    /// Distinct minima, best first.
    pub minima: Vec<Minimum>,
    /// Bayesian estimate (Boender & Rinnooy Kan 1987) of the probability
    /// that a minimum was missed.
    pub missed_minimum_estimate: f64,
    /// Expected total number of minima under the same rule.
    pub expected_minima: f64,
    /// Sampling box per parameter `[low, high]`.
    pub box_bounds: Vec<[f64; 2]>,
    /// Every start, for the figures.
    pub runs: Vec<StartRun>,
}

use super::{Fitted, Progress};

/// Runs the multi-start search (STUB).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> MultistartResult {
    let _ = (ctx, progress);
    unimplemented!("multi-start not built yet")
}
