//! `replicates.csv` (on request): every replicate estimate of the bootstrap
//! and the Monte Carlo refits, one row per successful replicate.
//!
//! Columns: `diagnostic` (`bootstrap` or `monte-carlo`), `replicate` (the
//! replicate's index, i.e. its random stream, counting from 0; failed
//! replicates are absent), then one column per parameter of the base fit,
//! headed by its name. A parameter a diagnostic did not estimate is empty.

use crate::audit::AuditResults;
use crate::diagnostics::resample::ResampleResult;
use crate::report::figures::estimate_column;
use crate::report::{Figures, Renderer, ReportError};

/// Replicate indices of the rows of `estimates`: 0..run without the failed
/// ones when the counts agree, else the row numbers.
pub fn replicate_indices(rs: &ResampleResult) -> Vec<usize> {
    let failed: std::collections::BTreeSet<usize> = rs.failures.iter().map(|f| f.index).collect();
    let ok: Vec<usize> = (0..rs.run).filter(|i| !failed.contains(i)).collect();
    if ok.len() == rs.estimates.len() {
        ok
    } else {
        (0..rs.estimates.len()).collect()
    }
}

fn csv_err(e: impl std::fmt::Display) -> ReportError {
    ReportError::Csv(e.to_string())
}

/// The CSV text.
pub fn to_csv(results: &AuditResults) -> Result<Vec<u8>, ReportError> {
    let names: Vec<String> = results.fit.parameters.iter().map(|p| p.name.clone()).collect();
    let mut w = ::csv::Writer::from_writer(Vec::new());
    let mut header = vec!["diagnostic".to_string(), "replicate".to_string()];
    header.extend(names.iter().cloned());
    w.write_record(&header).map_err(csv_err)?;
    for (label, rs) in [
        ("bootstrap", results.bootstrap.as_ref()),
        ("monte-carlo", results.monte_carlo.as_ref()),
    ] {
        let Some(rs) = rs else { continue };
        let cols: Vec<Option<usize>> = names.iter().map(|n| estimate_column(rs, &names, n)).collect();
        for (row, idx) in rs.estimates.iter().zip(replicate_indices(rs)) {
            let mut rec = vec![label.to_string(), idx.to_string()];
            for c in &cols {
                rec.push(match c.and_then(|c| row.get(c)) {
                    // Shortest text that reads back as the same double.
                    Some(v) if v.is_finite() => format!("{v:e}"),
                    Some(v) => format!("{v}"),
                    None => String::new(),
                });
            }
            w.write_record(&rec).map_err(csv_err)?;
        }
    }
    w.into_inner().map_err(csv_err)
}

/// Writes `replicates.csv`.
pub struct Replicates;

impl Renderer for Replicates {
    fn name(&self) -> &'static str {
        "csv"
    }

    fn render(
        &self,
        results: &AuditResults,
        _figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(vec![("replicates.csv".into(), to_csv(results)?)])
    }
}
