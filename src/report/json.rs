//! `results.json`: the whole [`AuditResults`] record, pretty-printed.
//!
//! The layout is documented field by field in docs/RESULTS.md and versioned
//! by `schema_version` ([`crate::audit::SCHEMA_VERSION`]). Non-finite
//! numbers (a failed refit's NaN, an open interval's infinity) are written
//! as `null`, so the file is always valid JSON.

use crate::audit::AuditResults;
use crate::report::{Figures, Renderer, ReportError};

/// The JSON text of the results.
pub fn to_json(results: &AuditResults) -> Result<String, ReportError> {
    let mut s = serde_json::to_string_pretty(results)?;
    s.push('\n');
    Ok(s)
}

/// Writes `results.json`.
pub struct Json;

impl Renderer for Json {
    fn name(&self) -> &'static str {
        "json"
    }

    fn render(
        &self,
        results: &AuditResults,
        _figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(vec![("results.json".into(), to_json(results)?.into_bytes())])
    }
}
