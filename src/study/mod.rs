//! Study files: a TOML file naming a data file, a formula, its parameters
//! and the audit settings, read, resolved and checked into a [`Study`] that
//! is ready to fit.
//!
//! ```toml
//! title = "Cooling of a sealed vial"     # optional
//!
//! [data]
//! file = "cooling.csv"      # relative to the study file; absolute allowed
//! x = "t"                   # one column, or a list: x = ["x1", "x2"]
//! y = "temp"
//! sigma = "u_temp"          # optional: a column, or one number for all points
//! columns = { temp = "Temp (°C)", u_temp = "u(T) / K" }   # optional aliases
//!
//! [model]
//! formula = "T_env + dT*exp(-t/tau)"
//!
//! [parameters]              # every parameter of the formula, in vector order
//! T_env = { start = 20.0 }
//! dT    = { start = 50.0, min = 0 }
//! tau   = { start = 300, min = 1, max = 1e5, fixed = false }
//!
//! [constants]               # optional: name = number
//! T0 = 273.15
//!
//! [fit]                     # optional
//! method = "lm"             # "lm" | "steepest"
//! scale_covariance = false  # absent: scale by chi2/dof only without sigma
//! max_iterations = 1000
//! geodesic = false
//!
//! [audit]                   # optional, see crate::settings::AuditSettings
//! seed = 1
//! ```
//!
//! Rules the loader enforces (each failure is a [`StudyError`] naming the
//! file and line/column or key):
//!
//! * every table rejects unknown keys;
//! * parameters are ordered as they appear in the file; each needs a finite
//!   `start` inside `[min, max]`, and `min < max`; every declared parameter
//!   must appear in the formula;
//! * names resolve parameters first, then constants, then x columns; a
//!   parameter or constant with the name of another parameter, constant or
//!   x column is an error (the other could never be read);
//! * **aliases**: `data.columns` maps an identifier to a CSV header, so a
//!   header such as `Temp (°C)` can be used. `x`, `y` and `sigma` may name a
//!   column by alias or by its exact header; x columns must be named by an
//!   identifier (they appear in the formula). An alias may not equal a
//!   different header of the file;
//! * the data file is read as described in [`csv`](self::read_csv); only the
//!   columns used must be numeric; a header used twice is an error only when
//!   that header is used;
//! * sigma values must be positive; at least (free parameters + 1) points;
//! * an x column that holds a single value is a [`StudyWarning`] when other
//!   x columns vary, and an error when every x column is constant;
//! * the model must be finite (value and derivatives) at the starting values
//!   for every point; the error names the first bad point's data line.

mod csv;
mod error;
mod joint;
mod spec;

pub use self::csv::{parse_raw, read_csv, RawTable, Table};
pub use self::error::{At, Shadow, StudyError};
pub use self::joint::DatasetEntry;
pub use self::spec::{
    AxisScale, DataSpec, FitSpec, InverseSpec, Loc, Locations, ModelSpec, ParamEntry, ReportSpec, SigmaSpec,
    StudySpec,
};

use crate::data::Dataset;
use crate::diagnostics::derived::DerivedQuantity;
use crate::diagnostics::inverse::{InverseModel, InverseRequest};
use crate::fit::{FitOptions, ParamSpec, Problem};
use crate::model::{self, ModelErrorKind, ModelFn, Symbols, Tape};
use crate::settings::AuditSettings;
use std::fmt;
use std::path::{Path, PathBuf};

/// A study resolved, checked and compiled, ready to fit.
#[derive(Debug, Clone)]
pub struct Study {
    /// The study file (or a virtual name).
    pub path: PathBuf,
    /// File stem, used for `out/<name>/`.
    pub name: String,
    /// Title from the file.
    pub title: Option<String>,
    /// The data file as resolved (None for a programmatic data set).
    pub data_file: Option<PathBuf>,
    /// The formula.
    pub formula: String,
    /// Parameters in vector order.
    pub parameters: Vec<ParamSpec>,
    /// Named constants.
    pub constants: Vec<(String, f64)>,
    /// The data.
    pub dataset: Dataset,
    /// `[audit]`, validated.
    pub audit: AuditSettings,
    /// `[fit]`, resolved.
    pub fit_options: FitOptions,
    /// `[report]`: how the figures are drawn.
    pub report: ReportSpec,
    /// `data.sigma` as written (a column name or one number), for `check`.
    pub sigma_spec: Option<SigmaSpec>,
    /// The compiled formula (with several `[[datasets]]`: the first data
    /// set's formula over all parameters; fits use [`Study::model_fn`]).
    pub model: Tape,
    /// The joint model of a study with `[[datasets]]` (each data set's
    /// formula on its own points); `None` for `[data]` + `[model]`.
    pub joint: Option<model::JointModel>,
    /// The `[derived]` quantities, compiled, in file order.
    pub derived: Vec<DerivedQuantity>,
    /// The `[[inverse]]` requests, checked, in file order.
    pub inverse: Vec<InverseRequest>,
    /// The model with its x column as an extra last parameter (exact
    /// `df/dx`), when there are inverse requests.
    pub inverse_model: Option<InverseModel>,
    /// SHA-256 (hex) of the study file's bytes, when read from a file.
    pub study_sha256: Option<String>,
    /// SHA-256 (hex) of the data file's bytes, when read from a file.
    pub data_sha256: Option<String>,
    /// Source line of each point in the data file.
    pub data_lines: Option<Vec<usize>>,
    /// Things worth telling the user that do not stop the study.
    pub warnings: Vec<StudyWarning>,
}

/// A condition that does not stop the study.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum StudyWarning {
    /// One x column holds a single value (others vary).
    ConstantXColumn {
        /// The column.
        column: String,
    },
}

impl fmt::Display for StudyWarning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            StudyWarning::ConstantXColumn { column } => {
                write!(
                    f,
                    "x column `{column}` holds one value only: the data carry no information on it"
                )
            }
        }
    }
}

/// Largest study file read, in bytes.
pub const MAX_STUDY_BYTES: u64 = 1 << 20;

