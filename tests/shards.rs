//! Exact shards through the command line: `audit --shard K/N` parts merged
//! by `fitaudit merge` give the single-machine results.json bit for bit
//! (provenance aside), and parts that do not belong together are refused.
//!
//! The identity checked: every random draw comes from the stream of its
//! replicate index and every item is computed on its own, so splitting the
//! items and joining them in index order cannot change any number.

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use serde_json::Value;

fn fitaudit() -> Command {
    Command::cargo_bin("fitaudit").unwrap()
}

/// An invented decay study: 15 points of y = 2 + 5 exp(-x/3) with a fixed
/// deterministic disturbance, sigma 0.05, small diagnostics settings.
fn write_study(dir: &Path, name: &str, extra_audit: &str) -> PathBuf {
    let mut csv = String::from("x,y,u\n");
    for i in 0..15 {
        let x = 0.5 * i as f64;
        let y = 2.0 + 5.0 * (-x / 3.0).exp() + 0.05 * (7.3 * i as f64).sin();
        csv.push_str(&format!("{x},{y},0.05\n"));
    }
    std::fs::write(dir.join(format!("{name}.csv")), csv).unwrap();
    let study = format!(
        "title = \"Decay {name}\"\n[data]\nfile = \"{name}.csv\"\nx = \"x\"\ny = \"y\"\nsigma = \"u\"\n\
         [model]\nformula = \"c + A*exp(-x/tau)\"\n[parameters]\nc = {{ start = 1 }}\nA = {{ start = 4 }}\n\
         tau = {{ start = 2, min = 0.01 }}\n[audit]\nseed = 11\n{extra_audit}\
         bootstrap = {{ replicates = 45 }}\nmonte_carlo = {{ replicates = 37 }}\nprofile = {{ points = 9 }}\n\
         contours = {{ grid = 7 }}\nmultistart = {{ starts = 6, max_starts = 12 }}\n"
    );
    let path = dir.join(format!("{name}.toml"));
    std::fs::write(&path, study).unwrap();
    path
}

/// results.json without its provenance block, as text (the pretty-printed
/// provenance object is the only part that may differ).
fn stripped(path: &Path) -> (String, Value) {
    let text = std::fs::read_to_string(path).unwrap();
    let mut out = String::new();
    let mut skipping = false;
    for line in text.lines() {
        if line.starts_with("  \"provenance\": {") {
            skipping = true;
        } else if skipping {
            if line == "  }," {
                skipping = false;
            }
        } else {
            out.push_str(line);
            out.push('\n');
        }
    }
    let mut v: Value = serde_json::from_str(&text).unwrap();
    v.as_object_mut().unwrap().remove("provenance");
    (out, v)
}

