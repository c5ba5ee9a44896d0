//! write_report: exactly the expected files, committed atomically; a failing
//! render leaves no folder; summary.md and replicates.csv contents.

#[path = "common/fixture.rs"]
mod fixture;

use std::collections::BTreeSet;
use std::path::Path;

use fitaudit::audit::{AuditOptions, AuditResults};
use fitaudit::report::{self, figures, markdown, Figures, Renderer, ReportError};

fn files_under(root: &Path) -> BTreeSet<String> {
    let mut out = BTreeSet::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.insert(p.strip_prefix(root).unwrap().to_string_lossy().replace('\\', "/"));
            }
        }
    }
    out
}

fn expected(with_csv: bool) -> BTreeSet<String> {
    let mut s: BTreeSet<String> = [
        ".fitaudit-output",
        "report.html",
        "results.json",
        "summary.md",
        "bands.csv",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    for f in [
        "fit.svg",
        "residuals_qq.svg",
        "residuals_x.svg",
        "hist_T_env.svg",
        "hist_dT.svg",
        "hist_tau.svg",
        "profile_T_env.svg",
        "profile_dT.svg",
        "profile_tau.svg",
        "contour_T_env_dT.svg",
        "contour_T_env_tau.svg",
        "contour_dT_tau.svg",
        "multistart.svg",
        "correlation.svg",
    ] {
        s.insert(format!("figures/{f}"));
    }
    if with_csv {
        s.insert("replicates.csv".into());
    }
    s
}

#[test]
fn writes_exactly_the_expected_files_and_replaces_an_earlier_run() {
    let root = tempfile::tempdir().unwrap();
    let out = root.path().join("cooling");
    let r = fixture::cooling();
    let dest = report::write_report(&r, &out, &AuditOptions::default()).unwrap();
    assert_eq!(dest, out);
    assert_eq!(files_under(&out), expected(false));
    // Only the committed folder is left beside it (no staging folder).
    assert_eq!(std::fs::read_dir(root.path()).unwrap().count(), 1);
    let json = std::fs::read_to_string(out.join("results.json")).unwrap();
    assert_eq!(serde_json::from_str::<AuditResults>(&json).unwrap(), r);
    let svg = std::fs::read_to_string(out.join("figures/profile_tau.svg")).unwrap();
    assert!(roxmltree::Document::parse(&svg).is_ok());

    // A second run with replicates replaces the first.
    let options = AuditOptions {
        write_replicates: true,
        ..AuditOptions::default()
    };
    report::write_report(&fixture::cooling(), &out, &options).unwrap();
    assert_eq!(files_under(&out), expected(true));
}

struct Failing;

impl Renderer for Failing {
    fn name(&self) -> &'static str {
        "failing"
    }
    fn render(&self, _: &AuditResults, _: &Figures) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Err(ReportError::Figure {
            name: "broken.svg".into(),
            message: "cannot draw".into(),
        })
    }
}

struct Escaping;

impl Renderer for Escaping {
    fn name(&self) -> &'static str {
        "escaping"
    }
    fn render(&self, _: &AuditResults, _: &Figures) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(vec![
            ("ok.txt".into(), b"1".to_vec()),
            ("../outside.txt".into(), b"2".to_vec()),
        ])
    }
}

#[test]
fn a_failing_render_leaves_no_folder() {
    let root = tempfile::tempdir().unwrap();
    let out = root.path().join("run");
    let r = fixture::fit_only();
    let f = figures::build(&r).unwrap();
    let err = report::write_with(&r, &f, &out, &[&report::json::Json, &Failing]).unwrap_err();
    assert!(matches!(err, ReportError::Figure { .. }));
    assert_eq!(err.to_string(), "figure broken.svg: cannot draw");
    // A file name escaping the folder fails in the middle of writing.
    let err = report::write_with(&r, &f, &out, &[&report::json::Json, &Escaping]).unwrap_err();
    assert!(matches!(err, ReportError::Output(_)), "{err}");
    assert!(!out.exists());
    assert!(!root.path().join("outside.txt").exists());
    assert_eq!(
        std::fs::read_dir(root.path()).unwrap().count(),
        0,
        "no staging folder left"
    );
}

