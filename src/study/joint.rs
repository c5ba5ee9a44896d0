//! Studies of several data sets: `[[datasets]]` entries, each with its own
//! data file, columns, sigma and formula, fitted jointly; `[parameters]`
//! lists every parameter once and a parameter used by several formulas is
//! shared.
//!
//! ```toml
//! [[datasets]]
//! name = "run_300K"
//! file = "run_300K.csv"
//! x = "t"
//! y = "c"
//! sigma = "u_c"
//! formula = "c0*exp(-A*exp(-Ea/(R*300))*t)"
//!
//! [[datasets]]
//! name = "run_320K"
//! file = "run_320K.csv"
//! x = "t"
//! y = "c"
//! sigma = 0.01
//! formula = "c1*exp(-A*exp(-Ea/(R*320))*t)"
//!
//! [parameters]
//! c0 = { start = 1 }
//! c1 = { start = 1 }
//! A  = { start = 1e6 }
//! Ea = { start = 40000 }
//! ```
//!
//! Each entry is read and checked like `[data]` + `[model]` (every error
//! names `datasets[i].KEY`), then the entries are concatenated into one
//! [`Dataset`] with one [`DataGroup`] per entry and a last `x` column
//! holding each point's data-set index, and fitted through one
//! [`JointModel`]. Rules beyond those of `[data]`:
//!
//! * `[[datasets]]` replaces `[data]` and `[model]`: using both is an error;
//! * every entry needs a `name`, unique, and a `formula`;
//! * every parameter must be used by at least one formula;
//! * either every data set states sigma or none does (one common model of
//!   the errors: without sigma, one residual variance is estimated for all);
//! * `[[inverse]]` needs a single data set.

use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

use super::error::{self, At, StudyError};
use super::spec::{self, DataSpec, SigmaSpec, StudySpec};
use super::{
    check_spec, dataset_from_table, invalid, key_column_at, parse_raw, sha256_hex, Study, StudyWarning,
};
use crate::data::{DataGroup, Dataset};
use crate::fit::FitOptions;
use crate::model::{self, JointModel, JointPart, ModelErrorKind, ModelFn, Symbols};

/// Name of the joint data's last `x` column: each point's data-set index.
pub const GROUP_COLUMN: &str = "dataset";

/// One `[[datasets]]` entry as written.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DatasetEntry {
    /// Name of the data set (unique; used in the report and figure names).
    #[serde(default)]
    pub name: String,
    /// The CSV file, relative to the study file (absolute paths allowed).
    #[serde(default)]
    pub file: PathBuf,
    /// Independent-variable columns: `x = "t"` or `x = ["x1", "x2"]`.
    #[serde(with = "spec::one_or_many")]
    pub x: Vec<String>,
    /// Response column.
    pub y: String,
    /// Standard uncertainties: a column, or one number for every point.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma: Option<SigmaSpec>,
    /// Standard uncertainties of x (errors in x). Not supported in a
    /// study of several data sets: the loader refuses it, naming the key.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sigma_x: Option<SigmaSpec>,
    /// Aliases: identifier = CSV header.
    #[serde(default, with = "spec::ordered", skip_serializing_if = "Vec::is_empty")]
    pub columns: Vec<(String, String)>,
    /// The formula over the parameters, constants and this entry's x names.
    #[serde(default)]
    pub formula: String,
}

impl DatasetEntry {
    /// The entry's data keys as a `[data]` table.
    pub fn data_spec(&self) -> DataSpec {
        DataSpec {
            file: self.file.clone(),
            x: self.x.clone(),
            y: self.y.clone(),
            sigma: self.sigma.clone(),
            sigma_x: None,
            columns: self.columns.clone(),
        }
    }
}

/// Renames `data.KEY` to `datasets[i].KEY` in an error of the `[data]`
/// reader, so that it names the entry.
fn rekey(e: StudyError, prefix: &str) -> StudyError {
    let fix = |s: String| {
        s.replace("`data.", &format!("`{prefix}."))
            .replace("in [data]", &format!("in {prefix}"))
    };
    let fix_key = |k: String| match k.strip_prefix("data.") {
        Some(rest) => format!("{prefix}.{rest}"),
        None => k,
    };
    match e {
        StudyError::Invalid { at, key, why } => StudyError::Invalid {
            at,
            key: fix_key(key),
            why: fix(why),
        },
        StudyError::MissingColumn {
            at,
            key,
            name,
            data_file,
            available,
            hint_text,
        } => StudyError::MissingColumn {
            at,
            key: fix_key(key),
            name,
            data_file,
            available,
            hint_text: hint_text.map(|h| fix(h.into_string()).into_boxed_str()),
        },
        other => other,
    }
}

