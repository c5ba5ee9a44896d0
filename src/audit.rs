//! The audit: base fit, then the diagnostics battery, then the verdicts,
//! gathered into one [`AuditResults`] record that every renderer reads.

use serde::{Deserialize, Serialize};

use crate::data::Dataset;
use crate::diagnostics::bands::Bands;
use crate::diagnostics::contour::ContourResult;
use crate::diagnostics::coverage::CoverageResult;
use crate::diagnostics::derived::{DerivedQuantity, DerivedResult};
use crate::diagnostics::inverse::{InverseModel, InverseRequest, InverseResult};
use crate::diagnostics::multistart::MultistartResult;
use crate::diagnostics::nonlinearity::NonlinearityResult;
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

impl AuditOptions {
    /// The diagnostics run on a study with audit settings `settings`:
    /// `only`, and the coverage simulation too when `only` is the default
    /// battery ([`Diagnostic::ALL`], what no `--only` gives) and the study
    /// sets `audit.coverage.enabled`.
    pub fn diagnostics_for(&self, settings: &crate::settings::AuditSettings) -> Vec<Diagnostic> {
        let mut v = self.only.clone();
        if v == Diagnostic::ALL && settings.coverage.enabled {
            v.push(Diagnostic::Coverage);
        }
        v
    }
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
    /// The slices of a study's work do not join (a merge of foreign parts).
    #[error("study {study}: the parts do not join: {why}")]
    Parts {
        /// Study name.
        study: String,
        /// Why.
        why: String,
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

/// One data set's share of a joint fit (a study of several `[[datasets]]`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DatasetShare {
    /// The data set's name.
    pub name: String,
    /// Its formula.
    pub formula: String,
    /// Its number of points.
    pub points: usize,
    /// Index of its first point in the joint data (`data`, and the fits'
    /// per-point arrays, before any display reduction).
    pub start: usize,
    /// The parameters its formula uses.
    pub parameters: Vec<String>,
    /// Of those, the ones another data set uses too.
    pub shared: Vec<String>,
    /// Its contribution to the joint chi-squared: the sum of its squared
    /// normalised residuals (the contributions add up to `fit.chi2`).
    pub chi2: f64,
    /// `chi2 / fit.chi2` (0 when the joint chi-squared is 0).
    pub chi2_fraction: f64,
    /// Its share of the joint degrees of freedom: its points minus, for
    /// each free parameter it uses, one over the number of data sets using
    /// that parameter (the shares add up to `fit.dof`).
    pub dof_share: f64,
    /// `chi2 / dof_share` (none when the share is not positive): near the
    /// joint reduced chi-squared when the data sets agree with the model
    /// and their sigma alike.
    pub reduced_chi2: Option<f64>,
    /// Its fitted curve, when it has one independent variable.
    pub curve: Option<Curve>,
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
    /// Coverage of the study's own intervals, simulated at the fit (absent
    /// when it did not run; it is not in the default battery).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub coverage: Option<CoverageResult>,
    /// Curvature measures and Box's bias at the audited fit (every audit,
    /// whatever `--only` selects).
    #[serde(default)]
    pub nonlinearity: NonlinearityResult,
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
    /// A study of several `[[datasets]]`: each data set's share of the
    /// joint fit, in file order (empty for one data set).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub datasets: Vec<DatasetShare>,
    /// For a study of more than [`crate::reduction::RECORD_POINTS`]
    /// points: which points `data` and the fits' per-point arrays keep
    /// (every diagnostic ran on all of them); absent when all are kept.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reduction: Option<crate::reduction::DataReduction>,
    /// The study's `[report]` settings the figures were drawn with.
    #[serde(default)]
    pub report: crate::study::ReportSpec,
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
    /// How the figures are drawn (the study's `[report]` table).
    pub report: crate::study::ReportSpec,
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
///
/// This is the merge of one part: [`compute`] of the whole slice, then
/// [`summarise`], the same two steps a sharded run takes on several machines.
pub fn run(
    input: &AuditInput,
    options: &AuditOptions,
    progress: &dyn Progress,
) -> Result<AuditResults, AuditError> {
    let work = compute(input, options, crate::shard::Slice::whole(), progress)?;
    let joined = crate::shard::Work::join(vec![work]).map_err(|why| AuditError::Parts {
        study: input.info.name.clone(),
        why,
    })?;
    summarise(input, options, joined)
}

/// The fit the battery runs at, with the fit from the study's start when
/// the audit was re-based (deterministic: the same in every shard).
struct Settled<'a> {
    audited: FitResult,
    start_fit: Option<FitResult>,
    problem: Problem<'a>,
    multistart: Option<MultistartResult>,
}

fn base_fit(input: &AuditInput) -> Result<FitResult, AuditError> {
    fit::fit(&input.problem(), input.data).map_err(|source| AuditError::BaseFit {
        study: input.info.name.clone(),
        source,
    })
}

fn settle<'a>(
    input: &'a AuditInput,
    base: FitResult,
    mut multistart: Option<MultistartResult>,
) -> Settled<'a> {
    let problem = input.problem();
    let rebased_fit = match &multistart {
        Some(ms) if input.settings.multistart.rebase && !ms.base_is_best => rebase(&problem, input.data, ms),
        _ => None,
    };
    match rebased_fit {
        Some(best) => {
            if let Some(ms) = multistart.as_mut() {
                ms.audited_is_best = true;
            }
            let mut problem = input.problem();
            for (spec, p) in problem.params.iter_mut().zip(&best.parameters) {
                spec.start = p.value;
            }
            Settled {
                audited: best,
                start_fit: Some(base),
                problem,
                multistart,
            }
        }
        None => Settled {
            audited: base,
            start_fit: None,
            problem,
            multistart,
        },
    }
}

