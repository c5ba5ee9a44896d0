//! Fault injection into the output-folder protocol (src/output.rs). The
//! testing hook `FITAUDIT_OUTPUT_FAULT=<point>` makes the process kill
//! itself with SIGKILL at a named point of writing or replacing a report;
//! `FITAUDIT_OUTPUT_NO_EXCHANGE=1` forces the two-rename fallback used
//! where the file system cannot swap two folders atomically. After every
//! kill the destination must hold the old report or the new one, complete
//! (every file the marker lists, nothing else), and the next run must
//! succeed and leave nothing stale beside it. The expectations are the
//! protocol's own contract (README, "Output folders"); no outside source
//! applies. No wall-clock time is asserted.

#![cfg(target_os = "linux")]

use std::collections::BTreeSet;
use std::os::unix::process::ExitStatusExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> PathBuf {
    assert_cmd::cargo::cargo_bin("fitaudit")
}

/// A straight line with a little deterministic scatter.
fn write_study(dir: &Path) -> PathBuf {
    let mut csv = String::from("x,y,u\n");
    for i in 0..8 {
        let x = i as f64;
        let y = 1.0 + 2.0 * x + 0.05 * (3.0 * x).sin();
        csv.push_str(&format!("{x},{y:.6},0.1\n"));
    }
    std::fs::write(dir.join("line.csv"), csv).unwrap();
    let study = dir.join("line.toml");
    std::fs::write(
        &study,
        "[data]\nfile = \"line.csv\"\nx = \"x\"\ny = \"y\"\nsigma = \"u\"\n\
         [model]\nformula = \"a + b*x\"\n\
         [parameters]\na = { start = 0 }\nb = { start = 1 }\n\
         [audit]\nprofile = { points = 7 }\n",
    )
    .unwrap();
    study
}

fn audit(dir: &Path, seed: u64, fault: Option<&str>, no_exchange: bool) -> Output {
    let mut cmd = Command::new(bin());
    cmd.current_dir(dir)
        .args([
            "audit",
            "line.toml",
            "--out",
            "rep",
            "--quiet",
            "--only",
            "profile",
        ])
        .args(["--threads", "1", "--seed", &seed.to_string()])
        .env_remove("FITAUDIT_OUTPUT_FAULT")
        .env_remove("FITAUDIT_OUTPUT_NO_EXCHANGE");
    if let Some(f) = fault {
        cmd.env("FITAUDIT_OUTPUT_FAULT", f);
    }
    if no_exchange {
        cmd.env("FITAUDIT_OUTPUT_NO_EXCHANGE", "1");
    }
    cmd.output().unwrap()
}

/// The files under `root`, relative, `/`-separated.
fn files(root: &Path) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.insert(p.strip_prefix(root).unwrap().to_string_lossy().into_owned());
            }
        }
    }
    out
}

/// Checks that `folder` is a complete report: exactly the files its marker
/// lists (and the marker), a results.json that parses; returns the seed
/// recorded in its command line.
fn complete_report(folder: &Path) -> u64 {
    let marker = std::fs::read_to_string(folder.join(".fitaudit-output")).unwrap();
    let mut listed: BTreeSet<String> = marker
        .lines()
        .filter_map(|l| l.strip_prefix("file "))
        .map(str::to_string)
        .collect();
    assert!(
        listed.contains("results.json") && listed.contains("report.html"),
        "{marker}"
    );
    listed.insert(".fitaudit-output".into());
    assert_eq!(files(folder), listed, "{}", folder.display());
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(folder.join("results.json")).unwrap()).unwrap();
    let line = json["provenance"]["command_line"].as_str().unwrap().to_string();
    let seed = line.split("--seed ").nth(1).unwrap().split(' ').next().unwrap();
    assert!(std::fs::read_to_string(folder.join("report.html"))
        .unwrap()
        .trim_end()
        .ends_with("</html>"));
    seed.parse().unwrap()
}