/// One entry read: its data, where the points came from, and its spec.
struct Read {
    data: Dataset,
    file: PathBuf,
    lines: Vec<usize>,
    /// 1-based field numbers of its x columns.
    x_columns: Vec<usize>,
    sha256: String,
    parameters: Vec<String>,
}

/// Resolves a study of `[[datasets]]` (see the module documentation).
pub(super) fn from_spec(spec: StudySpec, base_dir: &Path, name: &str) -> Result<Study, StudyError> {
    for table in ["data", "model"] {
        if spec.locations.has_table(table) {
            return Err(invalid(
                &spec,
                table,
                "cannot be used together with [[datasets]]: write each data set's file, columns and \
                 formula in its [[datasets]] entry, or use [data] and [model] without [[datasets]]",
            ));
        }
    }
    let (params, options) = check_spec(&spec)?;
    let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
    if !spec.inverse.is_empty() {
        return Err(invalid(
            &spec,
            "inverse[0]",
            "reads a response off one fitted curve, which needs a single data set ([data] and [model]); \
             a study of [[datasets]] has one curve per data set",
        ));
    }
    let mut reads: Vec<Read> = Vec::with_capacity(spec.datasets.len());
    let mut parts: Vec<JointPart> = Vec::with_capacity(spec.datasets.len());
    let mut used_by: Vec<Vec<usize>> = vec![Vec::new(); names.len()];
    let mut warnings = Vec::new();
    for (i, entry) in spec.datasets.iter().enumerate() {
        let prefix = format!("datasets[{i}]");
        let key = |k: &str| format!("{prefix}.{k}");
        if entry.name.trim().is_empty() {
            return Err(invalid(
                &spec,
                &key("name"),
                "is missing or empty: give every data set a name",
            ));
        }
        if let Some(j) = spec.datasets[..i].iter().position(|e| e.name == entry.name) {
            return Err(invalid(
                &spec,
                &key("name"),
                format!(
                    "`{}` is also the name of datasets[{j}]: every data set needs its own name",
                    entry.name
                ),
            ));
        }
        if entry.formula.trim().is_empty() {
            return Err(invalid(
                &spec,
                &key("formula"),
                "is missing or empty: write the data set's model formula",
            ));
        }
        if entry.file.as_os_str().is_empty() {
            return Err(invalid(
                &spec,
                &key("file"),
                "is missing or empty: name the data file (CSV), relative to the study file",
            ));
        }
        if entry.sigma_x.is_some() {
            return Err(invalid(
                &spec,
                &key("sigma_x"),
                "is not supported in a study of several [[datasets]]: errors in x (the effective \
                 variance) apply to a single data set ([data] and [model]); remove it, or fit that \
                 data set on its own",
            ));
        }
        if entry.x.len() > model::joint::MAX_VARS {
            return Err(invalid(
                &spec,
                &key("x"),
                format!(
                    "names {} columns; a data set may have at most {}",
                    entry.x.len(),
                    model::joint::MAX_VARS
                ),
            ));
        }
        // The entry read as [data] + [model], its keys renamed.
        let mut sub = spec.clone();
        sub.datasets = Vec::new();
        sub.data = entry.data_spec();
        sub.model.formula = entry.formula.clone();
        sub.locations = spec.locations.renamed(&[
            (&format!("{prefix}."), "data."),
            (&key("formula"), "model.formula"),
        ]);
        let file = base_dir.join(&entry.file);
        let bytes = super::read_input(&file, super::MAX_DATA_BYTES).map_err(|source| {
            StudyError::ReadDatasetFile {
                at: Box::new(At::file(&file)),
                key_at: Box::new(spec.at(&key("file"))),
                key: key("file"),
                source,
            }
        })?;
        let raw = parse_raw(&bytes, &file)?;
        let (data, columns) = dataset_from_table(&sub, &raw).map_err(|e| rekey(e, &prefix))?;
        if data.is_empty() {
            return Err(StudyError::NoDataRows {
                at: Box::new(At::file(&file)),
            });
        }
        super::no_shadowed_x(&spec, &data.x_names)?;
        if sub.data.sigma.is_some() != spec.datasets[0].sigma.is_some() {
            return Err(invalid(
                &spec,
                &key("sigma"),
                format!(
                    "{} while datasets[0] {}: either every data set states sigma or none does \
                     (without sigma one residual variance is estimated for all data sets together)",
                    if entry.sigma.is_some() {
                        "is given"
                    } else {
                        "is absent"
                    },
                    if spec.datasets[0].sigma.is_some() {
                        "gives one"
                    } else {
                        "gives none"
                    },
                ),
            ));
        }
        let tape = compile_entry(&spec, &key("formula"), &entry.formula, &names, &data.x_names)?;
        let local: Vec<usize> = (0..names.len()).filter(|&j| tape.uses_parameter(j)).collect();
        let local_names: Vec<String> = local.iter().map(|&j| names[j].clone()).collect();
        let local_tape = compile_entry(
            &spec,
            &key("formula"),
            &entry.formula,
            &local_names,
            &data.x_names,
        )?;
        for &j in &local {
            used_by[j].push(i);
        }
        if data.len() >= 2 && !data.x.is_empty() {
            let constant: Vec<bool> = data.x.iter().map(|c| c.iter().all(|v| *v == c[0])).collect();
            if constant.iter().all(|&c| c) {
                return Err(StudyError::ConstantX {
                    at: Box::new(At::file(&file)),
                    columns: data.x_names.clone(),
                });
            }
            for (k, c) in constant.iter().enumerate() {
                if *c {
                    warnings.push(StudyWarning::ConstantXColumn {
                        column: format!("{} (data set `{}`)", data.x_names[k], entry.name),
                    });
                }
            }
        }
        parts.push(JointPart {
            tape: local_tape,
            map: local,
        });
        reads.push(Read {
            data,
            file,
            lines: raw.lines.clone(),
            x_columns: columns.x.iter().map(|j| j + 1).collect(),
            sha256: sha256_hex(&bytes),
            parameters: local_names,
        });
    }
    for (j, p) in params.iter().enumerate() {
        if used_by[j].is_empty() {
            return Err(invalid(
                &spec,
                &format!("parameters.{}", p.name),
                format!(
                    "is declared but no data set's formula uses it: remove it or use it in a formula \
                     (formulas of {})",
                    error::name_list(&spec.datasets.iter().map(|e| e.name.clone()).collect::<Vec<_>>())
                ),
            ));
        }
    }
    let dataset = concatenate(&spec, &reads);
    let n = dataset.len();
    let free = params.iter().filter(|p| !p.fixed).count();
    if n < free + 1 {
        return Err(StudyError::TooFewPoints {
            at: Box::new(At::file(&spec.origin)),
            points: n,
            free,
            needed: free + 1,
        });
    }
    let joint = JointModel::new(parts, names.len(), dataset.x.len() - 1);
    // The model must be finite at the starts for every point.
    let starts: Vec<f64> = params.iter().map(|p| p.start).collect();
    let xs = dataset.x_slices();
    let mut values = vec![0.0; n];
    let mut jac = vec![0.0; n * names.len()];
    let mut scratch = Vec::new();
    if let Err(bad) = joint.eval(&starts, &xs, &mut values, Some(&mut jac), &mut scratch) {
        let i = bad.point.min(n - 1);
        let (g, group) = dataset
            .groups
            .iter()
            .enumerate()
            .find(|(_, g)| g.range().contains(&i))
            .expect("every point lies in a data set");
        let local = i - group.start;
        return Err(StudyError::NotFiniteAtStart {
            at: Box::new(super::x_cell_or_line(
                &reads[g].file,
                reads[g].lines[local],
                &reads[g].x_columns,
            )),
            study: Box::new(At::file(&spec.origin)),
            point: i + 1,
            x: reads[g]
                .data
                .x_names
                .iter()
                .zip(&reads[g].data.x)
                .map(|(n, c)| (n.clone(), c[local]))
                .collect(),
            derivative: values[i].is_finite(),
        });
    }
    let first = &spec.datasets[0];
    let model = compile_entry(
        &spec,
        "datasets[0].formula",
        &first.formula,
        &names,
        &reads[0].data.x_names,
    )?;
    let derived = super::compile_derived(&spec, &names)?;
    let formula = spec
        .datasets
        .iter()
        .map(|e| format!("{}: {}", e.name, e.formula))
        .collect::<Vec<_>>()
        .join("; ");
    // One digest for all the data: SHA-256 of each file's digest in entry
    // order, so that a change to any data file changes it (what a merge of
    // shards and the provenance compare); each file's own digest is in its
    // group.
    let combined: String = reads.iter().map(|r| format!("{}\n", r.sha256)).collect();
    let data_sha256 = Some(sha256_hex(combined.as_bytes()));
    let level = spec.audit.level;
    Ok(Study {
        path: spec.origin.clone(),
        name: name.to_string(),
        title: spec.title.clone(),
        data_file: None,
        formula,
        parameters: params,
        constants: spec.constants.clone(),
        dataset,
        fit_options: FitOptions { level, ..options },
        audit: spec.audit.clone(),
        model,
        joint: Some(joint),
        report: spec.report,
        sigma_spec: None,
        derived,
        inverse: Vec::new(),
        inverse_model: None,
        study_sha256: None,
        data_sha256,
        data_lines: None,
        warnings,
    })
}

