//! The audit: base fit, then the diagnostics battery, then the verdicts,
//! gathered into one [`AuditResults`] record that every renderer reads.

use serde::{Deserialize, Serialize};

use crate::data::Dataset;
use crate::diagnostics::bands::Bands;
use crate::diagnostics::contour::ContourResult;
use crate::diagnostics::derived::{DerivedQuantity, DerivedResult};
use crate::diagnostics::inverse::{InverseModel, InverseRequest, InverseResult};
use crate::diagnostics::multistart::MultistartResult;
use crate::diagnostics::profile::ProfileResult;
use crate::diagnostics::resample::ResampleResult;
use crate::diagnostics::verdict::{self, Verdict, VerdictInputs};
use crate::diagnostics::{self, Fitted, Progress};
use crate::fit::{self, FitOptions, FitResult, ParamSpec, Problem};
use crate::model::ModelFn;
use crate::settings::{AuditSettings, Diagnostic};

/// Version of the layout of `results.json` (docs/RESULTS.md).
pub const SCHEMA_VERSION: u32 = 1;

/// What to run and how the run was started.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditOptions {
    /// Diagnostics to run.
    pub only: Vec<Diagnostic>,
    /// The command line, for the provenance record.
    pub command_line: String,
    /// Also write every replicate estimate to `replicates.csv`.
    pub write_replicates: bool,
}

impl Default for AuditOptions {
    fn default() -> Self {
        AuditOptions {
            only: Diagnostic::ALL.to_vec(),
            command_line: String::new(),
            write_replicates: false,
        }
    }
}

/// Errors of the audit layer.
#[derive(Debug, thiserror::Error)]
pub enum AuditError {
    /// The base fit could not be computed.
    #[error("study {study}: the base fit failed: {source}")]
    BaseFit {
        /// Study name.
        study: String,
        /// Why.
        source: fit::FitError,
    },
}

/// Identification of the study in the record.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StudyInfo {
    /// Study name (file stem).
    pub name: String,
    /// Title, when given.
    pub title: Option<String>,
    /// Study file as given.
    pub path: String,
    /// Data file, when the data came from one.
    pub data_file: Option<String>,
    /// Model formula.
    pub formula: String,
    /// Number of points.
    pub points: usize,
    /// Whether sigma was given (absolute covariance).
    pub sigma_given: bool,
    /// SHA-256 of the study file.
    pub study_sha256: Option<String>,
    /// SHA-256 of the data file.
    pub data_sha256: Option<String>,
}

/// Tool version, command line, date and machine facts of the run.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Provenance {
    /// Tool name.
    pub tool: String,
    /// Tool version.
    pub version: String,
    /// Command line.
    pub command_line: String,
    /// UTC date and time of the run (RFC 3339).
    pub date: String,
    /// Worker threads used (results do not depend on it).
    pub threads: usize,
}

/// The model curve on a fine grid of the (single) independent variable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Curve {
    /// Abscissae.
    pub x: Vec<f64>,
    /// Model values.
    pub y: Vec<f64>,
}

/// Everything an audit computed: the content of `results.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AuditResults {
    /// Layout version.
    pub schema_version: u32,
    /// Provenance.
    pub provenance: Provenance,
    /// The study.
    pub study: StudyInfo,
    /// Settings in force (study values overridden by flags).
    pub settings: AuditSettings,
    /// Diagnostics run.
    pub diagnostics_run: Vec<Diagnostic>,
    /// The data.
    pub data: Dataset,
    /// The audited fit: the fit from the study's start, or, when the audit
    /// was re-based, the fit at the best minimum the search found.
    pub fit: FitResult,
    /// The fit from the study's start when the audit was re-based (a
    /// different, worse minimum); absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub start_fit: Option<FitResult>,
    /// Whether the audit was re-based at the best minimum of the search.
    #[serde(default)]
    pub rebased: bool,
    /// The fitted curve, for one independent variable.
    pub curve: Option<Curve>,
    /// Confidence and prediction bands on the curve's grid (one
    /// independent variable only); the resampled bands when the bootstrap
    /// or the Monte Carlo ran.
    #[serde(default)]
    pub bands: Option<Bands>,
    /// Bootstrap.
    pub bootstrap: Option<ResampleResult>,
    /// Monte Carlo.
    pub monte_carlo: Option<ResampleResult>,
    /// Profiles.
    pub profile: Option<ProfileResult>,
    /// Contour maps.
    pub contours: Option<Vec<ContourResult>>,
    /// Multi-start search.
    pub multistart: Option<MultistartResult>,
    /// Verdict per parameter.
    pub verdicts: Vec<Verdict>,
    /// Derived quantities of the study's `[derived]` table, in file order
    /// (empty without one).
    #[serde(default)]
    pub derived: Vec<DerivedResult>,
    /// Inverse predictions of the study's `[[inverse]]` entries, in file
    /// order (empty without any).
    #[serde(default)]
    pub inverse: Vec<InverseResult>,
    /// For a study of more than [`crate::reduction::RECORD_POINTS`]
    /// points: which points `data` and the fits' per-point arrays keep
    /// (every diagnostic ran on all of them); absent when all are kept.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reduction: Option<crate::reduction::DataReduction>,
}

