//! The report: one renderer per output format, all reading the same
//! [`AuditResults`]; the figures are drawn once and shared.
//!
//! [`write_report`] writes, into one output folder committed atomically
//! through [`crate::output::Staging`]:
//!
//! | file | renderer |
//! |---|---|
//! | `report.html` | [`html::Html`]: one self-contained page, inline SVG and CSS |
//! | `results.json` | [`json::Json`]: everything computed (docs/RESULTS.md) |
//! | `summary.md` | [`markdown::Markdown`]: verdict and comparison tables |
//! | `figures/*.svg` | [`figures::SvgFiles`]: every figure as its own file |
//! | `bands.csv` | [`csv::BandsCsv`]: confidence and prediction bands on the curve grid (one x column) |
//! | `replicates.csv` | [`csv::Replicates`]: on request, every replicate estimate |
//!
//! The terminal tables of the command line are in [`text`]; the index of a
//! batch (`index.html`, `index.json`) is in [`index`].

use std::path::{Path, PathBuf};

use crate::audit::{AuditOptions, AuditResults};
use crate::output::{OutputError, Staging};

pub mod csv;
pub mod datasets;
pub mod figures;
pub mod findings;
pub mod format;
pub mod html;
pub mod index;
pub mod json;
pub mod markdown;
pub mod nonlinearity;
pub mod tables;
pub mod text;
pub mod validation;

pub use figures::{Figure, Figures};

/// Errors of the report layer.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// Writing the output folder failed.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// A figure could not be drawn.
    #[error("figure {name}: {message}")]
    Figure {
        /// File name of the figure.
        name: String,
        /// What went wrong.
        message: String,
    },
    /// The results could not be written as JSON.
    #[error("results.json: {0}")]
    Json(#[from] serde_json::Error),
    /// A CSV table (`replicates.csv`, `bands.csv`) could not be written.
    #[error("CSV output: {0}")]
    Csv(String),
}

/// One output format. A renderer only produces bytes; the caller does the
/// file I/O (through [`Staging`]), so a renderer never leaves half a file.
pub trait Renderer {
    /// Short name of the format (for messages).
    fn name(&self) -> &'static str;
    /// The files of this format: `(path relative to the output folder, contents)`.
    fn render(
        &self,
        results: &AuditResults,
        figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError>;
}

/// The renderers `fitaudit audit` runs, in order.
pub fn default_renderers(options: &AuditOptions) -> Vec<Box<dyn Renderer>> {
    let mut out: Vec<Box<dyn Renderer>> = vec![
        Box::new(html::Html),
        Box::new(json::Json),
        Box::new(markdown::Markdown),
        Box::new(figures::SvgFiles),
        Box::new(csv::BandsCsv),
    ];
    if options.write_replicates {
        out.push(Box::new(csv::Replicates));
    }
    out
}

/// Draws the figures and writes every output of the audit into `out`:
/// `report.html`, `results.json`, `summary.md`, `figures/*.svg`, `bands.csv`
/// (one x column) and, when
/// `options.write_replicates`, `replicates.csv`. Nothing appears at `out`
/// unless every file was written. Returns the final folder.
pub fn write_report(
    results: &AuditResults,
    out: &Path,
    options: &AuditOptions,
) -> Result<PathBuf, ReportError> {
    let figures = figures::build(results)?;
    let renderers = default_renderers(options);
    let refs: Vec<&dyn Renderer> = renderers.iter().map(|r| r.as_ref()).collect();
    write_with(results, &figures, out, &refs)
}

/// Every file [`write_report`] writes, as `(path relative to the report
/// folder, contents)`, without touching the disk (a batch writes them
/// under each study's subfolder of one staging folder).
pub fn render_files(
    results: &AuditResults,
    options: &AuditOptions,
) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
    let figures = figures::build(results)?;
    let mut files = Vec::new();
    for r in default_renderers(options) {
        files.extend(r.render(results, &figures)?);
    }
    Ok(files)
}

