//! Monte Carlo refits from synthetic noise around the base fit.

use super::resample::ResampleResult;
use super::{Fitted, Progress};

/// Runs the Monte Carlo refits (STUB).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ResampleResult {
    let _ = (ctx, progress);
    unimplemented!("Monte Carlo not built yet")
}