/// Computes slice `slice` of the study's work and returns its raw
/// outcomes (see [`crate::shard`]): the base fit and the multi-start
/// search in full, then the slice's bootstrap replicates, Monte Carlo
/// trials, profiles, contour maps and coverage replicates.
pub fn compute(
    input: &AuditInput,
    options: &AuditOptions,
    slice: crate::shard::Slice,
    progress: &dyn Progress,
) -> Result<crate::shard::Work, AuditError> {
    use crate::shard::{Pieces, StoredOutcome};
    let base = base_fit(input)?;
    let run = options.diagnostics_for(&input.settings);
    let wants = |d: Diagnostic| run.contains(&d);
    let multistart = wants(Diagnostic::Multistart).then(|| {
        let ctx = Fitted {
            problem: input.problem(),
            data: input.data,
            fit: &base,
            settings: &input.settings,
        };
        diagnostics::multistart::run(&ctx, progress)
    });
    let raw_multistart = multistart.clone();
    let settled = settle(input, base, multistart);
    let ctx = Fitted {
        problem: settled.problem,
        data: input.data,
        fit: &settled.audited,
        settings: &input.settings,
    };
    let store =
        |v: Vec<diagnostics::resample::Outcome>| v.iter().map(StoredOutcome::store).collect::<Vec<_>>();
    let bootstrap = wants(Diagnostic::Bootstrap).then(|| {
        let s = &input.settings.bootstrap;
        let range = slice.range(s.replicates);
        progress.start(
            &format!("bootstrap ({})", diagnostics::bootstrap::scheme_name(s.scheme)),
            range.len() as u64,
        );
        let o = diagnostics::bootstrap::replicates(&ctx, s, range.clone(), progress);
        progress.finish();
        Pieces::new(s.replicates, range, store(o))
    });
    let monte_carlo = wants(Diagnostic::MonteCarlo).then(|| {
        let s = &input.settings.monte_carlo;
        let range = slice.range(s.replicates);
        let o = diagnostics::monte_carlo::outcomes(&ctx, s, range.clone(), progress);
        // An adaptive run of the whole range may stop early: the list is then shorter.
        let total = if slice.is_whole() { o.len() } else { s.replicates };
        Pieces::new(total, range, store(o))
    });
    let profile = wants(Diagnostic::Profile).then(|| {
        let total = diagnostics::profile::free_parameters(&ctx).len();
        let range = slice.range(total);
        Pieces::new(
            total,
            range.clone(),
            diagnostics::profile::profiles(&ctx, range, progress),
        )
    });
    let contours = wants(Diagnostic::Contours).then(|| {
        let total = diagnostics::contour::choose_pairs(&ctx).len();
        let range = slice.range(total);
        Pieces::new(
            total,
            range.clone(),
            diagnostics::contour::maps(&ctx, range, progress),
        )
    });
    let coverage = wants(Diagnostic::Coverage).then(|| {
        let total = input.settings.coverage.replicates;
        let range = slice.range(total);
        progress.start("coverage", range.len() as u64);
        let o = diagnostics::coverage::outcomes(&ctx, range.clone(), progress);
        progress.finish();
        Pieces::new(total, range, o)
    });
    Ok(crate::shard::Work {
        multistart: raw_multistart,
        bootstrap,
        monte_carlo,
        profile,
        contours,
        coverage,
    })
}

