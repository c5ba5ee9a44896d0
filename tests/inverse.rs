//! Inverse prediction: the calibration-line closed forms, the Monte Carlo
//! distribution, and the clear outcomes without a unique root.

use fitaudit::audit::{self, AuditOptions, AuditResults};
use fitaudit::diagnostics::inverse::{InverseProblem, ReadingSigma};
use fitaudit::diagnostics::NoProgress;
use fitaudit::settings::Diagnostic;

/// Invented calibration data: 8 standards, response 0.1 + 0.9 c plus a
/// fixed zig-zag; `sigma` adds a column of standard uncertainties.
fn csv(sigma: bool) -> String {
    let mut s = String::from(if sigma { "conc,resp,u\n" } else { "conc,resp\n" });
    for i in 0..8 {
        let c = 1.0 + i as f64;
        let w = [0.04, -0.06, 0.01, 0.05, -0.03, -0.05, 0.07, -0.02][i];
        let u = 0.03 + 0.01 * i as f64;
        if sigma {
            s.push_str(&format!("{c},{},{u}\n", 0.1 + 0.9 * c + w));
        } else {
            s.push_str(&format!("{c},{}\n", 0.1 + 0.9 * c + w));
        }
    }
    s
}

fn study(sigma: bool, inverse: &str, formula: &str) -> String {
    format!(
        "[data]\nfile = \"data.csv\"\nx = \"conc\"\ny = \"resp\"\n{}\n[model]\nformula = \"{formula}\"\n\n\
         [parameters]\nb0 = {{ start = 0 }}\nb1 = {{ start = 1 }}\n\n{inverse}\n\
         [audit]\nmonte_carlo = {{ replicates = 3000 }}\n",
        if sigma { "sigma = \"u\"\n" } else { "" }
    )
}

fn run(study_text: &str, csv_text: &str, only: &[Diagnostic]) -> Result<AuditResults, String> {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cal.toml");
    std::fs::write(&path, study_text).unwrap();
    std::fs::write(dir.path().join("data.csv"), csv_text).unwrap();
    let s = fitaudit::study::load(&path).map_err(|e| e.to_string())?;
    let options = AuditOptions {
        only: only.to_vec(),
        ..AuditOptions::default()
    };
    Ok(audit::run(&audit::input_from_study(&s), &options, &NoProgress).unwrap())
}

const SAMPLES: &str =
    "[[inverse]]\nname = \"A\"\ny = 3.2\nreadings = 3\n\n[[inverse]]\nname = \"B\"\ny = 6.0\n";

#[test]
fn unweighted_line_matches_the_calibration_textbook_form() {
    // The standard error of a concentration read off an unweighted
    // calibration line (J. N. Miller and J. C. Miller, Statistics and
    // Chemometrics for Analytical Chemistry, ch. 5; N. R. Draper and
    // H. Smith, Applied Regression Analysis, 3rd ed., 1998, ch. 3):
    // s_x0 = (s / b1) sqrt(1/m + 1/n + (y0 - ybar)^2 / (b1^2 Sxx)).
    let r = run(&study(false, SAMPLES, "b0 + b1*conc"), &csv(false), &[]).unwrap();
    let x = &r.data.x[0];
    let y = &r.data.y;
    let n = x.len() as f64;
    let xbar = x.iter().sum::<f64>() / n;
    let ybar = y.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - xbar).powi(2)).sum();
    let b1 = x.iter().zip(y).map(|(a, b)| (a - xbar) * (b - ybar)).sum::<f64>() / sxx;
    let b0 = ybar - b1 * xbar;
    let s = (x
        .iter()
        .zip(y)
        .map(|(a, b)| (b - b0 - b1 * a).powi(2))
        .sum::<f64>()
        / (n - 2.0))
        .sqrt();
    assert_eq!(r.inverse.len(), 2);
    for (inv, y0, m) in [(&r.inverse[0], 3.2, 3.0), (&r.inverse[1], 6.0, 1.0)] {
        let x0 = (y0 - b0) / b1;
        let sx0 = s / b1 * (1.0 / m + 1.0 / n + (y0 - ybar).powi(2) / (b1 * b1 * sxx)).sqrt();
        let got = inv.std_error.unwrap();
        eprintln!(
            "{}: x0 = {} (closed {x0}), u = {got} (closed {sx0})",
            inv.name,
            inv.x.unwrap()
        );
        assert!((inv.x.unwrap() - x0).abs() < 1e-9 * x0);
        assert!((got - sx0).abs() < 1e-9 * sx0, "{got} vs {sx0}");
        assert_eq!(inv.reading_sigma_source, ReadingSigma::ResidualStd);
        assert!((inv.reading_sigma - s).abs() < 1e-12 * s);
        let k = r.fit.coverage_factor;
        assert!((inv.upper.unwrap() - (x0 + k * sx0)).abs() < 1e-9 * x0);
        assert!(inv.monte_carlo.is_none(), "no Monte Carlo ran");
    }
}