/// What an audit runs on: the study resolved into its parts (the study
/// layer builds it; library users may build one directly).
pub struct AuditInput<'a> {
    /// Identification of the study for the record.
    pub info: StudyInfo,
    /// The model.
    pub model: &'a dyn ModelFn,
    /// Parameter specifications.
    pub params: Vec<ParamSpec>,
    /// Optimiser options.
    pub fit_options: FitOptions,
    /// The data.
    pub data: &'a Dataset,
    /// Settings of the battery.
    pub settings: AuditSettings,
    /// Derived quantities to evaluate (empty for none).
    pub derived: &'a [DerivedQuantity],
    /// Responses to read off the curve (empty for none).
    pub inverse: &'a [InverseRequest],
    /// The model with x as its last parameter (needed when `inverse` is not empty).
    pub inverse_model: Option<&'a InverseModel>,
}

impl AuditInput<'_> {
    /// The fitting problem (its analytic interval at the audit's level).
    pub fn problem(&self) -> Problem<'_> {
        let mut options = self.fit_options.clone();
        options.level = self.settings.level;
        Problem {
            model: self.model,
            params: self.params.clone(),
            options,
        }
    }
}

/// Runs the base fit and the chosen diagnostics in the current rayon pool.
///
/// The multi-start search, when chosen, runs first. When it finds a
/// clearly better minimum than the fit from the study's start and
/// `settings.multistart.rebase` is on, the problem is refitted from that
/// minimum and every other diagnostic and the verdicts run at it: `fit` is
/// then that fit, `start_fit` the fit from the study's start and `rebased`
/// true.
pub fn run(
    input: &AuditInput,
    options: &AuditOptions,
    progress: &dyn Progress,
) -> Result<AuditResults, AuditError> {
    let problem = input.problem();
    let base = fit::fit(&problem, input.data).map_err(|source| AuditError::BaseFit {
        study: input.info.name.clone(),
        source,
    })?;
    let wants = |d: Diagnostic| options.only.contains(&d);

    let mut multistart = wants(Diagnostic::Multistart).then(|| {
        let ctx = Fitted {
            problem: input.problem(),
            data: input.data,
            fit: &base,
            settings: &input.settings,
        };
        diagnostics::multistart::run(&ctx, progress)
    });
    let rebased_fit = match &multistart {
        Some(ms) if input.settings.multistart.rebase && !ms.base_is_best => rebase(&problem, input.data, ms),
        _ => None,
    };
    let (audited, start_fit, problem) = match rebased_fit {
        Some(best) => {
            if let Some(ms) = multistart.as_mut() {
                ms.audited_is_best = true;
            }
            let mut problem = input.problem();
            for (spec, p) in problem.params.iter_mut().zip(&best.parameters) {
                spec.start = p.value;
            }
            (best, Some(base), problem)
        }
        None => (base, None, problem),
    };
    let rebased = start_fit.is_some();
    let ctx = Fitted {
        problem,
        data: input.data,
        fit: &audited,
        settings: &input.settings,
    };

    let bootstrap = wants(Diagnostic::Bootstrap).then(|| diagnostics::bootstrap::run(&ctx, progress));
    let monte_carlo = wants(Diagnostic::MonteCarlo).then(|| diagnostics::monte_carlo::run(&ctx, progress));
    let profile = wants(Diagnostic::Profile).then(|| diagnostics::profile::run(&ctx, progress));
    let contours = wants(Diagnostic::Contours).then(|| diagnostics::contour::run(&ctx, progress));

    let verdict_inputs = VerdictInputs {
        fit: &audited,
        bootstrap: bootstrap.as_ref(),
        monte_carlo: monte_carlo.as_ref(),
        profile: profile.as_ref(),
        multistart: multistart.as_ref(),
        tolerance: input.settings.tolerance,
        // Stated sigma, or counts (whose variance is their mean).
        sigma_given: audited.sigma_given,
        level: input.settings.level,
    };
    let verdicts = verdict::decide(&verdict_inputs);
    let derived = diagnostics::derived::evaluate(input.derived, &verdict_inputs);
    let inverse = match input.inverse_model {
        Some(im) if !input.inverse.is_empty() => diagnostics::inverse::evaluate(
            input.inverse,
            &diagnostics::inverse::InverseInputs {
                model: input.model,
                inverse_model: im,
                data: input.data,
                fit: &audited,
                monte_carlo: monte_carlo.as_ref(),
                seed: input.settings.seed,
            },
        ),
        _ => Vec::new(),
    };

    let curve = model_curve(input.model, input.data, &audited);
    let bands = curve.as_ref().and_then(|c| {
        diagnostics::bands::compute(
            input.model,
            input.data,
            &audited,
            &c.x,
            bootstrap.as_ref(),
            monte_carlo.as_ref(),
        )
    });
    drop(ctx);
    let mut audited = audited;
    let mut start_fit = start_fit;
    // Large studies: the record and the figures keep a display reduction.
    let (data, reduction) = if input.data.len() > crate::reduction::RECORD_POINTS {
        let indices = crate::reduction::select(input.data, &audited.residuals);
        let residual_quantiles = crate::reduction::residual_quantiles(&audited.residuals);
        let data = crate::reduction::reduce_data(input.data, &indices);
        crate::reduction::reduce_fit(&mut audited, &indices);
        if let Some(f) = start_fit.as_mut() {
            crate::reduction::reduce_fit(f, &indices);
        }
        let reduction = crate::reduction::DataReduction {
            points: input.data.len(),
            kept: indices.len(),
            indices,
            residual_quantiles,
        };
        (data, Some(reduction))
    } else {
        (input.data.clone(), None)
    };
    Ok(AuditResults {
        schema_version: SCHEMA_VERSION,
        provenance: Provenance {
            tool: env!("CARGO_PKG_NAME").to_string(),
            version: env!("CARGO_PKG_VERSION").to_string(),
            command_line: options.command_line.clone(),
            date: humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string(),
            threads: rayon::current_num_threads(),
        },
        study: input.info.clone(),
        settings: input.settings.clone(),
        diagnostics_run: options.only.clone(),
        data,
        fit: audited,
        start_fit,
        rebased,
        curve,
        bands,
        bootstrap,
        monte_carlo,
        profile,
        contours,
        multistart,
        verdicts,
        derived,
        inverse,
        reduction,
    })
}

