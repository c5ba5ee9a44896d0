//! Derived quantities: propagation against the JCGM 100 formula written
//! out by hand, resampled distributions, verdicts, study errors and the
//! command line.

use assert_cmd::Command;
use fitaudit::audit::{self, AuditOptions};
use fitaudit::diagnostics::verdict::{QuoteKind, Status};
use fitaudit::diagnostics::NoProgress;
use fitaudit::settings::Diagnostic;

/// An invented calibration line (fixed values, no randomness): 10
/// standards, response 0.05 + 0.8 c plus a fixed zig-zag, sigma 0.02.
fn line_csv() -> String {
    let mut s = String::from("conc,resp,u\n");
    for i in 0..10 {
        let c = 0.5 * i as f64;
        let wiggle = [
            0.013, -0.021, 0.004, 0.017, -0.009, -0.015, 0.022, -0.003, 0.008, -0.012,
        ][i];
        s.push_str(&format!("{c},{},0.02\n", 0.05 + 0.8 * c + wiggle));
    }
    s
}

const LINE: &str = r#"
[data]
file = "data.csv"
x = "conc"
y = "resp"
sigma = "u"

[model]
formula = "b0 + b1*conc"

[parameters]
b0 = { start = 0 }
b1 = { start = 1 }

[constants]
y0 = 2.1

[derived]
x0 = "(y0 - b0)/b1"
sum = "b0 + 2*b1"
log_slope = "ln(b1)"

[audit]
seed = 5
bootstrap = { replicates = 2000 }
monte_carlo = { replicates = 2000 }
"#;

fn write(study: &str, csv: &str) -> (tempfile::TempDir, std::path::PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("line.toml");
    std::fs::write(&path, study).unwrap();
    std::fs::write(dir.path().join("data.csv"), csv).unwrap();
    (dir, path)
}

#[test]
fn propagation_matches_the_jcgm_formula_written_out() {
    let (_d, path) = write(LINE, &line_csv());
    let study = fitaudit::study::load(&path).unwrap();
    let options = AuditOptions {
        only: vec![Diagnostic::Bootstrap, Diagnostic::MonteCarlo],
        ..AuditOptions::default()
    };
    let r = audit::run(&audit::input_from_study(&study), &options, &NoProgress).unwrap();
    assert_eq!(r.derived.len(), 3);
    let (b0, b1) = (r.fit.parameters[0].value, r.fit.parameters[1].value);
    let c = &r.fit.covariance;
    // JCGM 100:2008, 5.2.2 (eq. 16): u^2(q) = sum_i c_i^2 u^2(a_i) + 2 sum_i<j c_i c_j u(a_i, a_j),
    // with c = dq/da written out by hand.
    let x0 = (2.1 - b0) / b1;
    let (c0, c1) = (-1.0 / b1, -(2.1 - b0) / (b1 * b1));
    let u_x0 = (c0 * c0 * c[0][0] + c1 * c1 * c[1][1] + 2.0 * c0 * c1 * c[0][1]).sqrt();
    let u_sum = (c[0][0] + 4.0 * c[1][1] + 4.0 * c[0][1]).sqrt();
    let u_log = c[1][1].sqrt() / b1;
    for (d, value, u) in [
        (&r.derived[0], x0, u_x0),
        (&r.derived[1], b0 + 2.0 * b1, u_sum),
        (&r.derived[2], b1.ln(), u_log),
    ] {
        let got = d.std_error.unwrap();
        eprintln!("{}: {} +- {got} (hand {u})", d.name, d.value);
        assert!((d.value - value).abs() <= 1e-12 * value.abs(), "{}", d.name);
        assert!((got - u).abs() <= 1e-10 * u, "{}: {got} vs {u}", d.name);
        assert_eq!(d.expanded_uncertainty, Some(r.fit.coverage_factor * got));
    }
    assert_eq!(r.derived[0].sensitivities, vec![c0, c1]);

    // `sum` is linear in the parameters: its Monte Carlo values are normal
    // with SD u exactly, so the SD ratio is 1 within sqrt(1 / (2 (M - 1)))
    // per standard error; allow 4.
    let sum = &r.derived[1];
    let mc = sum.monte_carlo.as_ref().unwrap();
    assert_eq!((mc.used, mc.non_finite), (2000, 0));
    let ratio = mc.summary.sd_ratio.unwrap();
    eprintln!(
        "sum: Monte Carlo SD ratio {ratio:.4}, bootstrap {:.4}",
        sum.bootstrap.as_ref().unwrap().summary.sd_ratio.unwrap()
    );
    assert!((ratio - 1.0).abs() < 4.0 / (2.0 * 1999.0f64).sqrt(), "{ratio}");
    // The Monte Carlo values are the quantity at each trial's estimates.
    let mc_rows = &r.monte_carlo.as_ref().unwrap().estimates;
    let mean = mc_rows.iter().map(|a| a[0] + 2.0 * a[1]).sum::<f64>() / mc_rows.len() as f64;
    assert!((mc.summary.mean - mean).abs() < 1e-12 * mean.abs());
    // Every verdict holds on this well-determined line, and the quote is value +- k u.
    for d in &r.derived {
        assert_eq!(
            d.verdict.status,
            Status::Holds,
            "{}: {:?}",
            d.name,
            d.verdict.findings
        );
        let q = d.verdict.quote.as_ref().unwrap();
        assert_eq!(q.kind, QuoteKind::Analytic);
        let k = r.fit.coverage_factor;
        assert!((q.upper - (d.value + k * d.std_error.unwrap())).abs() < 1e-12 * q.upper.abs().max(1.0));
        assert!(d
            .verdict
            .findings
            .iter()
            .any(|f| f.rule == fitaudit::diagnostics::verdict::Rule::SpreadRatio));
    }
    // The report shows them after the parameters.
    let md = fitaudit::report::markdown::summary(&r);
    let fit_at = md.find("## Fit").unwrap();
    let derived_at = md.find("## Derived quantities").unwrap();
    assert!(derived_at > fit_at, "{md}");
    assert!(md.contains("x0 (derived)") && md.contains("(y0 - b0)/b1"), "{md}");
}

