//! Per-parameter verdicts: does the quoted +- hold?

use serde::{Deserialize, Serialize};

/// Verdict on one parameter's quoted uncertainty.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Status {
    /// Every diagnostic agrees with the analytic +-.
    Holds,
    /// Some diagnostic disagrees clearly but not gravely, or a warning applies.
    Doubtful,
    /// The +- cannot be trusted.
    Fails,
}

/// The verdict of one parameter with its reasons as plain sentences.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    /// Parameter name.
    pub parameter: String,
    /// Holds, doubtful or fails.
    pub status: Status,
    /// Why, one sentence each.
    pub reasons: Vec<String>,
}

use super::multistart::MultistartResult;
use super::profile::ProfileResult;
use super::resample::ResampleResult;
use crate::fit::FitResult;

/// What the verdicts are decided from: the base fit and whichever
/// diagnostics ran.
#[derive(Debug, Clone, Copy)]
pub struct VerdictInputs<'a> {
    /// The base fit.
    pub fit: &'a FitResult,
    /// Bootstrap, when run.
    pub bootstrap: Option<&'a ResampleResult>,
    /// Monte Carlo, when run.
    pub monte_carlo: Option<&'a ResampleResult>,
    /// Profiles, when run.
    pub profile: Option<&'a ProfileResult>,
    /// Multi-start search, when run.
    pub multistart: Option<&'a MultistartResult>,
    /// Relative tolerance below which a disagreement does not count.
    pub tolerance: f64,
}

/// Decides the verdict of every parameter (STUB).
pub fn decide(inputs: &VerdictInputs) -> Vec<Verdict> {
    let _ = inputs;
    unimplemented!("verdicts not built yet")
}