/// Largest data file read, in bytes (64 MiB: some two million rows of
/// three numbers; the 1e6-point benchmarks read about 25 MB).
pub const MAX_DATA_BYTES: u64 = 64 << 20;

/// Longest `title`, in characters.
pub const MAX_TITLE_CHARS: usize = 1000;

/// Longest name of a parameter, constant, derived quantity, column alias
/// or x column, in characters (names become figure file names).
pub const MAX_NAME_CHARS: usize = 64;

/// Longest column header of a data file, and longest `data.y` or
/// `data.sigma` column name or `[[inverse]]` name, in characters.
pub const MAX_HEADER_CHARS: usize = 1000;

/// Built-in constants of the formula language, which no name may shadow.
pub const BUILTIN_CONSTANTS: [&str; 2] = ["pi", "e"];

/// True for characters that must not reach a report or a terminal raw:
/// control characters (C0, DEL, C1), the non-characters U+FFFE and U+FFFF
/// (not allowed in XML) and the bidirectional overrides and isolates
/// (which reorder the text a reader sees).
pub fn is_unsafe_char(c: char) -> bool {
    c.is_control() || matches!(c, '\u{fffe}' | '\u{ffff}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}')
}

/// `text` with every [`is_unsafe_char`] replaced by U+FFFD (borrowed when
/// there is none).
pub fn neutralise(text: &str) -> std::borrow::Cow<'_, str> {
    if text.chars().any(is_unsafe_char) {
        std::borrow::Cow::Owned(
            text.chars()
                .map(|c| if is_unsafe_char(c) { '\u{fffd}' } else { c })
                .collect(),
        )
    } else {
        std::borrow::Cow::Borrowed(text)
    }
}

/// Reads an input file of at most `limit` bytes. The file is opened
/// without blocking and refused unless it is a regular file, so a named
/// pipe, a device or a folder is an error, never a hang or an endless read.
pub fn read_input(path: &Path, limit: u64) -> std::io::Result<Vec<u8>> {
    use std::io::{Error, ErrorKind, Read};
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NONBLOCK);
    }
    let file = options.open(path)?;
    let meta = file.metadata()?;
    if !meta.is_file() {
        let kind = file_kind(&meta);
        return Err(Error::new(
            ErrorKind::InvalidInput,
            format!("it is {kind}, not a regular file"),
        ));
    }
    if meta.len() > limit {
        return Err(Error::new(
            ErrorKind::InvalidInput,
            format!(
                "it has {} bytes, more than the limit of {} bytes ({} MiB)",
                meta.len(),
                limit,
                limit >> 20
            ),
        ));
    }
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    file.take(limit + 1).read_to_end(&mut bytes)?;
    if bytes.len() as u64 > limit {
        return Err(Error::new(
            ErrorKind::InvalidInput,
            format!("it grew beyond the limit of {limit} bytes while being read"),
        ));
    }
    Ok(bytes)
}

fn file_kind(meta: &std::fs::Metadata) -> &'static str {
    if meta.is_dir() {
        return "a folder";
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        let t = meta.file_type();
        if t.is_fifo() {
            return "a named pipe (FIFO)";
        }
        if t.is_char_device() {
            return "a character device";
        }
        if t.is_block_device() {
            return "a block device";
        }
        if t.is_socket() {
            return "a socket";
        }
    }
    "not a regular file"
}

/// Reads a study file and its data file, resolves and checks everything.
pub fn load(path: &Path) -> Result<Study, StudyError> {
    let bytes = read_input(path, MAX_STUDY_BYTES).map_err(|source| StudyError::ReadStudy {
        at: Box::new(At::file(path)),
        source,
    })?;
    let text = match std::str::from_utf8(&bytes) {
        Ok(t) => t,
        Err(e) => {
            let good = std::str::from_utf8(&bytes[..e.valid_up_to()]).unwrap_or("");
            let (l, c) = spec::line_col(good, good.len());
            return Err(StudyError::StudyNotUtf8 {
                at: Box::new(At::cell(path, l, c)),
            });
        }
    };
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    if let Some(p) = text
        .bytes()
        .enumerate()
        .position(|(i, b)| b == b'\r' && text.as_bytes().get(i + 1) != Some(&b'\n'))
    {
        let (l, c) = spec::line_col(text, p);
        return Err(StudyError::Rejected {
            at: Box::new(At::cell(path, l, c)),
            why: "a carriage return without a line feed (old Mac line ends) is not a TOML line end: \
                  save the study file with LF or CRLF line ends"
                .into(),
        });
    }
    let spec = StudySpec::from_toml_str(text, path)?;
    let name = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "study".to_string());
    let base = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut study = Study::from_spec(spec, &base, &name)?;
    study.study_sha256 = Some(sha256_hex(&bytes));
    Ok(study)
}

fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::{Digest, Sha256};
    Sha256::digest(bytes).iter().map(|b| format!("{b:02x}")).collect()
}

/// True for names a formula can use: an ASCII letter or `_`, then letters,
/// digits or `_`.
pub fn is_identifier(s: &str) -> bool {
    let mut c = s.chars();
    matches!(c.next(), Some(ch) if ch.is_ascii_alphabetic() || ch == '_')
        && c.all(|ch| ch.is_ascii_alphanumeric() || ch == '_')
}

/// A name a formula can use, built from a header such as `time (s)`: its
/// first run of identifier characters (`time`), else `x1`.
fn suggest_identifier(header: &str) -> String {
    let run: String = header
        .chars()
        .skip_while(|c| !(c.is_ascii_alphabetic() || *c == '_'))
        .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
        .collect();
    if run.is_empty() {
        "x1".to_string()
    } else {
        run
    }
}

/// Where the data came from.
struct DataSource {
    file: PathBuf,
    lines: Vec<usize>,
    sha256: String,
    /// 1-based field numbers of the y and sigma columns.
    y_column: usize,
    sigma_column: Option<usize>,
    /// 1-based field numbers of the x columns.
    x_columns: Vec<usize>,
}

