//! Many studies and many machines: batch audits, shard parts and their merge.
//!
//! - **Batch**: [`run_batch`] audits each study into `OUT/<study>/` and
//!   writes `OUT/index.html` and `OUT/index.json` ([`BatchIndex`]), one
//!   row per study. A study that fails to load or fit gets its row with the
//!   error and the others still run. The whole folder is committed
//!   atomically through [`crate::output::Staging`].
//! - **Shard**: [`run_shard`] computes slice `K/N` of the work and writes a
//!   part folder (`part.cbor`, the raw outcomes; `part.json`, a readable
//!   manifest). In a batch of at least `N` studies the studies themselves
//!   are dealt out, study `i` (0-based, in order) to shard `i mod N + 1`,
//!   each whole; with fewer studies than shards every study's work is
//!   sliced `N` ways (see [`crate::shard`]). Every part lists every study
//!   of the run (name, file hashes, settings), so the merge can check
//!   that the parts belong together.
//! - **Merge**: [`merge`] checks the parts (one tool version, one `N`,
//!   every `K` once, the same studies with the same hashes, settings and
//!   seed) and writes the report of the single-machine run: the same
//!   folder layout, and results.json equal field for field, provenance
//!   aside.
//!
//! Exit status of a batch: the gravest of its studies, ranked 1 (internal
//! error) above 2 (bad input) above 3 (`--strict` objection) above 0.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use crate::audit::{self, AuditOptions, AuditResults};
use crate::diagnostics::verdict::Status;
use crate::diagnostics::Progress;
use crate::output::{OutputError, Staging};
use crate::report::ReportError;
use crate::settings::AuditSettings;
use crate::shard::{Slice, Work};
use crate::study::{self, Study, StudyError};

/// Version of the layout of `index.json` and of a part file.
pub const FORMAT_VERSION: u32 = 1;

/// File name of a part's raw outcomes (CBOR, every f64 bit for bit).
pub const PART_FILE: &str = "part.cbor";

