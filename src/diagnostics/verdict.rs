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
