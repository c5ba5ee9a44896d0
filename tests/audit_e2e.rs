//! End-to-end runs of `fitaudit audit` and `fitaudit demo` through the
//! binary: the files exist, agree with results.json, and do not depend on
//! the thread count. Expectations are the tool's own contract (README).

use std::path::Path;

use assert_cmd::Command;
use serde_json::Value;

fn fitaudit() -> Command {
    Command::cargo_bin("fitaudit").unwrap()
}

/// Copies an embedded demo scenario (study + CSV) into `dir`.
fn scenario(dir: &Path, name: &str) -> std::path::PathBuf {
    let sc = fitaudit::demo::SCENARIOS.iter().find(|s| s.name == name).unwrap();
    std::fs::write(dir.join(sc.data_file), sc.data).unwrap();
    let study = dir.join(format!("{name}.toml"));
    std::fs::write(&study, sc.study).unwrap();
    study
}

fn audit(study: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    fitaudit()
        .arg("audit")
        .arg(study)
        .arg("--out")
        .arg(out)
        .args(["--quiet", "--replicates", "200", "--starts", "24"])
        .args(extra)
        .output()
        .unwrap()
}

fn strip_run_facts(mut v: Value) -> Value {
    v["provenance"]["date"] = Value::Null;
    v["provenance"]["threads"] = Value::Null;
    v["provenance"]["command_line"] = Value::Null;
    v
}

#[test]
fn audit_writes_consistent_files_independent_of_threads() {
    let tmp = tempfile::tempdir().unwrap();
    let study = scenario(tmp.path(), "cooling");
    let out1 = tmp.path().join("one");
    let out2 = tmp.path().join("two");
    let r1 = audit(&study, &out1, &["--threads", "1", "--replicates-csv"]);
    assert!(r1.status.success(), "{}", String::from_utf8_lossy(&r1.stderr));
    let r2 = audit(&study, &out2, &["--threads", "2", "--replicates-csv"]);
    assert!(r2.status.success());

    for f in [
        "report.html",
        "results.json",
        "summary.md",
        "replicates.csv",
        "figures/fit.svg",
        "figures/correlation.svg",
    ] {
        assert!(out1.join(f).is_file(), "{f} missing");
    }
    let j1: Value = serde_json::from_slice(&std::fs::read(out1.join("results.json")).unwrap()).unwrap();
    let j2: Value = serde_json::from_slice(&std::fs::read(out2.join("results.json")).unwrap()).unwrap();
    assert_eq!(j1["schema_version"], 1);
    assert_eq!(
        strip_run_facts(j1.clone()),
        strip_run_facts(j2),
        "results depend on the thread count"
    );

    // The replicate counts of the command line reached the diagnostics.
    assert_eq!(j1["bootstrap"]["replicates"], 200);
    assert_eq!(j1["monte_carlo"]["replicates"], 200);
    assert_eq!(j1["settings"]["multistart"]["starts"], 24);
    let starts = j1["multistart"]["starts"].as_u64().unwrap();
    let batches = j1["multistart"]["batches"].as_u64().unwrap();
    assert_eq!(starts, 24 * batches, "whole batches of 24");
    // The cooling curve has one minimum: no re-basing, no start_fit.
    assert_eq!(j1["rebased"], false);
    assert!(j1.get("start_fit").is_none());

    // Every verdict in results.json appears in the summary, the report and
    // on stdout, and every parameter has a figure.
    let html = std::fs::read_to_string(out1.join("report.html")).unwrap();
    let md = std::fs::read_to_string(out1.join("summary.md")).unwrap();
    let stdout = String::from_utf8_lossy(&r1.stdout);
    for v in j1["verdicts"].as_array().unwrap() {
        let name = v["parameter"].as_str().unwrap();
        let status = v["status"].as_str().unwrap();
        // Verdict rows: parameter, the quote (first), status; the reasons
        // follow as a list.
        let row_start = format!("| {} | ", name.replace('_', "\\_"));
        assert!(
            md.lines()
                .any(|l| l.starts_with(&row_start) && l.ends_with(&format!(" | {status} |"))),
            "summary lacks {name} {status}:\n{md}"
        );
        assert!(html.contains(name) && html.contains(status));
        assert!(stdout.contains(name) && stdout.contains(status), "{stdout}");
        assert!(out1.join(format!("figures/profile_{name}.svg")).is_file());
        assert!(out1.join(format!("figures/hist_{name}.svg")).is_file());
    }
    // The fitted chi-squared of the JSON is the one the report quotes.
    let chi2 = j1["fit"]["chi2"].as_f64().unwrap();
    assert!(
        html.contains(&format!("{chi2:.2}")) || html.contains(&format!("{chi2:.4}")),
        "chi2 {chi2} not in report"
    );
    // replicates.csv: one row per successful replicate of both diagnostics, plus the header.
    let csv = std::fs::read_to_string(out1.join("replicates.csv")).unwrap();
    let rows = j1["bootstrap"]["estimates"].as_array().unwrap().len()
        + j1["monte_carlo"]["estimates"].as_array().unwrap().len();
    assert_eq!(csv.lines().count(), rows + 1);

    // A second run into the same folder replaces it; a different seed changes the numbers.
    let r3 = audit(&study, &out1, &["--seed", "99"]);
    assert!(r3.status.success());
    let j3: Value = serde_json::from_slice(&std::fs::read(out1.join("results.json")).unwrap()).unwrap();
    assert_ne!(j3["bootstrap"]["parameters"], j1["bootstrap"]["parameters"]);
    assert!(
        !out1.join("replicates.csv").exists(),
        "the old run's files are gone"
    );
}

