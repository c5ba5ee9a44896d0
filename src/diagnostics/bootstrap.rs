//! Bootstrap resampling (case, residual, wild) with refits from the base fit.

use super::resample::ResampleResult;
use super::{Fitted, Progress};

/// Runs the bootstrap (STUB).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ResampleResult {
    let _ = (ctx, progress);
    unimplemented!("bootstrap not built yet")
}
