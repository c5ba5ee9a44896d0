//! Fuzz target `study`: arbitrary bytes as a study file and a data file.
//!
//! The input is split at the first line `%%`: the part before is the study
//! file (TOML), the part after the data file (CSV). Without that line the
//! whole input is tried both ways: as a study file with a fixed good data
//! file, and as a data file with a fixed good study file. Each part goes
//! through `StudySpec::from_toml_str`, `parse_raw` (and every column through
//! `numeric_column`), `Study::from_spec` on files in a temporary folder,
//! `Study::from_dataset`, and, for a study that loads and is small, a base
//! fit with a capped iteration count. Nothing may panic; every error must
//! render as text.
#![no_main]

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use fitaudit::data::Dataset;
use fitaudit::study::{parse_raw, Study, StudySpec};
use libfuzzer_sys::fuzz_target;

const GOOD_STUDY: &str = r#"[data]
file = "d.csv"
x = "t"
y = "y"
sigma = "u"
[model]
formula = "a + b*exp(-t/tau)"
[parameters]
a = { start = 1.0 }
b = { start = 4.0 }
tau = { start = 2.0, min = 0.01, max = 100 }
"#;

const GOOD_CSV: &str = "t,y,u\n0,6,0.1\n1,4.03,0.1\n2,2.84,0.1\n3,2.11,0.1\n4,1.68,0.1\n5,1.41,0.1\n";

/// A private folder for the data file, one per fuzzing process.
fn folder() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let d = std::env::temp_dir().join(format!("fitaudit-fuzz-study-{}", std::process::id()));
        std::fs::create_dir_all(&d).expect("temporary folder");
        d
    })
}

fn split(data: &[u8]) -> Option<(&[u8], &[u8])> {
    let mut start = 0;
    for line in data.split(|b| *b == b'\n') {
        let end = start + line.len();
        let trimmed = line.strip_suffix(b"\r").unwrap_or(line);
        if trimmed == b"%%" {
            let rest = data.get(end + 1..).unwrap_or(&[]);
            return Some((&data[..start], rest));
        }
        start = end + 1;
    }
    None
}

fn run(study_bytes: &[u8], csv: &[u8]) {
    let dir = folder();
    let file = dir.join("d.csv");
    // The data file alone.
    let raw = match parse_raw(csv, &file) {
        Ok(raw) => {
            let _ = raw.require_rows().map_err(|e| e.to_string());
            let cols: Vec<Option<Vec<f64>>> = (0..raw.headers.len())
                .map(|j| raw.numeric_column(j).map_err(|e| e.to_string()).ok())
                .collect();
            for (row, col) in raw.rows.iter().zip(0..) {
                assert_eq!(row.len(), raw.headers.len(), "row {col} is ragged after parse_raw");
            }
            Some((raw, cols))
        }
        Err(e) => {
            let _ = e.to_string();
            None
        }
    };
    let Ok(text) = std::str::from_utf8(study_bytes) else {
        return;
    };
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let origin = dir.join("s.toml");
    let mut spec = match StudySpec::from_toml_str(text, &origin) {
        Ok(s) => s,
        Err(e) => {
            let _ = e.to_string();
            return;
        }
    };
    // The data file name is replaced: a study may name any file on the
    // machine (a device, a huge file), which is not what this target tests.
    spec.data.file = PathBuf::from("d.csv");
    if std::fs::write(&file, csv).is_err() {
        return;
    }
    match Study::from_spec(spec.clone(), dir, "fuzz") {
        Ok(study) => {
            let free = study.free_parameters();
            assert!(study.dataset.len() > free, "a loaded study has fewer points than free parameters + 1");
            for w in &study.warnings {
                let _ = w.to_string();
            }
            fit_small(study);
        }
        Err(e) => {
            let _ = e.to_string();
        }
    }
    // The same spec against a data set built in code from the numeric columns.
    if let Some((_, cols)) = &raw {
        let numeric: Vec<Vec<f64>> = cols.iter().flatten().cloned().collect();
        let k = spec.data.x.len();
        if numeric.len() > k {
            let ds = Dataset {
                x_names: spec.data.x.clone(),
                x: numeric[..k].to_vec(),
                y_name: spec.data.y.clone(),
                y: numeric[k].clone(),
                sigma: numeric.get(k + 1).cloned(),
                sigma_x: None,
                groups: Vec::new(),
            };
            match Study::from_dataset(spec, ds, "fuzz") {
                Ok(study) => fit_small(study),
                Err(e) => {
                    let _ = e.to_string();
                }
            }
        }
    }
}

/// A base fit of a small loaded study, with few iterations.
fn fit_small(mut study: Study) {
    if study.dataset.len() > 64 || study.parameters.len() > 8 {
        return;
    }
    study.fit_options.max_iterations = study.fit_options.max_iterations.min(40);
    match fitaudit::fit::fit(&study.problem(), &study.dataset) {
        Ok(fit) => {
            assert_eq!(fit.parameters.len(), study.parameters.len());
            // The record must serialise (non-finite numbers become null).
            let _ = serde_json::to_string(&fit).expect("fit result serialises");
        }
        Err(e) => {
            let _ = e.to_string();
        }
    }
}

fuzz_target!(|data: &[u8]| {
    match split(data) {
        Some((study, csv)) => run(study, csv),
        None => {
            run(data, GOOD_CSV.as_bytes());
            run(GOOD_STUDY.as_bytes(), data);
        }
    }
});