/// Runs `renderers` and writes their files into `out` atomically: any error
/// (of a renderer or of the file system) leaves no folder behind.
pub fn write_with(
    results: &AuditResults,
    figures: &Figures,
    out: &Path,
    renderers: &[&dyn Renderer],
) -> Result<PathBuf, ReportError> {
    // Render everything before touching the disk.
    let mut files = Vec::new();
    for r in renderers {
        files.extend(r.render(results, figures)?);
    }
    let staging = Staging::new(out)?;
    for (path, bytes) in &files {
        staging.write(path, bytes)?;
    }
    Ok(staging.commit()?)
}

/// The notice that leads every report when the multi-start search found a
/// clearly lower minimum than the base fit: `(base chi2, best chi2)`.
pub fn better_minimum(results: &AuditResults) -> Option<(f64, f64)> {
    let ms = results.multistart.as_ref()?;
    if ms.audited_is_best {
        return None;
    }
    let best = ms
        .minima
        .iter()
        .map(|m| m.chi2)
        .filter(|c| c.is_finite())
        .fold(f64::INFINITY, f64::min);
    Some((ms.base_chi2, best))
}

/// The notice that leads a re-based report: the study's start reaches a
/// local minimum, the audit ran at the best minimum found.
#[derive(Debug, Clone, PartialEq)]
pub struct RebasedNotice {
    /// Chi-squared of the fit from the study's start.
    pub start_chi2: f64,
    /// Chi-squared of the audited fit.
    pub audited_chi2: f64,
    /// The start values to put in the study: `(name, value)` of every
    /// parameter that is not fixed, at the audited fit.
    pub starts: Vec<(String, f64)>,
}

/// The re-basing notice, when the audit was re-based.
pub fn rebased_notice(results: &AuditResults) -> Option<RebasedNotice> {
    let start = results.start_fit.as_ref().filter(|_| results.rebased)?;
    Some(RebasedNotice {
        start_chi2: start.chi2,
        audited_chi2: results.fit.chi2,
        starts: results
            .fit
            .parameters
            .iter()
            .filter(|p| !p.fixed)
            .map(|p| (p.name.clone(), p.value))
            .collect(),
    })
}

impl RebasedNotice {
    /// The start values as study-file lines, `name = value` with the
    /// shortest exact decimal form.
    pub fn start_lines(&self) -> String {
        self.starts
            .iter()
            .map(|(n, v)| format!("{n} = {{ start = {v} }}"))
            .collect::<Vec<_>>()
            .join("; ")
    }

    /// The notice as one plain sentence group (terminal and Markdown).
    pub fn sentence(&self) -> String {
        format!(
            "The study's start reaches a local minimum (chi2 = {}); audited at the best minimum found by the multi-start search (chi2 = {}). Put these start values in the study: {}",
            format::chi2(self.start_chi2),
            format::chi2(self.audited_chi2),
            self.start_lines()
        )
    }
}

/// The profile points that lie below the base fit's chi-squared:
/// `(parameter, held value, chi2 there)`. Such a point means the base fit is
/// not the minimum; the report leads with it like a better multi-start minimum.
pub fn profile_below_base(results: &AuditResults) -> Vec<(String, f64, f64)> {
    let Some(p) = &results.profile else {
        return Vec::new();
    };
    p.parameters
        .iter()
        .filter_map(|q| {
            q.below_minimum
                .as_ref()
                .map(|b| (q.name.clone(), b.value, b.chi2))
        })
        .collect()
}

/// The caution that closes every report.
pub const CAUTION: &str = "Statistics support, and do not replace, a laboratory's own validation \
procedure and the applicable standards. The diagnostics in this report show how far the quoted \
uncertainties agree with resampling, simulation and the shape of the chi-squared surface for this \
data set and this model; they do not establish that the model is right, that the data are free of \
systematic error, or that the method is fit for its intended use.";
