//! Confidence and prediction bands: the straight-line closed forms, and
//! the resampled bands against the analytic ones.
#![allow(clippy::needless_range_loop)]

mod resample_common;

use fitaudit::diagnostics::bands::{self, NewObservation};
use fitaudit::diagnostics::{bootstrap, monte_carlo, NoProgress};
use fitaudit::fit::{self, CoverageBasis, FitOptions, FitResult, Problem};
use fitaudit::model::ModelFn;
use fitaudit::settings::{AuditSettings, BootstrapSettings, MonteCarloSettings};
use resample_common::*;

fn fit_at(model: &dyn ModelFn, data: &fitaudit::data::Dataset, level: f64) -> FitResult {
    let problem = Problem {
        model,
        params: free_params(&[("a", 0.0), ("b", 1.0)]),
        options: FitOptions {
            level,
            ..FitOptions::default()
        },
    };
    let f = fit::fit(&problem, data).unwrap();
    assert!(f.converged);
    f
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

/// 12 unevenly spaced points of an invented line, no sigma.
fn unweighted_line() -> fitaudit::data::Dataset {
    let x: Vec<f64> = (0..12).map(|i| 0.5 * i as f64 + 0.03 * (i * i) as f64).collect();
    synthetic(&x, &[0.3; 12], |x| 2.0 + 0.7 * x, 41, 0, false)
}

#[test]
fn unweighted_line_matches_the_textbook_bands() {
    // N. R. Draper and H. Smith, Applied Regression Analysis, 3rd ed.
    // (1998), ch. 3: for a straight line fitted by ordinary least squares,
    // var(y_hat(x0)) = s^2 (1/n + (x0 - xbar)^2 / Sxx), a new observation
    // adds s^2, and the bands are y_hat +- t(n - 2, (1 + level)/2) sqrt(var).
    let data = unweighted_line();
    let model = line_model();
    let level = 0.95;
    let f = fit_at(&model, &data, level);
    let x = &data.x[0];
    let n = x.len() as f64;
    let xbar = x.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - xbar).powi(2)).sum();
    let sxy: f64 = x.iter().zip(&data.y).map(|(a, b)| (a - xbar) * b).sum();
    let b1 = sxy / sxx;
    let b0 = data.y.iter().sum::<f64>() / n - b1 * xbar;
    let sse: f64 = x
        .iter()
        .zip(&data.y)
        .map(|(a, y)| (y - b0 - b1 * a).powi(2))
        .sum();
    let s2 = sse / (n - 2.0);
    // t(10, 0.975) = 2.228139 (tables of Student's t, e.g. Draper and Smith's appendix).
    assert!(
        (f.coverage_factor - 2.228139).abs() < 1e-6,
        "{}",
        f.coverage_factor
    );
    assert_eq!(f.coverage_basis, CoverageBasis::StudentT);
    let t = f.coverage_factor;
    let grid: Vec<f64> = (0..400).map(|i| -1.0 + 11.0 * i as f64 / 399.0).collect();
    let b = bands::analytic(&model, &data, &f, &grid).unwrap();
    assert_eq!(b.new_observation, NewObservation::ResidualVariance);
    assert_eq!((b.level, b.coverage_factor), (level, t));
    let mut worst = 0.0f64;
    for (i, &x0) in grid.iter().enumerate() {
        let yhat = b0 + b1 * x0;
        let vc = s2 * (1.0 / n + (x0 - xbar).powi(2) / sxx);
        let vp = s2 + vc;
        let checks = [
            (b.y[i], yhat),
            (b.std_error[i], vc.sqrt()),
            (b.new_observation_std[i], s2.sqrt()),
            (b.confidence_lower[i], yhat - t * vc.sqrt()),
            (b.confidence_upper[i], yhat + t * vc.sqrt()),
            (b.prediction_lower[i], yhat - t * vp.sqrt()),
            (b.prediction_upper[i], yhat + t * vp.sqrt()),
        ];
        for (got, want) in checks {
            worst = worst.max(rel(got, want));
        }
    }
    eprintln!("unweighted line: worst relative difference {worst:.2e}");
    assert!(worst < 1e-9, "{worst}");
    // The narrowest confidence band is at the mean abscissa.
    let imin = (0..grid.len())
        .min_by(|&a, &c| b.std_error[a].total_cmp(&b.std_error[c]))
        .unwrap();
    assert!(
        (grid[imin] - xbar).abs() <= 11.0 / 399.0,
        "{} vs {xbar}",
        grid[imin]
    );
}

