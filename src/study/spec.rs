//! The study file as written: the TOML schema, deserialised but not yet
//! resolved against the data.
//!
//! Every table rejects unknown keys. Besides the typed [`StudySpec`], the
//! reader records where each key's value sits in the file ([`Locations`]) so
//! that later checks can name line and column.

use super::error::{At, StudyError};
use crate::fit::{CovarianceScaling, FitOptions, Likelihood, Method};
use crate::settings::AuditSettings;
use serde::de::{self, Deserializer, MapAccess, SeqAccess, Visitor};
use serde::ser::{SerializeMap, Serializer};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt;
use std::path::{Path, PathBuf};

/// The study file as written (deserialised TOML), before anything is
/// resolved.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StudySpec {
    /// Optional title shown in reports.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub title: Option<String>,
    /// `[data]`: the data file and its columns (absent, and empty, in a
    /// study of several `[[datasets]]`).
    #[serde(default)]
    pub data: DataSpec,
    /// `[model]`: the formula (absent, and empty, in a study of several
    /// `[[datasets]]`).
    #[serde(default)]
    pub model: ModelSpec,
    /// `[[datasets]]`: several data sets fitted jointly, each with its own
    /// file, columns, sigma and formula, sharing the parameters of
    /// `[parameters]` by name (instead of `[data]` + `[model]`).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub datasets: Vec<super::joint::DatasetEntry>,
    /// `[parameters]`, in the order of the file (= order of the parameter
    /// vector).
    #[serde(default, with = "ordered")]
    pub parameters: Vec<(String, ParamEntry)>,
    /// `[constants]`: named numbers the formula may use, in file order.
    #[serde(default, with = "ordered")]
    pub constants: Vec<(String, f64)>,
    /// `[derived]`: `name = "formula"` over parameters and constants, in
    /// file order.
    #[serde(default, with = "ordered", skip_serializing_if = "Vec::is_empty")]
    pub derived: Vec<(String, String)>,
    /// `[[inverse]]`: responses to read off the fitted curve.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub inverse: Vec<InverseSpec>,
    /// `[audit]`: settings of the diagnostics.
    #[serde(default)]
    pub audit: AuditSettings,
    /// `[fit]`: optimiser settings.
    #[serde(default)]
    pub fit: FitSpec,
    /// `[report]`: how the figures are drawn.
    #[serde(default)]
    pub report: ReportSpec,
    /// The study file this spec was read from (or a virtual name); not part
    /// of the file.
    #[serde(skip)]
    pub origin: PathBuf,
    /// Where each key sits in the study file; empty for a spec built in code.
    #[serde(skip)]
    pub locations: Locations,
}

/// `[report]`: presentation settings of the figures; they change no
/// number of the audit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReportSpec {
    /// Scale of the independent-variable axis of the data figures.
    #[serde(default)]
    pub x_axis: AxisScale,
    /// Scale of the response axis of the data figure.
    #[serde(default)]
    pub y_axis: AxisScale,
}

/// Scale of a figure axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum AxisScale {
    /// Logarithmic when every value drawn is positive and they span more
    /// than two decades (largest over smallest above 100), else linear.
    #[default]
    Auto,
    /// Linear.
    Linear,
    /// Logarithmic (base 10); values at or below zero are left out and
    /// the caption says how many.
    Log,
}

/// `[data]`.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    /// The CSV file, relative to the study file (absolute paths allowed).
    #[serde(default)]
    pub file: PathBuf,
    /// Independent-variable columns: `x = "t"` or `x = ["x1", "x2"]`
    /// (`x = []` for a model without independent variables).
    #[serde(with = "one_or_many")]
    pub x: Vec<String>,
    /// Response column.
    pub y: String,
    /// Standard uncertainties: a column, or one number for every point.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma: Option<SigmaSpec>,
    /// Standard uncertainties of the (one) x column, errors in x: a
    /// column, or one number for every point.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma_x: Option<SigmaSpec>,
    /// Aliases: identifier = CSV header, for headers that are not names a
    /// formula can use (`columns = { temp = "Temp (°C)" }`).
    #[serde(default, with = "ordered", skip_serializing_if = "Vec::is_empty")]
    pub columns: Vec<(String, String)>,
}