impl Study {
    /// Resolves a spec whose `data.file` is relative to `base_dir`; reads
    /// the data file. `name` is the study name (`out/<name>/`).
    pub fn from_spec(mut spec: StudySpec, base_dir: &Path, name: &str) -> Result<Study, StudyError> {
        if spec.origin.as_os_str().is_empty() {
            spec.origin = PathBuf::from(name);
        }
        if !spec.datasets.is_empty() {
            return joint::from_spec(spec, base_dir, name);
        }
        let from_file = !spec.locations.is_empty();
        let missing = [
            (
                "data",
                "[data] (the data file and its columns)",
                spec.data == DataSpec::default(),
            ),
            ("model", "[model] (the formula)", spec.model.formula.is_empty()),
        ];
        for (table, what, empty) in missing {
            if !spec.locations.has_table(table) && (from_file || empty) {
                return Err(invalid(
                    &spec,
                    table,
                    format!(
                        "is missing: a study needs {what}, or instead of [data] and [model] one or more \
                         [[datasets]] entries, each with name, file, x, y and formula"
                    ),
                ));
            }
        }
        let (params, options) = check_spec(&spec)?;
        if spec.data.file.as_os_str().is_empty() {
            return Err(StudyError::Invalid {
                at: Box::new(spec.at("data.file")),
                key: "data.file".into(),
                why: "is missing or empty: name the data file (CSV), relative to the study file".into(),
            });
        }
        let file = base_dir.join(&spec.data.file);
        let bytes = read_input(&file, MAX_DATA_BYTES).map_err(|source| StudyError::ReadData {
            at: Box::new(At::file(&file)),
            key_at: Box::new(spec.at("data.file")),
            source,
        })?;
        let raw = parse_raw(&bytes, &file)?;
        let (dataset, columns) = dataset_from_table(&spec, &raw)?;
        let source = DataSource {
            file,
            lines: raw.lines.clone(),
            sha256: sha256_hex(&bytes),
            y_column: columns.y + 1,
            sigma_column: columns.sigma.map(|j| j + 1),
            x_columns: columns.x.iter().map(|j| j + 1).collect(),
        };
        finish(spec, params, options, dataset, Some(source), name)
    }

    /// Resolves a spec against a data set built in code; `spec.data` is
    /// ignored (the data set carries names, values and sigma).
    pub fn from_dataset(mut spec: StudySpec, dataset: Dataset, name: &str) -> Result<Study, StudyError> {
        if spec.origin.as_os_str().is_empty() {
            spec.origin = PathBuf::from(name);
        }
        if !spec.datasets.is_empty() {
            return Err(invalid(
                &spec,
                "datasets",
                "cannot be used with a data set built in code: build the joint data set, or load the study file",
            ));
        }
        let (params, options) = check_spec(&spec)?;
        check_dataset(&spec, &dataset)?;
        finish(spec, params, options, dataset, None, name)
    }

    /// The fitting problem: model, parameters and optimiser settings.
    pub fn problem(&self) -> Problem<'_> {
        Problem {
            model: self.model_fn(),
            params: self.parameters.clone(),
            options: self.fit_options.clone(),
        }
    }

    /// The model every fit evaluates: the joint model with several
    /// `[[datasets]]`, else the compiled formula.
    pub fn model_fn(&self) -> &dyn ModelFn {
        match &self.joint {
            Some(j) => j,
            None => &self.model,
        }
    }

    /// Number of parameters that are not fixed.
    pub fn free_parameters(&self) -> usize {
        self.parameters.iter().filter(|p| !p.fixed).count()
    }
}

/// Refuses a name that shadows a built-in constant or is too long.
fn check_name(spec: &StudySpec, key: &str, name: &str) -> Result<(), StudyError> {
    if BUILTIN_CONSTANTS.contains(&name) {
        return Err(invalid(
            spec,
            key,
            format!(
                "is named `{name}`, a built-in constant of the formula language ({}); a name of \
                 the study may not replace it: choose another name",
                if name == "pi" { "3.14159..." } else { "2.71828..." }
            ),
        ));
    }
    let n = name.chars().count();
    if n > MAX_NAME_CHARS {
        return Err(invalid(
            spec,
            key,
            format!("is a name of {n} characters; names have at most {MAX_NAME_CHARS}"),
        ));
    }
    Ok(())
}

fn invalid(spec: &StudySpec, key: &str, why: impl Into<String>) -> StudyError {
    StudyError::Invalid {
        at: Box::new(spec.at(key)),
        key: key.to_string(),
        why: why.into(),
    }
}

/// Settings that do not apply to the chosen error model.
fn check_likelihood(spec: &StudySpec, options: &FitOptions) -> Result<(), StudyError> {
    if options.likelihood != crate::fit::Likelihood::Poisson {
        return Ok(());
    }
    let why = "does not apply with `fit.likelihood = \"poisson\"`";
    if spec.audit.bootstrap.scheme == crate::settings::BootstrapScheme::Wild {
        return Err(invalid(
            spec,
            "audit.bootstrap.scheme",
            format!(
                "\"wild\" {why}: use \"residual\" (for counts the parametric Poisson bootstrap) or \"case\""
            ),
        ));
    }
    if spec.audit.monte_carlo.student_t_dof.is_some() {
        return Err(invalid(
            spec,
            "audit.monte_carlo.student_t_dof",
            format!("{why}: the Monte Carlo draws Poisson counts; remove it"),
        ));
    }
    if spec.audit.coverage.student_t_dof.is_some() {
        return Err(invalid(
            spec,
            "audit.coverage.student_t_dof",
            format!("{why}: the coverage simulation draws Poisson counts; remove it"),
        ));
    }
    if !spec.inverse.is_empty() {
        return Err(invalid(
            spec,
            "inverse",
            format!("{why}: inverse predictions are made for Gaussian responses only"),
        ));
    }
    Ok(())
}

