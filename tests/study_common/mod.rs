//! Shared helpers of the study tests: write a study file and a data file
//! into a fresh temporary directory and load them.
//!
//! The cooling data below are invented (demo numbers): these tests check
//! the file contract (src/study/mod.rs docs), not any fitted value.

#![allow(dead_code)]

use fitaudit::study::{self, Study, StudyError};
use std::path::PathBuf;

/// The base study file. Line numbers matter to the tests:
/// 1 title, 2 [data], 3 file, 4 x, 5 y, 6 sigma, 7 [model], 8 formula,
/// 9 [parameters], 10 T_env, 11 dT, 12 tau, 13 [audit], 14 seed.
pub const STUDY: &str = r#"title = "Cooling of a sealed vial"
[data]
file = "cooling.csv"
x = "t"
y = "temp"
sigma = "u"
[model]
formula = "T_env + dT*exp(-t/tau)"
[parameters]
T_env = { start = 20.0 }
dT = { start = 50.0, min = 0 }
tau = { start = 300, min = 1, max = 1e5 }
[audit]
seed = 7
"#;

/// The base data file: line 1 comment, line 2 header, lines 3-7 data.
pub const CSV: &str = "# cooling curve (demo numbers)
t,temp,u
0,70.1,0.2
100,58.2,0.2
200,49.9,0.3
300,44.3,0.2
600,34.6,0.25
";

/// A temporary directory holding `study.toml` and `cooling.csv`.
pub struct Case {
    pub dir: tempfile::TempDir,
    pub study: PathBuf,
    pub data: PathBuf,
}

/// Writes both files (the data as raw bytes).
pub fn case_bytes(study_text: &str, csv: &[u8]) -> Case {
    let dir = tempfile::tempdir().unwrap();
    let study = dir.path().join("study.toml");
    let data = dir.path().join("cooling.csv");
    std::fs::write(&study, study_text).unwrap();
    std::fs::write(&data, csv).unwrap();
    Case { dir, study, data }
}

/// Writes both files and loads the study.
pub fn load(study_text: &str, csv: &str) -> (Case, Result<Study, StudyError>) {
    load_bytes(study_text, csv.as_bytes())
}

/// Writes both files (data as bytes) and loads the study.
pub fn load_bytes(study_text: &str, csv: &[u8]) -> (Case, Result<Study, StudyError>) {
    let c = case_bytes(study_text, csv);
    let r = study::load(&c.study);
    (c, r)
}

/// Loads and returns the error message; panics if loading succeeds.
pub fn err(study_text: &str, csv: &str) -> String {
    err_bytes(study_text, csv.as_bytes())
}

/// Like [`err`] with the data as bytes.
pub fn err_bytes(study_text: &str, csv: &[u8]) -> String {
    let (_c, r) = load_bytes(study_text, csv);
    match r {
        Ok(_) => panic!("expected an error"),
        Err(e) => e.to_string(),
    }
}

/// Asserts that `msg` contains every piece.
#[track_caller]
pub fn has(msg: &str, pieces: &[&str]) {
    for p in pieces {
        assert!(msg.contains(p), "message lacks {p:?}:\n{msg}");
    }
}
