//! Resampling on an exactly linear model: mathematical identities of
//! weighted least squares that the bootstrap and Monte Carlo spreads must
//! reproduce up to their own sampling error.
//!
//! For `y = X a + e` with weights `1/sigma^2` and `Xw = diag(1/sigma) X`,
//! `a_hat - a = (Xw^T Xw)^-1 Xw^T (e/sigma)`. Hence, exactly:
//!
//! - Monte Carlo with `e_i ~ sigma_i N(0,1)`: the estimates are normal with
//!   covariance `(Xw^T Xw)^-1`, the analytic covariance;
//! - residual bootstrap: `e*/sigma` i.i.d. from the pool, so the covariance
//!   is `v (Xw^T Xw)^-1` with `v` the mean square of the re-centred,
//!   leverage-adjusted residuals;
//! - wild bootstrap (`E v = 0, E v^2 = 1`): the covariance is the sandwich
//!   `(Xw^T Xw)^-1 Xw^T diag(r_i^2 / (1 - h_ii)) Xw (Xw^T Xw)^-1`, the HC2
//!   estimator of MacKinnon & White (1985, J. Econometrics 29:305).
//!
//! The points are synthetic (fixed seed): the identities hold for any data.
//! Each spread is compared with its identity within 3 standard errors of a
//! standard deviation, `SD / sqrt(2 (B - 1))` (normal-theory SE of an SD,
//! e.g. Ahn & Fessler 2003, "Standard errors of mean, variance, and
//! standard deviation estimators", (from memory)).
#![allow(clippy::needless_range_loop)]

mod resample_common;

use fitaudit::diagnostics::{bootstrap, monte_carlo, NoProgress};
use fitaudit::settings::{
    AuditSettings, BootstrapScheme, BootstrapSettings, MonteCarloSettings, WildWeights,
};
use nalgebra::{DMatrix, DVector};
use resample_common::*;

const B: usize = 4000;

fn line_sigma(n: usize) -> Vec<f64> {
    (0..n).map(|i| 0.2 + 0.05 * (i % 4) as f64).collect()
}

/// Weighted design matrix `diag(1/sigma) X` of the straight line.
fn weighted_design(x: &[f64], sigma: &[f64]) -> DMatrix<f64> {
    DMatrix::from_fn(
        x.len(),
        2,
        |i, j| if j == 0 { 1.0 / sigma[i] } else { x[i] / sigma[i] },
    )
}

/// Sandwich `(Xw^T Xw)^-1 Xw^T diag(w) Xw (Xw^T Xw)^-1`.
fn sandwich(xw: &DMatrix<f64>, w: &[f64]) -> DMatrix<f64> {
    let bread = (xw.transpose() * xw).try_inverse().unwrap();
    let meat = xw.transpose() * DMatrix::from_diagonal(&DVector::from_row_slice(w)) * xw;
    &bread * meat * &bread
}

fn sd_tolerance(b: usize) -> f64 {
    3.0 / (2.0 * (b - 1) as f64).sqrt()
}

