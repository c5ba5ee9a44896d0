//! `fit_<data set>.svg`: for a study of several `[[datasets]]`, the data
//! and fitted curve of each data set with its residual panel, drawn by the
//! same figure as `fit.svg` on that data set's points alone.

use super::{fit, safe_name, Figure};
use crate::audit::AuditResults;
use crate::data::Dataset;
use crate::report::ReportError;

/// The record restricted to data set `g`: its points, its own x columns
/// and names, its curve; no bands (they are drawn for one data set only)
/// and no display reduction (the points kept are already chosen).
fn restricted(results: &AuditResults, g: usize) -> Option<AuditResults> {
    let group = results.data.groups.get(g)?;
    let range = group.range();
    let data = &results.data;
    let k = group.x_names.len();
    let pick = |v: &[f64]| v.get(range.clone()).map(<[f64]>::to_vec).unwrap_or_default();
    let mut r = results.clone();
    r.data = Dataset {
        x_names: group.x_names.clone(),
        x: data.x.iter().take(k).map(|c| pick(c)).collect(),
        y_name: group.y_name.clone(),
        y: pick(&data.y),
        sigma: data.sigma.as_ref().map(|s| pick(s)),
        sigma_x: data.sigma_x.as_ref().map(|s| pick(s)),
        groups: Vec::new(),
    };
    r.fit.fitted = pick(&results.fit.fitted);
    r.fit.residuals = pick(&results.fit.residuals);
    r.fit.leverage = pick(&results.fit.leverage);
    r.curve = results.datasets.get(g).and_then(|d| d.curve.clone());
    r.bands = None;
    r.reduction = None;
    Some(r)
}

/// One fit figure per data set (none for a study of one data set).
pub(crate) fn figures(results: &AuditResults) -> Result<Vec<Figure>, ReportError> {
    let mut out = Vec::new();
    let mut used: Vec<String> = Vec::new();
    for (g, group) in results.data.groups.iter().enumerate() {
        let Some(sub) = restricted(results, g) else {
            continue;
        };
        let Some(mut f) = fit::figure(&sub)? else {
            continue;
        };
        let mut file = format!("fit_{}.svg", safe_name(&group.name));
        let mut k = 2;
        while used.contains(&file) {
            file = format!("fit_{}-{k}.svg", safe_name(&group.name));
            k += 1;
        }
        used.push(file.clone());
        f.file = file;
        f.title = format!("Data set {}: {}", group.name, f.title.to_lowercase());
        f.caption = format!("Data set {} ({}). {}", group.name, group.formula, f.caption);
        out.push(f);
    }
    Ok(out)
}
