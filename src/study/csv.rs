//! The data-file reader: delimited text with a header row.
//!
//! * delimiter: comma, semicolon or tab, whichever occurs most often
//!   (outside quotes) in the header line; a header without any is one column;
//! * lines whose first non-blank character is `#` are comments, blank lines
//!   are skipped;
//! * fields may be double-quoted (`""` is a quote inside); whitespace around
//!   fields is ignored; a UTF-8 byte-order mark and CRLF line ends are
//!   accepted;
//! * numbers: optional sign, digits with an optional `.` fraction, optional
//!   exponent (`-1.5e-3`, `.5`, `2.`). Hexadecimal, `nan`, `inf`, decimal
//!   commas and numbers that overflow a double are rejected with a message
//!   saying so.
//!
//! Line numbers are those of the file (comments and blank lines count);
//! columns are field numbers, 1-based.

use super::error::{At, StudyError};
use std::path::{Path, PathBuf};

/// A data file as text cells, before any column is read as numbers.
#[derive(Debug, Clone, PartialEq)]
pub struct RawTable {
    /// The file (for messages).
    pub file: PathBuf,
    /// The detected delimiter.
    pub delimiter: char,
    /// Line of the header row.
    pub header_line: usize,
    /// Column headers, trimmed.
    pub headers: Vec<String>,
    /// Data rows, each as long as `headers`, cells trimmed.
    pub rows: Vec<Vec<String>>,
    /// Source line of each row.
    pub lines: Vec<usize>,
}

/// A data file with every column read as numbers.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    /// Column headers.
    pub headers: Vec<String>,
    /// One vector per column, each as long as `lines`.
    pub columns: Vec<Vec<f64>>,
    /// Source line of each row (1-based).
    pub lines: Vec<usize>,
}

impl Table {
    /// The column with this header, if exactly present.
    pub fn column(&self, header: &str) -> Option<&[f64]> {
        self.headers
            .iter()
            .position(|h| h == header)
            .map(|i| self.columns[i].as_slice())
    }
}

/// Reads a data file and every column as numbers (for a study, only the
/// columns it uses need to be numeric: see [`RawTable::numeric_column`]).
pub fn read_csv(path: &Path) -> Result<Table, StudyError> {
    let bytes = super::read_input(path, super::MAX_DATA_BYTES).map_err(|source| StudyError::ReadData {
        at: Box::new(At::file(path)),
        key_at: Box::new(At::file(path)),
        source,
    })?;
    let raw = parse_raw(&bytes, path)?;
    raw.require_rows()?;
    let columns = (0..raw.headers.len())
        .map(|j| raw.numeric_column(j))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(Table {
        headers: raw.headers,
        columns,
        lines: raw.lines,
    })
}

impl RawTable {
    /// Error unless there is at least one data row.
    pub fn require_rows(&self) -> Result<(), StudyError> {
        if self.rows.is_empty() {
            return Err(StudyError::NoDataRows {
                at: Box::new(At::file(&self.file)),
            });
        }
        Ok(())
    }

    /// Column `j` (0-based) read as finite numbers; errors name line,
    /// column number and header.
    pub fn numeric_column(&self, j: usize) -> Result<Vec<f64>, StudyError> {
        let name = self.headers[j].clone();
        let mut out = Vec::with_capacity(self.rows.len());
        for (row, &line) in self.rows.iter().zip(&self.lines) {
            let text = &row[j];
            let at = Box::new(At::cell(&self.file, line, j + 1));
            let column = j + 1;
            match parse_number(text, self.delimiter) {
                Ok(v) => out.push(v),
                Err(NumberProblem::Empty) => return Err(StudyError::EmptyCell { at, column, name }),
                Err(NumberProblem::NonFinite(why)) => {
                    return Err(StudyError::NonFiniteCell {
                        at,
                        column,
                        name,
                        text: quoted_cell(text),
                        why,
                    })
                }
                Err(NumberProblem::DecimalComma) => {
                    return Err(StudyError::DecimalComma {
                        at,
                        column,
                        name,
                        text: quoted_cell(text),
                    })
                }
                Err(NumberProblem::NotANumber(why)) => {
                    return Err(StudyError::NotANumber {
                        at,
                        column,
                        name,
                        text: quoted_cell(text),
                        why,
                    })
                }
            }
        }
        Ok(out)
    }
}

