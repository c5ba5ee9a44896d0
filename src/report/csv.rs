//! `replicates.csv` (on request): every replicate estimate of the bootstrap
//! and the Monte Carlo refits, one row per successful replicate; and
//! `bands.csv` (whenever there are bands): the confidence and prediction
//! bands on the curve grid.
//!
//! `bands.csv` columns: `x`, `y`, `std_error`, `confidence_lower`,
//! `confidence_upper`, `prediction_lower`, `prediction_upper`, then
//! `bootstrap_lower`, `bootstrap_upper`, `monte_carlo_lower`,
//! `monte_carlo_upper` (empty when that diagnostic did not run); one row per
//! grid point. Non-finite values are written as `NaN`.
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
                    Some(v) => number(*v),
                    None => String::new(),
                });
            }
            w.write_record(&rec).map_err(csv_err)?;
        }
    }
    w.into_inner().map_err(csv_err)
}

/// Shortest text that reads back as the same double, as a plain decimal
/// (`97.47266113616185`, `0.000123`), which every spreadsheet reads;
/// exponent notation only below 1e-6 or from 1e15 on in magnitude, where a
/// plain decimal would be a long run of zeros; `NaN`, `inf`, `-inf` for
/// non-finite values.
pub fn number(v: f64) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            "NaN".into()
        } else if v > 0.0 {
            "inf".into()
        } else {
            "-inf".into()
        };
    }
    let a = v.abs();
    if v == 0.0 || (1e-6..1e15).contains(&a) {
        // Rust's Display of f64 is the shortest round-trip decimal.
        format!("{v}")
    } else {
        format!("{v:e}")
    }
}

/// The text of `bands.csv`, or `None` when the results have no bands.
pub fn bands_csv(results: &AuditResults) -> Result<Option<Vec<u8>>, ReportError> {
    let Some(b) = &results.bands else {
        return Ok(None);
    };
    let mut w = ::csv::Writer::from_writer(Vec::new());
    w.write_record([
        "x",
        "y",
        "std_error",
        "confidence_lower",
        "confidence_upper",
        "prediction_lower",
        "prediction_upper",
        "bootstrap_lower",
        "bootstrap_upper",
        "monte_carlo_lower",
        "monte_carlo_upper",
    ])
    .map_err(csv_err)?;
    let opt = |v: Option<&Vec<f64>>, i: usize| v.and_then(|v| v.get(i)).map_or(String::new(), |x| number(*x));
    for i in 0..b.x.len() {
        let cols = [
            &b.x,
            &b.y,
            &b.std_error,
            &b.confidence_lower,
            &b.confidence_upper,
            &b.prediction_lower,
            &b.prediction_upper,
        ];
        let mut rec: Vec<String> = cols
            .iter()
            .map(|c| c.get(i).map_or(String::new(), |v| number(*v)))
            .collect();
        rec.push(opt(b.bootstrap.as_ref().map(|r| &r.lower), i));
        rec.push(opt(b.bootstrap.as_ref().map(|r| &r.upper), i));
        rec.push(opt(b.monte_carlo.as_ref().map(|r| &r.lower), i));
        rec.push(opt(b.monte_carlo.as_ref().map(|r| &r.upper), i));
        w.write_record(&rec).map_err(csv_err)?;
    }
    w.into_inner().map(Some).map_err(csv_err)
}

/// Writes `bands.csv` when the results have bands.
pub struct BandsCsv;

impl Renderer for BandsCsv {
    fn name(&self) -> &'static str {
        "bands-csv"
    }

    fn render(
        &self,
        results: &AuditResults,
        _figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(bands_csv(results)?
            .map(|bytes| vec![("bands.csv".to_string(), bytes)])
            .unwrap_or_default())
    }
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

#[cfg(test)]
mod tests {
    use super::number;

    #[test]
    fn plain_decimals_that_read_back_exactly() {
        for v in [97.472_661_136_161_85, 0.000_123, -2.5, 1e14, 3.0, 1.0 / 3.0] {
            let t = number(v);
            assert!(!t.contains('e'), "{t}");
            // Round trip (identity): the text parses to the same double.
            assert_eq!(t.parse::<f64>().unwrap(), v, "{t}");
        }
        assert_eq!(number(97.472_661_136_161_85), "97.47266113616185");
        assert_eq!(number(0.0), "0");
        assert_eq!(number(1.5e-9), "1.5e-9");
        assert_eq!(number(f64::NAN), "NaN");
        assert_eq!(number(f64::NEG_INFINITY), "-inf");
    }
}