/// Checks everything that does not need the data: settings, parameters,
/// constants. Returns the parameters and the optimiser settings.
fn check_spec(spec: &StudySpec) -> Result<(Vec<ParamSpec>, FitOptions), StudyError> {
    spec.audit
        .validate()
        .map_err(|(key, why)| invalid(spec, &key, why))?;
    let options = spec
        .fit
        .to_options()
        .map_err(|(key, why)| invalid(spec, &key, why))?;
    check_likelihood(spec, &options)?;
    if spec.parameters.is_empty() {
        return Err(StudyError::NoParameters {
            at: Box::new(spec.at("parameters")),
        });
    }
    if let Some(t) = &spec.title {
        let n = t.chars().count();
        if n > MAX_TITLE_CHARS {
            return Err(invalid(
                spec,
                "title",
                format!("has {n} characters; a title has at most {MAX_TITLE_CHARS}"),
            ));
        }
    }
    let mut params = Vec::with_capacity(spec.parameters.len());
    for (i, (name, e)) in spec.parameters.iter().enumerate() {
        let key = format!("parameters.{name}");
        if !is_identifier(name) {
            return Err(invalid(
                spec,
                &key,
                "is not a name a formula can use (letters, digits and `_`, not starting with a digit)",
            ));
        }
        check_name(spec, &key, name)?;
        if spec.parameters[..i].iter().any(|(n, _)| n == name) {
            return Err(invalid(spec, &key, "is declared twice"));
        }
        let Some(start) = e.start else {
            return Err(StudyError::MissingStart {
                at: Box::new(spec.at(&key)),
                name: name.clone(),
            });
        };
        if !start.is_finite() {
            return Err(invalid(spec, &format!("{key}.start"), "must be a finite number"));
        }
        let min = e.min.unwrap_or(f64::NEG_INFINITY);
        let max = e.max.unwrap_or(f64::INFINITY);
        if min.is_nan() || min == f64::INFINITY {
            return Err(invalid(
                spec,
                &format!("{key}.min"),
                "must be a number below +inf",
            ));
        }
        if max.is_nan() || max == f64::NEG_INFINITY {
            return Err(invalid(
                spec,
                &format!("{key}.max"),
                "must be a number above -inf",
            ));
        }
        if min >= max {
            return Err(StudyError::EmptyBounds {
                at: Box::new(spec.at(&format!("{key}.min"))),
                name: name.clone(),
                min,
                max,
            });
        }
        if start < min || start > max {
            return Err(StudyError::StartOutsideBounds {
                at: Box::new(spec.at(&format!("{key}.start"))),
                name: name.clone(),
                start,
                min,
                max,
            });
        }
        params.push(ParamSpec {
            name: name.clone(),
            start,
            min,
            max,
            fixed: e.fixed,
        });
    }
    if params.iter().all(|p| p.fixed) {
        return Err(invalid(
            spec,
            "parameters",
            "fixes every parameter: there is nothing to fit or audit; free at least one (remove `fixed = true`)",
        ));
    }
    if let Some(pairs) = &spec.audit.contours.pairs {
        for (i, pair) in pairs.iter().enumerate() {
            let key = format!("audit.contours.pairs[{i}]");
            if pairs[..i]
                .iter()
                .any(|q| (q[0] == pair[0] && q[1] == pair[1]) || (q[0] == pair[1] && q[1] == pair[0]))
            {
                return Err(invalid(
                    spec,
                    &key,
                    "maps a pair that an earlier entry already maps",
                ));
            }
            for name in pair {
                match params.iter().find(|p| &p.name == name) {
                    None => {
                        let known: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
                        return Err(invalid(
                            spec,
                            &key,
                            format!(
                                "names `{name}`, which is not a declared parameter; parameters: {}",
                                error::name_list(&known)
                            ),
                        ));
                    }
                    Some(p) if p.fixed => {
                        return Err(invalid(
                            spec,
                            &key,
                            format!(
                                "names `{name}`, which is fixed: a contour map needs two free parameters"
                            ),
                        ));
                    }
                    Some(_) => {}
                }
            }
            if pair[0] == pair[1] {
                return Err(invalid(spec, &key, "names the same parameter twice"));
            }
        }
    }
    for (i, (name, v)) in spec.constants.iter().enumerate() {
        let key = format!("constants.{name}");
        if !is_identifier(name) {
            return Err(invalid(
                spec,
                &key,
                "is not a name a formula can use (letters, digits and `_`, not starting with a digit)",
            ));
        }
        check_name(spec, &key, name)?;
        if spec.constants[..i].iter().any(|(n, _)| n == name) {
            return Err(invalid(spec, &key, "is declared twice"));
        }
        if !v.is_finite() {
            return Err(invalid(spec, &key, "must be a finite number"));
        }
        if spec.parameters.iter().any(|(n, _)| n == name) {
            return Err(StudyError::Shadowing {
                at: Box::new(spec.at(&key)),
                name: name.clone(),
                kind: Shadow::ConstantIsParameter,
            });
        }
    }
    Ok((params, options))
}

/// Finds `header` among the table's headers: exactly once, or an error.
fn find_header(
    spec: &StudySpec,
    raw: &RawTable,
    key: &str,
    header: &str,
    alias: Option<&str>,
) -> Result<usize, StudyError> {
    let idx: Vec<usize> = raw
        .headers
        .iter()
        .enumerate()
        .filter(|(_, h)| *h == header)
        .map(|(i, _)| i)
        .collect();
    match idx.as_slice() {
        [] => {
            let hint_text = if let Some(a) = alias {
                Some(format!("`{a}` is an alias defined in `data.columns.{a}`"))
            } else if header.trim().parse::<f64>().is_ok() && key == "data.sigma" {
                Some("to give one sigma for every point, write the number without quotes".to_string())
            } else {
                raw.headers
                    .iter()
                    .find(|h| h.eq_ignore_ascii_case(header) || h.trim() == header.trim())
                    .map(|h| format!("did you mean `{h}`?"))
            };
            Err(StudyError::MissingColumn {
                at: Box::new(spec.at(key)),
                key: key.to_string(),
                name: header.to_string(),
                data_file: raw.file.clone(),
                available: raw.headers.clone(),
                hint_text: hint_text.map(String::into_boxed_str),
            })
        }
        [i] => Ok(*i),
        [a, b, ..] => Err(StudyError::DuplicateHeader {
            at: Box::new(At::line(&raw.file, raw.header_line)),
            header: header.to_string(),
            first: a + 1,
            second: b + 1,
        }),
    }
}