/// The pure summary step: the whole record from the study's work joined
/// from all its slices (one slice on one machine). The base fit and the
/// re-basing are recomputed (deterministic); every statistic reads the
/// joined outcomes in index order.
pub fn summarise(
    input: &AuditInput,
    options: &AuditOptions,
    work: crate::shard::Joined,
) -> Result<AuditResults, AuditError> {
    let base = base_fit(input)?;
    let settled = settle(input, base, work.multistart);
    let (audited, start_fit, multistart) = (settled.audited, settled.start_fit, settled.multistart);
    let rebased = start_fit.is_some();
    let ctx = Fitted {
        problem: settled.problem,
        data: input.data,
        fit: &audited,
        settings: &input.settings,
    };
    let bootstrap = work
        .bootstrap
        .map(|o| diagnostics::bootstrap::summarise(&ctx, &input.settings.bootstrap, true, o));
    let monte_carlo = work
        .monte_carlo
        .map(|o| diagnostics::monte_carlo::summarise(&ctx, &input.settings.monte_carlo, o));
    let profile = work.profile.map(|p| diagnostics::profile::assemble(&ctx, p));
    let contours = work.contours;
    let coverage = work
        .coverage
        .map(|o| diagnostics::coverage::summarise(&diagnostics::coverage::setup(&ctx), &o));

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
    let nonlinearity = diagnostics::nonlinearity::run(&ctx);
    let mut verdicts = verdict::decide(&verdict_inputs);
    if let Some(c) = &coverage {
        verdict::apply_coverage(&mut verdicts, c, profile.as_ref(), input.settings.tolerance);
    }
    diagnostics::nonlinearity::cite(&mut verdicts, &nonlinearity);
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
    let datasets = dataset_shares(input.model, input.data, &audited, &input.params);
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
        diagnostics_run: options.diagnostics_for(&input.settings),
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
        coverage,
        nonlinearity,
        verdicts,
        derived,
        inverse,
        datasets,
        reduction,
        report: input.report,
    })
}