#[test]
fn monte_carlo_sd_equals_analytic_standard_error() {
    let x = grid(20, 0.0, 0.5);
    let s = line_sigma(20);
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 1, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let mc = MonteCarloSettings {
        replicates: B,
        ..MonteCarloSettings::default()
    };
    let r = monte_carlo::run_with(&ctx, &mc, &NoProgress);
    assert_eq!((r.run, r.failed), (B, 0));
    assert_eq!(r.noise_scale, Some(1.0), "sigma given: taken as is");
    for (j, p) in r.parameters.iter().enumerate() {
        let se = fit.parameters[j].std_error.unwrap();
        let ratio = p.sd_ratio.unwrap();
        eprintln!(
            "MC {}: ratio {ratio:.4} +- {:.4}",
            p.name,
            p.sd_ratio_uncertainty.unwrap()
        );
        // Identity: Monte Carlo covariance = analytic covariance (linear model).
        assert!((ratio - 1.0).abs() < sd_tolerance(B), "{}: ratio {ratio}", p.name);
        // Unbiased: the mean is within 3 standard errors of a mean.
        assert!(
            p.bias.abs() < 3.0 * se / (B as f64).sqrt(),
            "{}: bias {}",
            p.name,
            p.bias
        );
        // Normal estimates: the 68.27 % percentile interval is estimate +- SE
        // (identity), up to the sampling error of a quantile, taken as 3 x
        // sqrt(p(1-p)/B)/phi(z) SE = 3 x 0.0307 SE at p = 0.1587 (asymptotic
        // SE of a sample quantile, common practice).
        assert!(
            (p.lower - (p.estimate - se)).abs() < 0.1 * se,
            "{} lower {}",
            p.name,
            p.lower
        );
        assert!(
            (p.upper - (p.estimate + se)).abs() < 0.1 * se,
            "{} upper {}",
            p.name,
            p.upper
        );
        // The Monte Carlo gives no BCa (it belongs to the bootstrap). Its
        // shortest coverage interval is never wider than the symmetric one,
        // which is among its candidates (identity, JCGM 101:2008, 7.7.3),
        // and for a symmetric distribution it is centred near the estimate.
        assert!(p.bca_lower.is_none());
        let (sl, su) = (p.shortest_lower.unwrap(), p.shortest_upper.unwrap());
        assert!(su - sl <= p.upper - p.lower);
        assert!((0.5 * (sl + su) - p.estimate).abs() < 0.25 * se, "{sl} {su}");
        // The robust spread estimates the SD: its standard error under
        // normality is 0.96 SE / sqrt(B) (see resample.rs); 4 of them.
        assert!((p.robust_std - se).abs() < 4.0 * 0.962 * se / (B as f64).sqrt());
        assert_eq!(p.runaways, 0);
    }
    // Correlation: SE of a sample correlation ~ (1 - rho^2)/sqrt(B) (common practice).
    let rho = fit.correlation[0][1];
    assert!(
        (r.correlation[0][1] - rho).abs() < 3.0 * (1.0 - rho * rho) / (B as f64).sqrt(),
        "{} vs {rho}",
        r.correlation[0][1]
    );
    assert_eq!(r.estimates.len(), B);
}

#[test]
fn monte_carlo_without_sigma_uses_the_scaled_covariance_convention() {
    let x = grid(20, 0.0, 0.5);
    let s = vec![0.3; 20];
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 2, 0, false);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    assert!(fit.covariance_scaled);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let mc = MonteCarloSettings {
        replicates: B,
        ..MonteCarloSettings::default()
    };
    let r = monte_carlo::run_with(&ctx, &mc, &NoProgress);
    // sigma_i = sqrt(chi2/dof): the noise the scaled covariance assumes.
    assert!((r.noise_scale.unwrap() - fit.reduced_chi2.sqrt()).abs() < 1e-15);
    for p in &r.parameters {
        let ratio = p.sd_ratio.unwrap();
        eprintln!("MC (no sigma) {}: ratio {ratio:.4}", p.name);
        // Identity: s^2 (X^T X)^-1 is the scaled covariance.
        assert!((ratio - 1.0).abs() < sd_tolerance(B), "{}: ratio {ratio}", p.name);
        assert!(p.bca_lower.is_none(), "BCa not requested");
    }
}