#[test]
fn weighted_line_matches_the_weighted_form_and_the_monte_carlo() {
    // Weighted line, x0 = (y0 - b0)/b1: by JCGM 100:2008, 5.2, written out,
    // u(x0)^2 = (1/Sw + (x0 - xw)^2 / Sxxw + sigma0^2 / m) / b1^2 with
    // Sw = sum w, xw = sum w x / Sw, Sxxw = sum w (x - xw)^2, w = 1/sigma^2
    // (the weighted form of the calibration formula above).
    let inv = "[[inverse]]\nname = \"A\"\ny = 3.2\nreadings = 2\nsigma = 0.05\n\n\
               [[inverse]]\nname = \"B\"\ny = 6.0\n";
    let r = run(
        &study(true, inv, "b0 + b1*conc"),
        &csv(true),
        &[Diagnostic::MonteCarlo],
    )
    .unwrap();
    let x = &r.data.x[0];
    let sig = r.data.sigma.as_ref().unwrap();
    let w: Vec<f64> = sig.iter().map(|s| 1.0 / (s * s)).collect();
    let sw: f64 = w.iter().sum();
    let xw = w.iter().zip(x).map(|(a, b)| a * b).sum::<f64>() / sw;
    let sxxw: f64 = w.iter().zip(x).map(|(a, b)| a * (b - xw).powi(2)).sum();
    let (b0, b1) = (r.fit.parameters[0].value, r.fit.parameters[1].value);
    for (inv, y0, m, s0) in [
        (&r.inverse[0], 3.2, 2.0, Some(0.05)),
        (&r.inverse[1], 6.0, 1.0, None),
    ] {
        let x0 = (y0 - b0) / b1;
        // Without a stated sigma: the data's sigma interpolated at x0
        // (they rise by 0.01 per unit of conc from 0.03 at conc 1).
        let s0 = s0.unwrap_or(0.03 + 0.01 * (x0 - 1.0));
        let u = ((1.0 / sw + (x0 - xw).powi(2) / sxxw + s0 * s0 / m) / (b1 * b1)).sqrt();
        let got = inv.std_error.unwrap();
        assert!((got - u).abs() < 1e-9 * u, "{}: {got} vs {u}", inv.name);
        assert!((inv.reading_sigma - s0).abs() < 1e-12);
        // The Monte Carlo of a line: x0* = (y* - b0*)/b1* is nearly
        // normal with SD u (b1 is known to 1 %); allow 5 standard errors of
        // an SD from 3000 trials plus 2 % for the curvature of the ratio.
        let mc = inv.monte_carlo.as_ref().unwrap();
        let ratio = mc.std / u;
        eprintln!(
            "{}: u = {u}, Monte Carlo SD ratio {ratio:.4} ({} trials)",
            inv.name, mc.used
        );
        assert_eq!((mc.used, mc.failed), (3000, 0));
        assert!(
            (ratio - 1.0).abs() < 5.0 / (2.0 * 2999.0f64).sqrt() + 0.02,
            "{ratio}"
        );
        assert!(mc.lower < x0 && x0 < mc.upper);
    }
    assert_eq!(r.inverse[1].reading_sigma_source, ReadingSigma::InterpolatedSigma);
    // Reported after the derived quantities, one row per sample.
    let md = fitaudit::report::markdown::summary(&r);
    assert!(md.contains("## Inverse predictions"), "{md}");
    assert!(md.contains("| A | 3.2 | 2 |"), "{md}");
}

