//! The one error type of the study layer.
//!
//! Every variant carries an [`At`]: the file the user must edit and, where
//! it applies, the 1-based line and column. Study-file errors also name the
//! key (`parameters.tau.min`); data-file errors name the column by number
//! and header. `Display` is the complete message shown to the user.

use std::fmt;
use std::path::PathBuf;

/// A place in a file: the file, and the 1-based line and column when known.
///
/// In a study file the column counts characters; in a data file it counts
/// fields (the first field is column 1).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct At {
    /// The file (the study file, the data file or a virtual study name).
    pub file: PathBuf,
    /// 1-based line.
    pub line: Option<usize>,
    /// 1-based column.
    pub column: Option<usize>,
}

impl At {
    /// A whole file, no position.
    pub fn file(file: impl Into<PathBuf>) -> Self {
        At {
            file: file.into(),
            line: None,
            column: None,
        }
    }

    /// A line of a file.
    pub fn line(file: impl Into<PathBuf>, line: usize) -> Self {
        At {
            file: file.into(),
            line: Some(line),
            column: None,
        }
    }

    /// A line and column of a file.
    pub fn cell(file: impl Into<PathBuf>, line: usize, column: usize) -> Self {
        At {
            file: file.into(),
            line: Some(line),
            column: Some(column),
        }
    }
}

impl fmt::Display for At {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        match (self.line, self.column) {
            (Some(l), Some(c)) => write!(f, ", line {l}, column {c}"),
            (Some(l), None) => write!(f, ", line {l}"),
            _ => Ok(()),
        }
    }
}

/// Formats a list of names as `` `a`, `b`, `c` ``.
pub(crate) fn name_list(names: &[String]) -> String {
    if names.is_empty() {
        return "(none)".to_string();
    }
    names
        .iter()
        .map(|n| format!("`{n}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn hint<S: AsRef<str>>(s: &Option<S>) -> String {
    match s {
        Some(h) => format!("; {}", h.as_ref()),
        None => String::new(),
    }
}

fn header(h: &str) -> String {
    if h.is_empty() {
        "(unnamed)".to_string()
    } else {
        format!("`{h}`")
    }
}

/// Which two kinds of names collide in [`StudyError::Shadowing`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shadow {
    /// A constant with a parameter's name (the parameter wins).
    ConstantIsParameter,
    /// A parameter with an x column's name (the parameter wins).
    ParameterIsColumn,
    /// A constant with an x column's name (the constant wins).
    ConstantIsColumn,
}

impl Shadow {
    fn what(self) -> &'static str {
        match self {
            Shadow::ParameterIsColumn => "parameter",
            _ => "constant",
        }
    }
    fn other(self) -> &'static str {
        match self {
            Shadow::ConstantIsParameter => "the parameter",
            _ => "the x column",
        }
    }
    fn loser(self) -> &'static str {
        match self {
            Shadow::ConstantIsParameter => "constant",
            _ => "column",
        }
    }
    /// The study-file key of the shadowing name.
    pub fn key(self, name: &str) -> String {
        match self {
            Shadow::ParameterIsColumn => format!("parameters.{name}"),
            _ => format!("constants.{name}"),
        }
    }
}