/// Each data set's share of a joint fit (empty for one data set).
pub fn dataset_shares(
    model: &dyn ModelFn,
    data: &Dataset,
    fit: &FitResult,
    params: &[ParamSpec],
) -> Vec<DatasetShare> {
    let groups = &data.groups;
    let users = |name: &str| {
        groups
            .iter()
            .filter(|g| g.parameters.iter().any(|p| p == name))
            .count()
    };
    let values: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    groups
        .iter()
        .enumerate()
        .map(|(g, group)| {
            let chi2: f64 = group
                .range()
                .map(|i| fit.residuals.get(i).map_or(0.0, |r| r * r))
                .sum();
            let dof_share = group.len as f64
                - group
                    .parameters
                    .iter()
                    .filter(|name| params.iter().any(|p| &p.name == *name && !p.fixed))
                    .map(|name| 1.0 / users(name) as f64)
                    .sum::<f64>();
            let curve = (group.x_names.len() == 1)
                .then(|| group_curve(model, data, g, &values))
                .flatten();
            DatasetShare {
                name: group.name.clone(),
                formula: group.formula.clone(),
                points: group.len,
                start: group.start,
                parameters: group.parameters.clone(),
                shared: group
                    .parameters
                    .iter()
                    .filter(|p| users(p) > 1)
                    .cloned()
                    .collect(),
                chi2,
                chi2_fraction: if fit.chi2 > 0.0 { chi2 / fit.chi2 } else { 0.0 },
                dof_share,
                reduced_chi2: (dof_share > 0.0).then(|| chi2 / dof_share),
                curve,
            }
        })
        .collect()
}

/// Points of the linear part of [`curve_grid`].
pub const CURVE_LINEAR_POINTS: usize = 400;
/// Points of the logarithmic part of [`curve_grid`].
pub const CURVE_LOG_POINTS: usize = 200;

/// The abscissae of a fitted curve over `[lo, hi]`: [`CURVE_LINEAR_POINTS`]
/// evenly spaced, and, when the range is positive and spans more than a
/// decade, [`CURVE_LOG_POINTS`] more evenly spaced in `log10 x`, sorted
/// and without repeats. The curve (and the bands on the same grid) then
/// reads smooth on a linear and on a logarithmic x axis alike; on a log
/// axis a linear grid alone would leave the lowest decades with a point
/// or two and draw the model there as a straight chord.
pub fn curve_grid(lo: f64, hi: f64) -> Vec<f64> {
    let n = CURVE_LINEAR_POINTS;
    let mut xs: Vec<f64> = (0..n)
        .map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64)
        .collect();
    if lo > 0.0 && hi / lo > 10.0 {
        let (a, b) = (lo.log10(), hi.log10());
        let m = CURVE_LOG_POINTS;
        xs.extend((1..m - 1).map(|i| 10f64.powf(a + (b - a) * i as f64 / (m - 1) as f64)));
        xs.sort_by(f64::total_cmp);
        xs.dedup();
    }
    xs
}

/// Data set `g`'s model on [`curve_grid`] over its (single) x column.
fn group_curve(model: &dyn ModelFn, data: &Dataset, g: usize, params: &[f64]) -> Option<Curve> {
    let r = data.groups[g].range();
    let col = &data.x.first()?[r];
    let lo = col.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = col.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(lo.is_finite() && hi.is_finite()) {
        return None;
    }
    let xs = curve_grid(lo, hi);
    let n = xs.len();
    let zeros = vec![0.0; n];
    let group = vec![g as f64; n];
    let last = data.x.len() - 1;
    let cols: Vec<&[f64]> = (0..data.x.len())
        .map(|k| match k {
            0 => xs.as_slice(),
            k if k == last => group.as_slice(),
            _ => zeros.as_slice(),
        })
        .collect();
    let mut ys = vec![0.0; n];
    let mut scratch = Vec::new();
    let _ = model.eval(params, &cols, &mut ys, None, &mut scratch);
    Some(Curve { x: xs, y: ys })
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

/// The model on [`curve_grid`] over the data, when there is one
/// independent variable.
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
    let xs = curve_grid(lo, hi);
    let params: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    let mut ys = vec![0.0; xs.len()];
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
        model: study.model_fn(),
        params: study.parameters.clone(),
        fit_options: study.fit_options.clone(),
        data: &study.dataset,
        settings: study.audit.clone(),
        derived: &study.derived,
        inverse: &study.inverse,
        inverse_model: study.inverse_model.as_ref(),
        report: study.report,
    }
}