/// Resolves a name used in `[data]` (alias or header) to a column index.
fn resolve(spec: &StudySpec, raw: &RawTable, key: &str, name: &str) -> Result<usize, StudyError> {
    match spec.data.columns.iter().find(|(a, _)| a == name) {
        Some((a, h)) => find_header(spec, raw, key, h, Some(a)),
        None => find_header(spec, raw, key, name, None),
    }
}

/// The 0-based field numbers of the data's columns in the CSV table, for
/// errors that point at a cell.
struct ColumnIndices {
    x: Vec<usize>,
    y: usize,
    sigma: Option<usize>,
}

fn dataset_from_table(spec: &StudySpec, raw: &RawTable) -> Result<(Dataset, ColumnIndices), StudyError> {
    let d = &spec.data;
    for (i, (alias, header)) in d.columns.iter().enumerate() {
        let key = format!("data.columns.{alias}");
        if !is_identifier(alias) {
            return Err(invalid(
                spec,
                &key,
                "is not a name a formula can use: an alias is letters, digits and `_`, not starting with a digit",
            ));
        }
        check_name(spec, &key, alias)?;
        if d.columns[..i].iter().any(|(a, _)| a == alias) {
            return Err(invalid(spec, &key, "is declared twice"));
        }
        if alias != header && raw.headers.iter().any(|h| h == alias) {
            return Err(invalid(
                spec,
                &key,
                format!(
                    "is also a column header of {}: an alias must not hide another column, choose another name",
                    raw.file.display()
                ),
            ));
        }
        find_header(spec, raw, &key, header, None)?;
    }
    let x_key = |i: usize| {
        if d.x.len() == 1 {
            "data.x".to_string()
        } else {
            format!("data.x[{i}]")
        }
    };
    let mut x_idx = Vec::with_capacity(d.x.len());
    for (i, name) in d.x.iter().enumerate() {
        let key = x_key(i);
        if name.chars().count() > MAX_HEADER_CHARS {
            return Err(invalid(
                spec,
                &key,
                format!("is longer than {MAX_HEADER_CHARS} characters"),
            ));
        }
        if !is_identifier(name) {
            let alias = suggest_identifier(name);
            return Err(invalid(
                spec,
                &key,
                format!(
                    "names `{name}`, which is not a name a formula can use: give the column one with \
                     `columns = {{ {alias} = \"{name}\" }}` in [data] and write `{alias}` in `data.x`"
                ),
            ));
        }
        check_name(spec, &key, name)?;
        if d.x[..i].contains(name) {
            return Err(invalid(spec, &key, format!("names `{name}` twice")));
        }
        x_idx.push(resolve(spec, raw, &key, name)?);
    }
    if d.y.is_empty() {
        return Err(invalid(spec, "data.y", "is empty: name the response column"));
    }
    for (key, name) in [
        ("data.y", Some(&d.y)),
        (
            "data.sigma",
            match &d.sigma {
                Some(SigmaSpec::Column(c)) => Some(c),
                _ => None,
            },
        ),
    ] {
        if name.is_some_and(|n| n.chars().count() > MAX_HEADER_CHARS) {
            return Err(invalid(
                spec,
                key,
                format!("is longer than {MAX_HEADER_CHARS} characters"),
            ));
        }
    }
    let y_idx = resolve(spec, raw, "data.y", &d.y)?;
    if x_idx.contains(&y_idx) {
        return Err(invalid(spec, "data.y", "names a column that is also an x column"));
    }
    let poisson = spec.fit.likelihood == Some(crate::fit::Likelihood::Poisson);
    if poisson && d.sigma.is_some() {
        return Err(invalid(
            spec,
            "data.sigma",
            "is not allowed with `fit.likelihood = \"poisson\"`: the variance of a count is its mean; remove data.sigma",
        ));
    }
    let sigma_idx = match &d.sigma {
        Some(SigmaSpec::Column(c)) => {
            let j = resolve(spec, raw, "data.sigma", c)?;
            if j == y_idx || x_idx.contains(&j) {
                return Err(invalid(
                    spec,
                    "data.sigma",
                    "names a column that is also the y or an x column",
                ));
            }
            Some(j)
        }
        Some(SigmaSpec::Value(v)) => {
            if !(v.is_finite() && *v > 0.0) {
                return Err(invalid(
                    spec,
                    "data.sigma",
                    "must be a positive finite number or a column name",
                ));
            }
            None
        }
        None => None,
    };
    let sigma_x_idx = match &d.sigma_x {
        None => None,
        Some(spec_x) => {
            if d.x.len() != 1 {
                return Err(invalid(
                    spec,
                    "data.sigma_x",
                    format!("needs exactly one x column; data.x names {}", d.x.len()),
                ));
            }
            if poisson {
                return Err(invalid(
                    spec,
                    "data.sigma_x",
                    "is not allowed with `fit.likelihood = \"poisson\"`: errors in x apply to Gaussian fits",
                ));
            }
            if d.sigma.is_none() {
                return Err(invalid(
                    spec,
                    "data.sigma_x",
                    "needs data.sigma too: the effective variance adds the x uncertainty to that of y",
                ));
            }
            match spec_x {
                SigmaSpec::Column(c) => {
                    let j = resolve(spec, raw, "data.sigma_x", c)?;
                    if j == y_idx || x_idx.contains(&j) || sigma_idx == Some(j) {
                        return Err(invalid(
                            spec,
                            "data.sigma_x",
                            "names a column that is also the y, an x or the sigma column",
                        ));
                    }
                    Some(Some(j))
                }
                SigmaSpec::Value(v) => {
                    if !(v.is_finite() && *v >= 0.0) {
                        return Err(invalid(
                            spec,
                            "data.sigma_x",
                            "must be a finite number >= 0 or a column name",
                        ));
                    }
                    Some(None)
                }
            }
        }
    };
    raw.require_rows()?;
    let x = x_idx
        .iter()
        .map(|&j| raw.numeric_column(j))
        .collect::<Result<Vec<_>, _>>()?;
    let y = raw.numeric_column(y_idx)?;
    if poisson {
        for (v, &line) in y.iter().zip(&raw.lines) {
            if !(*v >= 0.0 && v.fract() == 0.0) {
                return Err(StudyError::BadCount {
                    at: Box::new(At::cell(&raw.file, line, y_idx + 1)),
                    column: y_idx + 1,
                    name: raw.headers[y_idx].clone(),
                    value: *v,
                });
            }
        }
    }
    let sigma = match (&d.sigma, sigma_idx) {
        (_, Some(j)) => {
            let s = raw.numeric_column(j)?;
            for (v, &line) in s.iter().zip(&raw.lines) {
                if *v <= 0.0 {
                    return Err(StudyError::BadSigma {
                        at: Box::new(At::cell(&raw.file, line, j + 1)),
                        column: j + 1,
                        name: raw.headers[j].clone(),
                        value: *v,
                    });
                }
            }
            Some(s)
        }
        (Some(SigmaSpec::Value(v)), None) => Some(vec![*v; y.len()]),
        _ => None,
    };
    let sigma_x = match (&d.sigma_x, sigma_x_idx) {
        (_, Some(Some(j))) => {
            let s = raw.numeric_column(j)?;
            for (v, &line) in s.iter().zip(&raw.lines) {
                if *v < 0.0 {
                    return Err(StudyError::BadSigmaX {
                        at: Box::new(At::cell(&raw.file, line, j + 1)),
                        column: j + 1,
                        name: raw.headers[j].clone(),
                        value: *v,
                    });
                }
            }
            Some(s)
        }
        (Some(SigmaSpec::Value(v)), _) => Some(vec![*v; y.len()]),
        _ => None,
    };
    Ok((
        Dataset {
            x_names: d.x.clone(),
            x,
            y_name: d.y.clone(),
            y,
            sigma,
            sigma_x,
            groups: Vec::new(),
        },
        ColumnIndices {
            x: x_idx,
            y: y_idx,
            sigma: sigma_idx,
        },
    ))
}