/// Errors of the batch layer.
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    /// Parts that do not belong together, or a missing or duplicated part.
    #[error(transparent)]
    Parts(#[from] PartsError),
    /// A folder without study files.
    #[error("folder {0} holds no study file (*.toml)")]
    EmptyFolder(PathBuf),
    /// A single study failed (outside a batch).
    #[error(transparent)]
    Study(#[from] StudyError),
    /// A single audit failed (outside a batch).
    #[error(transparent)]
    Audit(#[from] audit::AuditError),
    /// Writing the output failed.
    #[error(transparent)]
    Output(#[from] OutputError),
    /// Rendering a report failed.
    #[error(transparent)]
    Report(#[from] ReportError),
    /// Reading a folder or a file failed.
    #[error("cannot read {path}: {source}")]
    Io {
        /// The path.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
}

/// Parts refused by the merge, with the part(s) concerned.
#[derive(Debug, thiserror::Error)]
#[error("{0}")]
pub struct PartsError(pub String);

/// Command-line values that override a study's `[audit]` table.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Overrides {
    /// Replicates of both bootstrap and Monte Carlo.
    pub replicates: Option<usize>,
    /// Starts of the first multi-start batch.
    pub starts: Option<usize>,
    /// Seed of every random stream.
    pub seed: Option<u64>,
    /// Audit the fit from the study's start (no re-basing).
    pub keep_start: bool,
    /// Confidence level of every interval (`--level`, overrides `audit.level`).
    pub level: Option<f64>,
}

impl Overrides {
    /// Applies the overrides to a loaded study and validates the settings.
    pub fn apply(&self, study: &mut Study) -> Result<(), StudyError> {
        if let Some(n) = self.replicates {
            study.audit.bootstrap.replicates = n;
            study.audit.monte_carlo.replicates = n;
        }
        if let Some(n) = self.starts {
            study.audit.multistart.starts = n;
        }
        if let Some(s) = self.seed {
            study.audit.seed = s;
        }
        if let Some(l) = self.level {
            study.audit.level = l;
            study.fit_options.level = l;
        }
        if self.keep_start {
            study.audit.multistart.rebase = false;
        }
        study.audit.validate().map_err(|(key, why)| StudyError::Invalid {
            at: Box::new(study::At::file(&study.path)),
            key: format!("{key} (as set in the study or on the command line)"),
            why,
        })
    }

    /// Loads a study and applies the overrides.
    pub fn load(&self, path: &Path) -> Result<Study, StudyError> {
        let mut s = study::load(path)?;
        self.apply(&mut s)?;
        Ok(s)
    }
}

/// The study files named: files as given (a missing one is kept, to fail
/// as it loads), folders replaced by their `*.toml` files in name order.
pub fn expand(paths: &[PathBuf]) -> Result<Vec<PathBuf>, BatchError> {
    let mut out = Vec::new();
    for p in paths {
        if p.is_dir() {
            let mut found: Vec<PathBuf> = std::fs::read_dir(p)
                .map_err(|source| BatchError::Io {
                    path: p.clone(),
                    source,
                })?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|f| f.is_file() && f.extension().is_some_and(|x| x == "toml"))
                .collect();
            found.sort();
            if found.is_empty() {
                return Err(BatchError::EmptyFolder(p.clone()));
            }
            out.extend(found);
        } else {
            // A missing file fails to load like any bad study: in a batch
            // it gets its row with the error.
            out.push(p.clone());
        }
    }
    Ok(out)
}

/// Whether these arguments make a batch: more than one study, or a folder.
pub fn is_batch(paths: &[PathBuf]) -> bool {
    paths.len() > 1 || paths.iter().any(|p| p.is_dir())
}

/// One folder name per study (its file stem made safe; a repeated name
/// gets `-2`, `-3`, ... in order).
pub fn folder_names(paths: &[PathBuf]) -> Vec<String> {
    let mut seen: Vec<String> = Vec::new();
    paths
        .iter()
        .map(|p| {
            let stem = p
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default();
            let base = crate::cli_support::folder_name(&stem);
            let mut name = base.clone();
            let mut i = 2;
            while seen.contains(&name) || name == "index.html" || name == "index.json" {
                name = format!("{base}-{i}");
                i += 1;
            }
            seen.push(name.clone());
            name
        })
        .collect()
}

/// Rank of an exit status for "the gravest": 1 > 2 > 3 > 0.
pub fn gravity(code: u8) -> u8 {
    match code {
        0 => 0,
        3 => 1,
        2 => 2,
        _ => 3,
    }
}

/// The gravest of some exit statuses (0 for none).
pub fn gravest(codes: impl IntoIterator<Item = u8>) -> u8 {
    codes.into_iter().max_by_key(|c| gravity(*c)).unwrap_or(0)
}

/// Exit status of an audited study: 3 with `strict` when a verdict fails
/// or the audit was re-based, else 0.
pub fn audit_status(results: &AuditResults, strict: bool) -> u8 {
    let fails = results.verdicts.iter().any(|v| v.status == Status::Fails);
    if strict && (fails || results.rebased) {
        3
    } else {
        0
    }
}

/// One row of the index: a study of the batch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StudyRow {
    /// Folder of its report inside the batch folder.
    pub name: String,
    /// The study file as given.
    pub study: String,
    /// Title, when the study loaded and has one.
    pub title: Option<String>,
    /// `audited` or `error`.
    pub status: String,
    /// Exit status of this study alone.
    pub exit_status: u8,
    /// Link to its report (relative to the batch folder), when audited.
    pub report: Option<String>,
    /// Verdicts `holds`.
    pub holds: usize,
    /// Verdicts `doubtful`.
    pub doubtful: usize,
    /// Verdicts `fails`.
    pub fails: usize,
    /// The audit was re-based at the best minimum of the search.
    pub rebased: bool,
    /// Chi-squared from the study's start when the search found a lower
    /// minimum (re-based or not).
    pub start_chi2: Option<f64>,
    /// Chi-squared of the best minimum found when lower than the start's.
    pub best_chi2: Option<f64>,
    /// Failed refits of bootstrap, Monte Carlo and profiles together.
    pub failed_refits: usize,
    /// The error, when the study could not be audited.
    pub error: Option<String>,
}

/// The content of `index.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BatchIndex {
    /// Layout version.
    pub schema_version: u32,
    /// Tool name.
    pub tool: String,
    /// Tool version.
    pub version: String,
    /// Command line of the run (or of the merge).
    pub command_line: String,
    /// UTC date and time (RFC 3339).
    pub date: String,
    /// Exit status of the batch: the gravest of its studies.
    pub exit_status: u8,
    /// One row per study, in the order given.
    pub studies: Vec<StudyRow>,
}

/// The row of an audited study.
pub fn row_from(results: &AuditResults, name: &str, study: &str, strict: bool) -> StudyRow {
    let count = |s: Status| results.verdicts.iter().filter(|v| v.status == s).count();
    let (start_chi2, best_chi2) = if let Some(n) = crate::report::rebased_notice(results) {
        (Some(n.start_chi2), Some(n.audited_chi2))
    } else if let Some((a, b)) = crate::report::better_minimum(results) {
        (Some(a), Some(b))
    } else {
        (None, None)
    };
    let failed_refits = results.bootstrap.as_ref().map_or(0, |r| r.failed)
        + results.monte_carlo.as_ref().map_or(0, |r| r.failed)
        + results.profile.as_ref().map_or(0, |r| r.failed);
    StudyRow {
        name: name.to_string(),
        study: study.to_string(),
        title: results.study.title.clone(),
        status: "audited".into(),
        exit_status: audit_status(results, strict),
        report: Some(format!("{name}/report.html")),
        holds: count(Status::Holds),
        doubtful: count(Status::Doubtful),
        fails: count(Status::Fails),
        rebased: results.rebased,
        start_chi2,
        best_chi2,
        failed_refits,
        error: None,
    }
}

/// The row of a study that could not be audited.
pub fn error_row(name: &str, study: &str, message: String, exit_status: u8) -> StudyRow {
    StudyRow {
        name: name.to_string(),
        study: study.to_string(),
        title: None,
        status: "error".into(),
        exit_status,
        report: None,
        holds: 0,
        doubtful: 0,
        fails: 0,
        rebased: false,
        start_chi2: None,
        best_chi2: None,
        failed_refits: 0,
        error: Some(message),
    }
}

/// An error's message with its causes (each once).
pub fn message(err: &(dyn std::error::Error + 'static)) -> String {
    let mut text = String::new();
    let mut next = Some(err);
    while let Some(e) = next {
        let part = e.to_string();
        if !text.contains(&part) {
            if !text.is_empty() {
                text.push_str(": ");
            }
            text.push_str(&part);
        }
        next = e.source();
    }
    text
}

fn now() -> String {
    humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()
}

fn index_of(rows: Vec<StudyRow>, command_line: &str) -> BatchIndex {
    BatchIndex {
        schema_version: FORMAT_VERSION,
        tool: env!("CARGO_PKG_NAME").to_string(),
        version: env!("CARGO_PKG_VERSION").to_string(),
        command_line: command_line.to_string(),
        date: now(),
        exit_status: gravest(rows.iter().map(|r| r.exit_status)),
        studies: rows,
    }
}

/// What a run is asked to do.
pub struct Request<'a> {
    /// The study files (folders already expanded by [`expand`]).
    pub studies: Vec<PathBuf>,
    /// Overrides of the studies' settings.
    pub overrides: Overrides,
    /// Diagnostics and outputs.
    pub options: AuditOptions,
    /// `--strict`.
    pub strict: bool,
    /// The output folder (the batch folder, or the part folder).
    pub out: PathBuf,
    /// Progress reporting.
    pub progress: &'a dyn Progress,
}

/// The output folder's checks before any work: a folder fitaudit may
/// replace, which is not and does not contain one of the study files
/// (their data files are checked as each study loads: a foreign file in
/// the folder is refused anyway).
fn protect_studies(req: &Request) -> Result<(), BatchError> {
    let inputs: Vec<&Path> = req.studies.iter().map(PathBuf::as_path).collect();
    crate::output::preflight_protecting(&req.out, &inputs)?;
    Ok(())
}

/// Audits every study into `out/<name>/` and writes the index; returns it.
pub fn run_batch(req: &Request) -> Result<BatchIndex, BatchError> {
    protect_studies(req)?;
    let names = folder_names(&req.studies);
    let staging = Staging::new(&req.out)?;
    let mut rows = Vec::new();
    for (path, name) in req.studies.iter().zip(&names) {
        let shown = path.display().to_string();
        let audited = req.overrides.load(path).map_err(BatchError::from).and_then(|s| {
            Ok(audit::run(
                &audit::input_from_study(&s),
                &req.options,
                req.progress,
            )?)
        });
        let row = match audited {
            Ok(results) => {
                write_study(&staging, name, &results, &req.options)?;
                row_from(&results, name, &shown, req.strict)
            }
            Err(e) => error_row(name, &shown, message(&e), crate::cli_support::classify_error(&e)),
        };
        rows.push(row);
    }
    let index = index_of(rows, &req.options.command_line);
    write_index(&staging, &index)?;
    staging.commit()?;
    Ok(index)
}

fn write_study(
    staging: &Staging,
    name: &str,
    results: &AuditResults,
    options: &AuditOptions,
) -> Result<(), BatchError> {
    for (rel, bytes) in crate::report::render_files(results, options)? {
        staging.write(&format!("{name}/{rel}"), &bytes)?;
    }
    Ok(())
}

fn write_index(staging: &Staging, index: &BatchIndex) -> Result<(), BatchError> {
    staging.write("index.json", crate::report::index::json(index)?.as_bytes())?;
    staging.write("index.html", crate::report::index::html(index).as_bytes())?;
    Ok(())
}

/// A study as recorded in a part.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StudyPart {
    /// Folder name of its report.
    pub name: String,
    /// The study file as given.
    pub given: String,
    /// The study file, absolute, for the merge to read.
    pub path: PathBuf,
    /// SHA-256 of the study file (None when unreadable).
    pub study_sha256: Option<String>,
    /// SHA-256 of its data file (None when it did not load).
    pub data_sha256: Option<String>,
    /// Settings in force, overrides applied (None when it did not load).
    pub settings: Option<AuditSettings>,
    /// The study as the shard recorded it (paths as given there), for the
    /// merged record (None when it did not load).
    pub info: Option<audit::StudyInfo>,
    /// The data files of its `[[datasets]]` as the shard resolved them
    /// (relative to the study as given there), for the merged record;
    /// empty for a study of one data set.
    #[serde(default)]
    pub group_files: Vec<Option<String>>,
    /// Which slice of its work this part holds (None: none of it).
    pub slice: Option<Slice>,
    /// The raw outcomes of that slice.
    pub work: Option<Work>,
    /// Why the study could not be audited, with its exit status.
    pub error: Option<(String, u8)>,
}