/// The vibration demo's start reaches a local minimum: the audit is
/// re-based at the best minimum, `--strict` exits 3, and the report and the
/// terminal lead with the notice and the start values; with `--keep-start`
/// the audited fit is the start's, whose verdicts fail.
#[test]
fn strict_exits_3_when_rebased_or_a_verdict_fails_and_only_limits_the_battery() {
    let tmp = tempfile::tempdir().unwrap();
    let study = scenario(tmp.path(), "vibration");
    let out = tmp.path().join("vib");
    let r = audit(&study, &out, &["--strict", "--only", "multistart,profile"]);
    assert_eq!(r.status.code(), Some(3), "{}", String::from_utf8_lossy(&r.stderr));
    let j: Value = serde_json::from_slice(&std::fs::read(out.join("results.json")).unwrap()).unwrap();
    assert!(j["bootstrap"].is_null() && j["monte_carlo"].is_null() && j["contours"].is_null());
    assert_eq!(j["multistart"]["base_is_best"], false);
    assert_eq!(j["multistart"]["audited_is_best"], true);
    assert_eq!(j["rebased"], true);
    let start_chi2 = j["start_fit"]["chi2"].as_f64().unwrap();
    let chi2 = j["fit"]["chi2"].as_f64().unwrap();
    assert_eq!(j["multistart"]["base_chi2"].as_f64().unwrap(), start_chi2);
    assert!(chi2 < start_chi2 / 10.0, "audited {chi2} start {start_chi2}");
    // The audited fit is at the generating frequency, 3.3 Hz.
    let f = j["fit"]["parameters"][1]["value"].as_f64().unwrap();
    assert!((f - 3.3).abs() < 0.05, "f {f}");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    let lead = html
        .find("re-based at the best minimum")
        .expect("the report leads with the re-basing notice");
    let verdicts = html.find("Verdict summary").unwrap();
    assert!(lead < verdicts);
    assert!(html.contains("f = { start = "), "start values in the notice");
    let stdout = String::from_utf8_lossy(&r.stdout);
    assert!(
        stdout
            .lines()
            .next()
            .unwrap()
            .starts_with("NOTICE: The study's start reaches a local minimum"),
        "{stdout}"
    );

    // Re-basing off: the start's fit is audited and the better minimum fails it.
    let out2 = tmp.path().join("vib-keep");
    let r = audit(
        &study,
        &out2,
        &["--strict", "--keep-start", "--only", "multistart"],
    );
    assert_eq!(r.status.code(), Some(3));
    let j: Value = serde_json::from_slice(&std::fs::read(out2.join("results.json")).unwrap()).unwrap();
    assert_eq!(j["rebased"], false);
    assert!(j.get("start_fit").is_none());
    assert_eq!(j["multistart"]["audited_is_best"], false);
    assert_eq!(j["fit"]["chi2"], j["multistart"]["base_chi2"]);
    assert!(j["verdicts"]
        .as_array()
        .unwrap()
        .iter()
        .any(|v| v["status"] == "fails"));
    let html = std::fs::read_to_string(out2.join("report.html")).unwrap();
    assert!(html.contains("not the best minimum"));
}

#[test]
fn demo_writes_three_reports_and_names_them() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("demo");
    let r = fitaudit()
        .current_dir(tmp.path())
        .args(["demo", "--quiet", "--out"])
        .arg(&out)
        .output()
        .unwrap();
    assert!(r.status.success(), "{}", String::from_utf8_lossy(&r.stderr));
    let stdout = String::from_utf8_lossy(&r.stdout);
    for name in ["cooling", "enzyme", "vibration"] {
        for f in ["report.html", "results.json", "summary.md", "figures/fit.svg"] {
            assert!(out.join(name).join(f).is_file(), "{name}/{f}");
        }
        assert!(stdout.contains(name), "{stdout}");
    }
    assert!(stdout.contains("3 holds, 0 doubtful, 0 fails"), "{stdout}");
    assert!(
        stdout.contains("vibration") && stdout.contains("audited at the best minimum found"),
        "{stdout}"
    );
}