fn check_dataset(spec: &StudySpec, ds: &Dataset) -> Result<(), StudyError> {
    let bad = |why: String| StudyError::InvalidDataset {
        at: Box::new(At::file(&spec.origin)),
        why,
    };
    let n = ds.y.len();
    if ds.x.len() != ds.x_names.len() {
        return Err(bad(format!(
            "has {} x names but {} x columns",
            ds.x_names.len(),
            ds.x.len()
        )));
    }
    for (i, (name, col)) in ds.x_names.iter().zip(&ds.x).enumerate() {
        if !is_identifier(name) {
            return Err(bad(format!("x name `{name}` is not a name a formula can use")));
        }
        if ds.x_names[..i].contains(name) {
            return Err(bad(format!("names x column `{name}` twice")));
        }
        if col.len() != n {
            return Err(bad(format!(
                "x column `{name}` has {} values but y has {n}",
                col.len()
            )));
        }
        if let Some(p) = col.iter().position(|v| !v.is_finite()) {
            return Err(bad(format!("x column `{name}` is not finite at point {}", p + 1)));
        }
    }
    if let Some(p) = ds.y.iter().position(|v| !v.is_finite()) {
        return Err(bad(format!("y is not finite at point {}", p + 1)));
    }
    if let Some(s) = &ds.sigma {
        if s.len() != n {
            return Err(bad(format!("sigma has {} values but y has {n}", s.len())));
        }
        if let Some(p) = s.iter().position(|v| !(v.is_finite() && *v > 0.0)) {
            return Err(bad(format!(
                "sigma {} at point {} is not a positive finite number",
                s[p],
                p + 1
            )));
        }
    }
    Ok(())
}

/// The weights `1/sigma`, the weighted residuals, their squares, the
/// weighted Jacobian and chi-squared must be finite at the start values:
/// a y of 1.797e308 or a sigma of 1e-320 is an input error naming the cell,
/// not a fit that fails without saying where.
fn check_weights_at_start(
    spec: &StudySpec,
    dataset: &Dataset,
    values: &[f64],
    jac: &[f64],
    source: Option<&DataSource>,
) -> Result<(), StudyError> {
    let n = dataset.len();
    let cell = |i: usize, column: Option<usize>| -> Box<At> {
        Box::new(match (source, column) {
            (Some(s), Some(c)) => At::cell(&s.file, s.lines[i], c),
            (Some(s), None) => At::line(&s.file, s.lines[i]),
            (None, _) => At::file(&spec.origin),
        })
    };
    let sigma_column = source.and_then(|s| s.sigma_column);
    let y_column = source.map(|s| s.y_column);
    let mut chi2 = 0.0f64;
    for i in 0..n {
        let s = dataset.sigma.as_ref().map_or(1.0, |s| s[i]);
        let w = 1.0 / s;
        if !(w.is_finite() && (w * w).is_finite()) {
            return Err(StudyError::Rejected {
                at: cell(i, sigma_column),
                why: format!(
                    "sigma {s:e} of point {} is so small that its weight 1/sigma^2 overflows a double \
                     (sigma must be above about 1e-154): check the value and its units",
                    i + 1
                ),
            });
        }
        let r = (dataset.y[i] - values[i]) * w;
        if !(r.is_finite() && (r * r).is_finite()) {
            return Err(StudyError::Rejected {
                at: cell(i, y_column),
                why: format!(
                    "the weighted residual (y - f)/sigma of point {} overflows a double at the start \
                     values (y = {:e}, f = {:e}, sigma = {s:e}): check the value, its units and the \
                     start values",
                    i + 1,
                    dataset.y[i],
                    values[i]
                ),
            });
        }
        let m = jac.len() / n.max(1);
        if let Some(j) = (0..m).find(|&j| {
            let d = jac[j * n + i] * w;
            !(d.is_finite() && (d * d).is_finite())
        }) {
            return Err(StudyError::Rejected {
                at: cell(i, sigma_column.or(y_column)),
                why: format!(
                    "the weighted derivative of the model with respect to `{}` overflows a double at \
                     point {} at the start values (sigma = {s:e}): check sigma, the data's units and \
                     the start values",
                    spec.parameters.get(j).map_or("?", |p| p.0.as_str()),
                    i + 1
                ),
            });
        }
        chi2 += r * r;
    }
    if !chi2.is_finite() {
        return Err(StudyError::Rejected {
            at: Box::new(match source {
                Some(s) => At::file(&s.file),
                None => At::file(&spec.origin),
            }),
            why: "chi-squared at the start values overflows a double (the weighted residuals are \
                  too large together): check the data's units, sigma and the start values"
                .into(),
        });
    }
    Ok(())
}