/// `data.sigma`: a column or one number.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum SigmaSpec {
    /// Name (or alias) of a column of standard uncertainties.
    Column(String),
    /// One standard uncertainty for every point.
    Value(f64),
}

impl<'de> Deserialize<'de> for SigmaSpec {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = SigmaSpec;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a column name or one number")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<SigmaSpec, E> {
                Ok(SigmaSpec::Column(v.to_string()))
            }
            fn visit_f64<E: de::Error>(self, v: f64) -> Result<SigmaSpec, E> {
                Ok(SigmaSpec::Value(v))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<SigmaSpec, E> {
                Ok(SigmaSpec::Value(v as f64))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<SigmaSpec, E> {
                Ok(SigmaSpec::Value(v as f64))
            }
        }
        d.deserialize_any(V)
    }
}

/// One entry of `[[inverse]]`: a measured response to read off the curve.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InverseSpec {
    /// Name of the sample.
    pub name: String,
    /// The measured response (a mean of `readings` readings).
    pub y: f64,
    /// Readings averaged into `y` (default 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub readings: Option<usize>,
    /// Standard uncertainty of one reading (default: the data's sigma
    /// interpolated at the result, else `s`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma: Option<f64>,
}

/// `[model]`.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ModelSpec {
    /// The formula, e.g. `T_env + dT*exp(-t/tau)`.
    pub formula: String,
}

/// One entry of `[parameters]`.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ParamEntry {
    /// Starting value (required; optional here so the error can name it).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub start: Option<f64>,
    /// Lower bound.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub min: Option<f64>,
    /// Upper bound.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max: Option<f64>,
    /// Held at `start` when true.
    #[serde(default)]
    pub fixed: bool,
}

impl ParamEntry {
    /// A free parameter with a start and no bounds.
    pub fn start(start: f64) -> Self {
        ParamEntry {
            start: Some(start),
            ..ParamEntry::default()
        }
    }
}

/// Largest `fit.max_iterations`.
pub const MAX_ITERATIONS: usize = 10_000_000;

/// `[fit]`: optimiser settings; absent keys keep [`FitOptions::default`].
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FitSpec {
    /// `"lm"` (Levenberg-Marquardt, default) or `"steepest"`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub method: Option<Method>,
    /// `true`: always scale the covariance by chi2/dof; `false`: never;
    /// absent: scale only when the data have no sigma.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scale_covariance: Option<bool>,
    /// Iteration cap (at least 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_iterations: Option<usize>,
    /// Geodesic acceleration for Levenberg-Marquardt.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub geodesic: Option<bool>,
    /// Relative chi-squared change tolerance.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ftol: Option<f64>,
    /// Relative step tolerance.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub xtol: Option<f64>,
    /// Scaled gradient tolerance.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gtol: Option<f64>,
    /// The error model: `"gaussian"` (default) or `"poisson"` (counts).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub likelihood: Option<Likelihood>,
}

impl FitSpec {
    /// The optimiser settings, or the key whose value is not allowed and why.
    pub fn to_options(&self) -> Result<FitOptions, (String, String)> {
        let mut o = FitOptions::default();
        if let Some(m) = self.method {
            o.method = m;
        }
        if let Some(s) = self.scale_covariance {
            o.covariance = if s {
                CovarianceScaling::Scaled
            } else {
                CovarianceScaling::Absolute
            };
        }
        if let Some(n) = self.max_iterations {
            if n == 0 {
                return Err(("fit.max_iterations".into(), "must be at least 1".into()));
            }
            if n > MAX_ITERATIONS {
                return Err((
                    "fit.max_iterations".into(),
                    format!("is {n}, more than the largest allowed, {MAX_ITERATIONS}"),
                ));
            }
            o.max_iterations = n;
        }
        if let Some(g) = self.geodesic {
            o.geodesic = g;
        }
        if let Some(l) = self.likelihood {
            o.likelihood = l;
        }
        for (key, val, slot) in [
            ("fit.ftol", self.ftol, &mut o.ftol),
            ("fit.xtol", self.xtol, &mut o.xtol),
            ("fit.gtol", self.gtol, &mut o.gtol),
        ] {
            if let Some(v) = val {
                if !(v.is_finite() && v >= 0.0) {
                    return Err((key.into(), "must be a finite number >= 0".into()));
                }
                *slot = v;
            }
        }
        Ok(o)
    }
}