/// The full fit from the best minimum of the search, when it is a valid
/// fit and keeps the lower chi-squared (it must not climb back above the
/// study start's minimum).
fn rebase(problem: &Problem, data: &Dataset, ms: &MultistartResult) -> Option<FitResult> {
    let best = ms.minima.first()?;
    let start: Vec<f64> = best.parameters.iter().map(|p| p.value).collect();
    let f = fit::fit_from(problem, data, &start).ok()?;
    (f.chi2.is_finite() && f.chi2 < ms.base_chi2).then_some(f)
}

/// The model on 400 points spanning the data, when there is one independent variable.
fn model_curve(model: &dyn ModelFn, data: &Dataset, fit: &FitResult) -> Option<Curve> {
    if data.x.len() != 1 || data.is_empty() {
        return None;
    }
    let col = &data.x[0];
    let lo = col.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = col.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(lo.is_finite() && hi.is_finite()) {
        return None;
    }
    let n = 400;
    let xs: Vec<f64> = (0..n)
        .map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64)
        .collect();
    let params: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    let mut ys = vec![0.0; n];
    let mut scratch = Vec::new();
    // Points where the model is not finite between the data stay in the
    // record as non-finite values (serialised as null) rather than hidden.
    let _ = model.eval(&params, &[xs.as_slice()], &mut ys, None, &mut scratch);
    Some(Curve { x: xs, y: ys })
}

/// The audit input of a loaded study.
pub fn input_from_study(study: &crate::study::Study) -> AuditInput<'_> {
    AuditInput {
        info: StudyInfo {
            name: study.name.clone(),
            title: study.title.clone(),
            path: study.path.display().to_string(),
            data_file: study.data_file.as_ref().map(|p| p.display().to_string()),
            formula: study.formula.clone(),
            points: study.dataset.len(),
            sigma_given: study.dataset.has_sigma(),
            study_sha256: study.study_sha256.clone(),
            data_sha256: study.data_sha256.clone(),
        },
        model: &study.model,
        params: study.parameters.clone(),
        fit_options: study.fit_options.clone(),
        data: &study.dataset,
        settings: study.audit.clone(),
        derived: &study.derived,
        inverse: &study.inverse,
        inverse_model: study.inverse_model.as_ref(),
    }
}
