//! End-to-end tests of the command line on study files.

#[path = "common/nist.rs"]
mod nist;

use assert_cmd::Command;

fn fitaudit() -> Command {
    Command::cargo_bin("fitaudit").unwrap()
}

/// Writes a NIST StRD problem as a study + CSV pair, the way a user would
/// describe it, and returns the study path. None when the data are absent
/// (outside CI: the caller skips).
fn nist_study(
    dir: &std::path::Path,
    name: &str,
    formula: &str,
    start: usize,
) -> Option<(std::path::PathBuf, nist::NistProblem)> {
    let path = nist::data_dir().join(format!("{name}.dat"));
    if !path.exists() {
        if std::env::var("CI").map(|v| v == "true").unwrap_or(false) {
            panic!(
                "NIST StRD data missing at {} (set FITAUDIT_NIST_DIR)",
                path.display()
            );
        }
        eprintln!(
            "skipped: NIST StRD data not found at {} (set FITAUDIT_NIST_DIR)",
            path.display()
        );
        return None;
    }
    let p = nist::read(&path).unwrap();
    let mut csv = String::from("x,y\n");
    for (x, y) in p.x[0].iter().zip(&p.y) {
        csv.push_str(&format!("{x:e},{y:e}\n"));
    }
    std::fs::write(dir.join("data.csv"), csv).unwrap();
    let mut study = format!(
        "title = \"NIST StRD {name}\"\n[data]\nfile = \"data.csv\"\nx = \"x\"\ny = \"y\"\n[model]\nformula = \"{formula}\"\n[parameters]\n"
    );
    for (k, b) in p.params.iter().enumerate() {
        study.push_str(&format!("{b} = {{ start = {:e} }}\n", p.starts[start][k]));
    }
    let sp = dir.join(format!("{name}.toml"));
    std::fs::write(&sp, study).unwrap();
    Some((sp, p))
}

/// `fit --json` on NIST StRD Misra1a and Thurber (certified values, NIST
/// ITL Statistical Reference Datasets): parameters agree to 6 significant
/// digits and standard errors to 4, through the whole path a user walks
/// (study file, CSV reader, formula compiler, fit, JSON).
#[test]
fn fit_json_reproduces_nist_certified_values() {
    let cases = [
        ("Misra1a", "b1*(1-exp[-b2*x])"),
        (
            "Thurber",
            "(b1 + b2*x + b3*x**2 + b4*x^3) / (1 + b5*x + b6*x^2 + b7*x^3)",
        ),
    ];
    for (name, formula) in cases {
        for start in 0..2 {
            let tmp = tempfile::tempdir().unwrap();
            let Some((study, p)) = nist_study(tmp.path(), name, formula, start) else {
                return;
            };
            let out = fitaudit().arg("fit").arg(&study).arg("--json").output().unwrap();
            assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
            let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
            let fit = &v["fit"];
            assert_eq!(fit["converged"], true);
            for (k, par) in fit["parameters"].as_array().unwrap().iter().enumerate() {
                let value = par["value"].as_f64().unwrap();
                let se = par["std_error"].as_f64().unwrap();
                assert!(
                    nist::lre(value, p.certified[k]) >= 6.0,
                    "{name} start {start} b{k}: {value}"
                );
                assert!(
                    nist::lre(se, p.certified_sd[k]) >= 4.0,
                    "{name} start {start} se b{k}: {se}"
                );
                assert_eq!(par["at_bound"], false);
            }
            let dof = p.y.len() - p.params.len();
            assert_eq!(fit["dof"].as_u64().unwrap() as usize, dof);
            assert!(nist::lre(fit["chi2"].as_f64().unwrap(), p.rss) >= 6.0);
            for key in [
                "stop_reason",
                "iterations",
                "reduced_chi2",
                "coverage_factor",
                "covariance",
                "correlation",
            ] {
                assert!(!fit[key].is_null(), "fit.{key} present");
            }
            // No sigma: chi2 is a sum of squares, so there is no p-value, and
            // the analytic interval uses Student's t with the fit's dof.
            assert!(fit["p_value"].is_null(), "{}", fit["p_value"]);
            assert_eq!(fit["sigma_given"], false);
            assert_eq!(fit["coverage_basis"], "student-t");
            assert_eq!(fit["converged"], true);
        }
    }
}

/// The plain table shows each parameter with its standard error, and the
/// goodness-of-fit line (values from the same NIST certified results).
#[test]
fn fit_table_and_check_describe_the_study() {
    let tmp = tempfile::tempdir().unwrap();
    let Some((study, _)) = nist_study(tmp.path(), "Misra1a", "b1*(1-exp(-b2*x))", 1) else {
        return;
    };
    let out = fitaudit().arg("fit").arg(&study).output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    // NIST certified b1 = 2.3894212918E+02, sd 2.7070075241E+00: printed
    // with two significant digits of the uncertainty, 238.9 and 2.7.
    assert!(
        text.contains("b1") && text.contains("238.9 ") && text.contains("2.7 "),
        "{text}"
    );
    // Certified RSS 1.2455138894E-01, 14 points - 2 parameters = 12 dof;
    // no sigma, so a sum of squares, its residual variance and no p-value.
    assert!(
        text.contains("sum of squares = 0.124551") && text.contains("dof = 12"),
        "{text}"
    );
    // s^2 = 0.12455138894 / 12 = 0.010379.
    assert!(text.contains("residual variance s^2 = 0.01038"), "{text}");
    assert!(text.contains("p-value: none (no sigma given"), "{text}");
    assert!(text.contains("Student's t, 12 dof"), "{text}");
    assert!(text.contains("b2"), "{text}");
    let out = fitaudit().arg("check").arg(&study).output().unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("14 points"), "{text}");
    assert!(text.contains("ok: the study is valid"));
}