#[test]
fn no_root_or_several_roots_give_no_value_and_say_why() {
    let inv = "[[inverse]]\nname = \"high\"\ny = 100\n\n[[inverse]]\nname = \"twice\"\ny = 4.0\n";
    // Invented data on the parabola 1 + 0.5 (c - 4.5)^2 over c = 1..8: it
    // reaches 4.0 twice (near c = 2.05 and 6.95), 100 never.
    let mut data = String::from("conc,resp\n");
    for i in 0..8 {
        let c = 1.0 + i as f64;
        let w = [0.04, -0.06, 0.01, 0.05, -0.03, -0.05, 0.07, -0.02][i];
        data.push_str(&format!("{c},{}\n", 1.0 + 0.5 * (c - 4.5f64).powi(2) + w));
    }
    let r = run(&study(false, inv, "b0 + b1*(conc - 4.5)^2"), &data, &[]).unwrap();
    assert_eq!(r.inverse[0].problem, Some(InverseProblem::NoRoot));
    assert!(r.inverse[0].x.is_none() && r.inverse[0].std_error.is_none());
    assert_eq!(r.inverse[1].problem, Some(InverseProblem::SeveralRoots));
    let md = fitaudit::report::markdown::summary(&r);
    assert!(md.contains("does not reach"), "{md}");
}

#[test]
fn bad_inverse_entries_name_the_key() {
    for (inv, pieces) in [
        (
            "[[inverse]]\nname = \"A\"\ny = 1\nreadings = 0\n",
            vec!["inverse[0].readings", "at least 1"],
        ),
        (
            "[[inverse]]\nname = \"A\"\ny = 1\nsigma = -1\n",
            vec!["inverse[0].sigma", "positive"],
        ),
        ("[[inverse]]\nname = \"A\"\ny = 1\nsigmas = 1\n", vec!["sigmas"]),
        (
            "[[inverse]]\nname = \"A\"\ny = 1\n[[inverse]]\nname = \"A\"\ny = 2\n",
            vec!["inverse[1].name", "twice"],
        ),
    ] {
        let msg = run(&study(false, inv, "b0 + b1*conc"), &csv(false), &[]).unwrap_err();
        for p in &pieces {
            assert!(msg.contains(p), "{inv}: message lacks {p:?}: {msg}");
        }
    }
}

#[test]
fn inverse_needs_exactly_one_x_column() {
    // Two x columns: an x0 cannot be read off a curve, and the error names
    // the key to fix.
    let csv_text = "conc,temp,resp\n1,20,1.0\n2,21,1.9\n3,22,2.8\n4,23,3.9\n5,24,4.7\n";
    let study_text = "[data]\nfile = \"data.csv\"\nx = [\"conc\", \"temp\"]\ny = \"resp\"\n\n[model]\n\
                      formula = \"b0 + b1*conc + 0*temp\"\n\n[parameters]\nb0 = { start = 0 }\nb1 = { start = 1 }\n\n\
                      [[inverse]]\nname = \"A\"\ny = 3.2\n";
    let msg = run(study_text, csv_text, &[]).unwrap_err();
    assert!(
        msg.contains("inverse") && msg.contains("exactly one x column"),
        "{msg}"
    );
}