/// Where in the study file a formula column lies.
fn formula_at(spec: &StudySpec, column: Option<usize>) -> At {
    key_column_at(spec, "model.formula", column)
}

/// Where in the study file column `column` of the string at `key` lies.
fn key_column_at(spec: &StudySpec, key: &str, column: Option<usize>) -> At {
    match (spec.locations.get(key), column) {
        (Some(l), Some(c)) if l.plain_string => At::cell(&spec.origin, l.line, l.column + c),
        _ => spec.at(key),
    }
}

/// Checks `[[inverse]]` and compiles the model with its x column as a
/// parameter (for exact `df/dx`).
fn check_inverse(
    spec: &StudySpec,
    names: &[String],
    dataset: &Dataset,
) -> Result<(Vec<InverseRequest>, Option<InverseModel>), StudyError> {
    if spec.inverse.is_empty() {
        return Ok((Vec::new(), None));
    }
    let mut out: Vec<InverseRequest> = Vec::new();
    for (i, e) in spec.inverse.iter().enumerate() {
        let key = format!("inverse[{i}]");
        if dataset.x.len() != 1 {
            return Err(invalid(
                spec,
                &key,
                format!(
                    "reads a response off the curve, which needs exactly one x column; the model has {}",
                    dataset.x.len()
                ),
            ));
        }
        if e.name.trim().is_empty() {
            return Err(invalid(spec, &format!("{key}.name"), "is empty: name the sample"));
        }
        if e.name.chars().count() > MAX_HEADER_CHARS {
            return Err(invalid(
                spec,
                &format!("{key}.name"),
                format!("is longer than {MAX_HEADER_CHARS} characters"),
            ));
        }
        if out.iter().any(|r| r.name == e.name) {
            return Err(invalid(
                spec,
                &format!("{key}.name"),
                format!("`{}` is used twice", e.name),
            ));
        }
        if !e.y.is_finite() {
            return Err(invalid(spec, &format!("{key}.y"), "must be a finite number"));
        }
        let readings = e.readings.unwrap_or(1);
        if readings == 0 {
            return Err(invalid(spec, &format!("{key}.readings"), "must be at least 1"));
        }
        if let Some(s) = e.sigma {
            if !(s.is_finite() && s > 0.0) {
                return Err(invalid(
                    spec,
                    &format!("{key}.sigma"),
                    "must be a positive finite number",
                ));
            }
        }
        out.push(InverseRequest {
            name: e.name.clone(),
            y: e.y,
            readings,
            sigma: e.sigma,
        });
    }
    let mut with_x = names.to_vec();
    with_x.push(dataset.x_names[0].clone());
    let symbols = Symbols {
        parameters: &with_x,
        constants: &spec.constants,
        variables: &[],
    };
    let tape = model::compile(&spec.model.formula, &symbols).map_err(|e| StudyError::Formula {
        at: Box::new(formula_at(spec, e.column)),
        message: e.kind.to_string(),
        column: e.column,
    })?;
    Ok((out, Some(InverseModel { tape })))
}

/// Compiles the `[derived]` table over the parameters and constants.
fn compile_derived(spec: &StudySpec, names: &[String]) -> Result<Vec<DerivedQuantity>, StudyError> {
    let symbols = Symbols {
        parameters: names,
        constants: &spec.constants,
        variables: &[],
    };
    let mut out: Vec<DerivedQuantity> = Vec::with_capacity(spec.derived.len());
    for (name, formula) in &spec.derived {
        let key = format!("derived.{name}");
        if !is_identifier(name) {
            return Err(invalid(
                spec,
                &key,
                "is not a name (letters, digits and `_`, not starting with a digit)",
            ));
        }
        check_name(spec, &key, name)?;
        if names.contains(name) || spec.constants.iter().any(|(c, _)| c == name) {
            return Err(invalid(
                spec,
                &key,
                "has the name of a parameter or constant: give the derived quantity its own name",
            ));
        }
        if out.iter().any(|q| &q.name == name) {
            return Err(invalid(spec, &key, "is declared twice"));
        }
        let tape = model::compile(formula, &symbols).map_err(|e| {
            let message = match &e.kind {
                ModelErrorKind::UnknownName { name, suggestion } => format!(
                    "uses `{name}`, which is neither a parameter nor a constant (a derived quantity is a \
                     function of the parameters and constants only); known names: {}{}",
                    error::name_list(
                        &names
                            .iter()
                            .chain(spec.constants.iter().map(|(n, _)| n))
                            .cloned()
                            .collect::<Vec<_>>()
                    ),
                    suggestion
                        .as_ref()
                        .map(|s| format!("; did you mean `{s}`?"))
                        .unwrap_or_default()
                ),
                other => other.to_string(),
            };
            StudyError::DerivedFormula {
                at: Box::new(key_column_at(spec, &key, e.column)),
                key: key.clone(),
                message,
                column: e.column,
            }
        })?;
        out.push(DerivedQuantity {
            name: name.clone(),
            formula: formula.clone(),
            tape,
        });
    }
    Ok(out)
}

/// Refuses a parameter or constant named like an x column of the data
/// (it would hide the column in the formula), naming the study-file key.
pub(crate) fn no_shadowed_x(spec: &StudySpec, x_names: &[String]) -> Result<(), StudyError> {
    for xn in x_names {
        let kind = if spec.parameters.iter().any(|(n, _)| n == xn) {
            Shadow::ParameterIsColumn
        } else if spec.constants.iter().any(|(n, _)| n == xn) {
            Shadow::ConstantIsColumn
        } else {
            continue;
        };
        return Err(StudyError::Shadowing {
            at: Box::new(spec.at(&kind.key(xn))),
            name: xn.clone(),
            kind,
        });
    }
    Ok(())
}