/// The content of `part.cbor`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PartFile {
    /// Layout version.
    pub format: u32,
    /// Tool name.
    pub tool: String,
    /// Tool version.
    pub version: String,
    /// Which shard this is.
    pub shard: Slice,
    /// Whether the run was a batch (an index and a folder per study).
    pub batch: bool,
    /// Diagnostics and outputs (the command line left empty).
    pub options: AuditOptions,
    /// `--strict` of the run.
    pub strict: bool,
    /// Every study of the run, in order.
    pub studies: Vec<StudyPart>,
}

fn file_sha256(path: &Path) -> Option<String> {
    let bytes = std::fs::read(path).ok()?;
    Some(format!("{:x}", Sha256::digest(&bytes)))
}

/// Computes shard `slice` of the run and writes its part folder.
pub fn run_shard(req: &Request, slice: Slice, batch: bool) -> Result<PartFile, BatchError> {
    protect_studies(req)?;
    let names = folder_names(&req.studies);
    let deal = batch && req.studies.len() >= slice.n;
    let mut studies = Vec::new();
    for (i, (path, name)) in req.studies.iter().zip(&names).enumerate() {
        let mine = if deal {
            (i % slice.n + 1 == slice.k).then(Slice::whole)
        } else {
            Some(slice)
        };
        let abs = std::fs::canonicalize(path).unwrap_or_else(|_| path.clone());
        let mut part = StudyPart {
            name: name.clone(),
            given: path.display().to_string(),
            path: abs,
            study_sha256: file_sha256(path),
            data_sha256: None,
            settings: None,
            info: None,
            group_files: Vec::new(),
            slice: mine,
            work: None,
            error: None,
        };
        match req.overrides.load(path) {
            Err(e) => {
                if !batch {
                    return Err(e.into());
                }
                part.error = Some((message(&e), crate::cli_support::classify_error(&e)));
            }
            Ok(s) => {
                part.data_sha256 = s.data_sha256.clone();
                part.group_files = s.dataset.groups.iter().map(|g| g.file.clone()).collect();
                part.settings = Some(s.audit.clone());
                let input = audit::input_from_study(&s);
                part.info = Some(input.info.clone());
                if let Some(sl) = mine {
                    match audit::compute(&input, &req.options, sl, req.progress) {
                        Ok(w) => part.work = Some(w),
                        Err(e) if batch => {
                            part.error = Some((message(&e), crate::cli_support::classify_error(&e)));
                        }
                        Err(e) => return Err(e.into()),
                    }
                }
            }
        }
        studies.push(part);
    }
    let mut options = req.options.clone();
    options.command_line.clear();
    let file = PartFile {
        format: FORMAT_VERSION,
        tool: env!("CARGO_PKG_NAME").to_string(),
        version: env!("CARGO_PKG_VERSION").to_string(),
        shard: slice,
        batch,
        options,
        strict: req.strict,
        studies,
    };
    write_part(&file, &req.out)?;
    Ok(file)
}