#[test]
fn monte_carlo_student_t_has_unit_variance() {
    let x = grid(20, 0.0, 0.5);
    let s = line_sigma(20);
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 3, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let nu = 10.0;
    let mc = MonteCarloSettings {
        replicates: B,
        student_t_dof: Some(nu),
        ..MonteCarloSettings::default()
    };
    let r = monte_carlo::run_with(&ctx, &mc, &NoProgress);
    assert_eq!(r.scheme, "student-t");
    // t scaled by sqrt((nu-2)/nu) has variance 1, so the covariance is the
    // analytic one (identity). The noise has excess kurtosis 6/(nu-4) = 1
    // (Student-t moments, handbook formula); a linear combination has at
    // most that, so the SE of the SD ratio is at most sqrt((2 + 1)/(4 B)).
    let tol = 3.0 * (3.0 / (4.0 * B as f64)).sqrt();
    for p in &r.parameters {
        let ratio = p.sd_ratio.unwrap();
        eprintln!("MC t {}: ratio {ratio:.4}", p.name);
        assert!((ratio - 1.0).abs() < tol, "{}: ratio {ratio}", p.name);
    }
}

#[test]
fn residual_bootstrap_variance_is_pool_variance_times_analytic() {
    let x = grid(20, 0.0, 0.5);
    let s = line_sigma(20);
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 4, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let pool = bootstrap::residual_pool(&ctx);
    let v = pool.iter().map(|e| e * e).sum::<f64>() / pool.len() as f64;
    let bs = BootstrapSettings {
        replicates: B,
        scheme: BootstrapScheme::Residual,
        weights: WildWeights::Rademacher,
    };
    let r = bootstrap::run_with(&ctx, &bs, true, &NoProgress);
    assert_eq!((r.run, r.failed, r.scheme.as_str()), (B, 0, "residual"));
    for (j, p) in r.parameters.iter().enumerate() {
        let se = fit.parameters[j].std_error.unwrap();
        let ratio = p.std / (se * v.sqrt());
        eprintln!("residual {}: sd/(se sqrt v) {ratio:.4}, v = {v:.4}", p.name);
        assert!((ratio - 1.0).abs() < sd_tolerance(B), "{}: {ratio}", p.name);
        assert!(p.bca_lower.is_some() && p.acceleration.is_some());
    }
}

#[test]
fn leverage_adjustment_undoes_the_residual_shrinkage() {
    // E sum r_i^2 = n - p, so raw weighted residuals have mean square
    // (n - p)/n < 1 (Davison & Hinkley 1997, sec. 6.2.3); r_i / sqrt(1 - h_ii)
    // have E = 1 each (identity: Var r_i = 1 - h_ii), and after re-centring
    // E v = 1 - 1^T A 1 / n^2 with A_ij = (delta_ij - H_ij) / sqrt((1-h_i)(1-h_j))
    // (identity). Checked over 400 data sets within 3 standard errors of a mean.
    let n = 12;
    let x = grid(n, 0.0, 1.0);
    let s = line_sigma(n);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let settings = AuditSettings::default();
    let xw = weighted_design(&x, &s);
    let h = &xw * (xw.transpose() * &xw).try_inverse().unwrap() * xw.transpose();
    let mut one_a_one = 0.0;
    for i in 0..n {
        for k in 0..n {
            let d = if i == k { 1.0 } else { 0.0 };
            one_a_one += (d - h[(i, k)]) / ((1.0 - h[(i, i)]) * (1.0 - h[(k, k)])).sqrt();
        }
    }
    let expected_v = 1.0 - one_a_one / (n * n) as f64;
    let (mut vs, mut raws) = (Vec::new(), Vec::new());
    for k in 0..400 {
        let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 5, k, true);
        let fit = base_fit(&model, &params, &data);
        let ctx = fitted(&model, &params, &data, &fit, &settings);
        for i in 0..n {
            assert!(
                (fit.leverage[i] - h[(i, i)]).abs() < 1e-10,
                "leverage = hat diagonal"
            );
        }
        let pool = bootstrap::residual_pool(&ctx);
        vs.push(pool.iter().map(|e| e * e).sum::<f64>() / n as f64);
        raws.push(fit.residuals.iter().map(|e| e * e).sum::<f64>() / n as f64);
    }
    let mean_sem = |v: &[f64]| {
        let m = v.iter().sum::<f64>() / v.len() as f64;
        let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt();
        (m, sd / (v.len() as f64).sqrt())
    };
    let (mv, sv) = mean_sem(&vs);
    let (mr, sr) = mean_sem(&raws);
    eprintln!("adjusted pool mean square {mv:.4} +- {sv:.4} (expected {expected_v:.4}); raw {mr:.4} +- {sr:.4} (expected {:.4})", (n - 2) as f64 / n as f64);
    assert!((mv - expected_v).abs() < 3.0 * sv);
    assert!((mr - (n - 2) as f64 / n as f64).abs() < 3.0 * sr);
    // Paired: the adjustment raises the mean square by the expected amount.
    let diffs: Vec<f64> = vs.iter().zip(&raws).map(|(v, r)| v - r).collect();
    let (md, sd) = mean_sem(&diffs);
    let expected_d = expected_v - (n - 2) as f64 / n as f64;
    eprintln!("paired difference {md:.4} +- {sd:.4} (expected {expected_d:.4})");
    assert!((md - expected_d).abs() < 3.0 * sd);
    assert!(md > 10.0 * sd, "the adjustment must matter at n = 12");
}

