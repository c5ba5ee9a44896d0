//! Batch audits through the command line: several studies (or a folder of
//! them) into OUT/<study>/ with OUT/index.json and OUT/index.html; a study
//! that fails gets its row and does not stop the others; the exit status
//! is the gravest; a sharded batch merges into the same records.

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use serde_json::Value;

fn fitaudit() -> Command {
    Command::cargo_bin("fitaudit").unwrap()
}

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name)
}

/// Copies demo studies (invented data) into `dir`, adds a study with an
/// unknown key, and returns the study paths in the order given.
fn studies(dir: &Path) -> Vec<PathBuf> {
    for f in ["cooling.toml", "cooling.csv", "vibration.toml", "vibration.csv"] {
        std::fs::copy(demo(f), dir.join(f)).unwrap();
    }
    let broken = std::fs::read_to_string(dir.join("cooling.toml")).unwrap() + "\nbogus_key = 1\n";
    std::fs::write(dir.join("broken.toml"), broken).unwrap();
    vec![
        dir.join("cooling.toml"),
        dir.join("broken.toml"),
        dir.join("vibration.toml"),
    ]
}

const FAST: [&str; 5] = ["--replicates", "30", "--starts", "16", "--quiet"];

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn without_provenance(mut v: Value) -> Value {
    v.as_object_mut().unwrap().remove("provenance");
    v
}

fn rows_without_dates(mut v: Value) -> Value {
    let o = v.as_object_mut().unwrap();
    o.remove("date");
    o.remove("command_line");
    v
}

#[test]
fn a_failing_study_gets_its_row_the_others_run_and_the_exit_status_is_the_gravest() {
    let dir = tempfile::tempdir().unwrap();
    let paths = studies(dir.path());
    let out = dir.path().join("batch");
    let o = fitaudit()
        .arg("audit")
        .args(&paths)
        .args(FAST)
        .arg("--strict")
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    // cooling: 0; broken: 2 (bad input); vibration: 3 (--strict, re-based).
    // The gravest of 0, 2, 3 is 2 (docs/CLUSTER.md: 1 > 2 > 3 > 0).
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    let index = json(&out.join("index.json"));
    let rows = index["studies"].as_array().unwrap();
    assert_eq!(rows.len(), 3);
    assert_eq!(index["exit_status"], 2);
    assert_eq!(rows[0]["name"], "cooling");
    assert_eq!(rows[0]["status"], "audited");
    assert_eq!(rows[0]["exit_status"], 0);
    assert_eq!(rows[1]["name"], "broken");
    assert_eq!(rows[1]["status"], "error");
    assert_eq!(rows[1]["exit_status"], 2);
    let err = rows[1]["error"].as_str().unwrap();
    assert!(err.contains("bogus_key") && err.contains("broken.toml"), "{err}");
    assert!(!out.join("broken").exists());
    assert_eq!(rows[2]["name"], "vibration");
    assert_eq!(rows[2]["rebased"], true);
    assert_eq!(rows[2]["exit_status"], 3);
    // The row's notice numbers are the study record's own.
    for row in [&rows[0], &rows[2]] {
        let name = row["name"].as_str().unwrap();
        let r = json(&out.join(name).join("results.json"));
        let count = |s: &str| {
            r["verdicts"]
                .as_array()
                .unwrap()
                .iter()
                .filter(|v| v["status"] == s)
                .count()
        };
        assert_eq!(row["holds"].as_u64().unwrap() as usize, count("holds"), "{name}");
        assert_eq!(
            row["doubtful"].as_u64().unwrap() as usize,
            count("doubtful"),
            "{name}"
        );
        assert_eq!(row["fails"].as_u64().unwrap() as usize, count("fails"), "{name}");
        let free = r["fit"]["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|p| p["fixed"] == false)
            .count();
        assert_eq!(
            count("holds") + count("doubtful") + count("fails"),
            free,
            "{name}: one verdict per free parameter"
        );
        assert_eq!(row["report"], format!("{name}/report.html"));
        assert!(out.join(name).join("report.html").is_file());
        if row["rebased"] == true {
            assert_eq!(row["start_chi2"], r["start_fit"]["chi2"]);
            assert_eq!(row["best_chi2"], r["fit"]["chi2"]);
        }
    }
    // The page links every audited report and shows the error.
    let html = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert!(html.contains("href=\"cooling/report.html\"") && html.contains("href=\"vibration/report.html\""));
    assert!(html.contains("bogus_key") && html.contains("local minimum"));
    assert!(html.contains("do not replace"), "the caution closes the page");
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(stdout.contains("exit status 2"), "{stdout}");

    // Without the broken study, the gravest is --strict's 3; without
    // --strict, 0.
    // A missing study file is a study that fails to load: its row says so.
    let with_missing = [paths[0].clone(), dir.path().join("absent.toml")];
    let out3 = dir.path().join("batch3");
    let o = fitaudit()
        .arg("audit")
        .args(&with_missing)
        .args(["--only", "bootstrap", "--replicates", "20", "--quiet", "--out"])
        .arg(&out3)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let index = json(&out3.join("index.json"));
    assert_eq!(index["studies"][0]["status"], "audited");
    assert_eq!(index["studies"][1]["status"], "error");
    assert!(index["studies"][1]["error"]
        .as_str()
        .unwrap()
        .contains("absent.toml"));

    let two = [paths[0].clone(), paths[2].clone()];
    let out2 = dir.path().join("batch2");
    let o = fitaudit()
        .arg("audit")
        .args(&two)
        .args(FAST)
        .arg("--strict")
        .arg("--out")
        .arg(&out2)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(3));
    let o = fitaudit()
        .arg("audit")
        .args(&two)
        .args(FAST)
        .arg("--out")
        .arg(&out2)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(0));
}

