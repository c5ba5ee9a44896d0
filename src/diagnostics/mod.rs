//! The diagnostics battery. Each diagnostic is a module that takes the
//! fitted problem ([`Fitted`]) and its settings and returns a plain serde
//! result struct; none formats text for display and none writes its own
//! optimiser loop: every refit goes through [`crate::fit::Refitter`].

use crate::data::Dataset;
use crate::fit::{FitResult, Problem};
use crate::settings::AuditSettings;

pub mod bands;
pub mod bootstrap;
pub mod contour;
pub mod derived;
pub mod influence;
pub mod inverse;
pub mod marching;
pub mod monte_carlo;
pub mod multistart;
pub mod nonlinearity;
pub mod profile;
mod profile_scan;
pub mod resample;
pub mod roots;
pub mod sampling;
pub mod verdict;

/// A problem together with its base fit: the input of every diagnostic.
pub struct Fitted<'a> {
    /// Model, parameter specs and optimiser options.
    pub problem: Problem<'a>,
    /// The data of the base fit.
    pub data: &'a Dataset,
    /// The base fit.
    pub fit: &'a FitResult,
    /// Settings of the battery (seed, level, per-diagnostic settings).
    pub settings: &'a AuditSettings,
}

impl Fitted<'_> {
    /// Estimated parameter values of the base fit.
    pub fn values(&self) -> Vec<f64> {
        self.fit.parameters.iter().map(|p| p.value).collect()
    }

    /// The base fit's model value at every point, NaN where the fit gave
    /// none (replicates built on such a point then fail visibly as
    /// non-finite instead of being silently wrong).
    pub fn fitted_values(&self) -> Vec<f64> {
        (0..self.data.len())
            .map(|i| self.fit.fitted.get(i).copied().unwrap_or(f64::NAN))
            .collect()
    }

    /// Which parameters the optimiser may move (not fixed in the study).
    pub fn free_mask(&self) -> Vec<bool> {
        self.problem.params.iter().map(|p| !p.fixed).collect()
    }
}

/// Progress reporting for long diagnostics. The command line implements it
/// with a terminal progress bar; library callers may pass [`NoProgress`].
pub trait Progress: Sync {
    /// A stage with `total` units of work begins.
    fn start(&self, stage: &str, total: u64);
    /// `n` more units are done.
    fn advance(&self, n: u64);
    /// The stage is over.
    fn finish(&self);
}

/// Progress reporting that shows nothing.
pub struct NoProgress;

impl Progress for NoProgress {
    fn start(&self, _stage: &str, _total: u64) {}
    fn advance(&self, _n: u64) {}
    fn finish(&self) {}
}