/// Where a key's value sits in the study file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Loc {
    /// 1-based line.
    pub line: usize,
    /// 1-based character column.
    pub column: usize,
    /// True when the value is a one-line string without escapes, so that a
    /// column inside the string maps to `column + 1 + (c - 1)` in the file.
    pub plain_string: bool,
}

/// Positions of the keys of a study file, by full key path
/// (`parameters.tau.min`, `data.x[1]`).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Locations {
    map: BTreeMap<String, Loc>,
    /// Byte ranges of every value, for looking up the table an error is in.
    spans: Vec<(String, std::ops::Range<usize>)>,
}

impl Locations {
    /// The position of a key, if recorded.
    pub fn get(&self, key: &str) -> Option<Loc> {
        self.map.get(key).copied()
    }

    /// True when nothing is recorded (a spec built in code).
    pub fn is_empty(&self) -> bool {
        self.map.is_empty()
    }

    /// True when some key at or below `key` is recorded (`key` or `key.*`).
    pub fn has_table(&self, key: &str) -> bool {
        let dotted = format!("{key}.");
        self.map.keys().any(|k| k == key || k.starts_with(&dotted))
    }

    /// A copy in which every key starting with `from` also appears with
    /// `from` replaced by `to` (a `[[datasets]]` entry read as `[data]`).
    pub(crate) fn renamed(&self, renames: &[(&str, &str)]) -> Locations {
        let mut out = self.clone();
        for (k, v) in &self.map {
            for (from, to) in renames {
                if let Some(rest) = k.strip_prefix(from) {
                    out.map.insert(format!("{to}{rest}"), *v);
                }
            }
        }
        out
    }

    /// `file, line, column` of a key, falling back to the nearest recorded
    /// parent key, then to the file alone.
    pub fn at(&self, file: &Path, key: &str) -> At {
        let mut k = key;
        loop {
            if let Some(l) = self.get(k) {
                return At::cell(file, l.line, l.column);
            }
            match k.rfind(['.', '[']) {
                Some(i) => k = &k[..i],
                None => return At::file(file),
            }
        }
    }

    /// The deepest table whose value contains byte `offset`.
    fn table_containing(&self, offset: usize) -> Option<String> {
        self.spans
            .iter()
            .filter(|(_, r)| r.start <= offset && offset < r.end)
            .min_by_key(|(_, r)| r.end - r.start)
            .map(|(k, _)| k.clone())
    }
}

impl StudySpec {
    /// Parses a study file; `origin` names the file in errors.
    pub fn from_toml_str(text: &str, origin: &Path) -> Result<StudySpec, StudyError> {
        let tree: Tree = toml::from_str(text).map_err(|e| toml_error(&e, text, origin, None))?;
        let mut locations = Locations::default();
        let mut raw = Vec::new();
        walk_table(&tree.0, "", text, &mut locations, &mut raw);
        let mut spec: StudySpec =
            toml::from_str(text).map_err(|e| toml_error(&e, text, origin, Some(&locations)))?;
        spec.origin = origin.to_path_buf();
        spec.locations = locations;
        spec.neutralise_strings();
        // Numbers must be written in decimal: TOML also admits 0x.., 0o..,
        // 0b.. integers, which nobody means for a physical quantity.
        for (key, text) in raw {
            if is_number_key(&key) {
                let t = text.trim_start_matches(['+', '-']);
                if t.starts_with("0x") || t.starts_with("0o") || t.starts_with("0b") {
                    return Err(StudyError::Invalid {
                        at: Box::new(spec.locations.at(origin, &key)),
                        key,
                        why: format!(
                            "is written `{text}`: hexadecimal, octal and binary numbers are not accepted, write it in decimal"
                        ),
                    });
                }
            }
        }
        Ok(spec)
    }