/// Writes a part folder: `part.cbor` and the readable `part.json` manifest.
pub fn write_part(file: &PartFile, out: &Path) -> Result<PathBuf, BatchError> {
    let mut bytes = Vec::new();
    ciborium::into_writer(file, &mut bytes).map_err(|e| PartsError(format!("encoding the part: {e}")))?;
    #[derive(Serialize)]
    struct Manifest<'a> {
        tool: &'a str,
        version: &'a str,
        shard: String,
        batch: bool,
        studies: Vec<(&'a str, Option<String>, Option<&'a str>)>,
    }
    let manifest = Manifest {
        tool: &file.tool,
        version: &file.version,
        shard: file.shard.to_string(),
        batch: file.batch,
        studies: file
            .studies
            .iter()
            .map(|s| {
                (
                    s.name.as_str(),
                    s.slice.map(|x| x.to_string()),
                    s.error.as_ref().map(|e| e.0.as_str()),
                )
            })
            .collect(),
    };
    let staging = Staging::new(out)?;
    staging.write(PART_FILE, &bytes)?;
    let text = serde_json::to_string_pretty(&manifest).map_err(ReportError::from)? + "\n";
    staging.write("part.json", text.as_bytes())?;
    Ok(staging.commit()?)
}

/// Reads a part folder (or its `part.cbor`).
pub fn read_part(path: &Path) -> Result<PartFile, BatchError> {
    let file = if path.is_dir() {
        path.join(PART_FILE)
    } else {
        path.to_path_buf()
    };
    let bytes = std::fs::read(&file).map_err(|source| BatchError::Io {
        path: file.clone(),
        source,
    })?;
    ciborium::from_reader(bytes.as_slice())
        .map_err(|e| PartsError(format!("{} is not a fitaudit part ({e})", path.display())).into())
}

