//! The figures of the report, drawn once as SVG and shared by the HTML page
//! and the `figures/` folder.
//!
//! | file | content |
//! |---|---|
//! | `fit.svg` | data with error bars and the fitted curve, normalised residuals below (several independent variables: observed against fitted, residuals against fitted) |
//! | `residuals_qq.svg` | normal Q-Q plot of the normalised residuals (Hazen plotting positions) |
//! | `residuals_x.svg` | normalised residuals against the fitted values and the point order (one independent variable: the fit figure already has them against x), or against each independent variable |
//! | `fit_<data set>.svg` | several `[[datasets]]`: one data set's points, error bars and fitted curve with its residuals below (as `fit.svg`, on its points alone) |
//! | `hist_<p>.svg` | bootstrap and Monte Carlo estimates of one parameter, the analytic normal curve, and beneath it every interval as a labelled bar, one row per type |
//! | `profile_<p>.svg` | chi-squared profile of one parameter, covariance parabola, threshold |
//! | `contour_<p1>_<p2>.svg` | contour lines of one pair, covariance ellipses, bootstrap cloud |
//! | `multistart.svg` | multi-start end points and the chi-squared and basin share of each minimum |
//! | `correlation.svg` | correlation matrix of the base fit as a grey heat map with the values written in |
//!
//! Every figure takes its colours from [`palette`] (Okabe and Ito 2008,
//! colour-blind safe) and is readable in greyscale too: series differ by
//! line style (solid, dashed, dotted, long dash) and marker shape as well
//! as by colour.
//! A diagnostic that did not run simply has no figure.

use crate::audit::AuditResults;
use crate::diagnostics::resample::ResampleResult;
use crate::report::{Renderer, ReportError};

mod contour;
mod correlation;
mod datasets;
mod fit;
mod histogram;
mod multistart;
pub mod palette;
mod profile;
mod residuals;
pub mod svg;

pub use multistart::spread_order as multistart_plane_order;
pub use residuals::hazen_quantiles;

/// One figure.
#[derive(Debug, Clone, PartialEq)]
pub struct Figure {
    /// File name under `figures/`, e.g. `profile_tau.svg`.
    pub file: String,
    /// Short title.
    pub title: String,
    /// One or two sentences saying what is drawn (plain text).
    pub caption: String,
    /// The SVG document.
    pub svg: String,
}

/// The figures of one audit, in report order.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Figures {
    /// The figures.
    pub list: Vec<Figure>,
}

impl Figures {
    /// The figure written to `file`, if drawn.
    pub fn get(&self, file: &str) -> Option<&Figure> {
        self.list.iter().find(|f| f.file == file)
    }

    /// File names in report order.
    pub fn files(&self) -> Vec<&str> {
        self.list.iter().map(|f| f.file.as_str()).collect()
    }
}

/// Draws every figure the results allow.
pub fn build(results: &AuditResults) -> Result<Figures, ReportError> {
    let names = FileNames::new(results.fit.parameters.iter().map(|p| p.name.as_str()));
    let mut list = Vec::new();
    list.extend(fit::figure(results)?);
    list.extend(residuals::figures(results)?);
    list.extend(datasets::figures(results)?);
    if let Some(red) = &results.reduction {
        for f in list
            .iter_mut()
            .filter(|f| f.file == "fit.svg" || f.file == "residuals_x.svg")
        {
            f.caption.push_str(&format!(
                " Display reduction: {} of the {} points are drawn, the smallest and largest \
                 response and residual of each of {} consecutive slices, so no outlier is hidden.",
                red.kept,
                red.points,
                crate::reduction::BINS
            ));
        }
    }
    for j in 0..results.fit.parameters.len() {
        list.extend(histogram::figure(results, j, names.stem(j))?);
    }
    if let Some(profile) = &results.profile {
        for p in &profile.parameters {
            let stem = names.stem_of(&p.name);
            list.extend(profile::figure(results, profile, p, &stem)?);
        }
    }
    if let Some(contours) = &results.contours {
        let mut used = Vec::new();
        for c in contours {
            let mut file = format!(
                "contour_{}_{}.svg",
                names.stem_of(&c.pair[0]),
                names.stem_of(&c.pair[1])
            );
            let mut k = 2;
            while used.contains(&file) {
                file = format!(
                    "contour_{}_{}-{k}.svg",
                    names.stem_of(&c.pair[0]),
                    names.stem_of(&c.pair[1])
                );
                k += 1;
            }
            used.push(file.clone());
            list.extend(contour::figure(results, c, file)?);
        }
    }
    list.extend(multistart::figure(results)?);
    list.extend(correlation::figure(results)?);
    Ok(Figures { list })
}