    /// A minimal spec built in code: formula and parameters, defaults for
    /// everything else (for [`super::Study::from_dataset`]).
    pub fn new(formula: &str, parameters: Vec<(String, ParamEntry)>) -> StudySpec {
        StudySpec {
            title: None,
            data: DataSpec::default(),
            model: ModelSpec {
                formula: formula.to_string(),
            },
            parameters,
            constants: Vec::new(),
            derived: Vec::new(),
            inverse: Vec::new(),
            datasets: Vec::new(),
            audit: AuditSettings::default(),
            fit: FitSpec::default(),
            report: ReportSpec::default(),
            origin: PathBuf::new(),
            locations: Locations::default(),
        }
    }

    /// Replaces control characters (and the other characters of
    /// [`super::is_unsafe_char`]) in every string of the spec by U+FFFD, so
    /// that no user string reaches a report, an SVG or the terminal raw.
    pub fn neutralise_strings(&mut self) {
        fn fix(s: &mut String) {
            if let std::borrow::Cow::Owned(o) = super::neutralise(s) {
                *s = o;
            }
        }
        if let Some(t) = &mut self.title {
            fix(t);
        }
        self.data.x.iter_mut().for_each(fix);
        fix(&mut self.data.y);
        if let Some(SigmaSpec::Column(c)) = &mut self.data.sigma {
            fix(c);
        }
        for (a, h) in &mut self.data.columns {
            fix(a);
            fix(h);
        }
        fix(&mut self.model.formula);
        self.parameters.iter_mut().for_each(|(n, _)| fix(n));
        self.constants.iter_mut().for_each(|(n, _)| fix(n));
        for (n, f) in &mut self.derived {
            fix(n);
            fix(f);
        }
        self.inverse.iter_mut().for_each(|i| fix(&mut i.name));
        if let Some(pairs) = &mut self.audit.contours.pairs {
            pairs.iter_mut().flatten().for_each(fix);
        }
    }

    /// Position of `key` in the study file (file only when unknown).
    pub fn at(&self, key: &str) -> At {
        self.locations.at(&self.origin, key)
    }
}

fn is_number_key(key: &str) -> bool {
    let parts: Vec<&str> = key.split('.').collect();
    matches!(
        parts.as_slice(),
        ["parameters", _, "start" | "min" | "max"] | ["constants", _] | ["data", "sigma"]
    ) || key.starts_with("datasets[") && key.ends_with("].sigma")
}

/// 1-based (line, character column) of a byte offset.
pub(crate) fn line_col(text: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(text.len());
    let before = &text[..offset];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
    let column = before[line_start..].chars().count() + 1;
    (line, column)
}

fn toml_error(e: &toml::de::Error, text: &str, origin: &Path, locs: Option<&Locations>) -> StudyError {
    let (at, context) = match e.span() {
        Some(span) => {
            let (l, c) = line_col(text, span.start);
            let ctx = locs.and_then(|l| l.table_containing(span.start));
            (At::cell(origin, l, c), ctx)
        }
        None => (At::file(origin), None),
    };
    let mut message = super::neutralise(e.message().trim_end()).replace('\n', "; ");
    if message.contains("invalid floating-point number") {
        message.push_str(" (write an ordinary decimal number within the range of a double, |x| < 1.8e308)");
    }
    StudyError::Toml {
        at: Box::new(at),
        message,
        context,
    }
}

// ---------------------------------------------------------------------------
// Position tree: the document with a span on every value that has one.
//
// `toml::Spanned` fails on tables that exist only through a dotted header
// (`[parameters.tau]` without `[parameters]`): they have no span. So the
// tree speaks the span protocol of the TOML reader itself (the field names
// below are those `toml::Spanned` uses) and accepts a plain table in its
// place.

const SPANNED: &str = "$__serde_spanned_private_Spanned";
const START: &str = "$__serde_spanned_private_start";
const END: &str = "$__serde_spanned_private_end";
const VALUE: &str = "$__serde_spanned_private_value";
const FIELDS: &[&str] = &[START, END, VALUE];