/// What a merge wrote.
pub struct Merged {
    /// The index, for a batch; None for one study.
    pub index: Option<BatchIndex>,
    /// The record, for one study.
    pub results: Option<AuditResults>,
    /// Exit status (the gravest for a batch).
    pub exit_status: u8,
}

fn refuse(msg: String) -> BatchError {
    BatchError::Parts(PartsError(msg))
}

/// Checks that the parts belong together; returns them ordered by `K`.
pub fn check_parts(parts: Vec<(PathBuf, PartFile)>) -> Result<Vec<(PathBuf, PartFile)>, BatchError> {
    let Some((p0, f0)) = parts.first() else {
        return Err(refuse("no parts given".into()));
    };
    let (p0, f0) = (p0.clone(), f0.clone());
    let show = |p: &Path| p.display().to_string();
    for (p, f) in &parts {
        if f.format != FORMAT_VERSION || f.tool != f0.tool || f.version != f0.version {
            return Err(refuse(format!(
                "part {} was written by {} {} (part format {}), part {} by {} {} (format {}): merge only parts of one tool version",
                show(&p0), f0.tool, f0.version, f0.format, show(p), f.tool, f.version, f.format
            )));
        }
        if f.shard.n != f0.shard.n {
            return Err(refuse(format!(
                "part {} is shard {} but part {} is shard {}: parts of different splits",
                show(&p0),
                f0.shard,
                show(p),
                f.shard
            )));
        }
        if f.batch != f0.batch || f.options != f0.options || f.strict != f0.strict {
            return Err(refuse(format!(
                "parts {} and {} were run with different options (batch, --only, --strict or --replicates-csv)",
                show(&p0),
                show(p)
            )));
        }
        let names = |f: &PartFile| f.studies.iter().map(|s| s.given.clone()).collect::<Vec<_>>();
        if names(f) != names(&f0) {
            return Err(refuse(format!(
                "part {} audits studies [{}] but part {} audits [{}]: parts of different runs",
                show(&p0),
                names(&f0).join(", "),
                show(p),
                names(f).join(", ")
            )));
        }
        for (a, b) in f0.studies.iter().zip(&f.studies) {
            if a.study_sha256 != b.study_sha256 || a.data_sha256 != b.data_sha256 {
                return Err(refuse(format!(
                    "study {}: part {} and part {} hold different study or data files (SHA-256 {} / {} against {} / {}): parts of different studies",
                    a.given,
                    show(&p0),
                    show(p),
                    a.study_sha256.as_deref().unwrap_or("none"),
                    a.data_sha256.as_deref().unwrap_or("none"),
                    b.study_sha256.as_deref().unwrap_or("none"),
                    b.data_sha256.as_deref().unwrap_or("none"),
                )));
            }
            match (&a.settings, &b.settings) {
                (Some(x), Some(y)) if x.seed != y.seed => {
                    return Err(refuse(format!(
                        "study {}: part {} was run with seed {}, part {} with seed {}: parts of different runs",
                        a.given,
                        show(&p0),
                        x.seed,
                        show(p),
                        y.seed
                    )));
                }
                (x, y) if x != y => {
                    return Err(refuse(format!(
                        "study {}: parts {} and {} were run with different settings: parts of different runs",
                        a.given,
                        show(&p0),
                        show(p)
                    )));
                }
                _ => {}
            }
        }
    }
    let n = f0.shard.n;
    let mut by_k: Vec<Vec<PathBuf>> = vec![Vec::new(); n];
    for (p, f) in &parts {
        by_k[f.shard.k - 1].push(p.clone());
    }
    for (i, held) in by_k.iter().enumerate() {
        if held.len() > 1 {
            let list: Vec<String> = held.iter().map(|p| show(p)).collect();
            return Err(refuse(format!(
                "shard {}/{n} given {} times: {}",
                i + 1,
                held.len(),
                list.join(", ")
            )));
        }
    }
    let missing: Vec<String> = by_k
        .iter()
        .enumerate()
        .filter(|(_, h)| h.is_empty())
        .map(|(i, _)| format!("{}/{n}", i + 1))
        .collect();
    if !missing.is_empty() {
        let given: Vec<String> = parts
            .iter()
            .map(|(p, f)| format!("{} ({})", f.shard, show(p)))
            .collect();
        return Err(refuse(format!(
            "shard{} {} missing; given: {}",
            if missing.len() > 1 { "s" } else { "" },
            missing.join(", "),
            given.join(", ")
        )));
    }
    let mut parts = parts;
    parts.sort_by_key(|(_, f)| f.shard.k);
    Ok(parts)
}