/// Writes every figure to `figures/<file>`.
pub struct SvgFiles;

impl Renderer for SvgFiles {
    fn name(&self) -> &'static str {
        "svg"
    }

    fn render(
        &self,
        _results: &AuditResults,
        figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(figures
            .list
            .iter()
            .map(|f| (format!("figures/{}", f.file), f.svg.clone().into_bytes()))
            .collect())
    }
}

/// A parameter name made safe for a file name: only `[A-Za-z0-9_-]` are
/// kept, every other character becomes `_`; at most 48 characters; an empty
/// name becomes `param`.
pub fn safe_name(name: &str) -> String {
    let mut s: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '_' || c == '-' {
                c
            } else {
                '_'
            }
        })
        .take(48)
        .collect();
    if s.is_empty() {
        s = "param".into();
    }
    s
}

/// File-name stems of the parameters: [`safe_name`], made unique by
/// appending `-<position>` (1-based) when two names map to the same stem.
#[derive(Debug, Clone)]
pub struct FileNames {
    names: Vec<String>,
    stems: Vec<String>,
}

impl FileNames {
    /// Stems for the parameters in order.
    pub fn new<'a>(names: impl IntoIterator<Item = &'a str>) -> FileNames {
        let names: Vec<String> = names.into_iter().map(str::to_string).collect();
        let mut stems: Vec<String> = Vec::with_capacity(names.len());
        for (j, n) in names.iter().enumerate() {
            let mut s = safe_name(n);
            if stems.contains(&s) {
                let base = s.clone();
                let mut k = j + 1;
                s = format!("{base}-{k}");
                while stems.contains(&s) {
                    k += 1;
                    s = format!("{base}-{k}");
                }
            }
            stems.push(s);
        }
        FileNames { names, stems }
    }

    /// Stem of parameter `j`.
    pub fn stem(&self, j: usize) -> &str {
        &self.stems[j]
    }

    /// Stem of the parameter called `name` ([`safe_name`] when unknown).
    pub fn stem_of(&self, name: &str) -> String {
        match self.names.iter().position(|n| n == name) {
            Some(j) => self.stems[j].clone(),
            None => safe_name(name),
        }
    }
}

/// Column of parameter `name` in a resampling result's `estimates`: by the
/// result's own parameter list when the rows are that long, else by the
/// base fit's parameter list.
pub(crate) fn estimate_column(rs: &ResampleResult, fit_names: &[String], name: &str) -> Option<usize> {
    let width = rs.estimates.first().map(|r| r.len())?;
    if width == rs.parameters.len() {
        rs.parameters.iter().position(|p| p.name == name)
    } else if width == fit_names.len() {
        fit_names.iter().position(|n| n == name)
    } else {
        None
    }
}

/// The finite estimates of column `j`.
pub(crate) fn column(rs: &ResampleResult, j: usize) -> Vec<f64> {
    rs.estimates
        .iter()
        .filter_map(|r| r.get(j).copied())
        .filter(|v| v.is_finite())
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn file_names_are_safe_and_unique() {
        assert_eq!(safe_name("tau_1"), "tau_1");
        assert_eq!(safe_name("a&b"), "a_b");
        assert_eq!(safe_name("../x"), "___x");
        assert_eq!(safe_name("τ"), "_");
        assert_eq!(safe_name(""), "param");
        let n = FileNames::new(["a&b", "a<b", "c", "a\"b"]);
        assert_eq!(n.stem(0), "a_b");
        assert_eq!(n.stem(1), "a_b-2");
        assert_eq!(n.stem(2), "c");
        assert_eq!(n.stem(3), "a_b-4");
        assert_eq!(n.stem_of("a<b"), "a_b-2");
        assert_eq!(n.stem_of("zz z"), "zz_z");
    }
}