fn shard(study: &Path, k: usize, n: usize, out: &Path, extra: &[&str]) {
    let o = fitaudit()
        .arg("audit")
        .arg(study)
        .args(["--quiet", "--shard", &format!("{k}/{n}"), "--out"])
        .arg(out)
        .args(extra)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

fn merge(parts: &[PathBuf], out: &Path) -> std::process::Output {
    fitaudit()
        .arg("merge")
        .args(parts)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .output()
        .unwrap()
}

#[test]
fn merges_of_1_2_3_and_7_shards_equal_the_single_run_bit_for_bit() {
    let dir = tempfile::tempdir().unwrap();
    // The coverage simulation too (10 data sets: shard 7/7 gets one or two).
    let study = write_study(
        dir.path(),
        "decay",
        "coverage = { enabled = true, replicates = 10 }\n",
    );
    let single = dir.path().join("single");
    fitaudit()
        .arg("audit")
        .arg(&study)
        .args(["--quiet", "--out"])
        .arg(&single)
        .assert()
        .success();
    let (want_text, want) = stripped(&single.join("results.json"));
    // The record holds every diagnostic, so each one's slicing is checked.
    for key in [
        "bootstrap",
        "monte_carlo",
        "profile",
        "contours",
        "multistart",
        "coverage",
    ] {
        assert!(!want[key].is_null(), "{key} missing from the single run");
    }
    // Every simulated data set is counted once: run = replicates.
    assert_eq!(want["coverage"]["replicates"], 10);
    assert_eq!(want["coverage"]["run"], 10);
    assert!(want["diagnostics_run"]
        .as_array()
        .unwrap()
        .iter()
        .any(|d| d == "coverage"));
    assert_eq!(
        want["bootstrap"]["estimates"].as_array().unwrap().len()
            + want["bootstrap"]["failed"].as_u64().unwrap() as usize,
        45
    );
    for n in [1usize, 2, 3, 7] {
        let mut parts = Vec::new();
        // Written in reverse order and given to the merge in that order:
        // the merge orders the parts itself.
        for k in (1..=n).rev() {
            let p = dir.path().join(format!("part-{n}-{k}"));
            shard(&study, k, n, &p, &[]);
            parts.push(p);
        }
        let out = dir.path().join(format!("merged-{n}"));
        let o = merge(&parts, &out);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let (text, got) = stripped(&out.join("results.json"));
        assert_eq!(got, want, "merge of {n} shards differs from the single run");
        assert_eq!(text, want_text, "merge of {n} shards: results.json text differs");
        // The same report files as the single run.
        for f in [
            "report.html",
            "summary.md",
            "bands.csv",
            "figures/fit.svg",
            "figures/coverage.svg",
        ] {
            assert!(out.join(f).is_file(), "{f} missing after merging {n} shards");
        }
        assert_eq!(
            std::fs::read(out.join("bands.csv")).unwrap(),
            std::fs::read(single.join("bands.csv")).unwrap()
        );
    }
}

#[test]
fn adaptive_monte_carlo_shards_compute_to_the_cap_and_the_merge_stops_where_one_machine_stops() {
    let dir = tempfile::tempdir().unwrap();
    let study = write_study(dir.path(), "adaptive", "");
    // Adaptive with a loose tolerance.
    let text = std::fs::read_to_string(&study).unwrap().replace(
        "monte_carlo = { replicates = 37 }",
        "monte_carlo = { replicates = 2000, adaptive = true, adaptive_tolerance = 0.5 }",
    );
    std::fs::write(&study, text).unwrap();
    let single = dir.path().join("single");
    fitaudit()
        .arg("audit")
        .arg(&study)
        .args(["--quiet", "--only", "monte-carlo", "--out"])
        .arg(&single)
        .assert()
        .success();
    let (want_text, want) = stripped(&single.join("results.json"));
    // JCGM 101:2008, 7.9: batches of h = ceil(100 / (1 - 0.6827)) = 316
    // trials; stability is first judged after the second batch, and with a
    // 50 % tolerance it holds there: 2 h = 632 trials of the cap 2000.
    assert_eq!(want["monte_carlo"]["run"], 632);
    assert_eq!(want["monte_carlo"]["adaptive_stable"], true);
    let mut parts = Vec::new();
    for k in 1..=3 {
        let p = dir.path().join(format!("part-{k}"));
        shard(&study, k, 3, &p, &["--only", "monte-carlo"]);
        parts.push(p);
    }
    let out = dir.path().join("merged");
    let o = merge(&parts, &out);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (text, got) = stripped(&out.join("results.json"));
    assert_eq!(got, want);
    assert_eq!(text, want_text);
}

fn refused(parts: &[PathBuf], out: &Path) -> String {
    let o = merge(parts, out);
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(!out.exists(), "a refused merge leaves no folder");
    String::from_utf8_lossy(&o.stderr).into_owned()
}

#[test]
fn parts_that_do_not_belong_together_are_refused_naming_them() {
    let dir = tempfile::tempdir().unwrap();
    let study = write_study(dir.path(), "decay", "");
    let fast = ["--only", "bootstrap,monte-carlo"];
    let part = |name: &str, k: usize, n: usize, extra: &[&str]| {
        let p = dir.path().join(name);
        let mut args: Vec<&str> = fast.to_vec();
        args.extend_from_slice(extra);
        shard(&study, k, n, &p, &args);
        p
    };
    let p1 = part("p1", 1, 3, &[]);
    let p2 = part("p2", 2, 3, &[]);
    let p3 = part("p3", 3, 3, &[]);
    let out = dir.path().join("merged");

    // Missing: shard 2/3 is named.
    let e = refused(&[p1.clone(), p3.clone()], &out);
    assert!(e.contains("shard 2/3 missing"), "{e}");
    // Duplicated: the part given twice is named with both paths.
    let p3b = dir.path().join("p3-again");
    shard(&study, 3, 3, &p3b, &fast);
    let e = refused(&[p1.clone(), p2.clone(), p3.clone(), p3b.clone()], &out);
    assert!(
        e.contains("shard 3/3 given 2 times") && e.contains("p3-again"),
        "{e}"
    );
    // Another split.
    let q = part("q", 2, 4, &[]);
    let e = refused(&[p1.clone(), q.clone(), p3.clone()], &out);
    assert!(e.contains("different splits") && e.contains("2/4"), "{e}");
    // Another seed.
    let s2 = part("s2", 2, 3, &["--seed", "12"]);
    let e = refused(&[p1.clone(), s2, p3.clone()], &out);
    assert!(e.contains("seed 11") && e.contains("seed 12"), "{e}");
    // Other settings (replicates).
    let r2 = part("r2", 2, 3, &["--replicates", "44"]);
    let e = refused(&[p1.clone(), r2, p3.clone()], &out);
    assert!(e.contains("different settings"), "{e}");
    // Another study: the same file name with other contents.
    let other = tempfile::tempdir().unwrap();
    let study2 = write_study(other.path(), "decay", "level = 0.9\n");
    let o2 = dir.path().join("o2");
    shard(&study2, 2, 3, &o2, &fast);
    let e = refused(&[p1.clone(), o2, p3.clone()], &out);
    assert!(
        e.contains("different studies") || e.contains("different runs"),
        "{e}"
    );
    // Another tool version (a part rewritten as if by another release).
    let mut f = fitaudit::batch::read_part(&p2).unwrap();
    f.version = "0.0.1-other".into();
    let v2 = dir.path().join("v2");
    fitaudit::batch::write_part(&f, &v2).unwrap();
    let e = refused(&[p1.clone(), v2, p3.clone()], &out);
    assert!(e.contains("0.0.1-other") && e.contains("tool version"), "{e}");
    // A folder that is not a part.
    let e = refused(&[p1.clone(), dir.path().to_path_buf(), p3.clone()], &out);
    assert!(e.contains("part.cbor"), "{e}");
    // An --out naming one of the parts (or a folder holding one) would
    // replace that part with the merged report: refused, the part kept.
    for dest in [p2.clone(), dir.path().to_path_buf()] {
        let o = merge(&[p1.clone(), p2.clone(), p3.clone()], &dest);
        let e = String::from_utf8_lossy(&o.stderr).into_owned();
        assert_eq!(o.status.code(), Some(2), "{e}");
        assert!(e.contains("an input of this run"), "{e}");
        assert!(fitaudit::batch::read_part(&p2).is_ok(), "the part is kept");
    }
    // A study file changed after the shards ran.
    let text = std::fs::read_to_string(&study).unwrap();
    std::fs::write(&study, text.replace("Decay decay", "Decay decay, edited")).unwrap();
    let e = refused(&[p1, p2, p3], &out);
    assert!(e.contains("changed since the shards ran"), "{e}");
}

#[test]
fn bad_shard_arguments_are_usage_errors() {
    let dir = tempfile::tempdir().unwrap();
    let study = write_study(dir.path(), "decay", "");
    for bad in ["0/3", "4/3", "2", "x/y"] {
        let o = fitaudit()
            .arg("audit")
            .arg(&study)
            .args(["--shard", bad])
            .output()
            .unwrap();
        assert_eq!(o.status.code(), Some(2), "{bad}");
        assert!(String::from_utf8_lossy(&o.stderr).contains("K/N"), "{bad}");
    }
}

#[test]
fn a_shard_logs_progress_lines_when_stderr_is_not_a_terminal() {
    let dir = tempfile::tempdir().unwrap();
    let study = write_study(dir.path(), "decay", "");
    // stderr is a pipe here; an interval of 0 logs every update.
    let o = fitaudit()
        .arg("audit")
        .arg(&study)
        .args([
            "--only",
            "bootstrap",
            "--shard",
            "2/3",
            "--progress-interval",
            "0",
            "--out",
        ])
        .arg(dir.path().join("p"))
        .output()
        .unwrap();
    assert!(o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    // Shard 2/3 of 45 replicates holds replicates 15..30: 15 of them, and
    // the closing line reports all 15 (100.0 %).
    assert!(
        err.contains("progress: bootstrap (residual) 15/15 (100.0 %)"),
        "{err}"
    );
    assert!(
        !err.contains('\u{1b}'),
        "no terminal control codes in a log: {err}"
    );
    // --quiet silences it, and a bad interval is a usage error.
    let o = fitaudit()
        .arg("audit")
        .arg(&study)
        .args([
            "--only",
            "bootstrap",
            "--quiet",
            "--progress-interval",
            "0",
            "--out",
        ])
        .arg(dir.path().join("q"))
        .output()
        .unwrap();
    assert!(o.status.success() && o.stderr.is_empty());
    let o = fitaudit()
        .arg("audit")
        .arg(&study)
        .args(["--progress-interval", "nan"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
}

/// The single run's results.json (provenance aside) against the merge of
/// `n` shards of the same study.
fn assert_merge_equals_single(dir: &Path, study: &Path, tag: &str, n: usize) {
    let single = dir.join(format!("single-{tag}"));
    fitaudit()
        .arg("audit")
        .arg(study)
        .args(["--quiet", "--out"])
        .arg(&single)
        .assert()
        .success();
    let (want_text, want) = stripped(&single.join("results.json"));
    let parts: Vec<PathBuf> = (1..=n)
        .map(|k| {
            let p = dir.join(format!("part-{tag}-{k}"));
            shard(study, k, n, &p, &[]);
            p
        })
        .collect();
    let out = dir.join(format!("merged-{tag}"));
    let o = merge(&parts, &out);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (text, got) = stripped(&out.join("results.json"));
    assert_eq!(
        got, want,
        "{tag}: merge of {n} shards differs from the single run"
    );
    assert_eq!(text, want_text, "{tag}: results.json text differs");
}

#[test]
fn poisson_and_errors_in_x_shards_merge_to_the_single_run() {
    // Identity as above: the Poisson counts (Monte Carlo, parametric
    // bootstrap) and the x draws of errors in x come from each replicate's
    // own stream, so slicing cannot change them.
    let dir = tempfile::tempdir().unwrap();
    // Invented counts: round(1 + 12 exp(-x/3)) with a fixed disturbance.
    let mut csv = String::from("x,n\n");
    for i in 0..15 {
        let x = 0.5 * i as f64;
        let n = (1.0 + 12.0 * (-x / 3.0).exp() + 1.5 * (7.3 * i as f64).sin())
            .round()
            .max(0.0);
        csv.push_str(&format!("{x},{n}\n"));
    }
    std::fs::write(dir.path().join("counts.csv"), csv).unwrap();
    let counts = dir.path().join("counts.toml");
    std::fs::write(
        &counts,
        "title = \"Counts\"\n[data]\nfile = \"counts.csv\"\nx = \"x\"\ny = \"n\"\n\
         [model]\nformula = \"c + A*exp(-x/tau)\"\n[parameters]\nc = { start = 1, min = 0 }\n\
         A = { start = 10, min = 0 }\ntau = { start = 2, min = 0.01 }\n[fit]\nlikelihood = \"poisson\"\n\
         [audit]\nseed = 5\nbootstrap = { replicates = 30 }\nmonte_carlo = { replicates = 30 }\n\
         profile = { points = 7 }\ncontours = { grid = 5 }\nmultistart = { starts = 4, max_starts = 8 }\n",
    )
    .unwrap();
    assert_merge_equals_single(dir.path(), &counts, "poisson", 3);
    let xerr = write_study(dir.path(), "xerr", "");
    let text = std::fs::read_to_string(&xerr)
        .unwrap()
        .replace("sigma = \"u\"\n", "sigma = \"u\"\nsigma_x = 0.02\n")
        .replace("replicates = 45", "replicates = 30")
        .replace("replicates = 37", "replicates = 30");
    std::fs::write(&xerr, text).unwrap();
    assert_merge_equals_single(dir.path(), &xerr, "xerr", 2);
}

#[test]
fn joint_study_shards_merge_to_the_single_run_and_a_changed_data_file_is_refused() {
    // Two invented lines sharing a slope, each in its own file; the study
    // is named relative to the working folder, as a job script would, so
    // the record's data-set file names must come from the shards, not from
    // the merge's own reading of the study by its absolute path.
    let dir = tempfile::tempdir().unwrap();
    for (name, a) in [("left", 1.0), ("right", 3.0)] {
        let mut csv = String::from("x,y,u\n");
        for i in 0..8 {
            let x = i as f64;
            let y = a + 0.5 * x + 0.05 * (3.1 * i as f64 + a).sin();
            csv.push_str(&format!("{x},{y},0.05\n"));
        }
        std::fs::write(dir.path().join(format!("{name}.csv")), csv).unwrap();
    }
    std::fs::write(
        dir.path().join("joint.toml"),
        "title = \"Two lines\"\n[[datasets]]\nname = \"left\"\nfile = \"left.csv\"\nx = \"x\"\ny = \"y\"\n\
         sigma = \"u\"\nformula = \"a1 + b*x\"\n[[datasets]]\nname = \"right\"\nfile = \"right.csv\"\n\
         x = \"x\"\ny = \"y\"\nsigma = \"u\"\nformula = \"a2 + b*x\"\n[parameters]\na1 = { start = 0 }\n\
         a2 = { start = 0 }\nb = { start = 1 }\n[audit]\nseed = 3\nbootstrap = { replicates = 30 }\n\
         monte_carlo = { replicates = 30 }\nprofile = { points = 7 }\ncontours = { grid = 5 }\n\
         multistart = { starts = 4, max_starts = 8 }\n",
    )
    .unwrap();
    let run = |extra: &[&str], out: &str| {
        let o = fitaudit()
            .current_dir(dir.path())
            .args(["audit", "joint.toml", "--quiet", "--out", out])
            .args(extra)
            .output()
            .unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    };
    run(&[], "single");
    run(&["--shard", "1/2"], "p1");
    run(&["--shard", "2/2"], "p2");
    let parts = [dir.path().join("p1"), dir.path().join("p2")];
    let out = dir.path().join("merged");
    let o = merge(&parts, &out);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (want_text, want) = stripped(&dir.path().join("single/results.json"));
    let (text, got) = stripped(&out.join("results.json"));
    assert_eq!(got, want, "joint: merge differs from the single run");
    assert_eq!(text, want_text);
    assert_eq!(got["data"]["groups"][0]["file"], "./left.csv");
    assert!(got["study"]["data_sha256"].is_string());
    // A data file edited after the shards ran: its digest changes the
    // study's data digest, and the merge refuses.
    let path = dir.path().join("right.csv");
    let edited = std::fs::read_to_string(&path)
        .unwrap()
        .replace(",0.05\n", ",0.050\n");
    std::fs::write(&path, edited).unwrap();
    let e = refused(&parts, &dir.path().join("merged-again"));
    assert!(e.contains("changed since the shards ran"), "{e}");
}