/// A cell as quoted in an error message: at most 40 characters, so a
/// runaway cell (a megabyte of digits) cannot flood the terminal.
fn quoted_cell(text: &str) -> String {
    const KEEP: usize = 40;
    if text.chars().count() <= KEEP {
        text.to_string()
    } else {
        let head: String = text.chars().take(KEEP).collect();
        format!("{head}... ({} characters)", text.chars().count())
    }
}

/// Why a cell is not a usable number.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum NumberProblem {
    Empty,
    NonFinite(Option<String>),
    DecimalComma,
    NotANumber(Option<String>),
}

fn is_plain_decimal(s: &str) -> bool {
    let b = s.as_bytes();
    let mut i = 0;
    if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
        i += 1;
    }
    let int_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let mut digits = i - int_start;
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let f = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        digits += i - f;
    }
    if digits == 0 {
        return false;
    }
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        i += 1;
        if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
            i += 1;
        }
        let e = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        if i == e {
            return false;
        }
    }
    i == b.len()
}

/// Parses one cell. `delimiter` decides whether `3,14` is a decimal comma.
pub(crate) fn parse_number(text: &str, delimiter: char) -> Result<f64, NumberProblem> {
    let t = text.trim();
    if t.is_empty() {
        return Err(NumberProblem::Empty);
    }
    if is_plain_decimal(t) {
        let v: f64 = t.parse().map_err(|_| NumberProblem::NotANumber(None))?;
        if !v.is_finite() {
            return Err(NumberProblem::NonFinite(Some(
                "it is too large for a double-precision number".into(),
            )));
        }
        return Ok(v);
    }
    let unsigned = t.trim_start_matches(['+', '-']).to_ascii_lowercase();
    if matches!(unsigned.as_str(), "nan" | "inf" | "infinity") {
        return Err(NumberProblem::NonFinite(None));
    }
    if unsigned.starts_with("0x") || unsigned.starts_with("0o") || unsigned.starts_with("0b") {
        return Err(NumberProblem::NotANumber(Some(
            "hexadecimal, octal and binary numbers are not read: write it in decimal".into(),
        )));
    }
    if delimiter != ',' && t.matches(',').count() == 1 && is_plain_decimal(&t.replace(',', ".")) {
        return Err(NumberProblem::DecimalComma);
    }
    if t.contains('_') && is_plain_decimal(&t.replace('_', "")) {
        return Err(NumberProblem::NotANumber(Some(
            "digit separators are not read: write the digits without `_`".into(),
        )));
    }
    Err(NumberProblem::NotANumber(None))
}

/// Splits one line into raw fields (bytes), honouring double quotes.
/// Returns the fields (quotes removed) or (field index, message).
fn split_fields(line: &[u8], delim: u8) -> Result<Vec<Vec<u8>>, (usize, String)> {
    let mut fields = Vec::new();
    let mut i = 0;
    loop {
        // skip leading blanks (not the delimiter itself)
        while i < line.len() && (line[i] == b' ' || (line[i] == b'\t' && delim != b'\t')) {
            i += 1;
        }
        let mut field = Vec::new();
        if i < line.len() && line[i] == b'"' {
            i += 1;
            loop {
                if i >= line.len() {
                    return Err((fields.len(), "a quoted field has no closing quote".into()));
                }
                if line[i] == b'"' {
                    if i + 1 < line.len() && line[i + 1] == b'"' {
                        field.push(b'"');
                        i += 2;
                        continue;
                    }
                    i += 1;
                    break;
                }
                field.push(line[i]);
                i += 1;
            }
            while i < line.len() && line[i] != delim {
                if !line[i].is_ascii_whitespace() {
                    return Err((
                        fields.len(),
                        "text after the closing quote of a quoted field".into(),
                    ));
                }
                i += 1;
            }
        } else {
            while i < line.len() && line[i] != delim {
                field.push(line[i]);
                i += 1;
            }
        }
        fields.push(field);
        if i >= line.len() {
            break;
        }
        i += 1; // the delimiter
    }
    Ok(fields)
}