/// Everything that can be wrong with a study file, its data file or a
/// programmatic data set.
#[derive(Debug, thiserror::Error)]
pub enum StudyError {
    /// The study file could not be read.
    #[error("{at}: cannot read the study file: {source}")]
    ReadStudy {
        /// The study file.
        at: Box<At>,
        /// The I/O error.
        #[source]
        source: std::io::Error,
    },
    /// The data file could not be read.
    #[error("{at}: cannot read the data file named by `data.file` ({key_at}): {source}")]
    ReadData {
        /// The data file as resolved.
        at: Box<At>,
        /// Where the study file names it.
        key_at: Box<At>,
        /// The I/O error.
        #[source]
        source: std::io::Error,
    },
    /// A byte sequence that is not UTF-8 in the study file.
    #[error("{at}: the study file is not valid UTF-8 (save it as UTF-8)")]
    StudyNotUtf8 {
        /// File, line and column of the first bad byte.
        at: Box<At>,
    },
    /// TOML syntax error, an unknown key, a missing key or a value of the
    /// wrong type.
    #[error("{at}: {message}{}", context.as_ref().map(|c| format!(" (in `{c}`)")).unwrap_or_default())]
    Toml {
        /// Position reported by the TOML reader.
        at: Box<At>,
        /// What the TOML reader said.
        message: String,
        /// The table the error lies in, when known.
        context: Option<String>,
    },
    /// A setting whose value is not allowed.
    #[error("{at}: `{key}` {why}")]
    Invalid {
        /// Where the key is.
        at: Box<At>,
        /// Full key path, e.g. `audit.level`.
        key: String,
        /// What is wrong and what to write instead.
        why: String,
    },
    /// A parameter entry without `start`.
    #[error("{at}: parameter `{name}` has no start value (key `parameters.{name}.start`): write `{name} = {{ start = ... }}`")]
    MissingStart {
        /// Where the parameter is declared.
        at: Box<At>,
        /// The parameter.
        name: String,
    },
    /// `min >= max`.
    #[error("{at}: parameter `{name}` has min = {min} not below max = {max} (keys `parameters.{name}.min`, `parameters.{name}.max`)")]
    EmptyBounds {
        /// Where the parameter is declared.
        at: Box<At>,
        /// The parameter.
        name: String,
        /// Lower bound.
        min: f64,
        /// Upper bound.
        max: f64,
    },
    /// `start` outside `[min, max]`.
    #[error("{at}: the start of parameter `{name}` ({start}) lies outside its bounds [{min}, {max}] (key `parameters.{name}.start`)")]
    StartOutsideBounds {
        /// Where the start is.
        at: Box<At>,
        /// The parameter.
        name: String,
        /// Start value.
        start: f64,
        /// Lower bound.
        min: f64,
        /// Upper bound.
        max: f64,
    },
    /// No `[parameters]`, or an empty one.
    #[error("{at}: the study declares no parameters: list every parameter of `model.formula` under [parameters], each with a start")]
    NoParameters {
        /// The study file.
        at: Box<At>,
    },
    /// A `[derived]` formula does not compile (syntax, unknown name, arity).
    #[error("{at}: `{key}`: {message}{}", column.map(|c| format!(" (column {c} of the formula)")).unwrap_or_default())]
    DerivedFormula {
        /// Where the formula is.
        at: Box<At>,
        /// The key, `derived.NAME`.
        key: String,
        /// What is wrong.
        message: String,
        /// 1-based column in the formula.
        column: Option<usize>,
    },
    /// The formula does not parse.
    #[error("{at}: `model.formula`: {message}{}", column.map(|c| format!(" (column {c} of the formula)")).unwrap_or_default())]
    Formula {
        /// Where the formula is.
        at: Box<At>,
        /// What the compiler said.
        message: String,
        /// 1-based column in the formula.
        column: Option<usize>,
    },
    /// A name in the formula that is no parameter, constant or column.
    #[error("{at}: `model.formula` uses `{name}`{}, which is neither a parameter, a constant nor an x column; known names: {}{}",
        column.map(|c| format!(" (column {c} of the formula)")).unwrap_or_default(),
        name_list(known),
        suggestion.as_ref().map(|s| format!("; did you mean `{s}`?")).unwrap_or_default())]
    UnknownName {
        /// Where the formula is.
        at: Box<At>,
        /// The name as written.
        name: String,
        /// 1-based column in the formula.
        column: Option<usize>,
        /// Closest known name.
        suggestion: Option<String>,
        /// Parameters, constants and x columns.
        known: Vec<String>,
    },
    /// A declared parameter the formula does not use.
    #[error("{at}: parameter `{name}` is declared but `model.formula` does not use it: remove `parameters.{name}` or use it in the formula")]
    UnusedParameter {
        /// Where the parameter is declared.
        at: Box<At>,
        /// The parameter.
        name: String,
    },
    /// A parameter or constant with the name of another parameter,
    /// constant or x column.
    #[error("{at}: {} `{name}` (key `{}`) has the same name as {} `{name}`; names resolve parameters first, then constants, then columns, so the {} would never be read: rename one of them",
        kind.what(), kind.key(name), kind.other(), kind.loser())]
    Shadowing {
        /// Where the shadowing name is declared.
        at: Box<At>,
        /// The name.
        name: String,
        /// Which names collide.
        kind: Shadow,
    },
    /// The data file has no header row.
    #[error(
        "{at}: the data file is empty: it needs a header row naming the columns, then one row per point"
    )]
    NoHeader {
        /// The data file.
        at: Box<At>,
    },
    /// Content refused with a reason: a value that makes the weighted
    /// residuals, their weights or chi-squared overflow at the start, or
    /// line ends that are not TOML's.
    #[error("{at}: {why}")]
    Rejected {
        /// The data cell (file, line, column) or the study file position.
        at: Box<At>,
        /// What is wrong and what to do.
        why: String,
    },
    /// The data file has a header but no data row.
    #[error("{at}: the data file has a header but no data rows")]
    NoDataRows {
        /// The data file.
        at: Box<At>,
    },
    /// A byte sequence that is not UTF-8 in the data file.
    #[error("{at}: the data file is not valid UTF-8 in column {column}{} (save it as UTF-8)",
        header.as_ref().map(|h| format!(" ({})", self::header(h))).unwrap_or_default())]
    DataNotUtf8 {
        /// File, line and column (field number).
        at: Box<At>,
        /// Field number.
        column: usize,
        /// Header of that column, when known.
        header: Option<String>,
    },
    /// A quoted field without its closing quote, or text after it.
    #[error("{at}: {why}")]
    Quote {
        /// File, line and column (field number).
        at: Box<At>,
        /// What is wrong.
        why: String,
    },
    /// A row with a different number of fields than the header.
    #[error(
        "{at}: this row has {found} fields but the header (line {header_line}) has {expected}{}",
        hint(hint_text)
    )]
    Ragged {
        /// File and line.
        at: Box<At>,
        /// Fields found.
        found: usize,
        /// Fields of the header.
        expected: usize,
        /// Line of the header row.
        header_line: usize,
        /// An extra hint (decimal commas in a comma file).
        hint_text: Option<String>,
    },
    /// The same header appears twice and one of the two is used.
    #[error("{at}: header `{header}` appears in columns {first} and {second}; rename one (or name the column by an alias in `data.columns`)")]
    DuplicateHeader {
        /// Data file and header line.
        at: Box<At>,
        /// The header.
        header: String,
        /// First column number.
        first: usize,
        /// Second column number.
        second: usize,
    },
    /// A study key names a column the data file does not have.
    #[error("{at}: `{key}` names column `{name}`, which {} does not have; its columns are: {}{}", data_file.display(), name_list(available), hint(hint_text))]
    MissingColumn {
        /// Where the key is in the study file.
        at: Box<At>,
        /// The key (`data.y`, `data.x[1]`, `data.columns.temp`).
        key: String,
        /// The header looked for.
        name: String,
        /// The data file.
        data_file: PathBuf,
        /// The headers the data file has.
        available: Vec<String>,
        /// An extra hint.
        hint_text: Option<Box<str>>,
    },
    /// An empty cell in a used column.
    #[error("{at}: empty cell in column {column} ({})", header(name))]
    EmptyCell {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
    },
    /// A cell that is not a number.
    #[error(
        "{at}: `{text}` in column {column} ({}) is not a number{}",
        header(name),
        hint(why)
    )]
    NotANumber {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The cell.
        text: String,
        /// Why, when a reason is known (hexadecimal, ...).
        why: Option<String>,
    },
    /// A number written with a decimal comma.
    #[error("{at}: `{text}` in column {column} ({}) uses a decimal comma; decimal commas are not read, use '.' as the decimal separator (write `{}`)", header(name), text.replace(',', "."))]
    DecimalComma {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The cell.
        text: String,
    },
    /// NaN, infinity, or a number too large for a double.
    #[error(
        "{at}: `{text}` in column {column} ({}) is not a finite number{}",
        header(name),
        hint(why)
    )]
    NonFiniteCell {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The cell.
        text: String,
        /// Why (overflow).
        why: Option<String>,
    },
    /// A sigma that is zero or negative.
    #[error(
        "{at}: sigma {value} in column {column} ({}) is not positive; every standard uncertainty must be > 0",
        header(name)
    )]
    BadSigma {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The value.
        value: f64,
    },
    /// A negative sigma_x.
    #[error(
        "{at}: sigma_x {value} in column {column} ({}) is negative; every x uncertainty must be >= 0",
        header(name)
    )]
    BadSigmaX {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The value.
        value: f64,
    },
    /// A count of a Poisson fit that is negative or not a whole number.
    #[error(
        "{at}: count {value} in column {column} ({}) is not a whole number >= 0; `fit.likelihood = \"poisson\"` needs counts",
        header(name)
    )]
    BadCount {
        /// File, line, column.
        at: Box<At>,
        /// Column number.
        column: usize,
        /// Header.
        name: String,
        /// The value.
        value: f64,
    },
    /// Fewer points than free parameters + 1.
    #[error(
        "{at}: {points} data point{} cannot fit {free} free parameters: at least {needed} points are needed",
        if *points == 1 { "" } else { "s" }
    )]
    TooFewPoints {
        /// The data file (or study name).
        at: Box<At>,
        /// Points.
        points: usize,
        /// Free parameters.
        free: usize,
        /// Points needed.
        needed: usize,
    },
    /// Every x column holds one value only.
    #[error(
        "{at}: every x column is constant ({}): the data cannot tell the parameters apart",
        name_list(columns)
    )]
    ConstantX {
        /// The data file (or study name).
        at: Box<At>,
        /// The x columns.
        columns: Vec<String>,
    },
    /// The model is not finite at the starting values.
    #[error("{at}: the model {} is not finite at the starting values for the point with {} (point {point}); change the starts in {study} or check this row",
        if *derivative { "derivative" } else { "value" },
        x.iter().map(|(n, v)| format!("{n} = {v}")).collect::<Vec<_>>().join(", "))]
    NotFiniteAtStart {
        /// The data line of the point (or the study name when no file).
        at: Box<At>,
        /// The study file.
        study: Box<At>,
        /// 1-based point number.
        point: usize,
        /// The x values of the point.
        x: Vec<(String, f64)>,
        /// True when the value is finite but a derivative is not.
        derivative: bool,
    },
    /// The data file of a `[[datasets]]` entry could not be read.
    #[error("{at}: cannot read the data file named by `{key}` ({key_at}): {source}")]
    ReadDatasetFile {
        /// The data file as resolved.
        at: Box<At>,
        /// Where the study file names it.
        key_at: Box<At>,
        /// The key, `datasets[i].file`.
        key: String,
        /// The I/O error.
        #[source]
        source: std::io::Error,
    },
    /// The formula of a `[[datasets]]` entry does not compile (syntax,
    /// unknown name, arity).
    #[error("{at}: `{key}`: {message}{}", column.map(|c| format!(" (column {c} of the formula)")).unwrap_or_default())]
    DatasetFormula {
        /// Where the formula is.
        at: Box<At>,
        /// The key, `datasets[i].formula`.
        key: String,
        /// What is wrong.
        message: String,
        /// 1-based column in the formula.
        column: Option<usize>,
    },
    /// A programmatic data set that is inconsistent.
    #[error("{at}: the data set {why}")]
    InvalidDataset {
        /// The study (virtual) name.
        at: Box<At>,
        /// What is wrong.
        why: String,
    },
}