#[test]
fn wild_bootstrap_variance_is_the_hc2_sandwich() {
    let x = grid(20, 0.0, 0.5);
    let s = line_sigma(20);
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 6, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let w: Vec<f64> = (0..20)
        .map(|i| fit.residuals[i].powi(2) / (1.0 - fit.leverage[i]))
        .collect();
    let cov = sandwich(&weighted_design(&x, &s), &w);
    for (weights, name) in [
        (WildWeights::Rademacher, "Rademacher"),
        (WildWeights::Mammen, "Mammen"),
    ] {
        let bs = BootstrapSettings {
            replicates: B,
            scheme: BootstrapScheme::Wild,
            weights,
        };
        let r = bootstrap::run_with(&ctx, &bs, false, &NoProgress);
        assert_eq!((r.failed, r.scheme.as_str()), (0, "wild"));
        for (j, p) in r.parameters.iter().enumerate() {
            let ratio = p.std / cov[(j, j)].sqrt();
            eprintln!("wild {name} {}: sd / HC2 {ratio:.4}", p.name);
            // Both multiplier laws have excess kurtosis <= 0 (Rademacher -2,
            // Mammen -1: from their two-point laws), so the normal-theory SE of
            // the SD is an upper bound.
            assert!(
                (ratio - 1.0).abs() < sd_tolerance(B),
                "{name} {}: {ratio}",
                p.name
            );
        }
    }
}

#[test]
fn case_bootstrap_approximates_the_sandwich() {
    // The pairs bootstrap of least squares is asymptotically equivalent to
    // the heteroscedasticity-consistent sandwich (Freedman 1981, Ann. Stat.
    // 9:1218); at n = 40 we allow 10 % plus the sampling error (common
    // practice, no exact finite-n identity).
    let n = 40;
    let x = grid(n, 0.0, 0.25);
    let s = line_sigma(n);
    let data = synthetic(&x, &s, |x| 1.5 + 0.8 * x, 7, 0, true);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let w: Vec<f64> = (0..n)
        .map(|i| fit.residuals[i].powi(2) / (1.0 - fit.leverage[i]))
        .collect();
    let cov = sandwich(&weighted_design(&x, &s), &w);
    let bs = BootstrapSettings {
        replicates: B,
        scheme: BootstrapScheme::Case,
        weights: WildWeights::Rademacher,
    };
    let r = bootstrap::run_with(&ctx, &bs, true, &NoProgress);
    assert_eq!((r.failed, r.scheme.as_str()), (0, "case"));
    assert_eq!(r.jackknife_refits, n);
    for (j, p) in r.parameters.iter().enumerate() {
        let ratio = p.std / cov[(j, j)].sqrt();
        eprintln!("case {}: sd / HC2 {ratio:.4}", p.name);
        assert!((ratio - 1.0).abs() < 0.1 + sd_tolerance(B), "{}: {ratio}", p.name);
    }
}