#[test]
fn weighted_line_matches_the_weighted_closed_form() {
    // Identity: for y = b0 + b1 x with weights w = 1/sigma^2 the inverse of
    // X^T W X gives var(y_hat(x0)) = 1/Sw + (x0 - xw)^2 / Sxxw, with
    // Sw = sum w, xw = sum w x / Sw, Sxxw = sum w (x - xw)^2 (the weighted
    // form of Draper and Smith's ch. 3 result). With stated sigma the
    // coverage factor is the normal quantile and a new observation has the
    // sigma interpolated at x0.
    let x = grid(15, 1.0, 0.4);
    let sigma: Vec<f64> = (0..15).map(|i| 0.1 + 0.02 * i as f64).collect();
    let data = synthetic(&x, &sigma, |x| -0.5 + 1.3 * x, 42, 0, true);
    let model = line_model();
    let f = fit_at(&model, &data, 0.9);
    // z(0.95) = 1.644854 (normal tables).
    assert!((f.coverage_factor - 1.644854).abs() < 1e-6);
    let w: Vec<f64> = sigma.iter().map(|s| 1.0 / (s * s)).collect();
    let sw: f64 = w.iter().sum();
    let xw = w.iter().zip(&x).map(|(a, b)| a * b).sum::<f64>() / sw;
    let sxxw: f64 = w.iter().zip(&x).map(|(a, b)| a * (b - xw).powi(2)).sum();
    let grid: Vec<f64> = (0..400).map(|i| 1.0 + 5.6 * i as f64 / 399.0).collect();
    let b = bands::analytic(&model, &data, &f, &grid).unwrap();
    assert_eq!(b.new_observation, NewObservation::InterpolatedSigma);
    let k = f.coverage_factor;
    let mut worst = 0.0f64;
    for (i, &x0) in grid.iter().enumerate() {
        let vc = 1.0 / sw + (x0 - xw).powi(2) / sxxw;
        // The sigma are 0.1 + 0.05 (x - 1) exactly on this grid of data.
        let s_new = 0.1 + 0.05 * (x0 - 1.0);
        let yhat = b.y[i];
        let checks = [
            (b.std_error[i], vc.sqrt()),
            (b.new_observation_std[i], s_new),
            (b.confidence_upper[i] - yhat, k * vc.sqrt()),
            (yhat - b.prediction_lower[i], k * (vc + s_new * s_new).sqrt()),
        ];
        for (got, want) in checks {
            worst = worst.max(rel(got, want));
        }
    }
    eprintln!("weighted line: worst relative difference {worst:.2e}");
    assert!(worst < 1e-9, "{worst}");
}