#[test]
fn a_folder_is_a_batch_of_its_study_files_in_name_order() {
    let dir = tempfile::tempdir().unwrap();
    let folder = dir.path().join("studies");
    std::fs::create_dir(&folder).unwrap();
    let paths = studies(&folder);
    let out = dir.path().join("batch");
    let o = fitaudit()
        .arg("audit")
        .arg(&folder)
        .args(["--only", "bootstrap", "--replicates", "20", "--quiet", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    let index = json(&out.join("index.json"));
    let names: Vec<&str> = index["studies"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["broken", "cooling", "vibration"]);
    assert_eq!(paths.len(), 3);
    // An empty folder is bad input.
    let empty = dir.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    let o = fitaudit()
        .arg("audit")
        .arg(&empty)
        .arg("--quiet")
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("holds no study file"));
}

#[test]
fn a_sharded_batch_merges_into_the_batch_run() {
    let dir = tempfile::tempdir().unwrap();
    let paths = studies(dir.path());
    let run = dir.path().join("batch");
    let o = fitaudit()
        .arg("audit")
        .args(&paths)
        .args(FAST)
        .arg("--strict")
        .arg("--out")
        .arg(&run)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    // N = 2 deals the three studies out whole; N = 5 slices each one's work.
    for n in [2usize, 5] {
        let mut parts = Vec::new();
        for k in 1..=n {
            let p = dir.path().join(format!("part-{n}-{k}"));
            let o = fitaudit()
                .arg("audit")
                .args(&paths)
                .args(FAST)
                .arg("--strict")
                .args(["--shard", &format!("{k}/{n}"), "--out"])
                .arg(&p)
                .output()
                .unwrap();
            assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
            parts.push(p);
        }
        let merged = dir.path().join(format!("merged-{n}"));
        let o = fitaudit()
            .arg("merge")
            .args(&parts)
            .arg("--out")
            .arg(&merged)
            .arg("--quiet")
            .output()
            .unwrap();
        assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
        assert_eq!(
            rows_without_dates(json(&merged.join("index.json"))),
            rows_without_dates(json(&run.join("index.json"))),
            "N = {n}"
        );
        for s in ["cooling", "vibration"] {
            assert_eq!(
                without_provenance(json(&merged.join(s).join("results.json"))),
                without_provenance(json(&run.join(s).join("results.json"))),
                "{s}, N = {n}"
            );
        }
    }
}