#[test]
fn a_skewed_quantity_is_doubted_by_its_resampled_spread() {
    // 1/b1 with b1 barely determined (u(b1) near b1): the Monte Carlo
    // distribution of the reciprocal has a heavy tail (trials with b1 near
    // 0), so its SD is far above the linearised u and the runaway rule
    // makes the verdict doubtful, as it would for a parameter.
    let mut csv = String::from("conc,resp,u\n");
    for i in 0..8 {
        let c = 0.1 * i as f64;
        let wiggle = [0.3, -0.2, 0.1, -0.35, 0.25, -0.1, 0.2, -0.15][i];
        csv.push_str(&format!("{c},{},0.3\n", 1.0 + 0.5 * c + wiggle));
    }
    let study = LINE.replace(
        "x0 = \"(y0 - b0)/b1\"\nsum = \"b0 + 2*b1\"\nlog_slope = \"ln(b1)\"",
        "inverse_slope = \"1/b1\"",
    );
    let (_d, path) = write(&study, &csv);
    let s = fitaudit::study::load(&path).unwrap();
    let options = AuditOptions {
        only: vec![Diagnostic::MonteCarlo],
        ..AuditOptions::default()
    };
    let r = audit::run(&audit::input_from_study(&s), &options, &NoProgress).unwrap();
    let d = &r.derived[0];
    let mc = d.monte_carlo.as_ref().unwrap();
    eprintln!(
        "1/b1 = {} +- {:?}; MC SD ratio {:?}, robust ratio {:?}, status {:?}, findings {:?}",
        d.value,
        d.std_error,
        mc.summary.sd_ratio,
        mc.summary.robust_ratio,
        d.verdict.status,
        d.verdict.findings
    );
    assert!(mc.summary.sd_ratio.unwrap() > 10.0);
    assert!(mc.summary.runaways > 20);
    assert!(d.verdict.findings.iter().any(
        |f| f.rule == fitaudit::diagnostics::verdict::Rule::RunawayRefits && f.status == Status::Doubtful
    ));
    assert_eq!(d.verdict.status, Status::Doubtful);
    assert_eq!(
        d.verdict.no_quote,
        Some(fitaudit::diagnostics::verdict::NoQuote::NoDerivedProfile)
    );
    assert!(d.verdict.quote.is_none());
}

#[test]
fn fit_json_and_the_fit_table_carry_the_derived_quantities() {
    let (_d, path) = write(LINE, &line_csv());
    let out = Command::cargo_bin("fitaudit")
        .unwrap()
        .args(["fit", "--json"])
        .arg(&path)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let d = v["derived"].as_array().unwrap();
    assert_eq!(d.len(), 3);
    assert_eq!(d[0]["name"], "x0");
    assert_eq!(d[0]["formula"], "(y0 - b0)/b1");
    assert!(d[0]["std_error"].as_f64().unwrap() > 0.0);
    assert!(d[0]["bootstrap"].is_null(), "no resampling in `fit`");
    let out = Command::cargo_bin("fitaudit")
        .unwrap()
        .arg("fit")
        .arg(&path)
        .output()
        .unwrap();
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("derived") && text.contains("log_slope"), "{text}");
}

#[test]
fn a_bad_derived_formula_names_the_key_and_column_and_exits_2() {
    for (formula, pieces) in [
        ("(y0 - b0)/", vec!["derived.x0", "column"]),
        (
            "(y0 - b0)/bl",
            vec!["derived.x0", "`bl`", "did you mean", "column 11"],
        ),
        (
            "conc*b1",
            vec!["derived.x0", "`conc`", "parameters and constants only"],
        ),
    ] {
        let study = LINE.replace("x0 = \"(y0 - b0)/b1\"", &format!("x0 = \"{formula}\""));
        let (_d, path) = write(&study, &line_csv());
        let msg = fitaudit::study::load(&path).unwrap_err().to_string();
        for p in &pieces {
            assert!(msg.contains(p), "{formula}: message lacks {p:?}: {msg}");
        }
        // The study file's line of the key.
        assert!(msg.contains("line.toml, line 19"), "{msg}");
        let out = Command::cargo_bin("fitaudit")
            .unwrap()
            .arg("check")
            .arg(&path)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{formula}");
    }
    // A derived quantity may not take a parameter's name, nor be anything but a string.
    let study = LINE.replace("sum = \"b0 + 2*b1\"", "b1 = \"2*b0\"");
    let (_d, path) = write(&study, &line_csv());
    let msg = fitaudit::study::load(&path).unwrap_err().to_string();
    assert!(
        msg.contains("derived.b1") && msg.contains("name of a parameter"),
        "{msg}"
    );
    let study = LINE.replace("sum = \"b0 + 2*b1\"", "sum = 3");
    let (_d, path) = write(&study, &line_csv());
    assert!(fitaudit::study::load(&path).is_err());
}