struct Tree(Vec<(String, SpanNode)>);

/// A value and, when the reader knows it, its byte range.
struct SpanNode {
    span: Option<std::ops::Range<usize>>,
    node: Node,
}

enum Node {
    Table(Vec<(String, SpanNode)>),
    Array(Vec<SpanNode>),
    Scalar,
}

fn scalar<E>() -> Result<SpanNode, E> {
    Ok(SpanNode {
        span: None,
        node: Node::Scalar,
    })
}

struct SpanVisitor;

impl<'de> Visitor<'de> for SpanVisitor {
    type Value = SpanNode;
    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("any TOML value")
    }
    fn visit_bool<E>(self, _: bool) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_i64<E>(self, _: i64) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_u64<E>(self, _: u64) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_f64<E>(self, _: f64) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_str<E>(self, _: &str) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_string<E>(self, _: String) -> Result<SpanNode, E> {
        scalar()
    }
    fn visit_seq<A: SeqAccess<'de>>(self, mut a: A) -> Result<SpanNode, A::Error> {
        let mut v = Vec::new();
        while let Some(x) = a.next_element::<SpanNode>()? {
            v.push(x);
        }
        Ok(SpanNode {
            span: None,
            node: Node::Array(v),
        })
    }
    fn visit_map<A: MapAccess<'de>>(self, mut a: A) -> Result<SpanNode, A::Error> {
        let mut entries = Vec::new();
        let Some(first) = a.next_key::<String>()? else {
            return Ok(SpanNode {
                span: None,
                node: Node::Table(entries),
            });
        };
        if first == START {
            let start: usize = a.next_value()?;
            let mut end = start;
            let mut node = Node::Scalar;
            while let Some(k) = a.next_key::<String>()? {
                if k == END {
                    end = a.next_value()?;
                } else if k == VALUE {
                    node = a.next_value::<Unspanned>()?.0.node;
                } else {
                    a.next_value::<de::IgnoredAny>()?;
                }
            }
            return Ok(SpanNode {
                span: Some(start..end),
                node,
            });
        }
        entries.push((first, a.next_value::<SpanNode>()?));
        while let Some(k) = a.next_key::<String>()? {
            entries.push((k, a.next_value::<SpanNode>()?));
        }
        Ok(SpanNode {
            span: None,
            node: Node::Table(entries),
        })
    }
}

/// The value inside a span record: read without asking for a span again.
struct Unspanned(SpanNode);

impl<'de> Deserialize<'de> for Unspanned {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_any(SpanVisitor).map(Unspanned)
    }
}

impl<'de> Deserialize<'de> for SpanNode {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        d.deserialize_struct(SPANNED, FIELDS, SpanVisitor)
    }
}

impl<'de> Deserialize<'de> for Tree {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        match d.deserialize_map(SpanVisitor)?.node {
            Node::Table(t) => Ok(Tree(t)),
            _ => Err(de::Error::custom("a study file must be a TOML table")),
        }
    }
}

fn walk_table(
    entries: &[(String, SpanNode)],
    prefix: &str,
    text: &str,
    locs: &mut Locations,
    raw: &mut Vec<(String, String)>,
) {
    for (k, v) in entries {
        let key = if prefix.is_empty() {
            k.clone()
        } else {
            format!("{prefix}.{k}")
        };
        walk_value(v, key, text, locs, raw);
    }
}

fn walk_value(v: &SpanNode, key: String, text: &str, locs: &mut Locations, raw: &mut Vec<(String, String)>) {
    let mut src = "";
    if let Some(span) = &v.span {
        let (line, column) = line_col(text, span.start);
        src = text.get(span.clone()).unwrap_or("");
        let plain_string = src.len() >= 2
            && (src.starts_with('"') && !src.contains('\\') || src.starts_with('\''))
            && !src.starts_with("\"\"\"")
            && !src.starts_with("'''")
            && !src.contains('\n');
        locs.map.insert(
            key.clone(),
            Loc {
                line,
                column,
                plain_string,
            },
        );
    }
    match &v.node {
        Node::Table(t) => {
            if let Some(span) = &v.span {
                locs.spans.push((key.clone(), span.clone()));
            }
            walk_table(t, &key, text, locs, raw);
        }
        Node::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                walk_value(x, format!("{key}[{i}]"), text, locs, raw);
            }
        }
        Node::Scalar => raw.push((key, src.to_string())),
    }
}

