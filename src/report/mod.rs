//! Report layer (STUB on main until the report branch lands; same signatures).

use std::path::{Path, PathBuf};

use crate::audit::{AuditOptions, AuditResults};

/// Report errors (STUB).
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Output folder failure.
    #[error(transparent)]
    Output(#[from] crate::output::OutputError),
}

/// Writes the report folder (STUB: results.json only).
pub fn write_report(
    results: &AuditResults,
    out: &Path,
    options: &AuditOptions,
) -> Result<PathBuf, ReportError> {
    let _ = options;
    let staging = crate::output::Staging::new(out)?;
    let json = serde_json::to_vec_pretty(results).unwrap_or_default();
    staging.write("results.json", &json)?;
    Ok(staging.commit()?)
}

/// Plain-text renderers (STUB).
pub mod text {
    use crate::audit::AuditResults;
    use crate::fit::{FitResult, ParamSpec};

    /// Fit table (STUB).
    pub fn fit_table(title: Option<&str>, params: &[ParamSpec], fit: &FitResult) -> String {
        let _ = (title, params);
        format!("{fit:?}\n")
    }
    /// Verdict lines (STUB).
    pub fn verdict_lines(results: &AuditResults) -> String {
        format!("{:?}\n", results.verdicts)
    }
    /// Function catalogue (STUB).
    pub fn models_table() -> String {
        String::new()
    }
}