/// Entries of `dir` other than the study, its data and the report.
fn strays(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| !["line.toml", "line.csv", "rep"].contains(&n.as_str()))
        .collect()
}

#[test]
fn a_kill_at_any_point_leaves_the_old_or_the_new_report_and_the_next_run_clears_up() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    write_study(dir);
    let first = audit(dir, 1, None, false);
    assert_eq!(
        first.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&first.stderr)
    );
    assert_eq!(complete_report(&dir.join("rep")), 1);
    let mut current = 1u64;
    // (fault point, fallback, whether the new report is in place after the kill)
    let plan: [(&str, bool, Option<bool>); 10] = [
        ("staging-created", false, Some(false)),
        ("file-written", false, Some(false)),
        ("files-written", false, Some(false)),
        ("before-swap", false, Some(false)),
        ("after-swap", false, Some(true)),
        ("removing-old", false, Some(true)),
        ("before-swap", true, Some(false)),
        // Fallback: between the two renames the old report is aside, and
        // the next run puts it back before replacing it.
        ("after-aside", true, None),
        ("after-swap", true, Some(true)),
        ("removing-old", true, Some(true)),
    ];
    let mut seed = 10u64;
    for (point, fallback, new_in_place) in plan {
        seed += 1;
        let out = audit(dir, seed, Some(point), fallback);
        assert_eq!(
            out.status.signal(),
            Some(9),
            "{point}: the hook did not fire: {:?} {}",
            out.status,
            String::from_utf8_lossy(&out.stderr)
        );
        match new_in_place {
            Some(true) => assert_eq!(complete_report(&dir.join("rep")), seed, "{point}"),
            Some(false) => assert_eq!(complete_report(&dir.join("rep")), current, "{point}"),
            None => {
                assert!(!dir.join("rep").exists(), "{point}");
                let aside: Vec<String> = strays(dir).into_iter().filter(|n| n.contains(".old-")).collect();
                assert_eq!(aside.len(), 1, "{point}: {:?}", strays(dir));
                assert_eq!(complete_report(&dir.join(&aside[0])), current, "{point}");
            }
        }
        // The next run succeeds and nothing stale is left beside it.
        seed += 1;
        let out = audit(dir, seed, None, false);
        assert_eq!(
            out.status.code(),
            Some(0),
            "{point}: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        assert_eq!(complete_report(&dir.join("rep")), seed, "{point}");
        assert!(strays(dir).is_empty(), "{point}: left {:?}", strays(dir));
        current = seed;
    }
}

/// Two audits writing the same folder at once both succeed (the second to
/// commit replaces the first) and leave one complete report.
#[test]
fn concurrent_writers_to_one_folder_both_succeed() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    write_study(dir);
    for round in 0..3u64 {
        let spawn = |seed: u64| {
            Command::new(bin())
                .current_dir(dir)
                .args([
                    "audit",
                    "line.toml",
                    "--out",
                    "rep",
                    "--quiet",
                    "--only",
                    "profile",
                ])
                .args(["--threads", "1", "--seed", &seed.to_string()])
                .env_remove("FITAUDIT_OUTPUT_FAULT")
                .stderr(std::process::Stdio::piped())
                .spawn()
                .unwrap()
        };
        let a = spawn(100 + 2 * round);
        let b = spawn(101 + 2 * round);
        let (oa, ob) = (a.wait_with_output().unwrap(), b.wait_with_output().unwrap());
        assert_eq!(
            oa.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&oa.stderr)
        );
        assert_eq!(
            ob.status.code(),
            Some(0),
            "{}",
            String::from_utf8_lossy(&ob.stderr)
        );
        let seed = complete_report(&dir.join("rep"));
        assert!(seed == 100 + 2 * round || seed == 101 + 2 * round, "{seed}");
        assert!(strays(dir).is_empty(), "{:?}", strays(dir));
    }
}