/// Counts candidate delimiters outside quotes and picks the most frequent.
fn detect_delimiter(header: &[u8]) -> u8 {
    let mut counts = [0usize; 3];
    let cands = [b',', b';', b'\t'];
    let mut quoted = false;
    for &b in header {
        if b == b'"' {
            quoted = !quoted;
        } else if !quoted {
            for (k, &c) in cands.iter().enumerate() {
                if b == c {
                    counts[k] += 1;
                }
            }
        }
    }
    let mut best = 0;
    for k in 1..3 {
        if counts[k] > counts[best] {
            best = k;
        }
    }
    cands[best]
}

fn is_blank(b: u8) -> bool {
    b == b' ' || b == b'\t' || b == b'\r'
}

/// Parses a data file's bytes; `file` names it in errors.
pub fn parse_raw(bytes: &[u8], file: &Path) -> Result<RawTable, StudyError> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    // Old Mac line ends: a carriage return without a line feed ends a line.
    let lone_cr = bytes
        .iter()
        .enumerate()
        .any(|(i, &b)| b == b'\r' && bytes.get(i + 1) != Some(&b'\n'));
    let converted: Vec<u8>;
    let bytes = if lone_cr {
        converted = bytes
            .iter()
            .enumerate()
            .filter_map(|(i, &b)| match b {
                b'\r' if bytes.get(i + 1) == Some(&b'\n') => None,
                b'\r' => Some(b'\n'),
                other => Some(other),
            })
            .collect();
        &converted[..]
    } else {
        bytes
    };
    let mut header: Option<(usize, Vec<String>)> = None;
    let mut delim = b',';
    let mut rows = Vec::new();
    let mut lines = Vec::new();
    for (k, mut line) in bytes.split(|&b| b == b'\n').enumerate() {
        let lineno = k + 1;
        if let Some(l) = line.strip_suffix(b"\r") {
            line = l;
        }
        let first = line.iter().position(|&b| !is_blank(b));
        match first {
            None => continue,
            Some(p) if line[p] == b'#' => continue,
            _ => {}
        }
        if header.is_none() {
            delim = detect_delimiter(line);
        }
        let fields = split_fields(line, delim).map_err(|(j, why)| StudyError::Quote {
            at: Box::new(At::cell(file, lineno, j + 1)),
            why,
        })?;
        let mut cells = Vec::with_capacity(fields.len());
        for (j, f) in fields.into_iter().enumerate() {
            match String::from_utf8(f) {
                Ok(s) => cells.push(s.trim().to_string()),
                Err(_) => {
                    return Err(StudyError::DataNotUtf8 {
                        at: Box::new(At::cell(file, lineno, j + 1)),
                        column: j + 1,
                        header: header.as_ref().and_then(|(_, h)| h.get(j).cloned()),
                    })
                }
            }
        }
        match &header {
            None => {
                for (j, h) in cells.iter_mut().enumerate() {
                    let n = h.chars().count();
                    if n > super::MAX_HEADER_CHARS {
                        return Err(StudyError::Rejected {
                            at: Box::new(At::cell(file, lineno, j + 1)),
                            why: format!(
                                "the header of column {} has {n} characters; a header has at most {}",
                                j + 1,
                                super::MAX_HEADER_CHARS
                            ),
                        });
                    }
                    if let std::borrow::Cow::Owned(o) = super::neutralise(h) {
                        *h = o;
                    }
                }
                header = Some((lineno, cells))
            }
            Some((hl, h)) => {
                if cells.len() != h.len() {
                    let hint_text = if delim == b',' && cells.len() > h.len() {
                        Some(
                            "if the numbers use decimal commas, note that decimal commas are not read: use '.'"
                                .to_string(),
                        )
                    } else {
                        None
                    };
                    return Err(StudyError::Ragged {
                        at: Box::new(At::line(file, lineno)),
                        found: cells.len(),
                        expected: h.len(),
                        header_line: *hl,
                        hint_text,
                    });
                }
                rows.push(cells);
                lines.push(lineno);
            }
        }
    }
    let Some((header_line, headers)) = header else {
        return Err(StudyError::NoHeader {
            at: Box::new(At::file(file)),
        });
    };
    Ok(RawTable {
        file: file.to_path_buf(),
        delimiter: delim as char,
        header_line,
        headers,
        rows,
        lines,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(s: &str) -> Result<RawTable, StudyError> {
        parse_raw(s.as_bytes(), Path::new("d.csv"))
    }

    #[test]
    fn plain_decimal_grammar() {
        // Ordinary float syntax (common practice).
        for ok in ["1", "-1", "+1.5", ".5", "5.", "1e3", "1.5E-3", "0"] {
            assert!(is_plain_decimal(ok), "{ok}");
        }
        for bad in ["", ".", "e5", "1e", "1.5.2", "0x1A", "1,5", "--1", "1e+"] {
            assert!(!is_plain_decimal(bad), "{bad}");
        }
    }

    #[test]
    fn number_problems_are_classified() {
        assert_eq!(parse_number(" 2.5 ", ','), Ok(2.5));
        assert_eq!(parse_number("-1e-3", ';'), Ok(-1e-3));
        assert_eq!(parse_number("", ','), Err(NumberProblem::Empty));
        assert!(matches!(
            parse_number("NaN", ','),
            Err(NumberProblem::NonFinite(None))
        ));
        assert!(matches!(
            parse_number("-inf", ','),
            Err(NumberProblem::NonFinite(None))
        ));
        assert!(matches!(
            parse_number("1e400", ','),
            Err(NumberProblem::NonFinite(Some(_)))
        ));
        assert!(matches!(
            parse_number("0x1A", ','),
            Err(NumberProblem::NotANumber(Some(_)))
        ));
        assert_eq!(parse_number("3,14", ';'), Err(NumberProblem::DecimalComma));
        assert_eq!(parse_number("3,14", '\t'), Err(NumberProblem::DecimalComma));
        assert!(matches!(
            parse_number("abc", ';'),
            Err(NumberProblem::NotANumber(None))
        ));
        assert!(matches!(
            parse_number("1_000", ','),
            Err(NumberProblem::NotANumber(Some(_)))
        ));
    }

    #[test]
    fn delimiters_are_detected_from_the_header() {
        assert_eq!(p("a,b\n1,2\n").unwrap().delimiter, ',');
        assert_eq!(p("a;b\n1;2\n").unwrap().delimiter, ';');
        assert_eq!(p("a\tb\n1\t2\n").unwrap().delimiter, '\t');
        // a comma inside a quoted header does not count
        let t = p("\"x, s\";y\n1;2\n").unwrap();
        assert_eq!(t.delimiter, ';');
        assert_eq!(t.headers, vec!["x, s", "y"]);
    }

    #[test]
    fn bom_crlf_comments_blanks_and_whitespace() {
        let t = p("\u{feff}# comment\r\n  t , y \r\n\r\n 1 , 2 \r\n   # again\r\n3,4\r\n").unwrap();
        assert_eq!(t.headers, vec!["t", "y"]);
        assert_eq!(t.rows, vec![vec!["1", "2"], vec!["3", "4"]]);
        assert_eq!(t.lines, vec![4, 6]);
        assert_eq!(t.header_line, 2);
    }

    #[test]
    fn quoted_fields() {
        let t = p("\"a \"\"q\"\"\",b\n\"1\", 2\n").unwrap();
        assert_eq!(t.headers, vec!["a \"q\"", "b"]);
        assert_eq!(t.rows[0], vec!["1", "2"]);
        let e = p("a,b\n\"1,2\n").unwrap_err().to_string();
        assert!(
            e.contains("d.csv, line 2, column 1") && e.contains("no closing quote"),
            "{e}"
        );
        let e = p("a,b\n\"1\"x,2\n").unwrap_err().to_string();
        assert!(
            e.contains("line 2, column 1") && e.contains("after the closing quote"),
            "{e}"
        );
    }

    #[test]
    fn old_mac_line_ends_end_lines() {
        let t = p("t,y\r1,2\r\r3,4\r").unwrap();
        assert_eq!(t.headers, vec!["t", "y"]);
        assert_eq!(t.rows, vec![vec!["1", "2"], vec!["3", "4"]]);
        assert_eq!(t.lines, vec![2, 4]);
    }

    #[test]
    fn control_characters_in_headers_are_neutralised() {
        let t = p("t\u{1b}[31m,y\u{7}\n1,2\n").unwrap();
        assert_eq!(t.headers, vec!["t\u{fffd}[31m", "y\u{fffd}"]);
    }

    #[test]
    fn trailing_empty_tab_field_is_a_field() {
        let e = p("a\tb\n1\t\n").unwrap();
        assert_eq!(e.rows[0], vec!["1", ""]);
    }
}