#[test]
fn summary_has_the_verdict_rows_and_escapes_pipes() {
    let s = markdown::summary(&fixture::cooling());
    assert!(s.contains("| Parameter | Quote | Verdict |\n|---|---|---|\n"));
    // The reasons follow the table as a list, wrapped at 100 characters.
    let flat = s.replace("\n  ", " ");
    assert!(flat.contains(
        "- tau (doubtful): the profile interval's half-widths are 0.75 (below) and 1.30 (above) times the \
         covariance half-width 1.313: they differ by more than 20 %; the bootstrap spread differs from the \
         analytic standard error by 25 % (robust SD 1.642, ratio 1.25 to u, p = 1.0e-6 against a correct u), \
         more than 20 %: the quoted u is too small"
    ), "{s}");
    assert!(s.lines().all(|l| l.chars().count() <= markdown::WIDTH), "{s}");
    assert!(s.contains("| T\\_env | 21.500 \u{b1} 0.047 \\[21.453, 21.547\\] (68.27 %, k = 1.00) | holds |"));
    assert!(s.contains("## Interval comparison (68.27 % level)"));
    assert!(s.contains("| tau | 340.0 | 1.3 |"), "comparison row");
    assert!(!s.contains("> **The base fit"));
    // The fixture's derived half time ln(2) tau follows the parameters.
    let derived_at = s.find("## Derived quantities").expect("derived section");
    assert!(derived_at > s.find("## Fit").unwrap() && derived_at < s.find("## Interval comparison").unwrap());
    assert!(s.contains("| half\\_time | ln(2)\\*tau |"), "{s}");
    assert!(s.contains("| half\\_time (derived) |"), "verdict row");

    let h = markdown::summary(&fixture::hostile());
    assert!(h.starts_with("# Fit audit: &lt;script&gt;alert(1)&lt;/script&gt; &amp; \"quotes\" \\| pipes\n"));
    assert!(
        h.contains("| T&amp;env | 21.500 \u{b1} 0.047 \\[21.453, 21.547\\] (68.27 %, k = 1.00) | holds |")
    );
    assert!(h.contains("> **The base fit is not the best minimum found.**"));
    // Every table row has as many unescaped separators as its header.
    for line in h.lines().filter(|l| l.starts_with('|')) {
        let cells = line.replace("\\|", "").matches('|').count();
        // Every table is split to at most 100 characters a line, so the
        // counts vary; each row has at least two and at most eight columns.
        assert!((3..=9).contains(&cells), "{line}");
    }
}

#[test]
fn replicates_csv_has_one_row_per_successful_replicate() {
    let r = fixture::cooling();
    let bytes = report::csv::to_csv(&r).unwrap();
    let mut rd = csv::Reader::from_reader(bytes.as_slice());
    assert_eq!(
        rd.headers().unwrap(),
        vec!["diagnostic", "replicate", "T_env", "dT", "tau"]
    );
    let rows: Vec<csv::StringRecord> = rd.records().map(|r| r.unwrap()).collect();
    assert_eq!(rows.len(), fixture::BOOT + fixture::MC);
    let boot: Vec<&csv::StringRecord> = rows.iter().filter(|r| &r[0] == "bootstrap").collect();
    assert_eq!(boot.len(), fixture::BOOT);
    // Replicate 7 failed in the fixture: indices run 0..=400 without 7.
    let idx: Vec<usize> = boot.iter().map(|r| r[1].parse().unwrap()).collect();
    assert_eq!(&idx[..8], &[0, 1, 2, 3, 4, 5, 6, 8]);
    assert_eq!(*idx.last().unwrap(), fixture::BOOT);
    // Values read back exactly.
    let est = &r.bootstrap.as_ref().unwrap().estimates;
    assert_eq!(boot[7][4].parse::<f64>().unwrap(), est[7][2]);
    let mc: Vec<&csv::StringRecord> = rows.iter().filter(|r| &r[0] == "monte-carlo").collect();
    assert_eq!(mc.len(), fixture::MC);
    assert_eq!(&mc[0][1], "0");
}