/// Steepest descent is selectable and reaches the same minimum on an easy
/// problem (NIST StRD DanWood from start 2; certified RSS 4.3173084083E-03).
#[test]
fn steepest_descent_is_selectable() {
    let tmp = tempfile::tempdir().unwrap();
    let Some((study, p)) = nist_study(tmp.path(), "DanWood", "b1*x**b2", 1) else {
        return;
    };
    let out = fitaudit()
        .arg("fit")
        .arg(&study)
        .args(["--json", "--method", "steepest"])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let chi2 = v["fit"]["chi2"].as_f64().unwrap();
    assert!(
        nist::lre(chi2, p.rss) >= 4.0,
        "steepest descent chi2 {chi2} vs certified {}",
        p.rss
    );
}

/// Without sigma at the 95 % level the analytic interval uses Student's t
/// with the fit's 12 degrees of freedom: k = 2.179 (NIST/SEMATECH
/// e-Handbook 1.3.6.7.2, upper-tail 0.025, 12 dof), not the normal 1.960;
/// the expanded uncertainty is k times the standard error, and the NIST
/// certified standard error of b1 (2.7070075241E+00) gives U = 5.899.
#[test]
fn no_sigma_fit_uses_the_student_t_factor() {
    let tmp = tempfile::tempdir().unwrap();
    let Some((study, _)) = nist_study(tmp.path(), "Misra1a", "b1*(1-exp(-b2*x))", 1) else {
        return;
    };
    let mut text = std::fs::read_to_string(&study).unwrap();
    text.push_str("[audit]\nlevel = 0.95\n");
    std::fs::write(&study, text).unwrap();
    let out = fitaudit().arg("fit").arg("--json").arg(&study).output().unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let fit = &v["fit"];
    let k = fit["coverage_factor"].as_f64().unwrap();
    assert!((k - 2.179).abs() < 5e-4, "k = {k}");
    assert_eq!(fit["coverage_basis"], "student-t");
    assert!(fit["p_value"].is_null());
    let b1 = &fit["parameters"][0];
    let u = b1["std_error"].as_f64().unwrap();
    let big_u = b1["expanded_uncertainty"].as_f64().unwrap();
    assert!((big_u - k * u).abs() <= 1e-12 * big_u);
    assert!((big_u - 2.179 * 2.707_007_524_1).abs() < 2e-3, "U = {big_u}");
}

/// `check` echoes the sigma it read and the bootstrap scheme as a study file
/// writes it; `--level` overrides `audit.level` and is validated like it.
#[test]
fn check_echoes_sigma_and_scheme_and_level_flag_is_checked() {
    let root = env!("CARGO_MANIFEST_DIR");
    let out = fitaudit()
        .arg("check")
        .arg(format!("{root}/demo-data/cooling.toml"))
        .output()
        .unwrap();
    assert!(out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    // demo-data/cooling.csv: u_temp_C is 0.15 on every row (written by
    // examples/generate_demo_data.rs).
    assert!(
        text.contains("sigma      column u_temp_C, 0.15 for every point"),
        "{text}"
    );
    // The default scheme, spelled as in a study file (`"residual"`).
    assert!(text.contains("(residual)"), "{text}");
    assert!(!text.contains("Residual"), "{text}");
    let tmp = tempfile::tempdir().unwrap();
    let out = fitaudit()
        .args([
            "audit",
            &format!("{root}/demo-data/cooling.toml"),
            "--quiet",
            "--level",
            "1.5",
            "--out",
        ])
        .arg(tmp.path().join("x"))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("audit.level"));
}

/// `fit --level` sets the level of `U = k u` like `audit.level`: with
/// stated sigma k is the normal quantile, 1.960 at 95 % (z_0.975 =
/// 1.959964, any table of the normal distribution), and it is validated
/// like the study key.
#[test]
fn fit_level_flag_sets_the_coverage_factor() {
    let root = env!("CARGO_MANIFEST_DIR");
    let study = format!("{root}/demo-data/cooling.toml");
    let out = fitaudit()
        .args(["fit", "--json", "--level", "0.95", &study])
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let k = v["fit"]["coverage_factor"].as_f64().unwrap();
    assert!((k - 1.959964).abs() < 1e-6, "k = {k}");
    assert_eq!(v["fit"]["coverage_basis"], "normal");
    let out = fitaudit()
        .args(["fit", "--level", "0.00001", &study])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("audit.level"));
}