// ---------------------------------------------------------------------------
// serde helpers

/// A TOML table as an ordered list of (key, value), in file order.
pub(super) mod ordered {
    use super::*;

    pub fn serialize<S: Serializer, V: Serialize>(v: &[(String, V)], s: S) -> Result<S::Ok, S::Error> {
        let mut m = s.serialize_map(Some(v.len()))?;
        for (k, x) in v {
            m.serialize_entry(k, x)?;
        }
        m.end()
    }

    pub fn deserialize<'de, D, V>(d: D) -> Result<Vec<(String, V)>, D::Error>
    where
        D: Deserializer<'de>,
        V: Deserialize<'de>,
    {
        struct Vis<V>(std::marker::PhantomData<V>);
        impl<'de, V: Deserialize<'de>> Visitor<'de> for Vis<V> {
            type Value = Vec<(String, V)>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a table")
            }
            fn visit_map<A: MapAccess<'de>>(self, mut a: A) -> Result<Self::Value, A::Error> {
                let mut out: Vec<(String, V)> = Vec::new();
                while let Some(k) = a.next_key::<String>()? {
                    if out.iter().any(|(o, _)| *o == k) {
                        return Err(de::Error::custom(format!("duplicate key `{k}`")));
                    }
                    let v = a.next_value()?;
                    out.push((k, v));
                }
                Ok(out)
            }
        }
        d.deserialize_map(Vis(std::marker::PhantomData))
    }
}

/// `"a"` or `["a", "b"]`.
pub(super) mod one_or_many {
    use super::*;

    pub fn serialize<S: Serializer>(v: &[String], s: S) -> Result<S::Ok, S::Error> {
        if v.len() == 1 {
            s.serialize_str(&v[0])
        } else {
            v.serialize(s)
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<String>, D::Error> {
        struct Vis;
        impl<'de> Visitor<'de> for Vis {
            type Value = Vec<String>;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a column name or a list of column names")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<Vec<String>, E> {
                Ok(vec![v.to_string()])
            }
            fn visit_seq<A: SeqAccess<'de>>(self, mut a: A) -> Result<Vec<String>, A::Error> {
                let mut out = Vec::new();
                while let Some(x) = a.next_element::<String>()? {
                    out.push(x);
                }
                Ok(out)
            }
        }
        d.deserialize_any(Vis)
    }
}

#[cfg(test)]
mod report_table_tests {
    use super::*;

    const BASE: &str = "[data]\nfile = \"d.csv\"\nx = \"t\"\ny = \"y\"\n[model]\nformula = \"a*t\"\n[parameters]\na = { start = 1 }\n";

    #[test]
    fn report_table_sets_axis_scales_and_rejects_unknown_keys() {
        let spec = StudySpec::from_toml_str(BASE, Path::new("s.toml")).unwrap();
        assert_eq!(spec.report, ReportSpec::default());
        assert_eq!(spec.report.x_axis, AxisScale::Auto);
        let text = format!("{BASE}[report]\nx_axis = \"log\"\ny_axis = \"linear\"\n");
        let spec = StudySpec::from_toml_str(&text, Path::new("s.toml")).unwrap();
        assert_eq!(spec.report.x_axis, AxisScale::Log);
        assert_eq!(spec.report.y_axis, AxisScale::Linear);
        // A typo is an error naming the key.
        let text = format!("{BASE}[report]\nx_axes = \"log\"\n");
        let err = StudySpec::from_toml_str(&text, Path::new("s.toml"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("x_axes"), "{err}");
        let text = format!("{BASE}[report]\nx_axis = \"logarithmic\"\n");
        assert!(StudySpec::from_toml_str(&text, Path::new("s.toml")).is_err());
    }
}