/// The study of a merge, reloaded and checked against the part's hashes,
/// with the part's settings in force.
fn reload(sp: &StudyPart) -> Result<Study, BatchError> {
    let mut s = study::load(&sp.path)?;
    if file_sha256(&sp.path) != sp.study_sha256 || s.data_sha256 != sp.data_sha256 {
        return Err(refuse(format!(
            "study {}: the study or data file changed since the shards ran (SHA-256 differs); run the shards again",
            sp.path.display()
        )));
    }
    if let Some(settings) = &sp.settings {
        s.audit = settings.clone();
    }
    // The merge reads the study from its absolute path; the record names
    // the data files as the shard resolved them (their contents are the
    // same: the digests matched).
    if sp.group_files.len() == s.dataset.groups.len() {
        for (g, f) in s.dataset.groups.iter_mut().zip(&sp.group_files) {
            g.file = f.clone();
        }
    }
    Ok(s)
}

/// The record of study `i` from its slices in the parts.
fn merge_study(
    parts: &[(PathBuf, PartFile)],
    i: usize,
    options: &AuditOptions,
) -> Result<Result<AuditResults, (String, u8)>, BatchError> {
    let holders: Vec<&StudyPart> = parts
        .iter()
        .map(|(_, f)| &f.studies[i])
        .filter(|s| s.slice.is_some())
        .collect();
    let first = &parts[0].1.studies[i];
    if let Some(err) = holders
        .iter()
        .find_map(|s| s.error.clone())
        .or_else(|| first.error.clone())
    {
        return Ok(Err(err));
    }
    let slices: Vec<Slice> = holders.iter().filter_map(|s| s.slice).collect();
    let n = parts[0].1.shard.n;
    let whole = slices.len() == 1 && slices[0].is_whole();
    let split = slices.len() == n && slices.iter().all(|s| s.n == n);
    if !(whole || split) {
        return Err(refuse(format!(
            "study {}: the parts hold slices [{}] of its work, not one whole or all {n}",
            first.given,
            slices
                .iter()
                .map(|s| s.to_string())
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    let works: Vec<Work> = holders.iter().filter_map(|s| s.work.clone()).collect();
    if works.len() != holders.len() {
        return Err(refuse(format!(
            "study {}: a part holds no outcomes for its slice",
            first.given
        )));
    }
    let joined = Work::join(works).map_err(|why| refuse(format!("study {}: {why}", first.given)))?;
    let study = reload(first)?;
    let mut input = audit::input_from_study(&study);
    if let Some(info) = &first.info {
        input.info = info.clone();
    }
    Ok(audit::summarise(&input, options, joined)
        .map_err(|e| (message(&e), crate::cli_support::classify_error(&e))))
}

/// Merges parts into the full report at `out`.
pub fn merge(paths: &[PathBuf], out: &Path, command_line: &str) -> Result<Merged, BatchError> {
    // The parts are inputs: a destination that is (or holds) one of them
    // would replace it with the merged report.
    let inputs: Vec<&Path> = paths.iter().map(PathBuf::as_path).collect();
    crate::output::preflight_protecting(out, &inputs)?;
    let parts = paths
        .iter()
        .map(|p| read_part(p).map(|f| (p.clone(), f)))
        .collect::<Result<Vec<_>, _>>()?;
    let parts = check_parts(parts)?;
    let head = parts[0].1.clone();
    let mut options = head.options.clone();
    options.command_line = command_line.to_string();
    if !head.batch {
        let results = match merge_study(&parts, 0, &options)? {
            Ok(r) => r,
            Err((msg, _)) => return Err(refuse(msg)),
        };
        crate::report::write_report(&results, out, &options)?;
        let exit_status = audit_status(&results, head.strict);
        return Ok(Merged {
            index: None,
            results: Some(results),
            exit_status,
        });
    }
    let staging = Staging::new(out)?;
    let mut rows = Vec::new();
    for (i, sp) in head.studies.iter().enumerate() {
        let row = match merge_study(&parts, i, &options)? {
            Ok(results) => {
                write_study(&staging, &sp.name, &results, &options)?;
                row_from(&results, &sp.name, &sp.given, head.strict)
            }
            Err((msg, code)) => error_row(&sp.name, &sp.given, msg, code),
        };
        rows.push(row);
    }
    let index = index_of(rows, command_line);
    write_index(&staging, &index)?;
    staging.commit()?;
    Ok(Merged {
        exit_status: index.exit_status,
        index: Some(index),
        results: None,
    })
}