/// Compiles one entry's formula over `params` and its x names; errors name
/// `key` (`datasets[i].formula`) and the column.
fn compile_entry(
    spec: &StudySpec,
    key: &str,
    formula: &str,
    params: &[String],
    vars: &[String],
) -> Result<model::Tape, StudyError> {
    let symbols = Symbols {
        parameters: params,
        constants: &spec.constants,
        variables: vars,
    };
    model::compile(formula, &symbols).map_err(|e| {
        let message = match &e.kind {
            ModelErrorKind::UnknownName { name, suggestion } => format!(
                "uses `{name}`, which is neither a parameter, a constant nor an x column of this data set; \
                 known names: {}{}",
                error::name_list(
                    &params
                        .iter()
                        .chain(spec.constants.iter().map(|(n, _)| n))
                        .chain(vars)
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
        StudyError::DatasetFormula {
            at: Box::new(key_column_at(spec, key, e.column)),
            key: key.to_string(),
            message,
            column: e.column,
        }
    })
}

/// The data sets one after the other: joint x column `k` holds each data
/// set's `k`-th independent variable (0 for a data set with fewer), named
/// by that variable when all data sets agree, else by their names joined
/// with `/`; a last column holds each point's data-set index.
fn concatenate(spec: &StudySpec, reads: &[Read]) -> Dataset {
    let slots = reads.iter().map(|r| r.data.x.len()).max().unwrap_or(0);
    let n: usize = reads.iter().map(|r| r.data.len()).sum();
    let mut x_names = Vec::with_capacity(slots + 1);
    for k in 0..slots {
        let mut seen: Vec<&str> = Vec::new();
        for r in reads {
            if let Some(nm) = r.data.x_names.get(k) {
                if !seen.contains(&nm.as_str()) {
                    seen.push(nm);
                }
            }
        }
        x_names.push(seen.join("/"));
    }
    x_names.push(GROUP_COLUMN.to_string());
    let mut x = vec![Vec::with_capacity(n); slots + 1];
    let mut y = Vec::with_capacity(n);
    let with_sigma = reads.iter().all(|r| r.data.sigma.is_some());
    let mut sigma = Vec::with_capacity(if with_sigma { n } else { 0 });
    let mut groups = Vec::with_capacity(reads.len());
    let mut ys: Vec<&str> = Vec::new();
    for (g, (r, e)) in reads.iter().zip(&spec.datasets).enumerate() {
        let len = r.data.len();
        for (k, col) in x.iter_mut().enumerate().take(slots) {
            match r.data.x.get(k) {
                Some(c) => col.extend_from_slice(c),
                None => col.extend(std::iter::repeat(0.0).take(len)),
            }
        }
        x[slots].extend(std::iter::repeat(g as f64).take(len));
        groups.push(DataGroup {
            name: e.name.clone(),
            formula: e.formula.clone(),
            file: Some(r.file.display().to_string()),
            sha256: Some(r.sha256.clone()),
            x_names: r.data.x_names.clone(),
            y_name: r.data.y_name.clone(),
            parameters: r.parameters.clone(),
            start: y.len(),
            len,
        });
        y.extend_from_slice(&r.data.y);
        if let Some(s) = &r.data.sigma {
            if with_sigma {
                sigma.extend_from_slice(s);
            }
        }
        if !ys.contains(&r.data.y_name.as_str()) {
            ys.push(&r.data.y_name);
        }
    }
    Dataset {
        x_names,
        x,
        y_name: ys.join("/"),
        y,
        sigma: with_sigma.then_some(sigma),
        sigma_x: None,
        groups,
    }
}