#[test]
fn resampled_bands_agree_with_the_analytic_band_on_a_line() {
    // On a model linear in its parameters the Monte Carlo estimates are
    // exactly normal with the analytic covariance, so the pointwise
    // 68.27 % percentile band has half-width z u_f (z = 1.0000 the normal
    // quantile); the residual bootstrap's covariance is v C, v the mean
    // square of the re-centred leverage-adjusted residuals (Davison and
    // Hinkley 1997, sec. 6.2.3), so its half-width is sqrt(v) z u_f. The
    // relative standard error of a 68.27 % half-width from B replicates is
    // sqrt(0.925 / B) (src/diagnostics/resample.rs); allow 5 of them.
    let x = grid(25, 0.0, 0.4);
    let sigma = vec![0.2; 25];
    let data = synthetic(&x, &sigma, |x| 1.0 + 0.6 * x, 43, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let f = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &f, &settings);
    let b_count = 3000;
    let mc = monte_carlo::run_with(
        &ctx,
        &MonteCarloSettings {
            replicates: b_count,
            ..MonteCarloSettings::default()
        },
        &NoProgress,
    );
    let bs = bootstrap::run_with(
        &ctx,
        &BootstrapSettings {
            replicates: b_count,
            ..BootstrapSettings::default()
        },
        false,
        &NoProgress,
    );
    let pool = bootstrap::residual_pool(&ctx);
    let v = pool.iter().map(|r| r * r).sum::<f64>() / pool.len() as f64;
    let grid: Vec<f64> = (0..400).map(|i| 9.6 * i as f64 / 399.0).collect();
    let b = bands::compute(&model, &data, &f, &grid, Some(&bs), Some(&mc)).unwrap();
    let tol = 5.0 * (0.925 / b_count as f64).sqrt();
    for (name, rb, scale) in [
        ("Monte Carlo", b.monte_carlo.as_ref().unwrap(), 1.0),
        ("bootstrap", b.bootstrap.as_ref().unwrap(), v.sqrt()),
    ] {
        assert_eq!(rb.replicates, b_count);
        let mut worst = 0.0f64;
        let mut worst_centre = 0.0f64;
        for i in 0..grid.len() {
            let want = scale * b.coverage_factor * b.std_error[i];
            let half = 0.5 * (rb.upper[i] - rb.lower[i]);
            worst = worst.max((half / want - 1.0).abs());
            // The band's centre sits on the curve within a few standard
            // errors of a mean of B values (u_f / sqrt(B)).
            let centre = 0.5 * (rb.upper[i] + rb.lower[i]);
            worst_centre = worst_centre.max((centre - b.y[i]).abs() / (scale * b.std_error[i]));
        }
        eprintln!("{name}: worst half-width ratio deviation {worst:.4} (tolerance {tol:.4}), centre {worst_centre:.4}");
        assert!(worst < tol, "{name}: {worst}");
        assert!(
            worst_centre < 5.0 / (b_count as f64).sqrt() * 1.6,
            "{name}: {worst_centre}"
        );
        // The resampled band is not trivially wide: it lies inside the prediction band.
        for i in 0..grid.len() {
            assert!(rb.lower[i] > b.prediction_lower[i] && rb.upper[i] < b.prediction_upper[i]);
        }
    }
}

#[test]
fn an_audit_records_bands_and_writes_bands_csv() {
    use fitaudit::audit::{self, AuditInput, AuditOptions, StudyInfo};
    let data = unweighted_line();
    let model = line_model();
    let input = AuditInput {
        info: StudyInfo {
            name: "line".into(),
            title: None,
            path: "line.toml".into(),
            data_file: None,
            formula: "a + b*x".into(),
            points: data.len(),
            sigma_given: false,
            study_sha256: None,
            data_sha256: None,
        },
        model: &model,
        params: free_params(&[("a", 0.0), ("b", 1.0)]),
        fit_options: FitOptions::default(),
        data: &data,
        settings: AuditSettings::default(),
        derived: &[],
        inverse: &[],
        inverse_model: None,
        report: Default::default(),
    };
    let options = AuditOptions {
        only: vec![],
        ..AuditOptions::default()
    };
    let r = audit::run(&input, &options, &NoProgress).unwrap();
    let b = r.bands.as_ref().expect("bands of a one-variable model");
    assert_eq!(b.x, r.curve.as_ref().unwrap().x);
    assert!(
        b.bootstrap.is_none() && b.monte_carlo.is_none(),
        "no resampling ran"
    );
    let text = String::from_utf8(fitaudit::report::csv::bands_csv(&r).unwrap().unwrap()).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 401);
    assert!(lines[0].starts_with("x,y,std_error,confidence_lower"));
    let first: Vec<&str> = lines[1].split(',').collect();
    assert_eq!(first[0].parse::<f64>().unwrap(), b.x[0]);
    assert_eq!(first[6].parse::<f64>().unwrap(), b.prediction_upper[0]);
    assert_eq!(first[7], "", "no bootstrap band");
}