/// Where a model that is not finite at the starts points: the row's x
/// cell when the data have one x column (the model, at the starts, fails
/// at this x), else the row.
fn x_cell_or_line(file: &Path, line: usize, x_columns: &[usize]) -> At {
    match x_columns {
        [c] => At::cell(file, line, *c),
        _ => At::line(file, line),
    }
}

/// The checks that need both spec and data, compilation, and assembly.
fn finish(
    spec: StudySpec,
    params: Vec<ParamSpec>,
    options: FitOptions,
    dataset: Dataset,
    source: Option<DataSource>,
    name: &str,
) -> Result<Study, StudyError> {
    no_shadowed_x(&spec, &dataset.x_names)?;
    let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
    let symbols = Symbols {
        parameters: &names,
        constants: &spec.constants,
        variables: &dataset.x_names,
    };
    let tape = model::compile(&spec.model.formula, &symbols).map_err(|e| match e.kind {
        // `x = []` (a model of the parameters alone, such as a weighted
        // mean) with a formula that uses a name: the empty key is the culprit.
        ModelErrorKind::UnknownName { name, .. } if dataset.x_names.is_empty() => invalid(
            &spec,
            "data.x",
            format!(
                "names no column (`x = []`), yet the formula uses `{name}`: name the \
                 independent-variable column(s) there, e.g. `x = \"{name}\"`, or declare `{name}` \
                 as a parameter or constant"
            ),
        ),
        ModelErrorKind::UnknownName { name, suggestion } => StudyError::UnknownName {
            at: Box::new(formula_at(&spec, e.column)),
            name,
            column: e.column,
            suggestion,
            known: names
                .iter()
                .chain(spec.constants.iter().map(|(n, _)| n))
                .chain(&dataset.x_names)
                .cloned()
                .collect(),
        },
        ModelErrorKind::Syntax(message) => StudyError::Formula {
            at: Box::new(formula_at(&spec, e.column)),
            message,
            column: e.column,
        },
        other => StudyError::Formula {
            at: Box::new(formula_at(&spec, e.column)),
            message: other.to_string(),
            column: e.column,
        },
    })?;
    let derived = compile_derived(&spec, &names)?;
    let (inverse, inverse_model) = check_inverse(&spec, &names, &dataset)?;
    for (j, p) in params.iter().enumerate() {
        if !tape.uses_parameter(j) {
            return Err(StudyError::UnusedParameter {
                at: Box::new(spec.at(&format!("parameters.{}", p.name))),
                name: p.name.clone(),
            });
        }
    }
    let data_at = Box::new(match &source {
        Some(s) => At::file(&s.file),
        None => At::file(&spec.origin),
    });
    let n = dataset.len();
    if n == 0 {
        return Err(StudyError::NoDataRows { at: data_at });
    }
    let free = params.iter().filter(|p| !p.fixed).count();
    if n < free + 1 {
        return Err(StudyError::TooFewPoints {
            at: data_at,
            points: n,
            free,
            needed: free + 1,
        });
    }
    let mut warnings = Vec::new();
    if !dataset.x.is_empty() && n >= 2 {
        let constant: Vec<bool> = dataset.x.iter().map(|c| c.iter().all(|v| *v == c[0])).collect();
        if constant.iter().all(|&c| c) {
            return Err(StudyError::ConstantX {
                at: data_at,
                columns: dataset.x_names.clone(),
            });
        }
        for (k, c) in constant.iter().enumerate() {
            if *c {
                warnings.push(StudyWarning::ConstantXColumn {
                    column: dataset.x_names[k].clone(),
                });
            }
        }
    }
    // The model must be finite at the starts for every point.
    let starts: Vec<f64> = params.iter().map(|p| p.start).collect();
    let xs = dataset.x_slices();
    let mut values = vec![0.0; n];
    let mut jac = vec![0.0; n * params.len()];
    let mut scratch = Vec::new();
    if let Err(bad) = tape.eval(&starts, &xs, &mut values, Some(&mut jac), &mut scratch) {
        let i = bad.point.min(n - 1);
        let at = Box::new(match &source {
            Some(s) => x_cell_or_line(&s.file, s.lines[i], &s.x_columns),
            None => At::file(&spec.origin),
        });
        return Err(StudyError::NotFiniteAtStart {
            at,
            study: Box::new(At::file(&spec.origin)),
            point: i + 1,
            x: dataset
                .x_names
                .iter()
                .zip(&dataset.x)
                .map(|(n, c)| (n.clone(), c[i]))
                .collect(),
            derivative: values[i].is_finite(),
        });
    }
    check_weights_at_start(&spec, &dataset, &values, &jac, source.as_ref())?;
    let (data_file, data_sha256, data_lines) = match source {
        Some(s) => (Some(s.file), Some(s.sha256), Some(s.lines)),
        None => (None, None, None),
    };
    Ok(Study {
        path: spec.origin,
        name: name.to_string(),
        title: spec.title,
        data_file,
        formula: spec.model.formula,
        parameters: params,
        constants: spec.constants,
        dataset,
        fit_options: FitOptions {
            level: spec.audit.level,
            ..options
        },
        audit: spec.audit,
        report: spec.report,
        sigma_spec: spec.data.sigma.clone(),
        model: tape,
        joint: None,
        derived,
        inverse,
        inverse_model,
        study_sha256: None,
        data_sha256,
        data_lines,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_hex_matches_the_fips_180_2_vector() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn the_error_type_stays_small() {
        // Keeps Result<_, StudyError> cheap to return (clippy's
        // result_large_err threshold is 128 bytes).
        assert!(
            std::mem::size_of::<StudyError>() <= 128,
            "{}",
            std::mem::size_of::<StudyError>()
        );
    }

    #[test]
    fn identifiers() {
        for ok in ["t", "T_env", "_x1", "k2"] {
            assert!(is_identifier(ok), "{ok}");
        }
        for bad in ["", "1t", "Temp (C)", "a-b", "é"] {
            assert!(!is_identifier(bad), "{bad}");
        }
    }
}
