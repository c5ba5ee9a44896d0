//! Failure accounting: replicates whose refit fails are counted, listed and
//! excluded visibly, the statistics of the rest stay finite, and a failure
//! share above 1 % reaches the verdict.
//!
//! Model `b sqrt(a - x)` with the last point x = 9 just inside the edge
//! (a = 9.01, sigma = 0.3): for some replicates the least-squares solution
//! lies beyond the edge `a < 9`, where the model is not finite, so the
//! refit cannot converge (synthetic data, fixed seed; the effect, not the
//! numbers, is the point).

mod resample_common;

use fitaudit::diagnostics::resample::{Outcome, ResampleResult};
use fitaudit::diagnostics::verdict::{decide, Status, VerdictInputs};
use fitaudit::diagnostics::{bootstrap, monte_carlo, NoProgress};
use fitaudit::model::NativeModel;
use fitaudit::settings::{
    AuditSettings, BootstrapScheme, BootstrapSettings, MonteCarloSettings, WildWeights,
};
use resample_common::*;

const B: usize = 500;

fn edge_model() -> NativeModel<PointFn> {
    fn f(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        let s = (p[0] - x[0]).sqrt();
        g[0] = p[1] * 0.5 / s;
        g[1] = s;
        p[1] * s
    }
    NativeModel::new(2, f as PointFn)
}

fn check_accounting(r: &ResampleResult) {
    assert_eq!(r.run, B);
    assert!(r.failed > 0, "{}: the edge must make some refits fail", r.scheme);
    assert_eq!(r.failed, r.failures.len());
    assert_eq!(
        r.estimates.len(),
        B - r.failed,
        "every replicate is either kept or listed"
    );
    assert!(r.failures.windows(2).all(|w| w[0].index < w[1].index));
    assert!(r.failures.iter().all(|f| f.index < B));
    assert!(r
        .failures
        .iter()
        .all(|f| f.reason == "non-finite" || f.reason == "not-converged"));
    assert!(r.estimates.iter().flatten().all(|v| v.is_finite()));
    for (j, p) in r.parameters.iter().enumerate() {
        let finite = [p.mean, p.bias, p.std, p.lower, p.upper, p.sd_ratio.unwrap()];
        assert!(finite.iter().all(|v| v.is_finite()), "{}: {p:?}", r.scheme);
        // The statistics are those of the kept replicates (excluded visibly).
        let kept: Vec<f64> = r.estimates.iter().map(|e| e[j]).collect();
        let mean = kept.iter().sum::<f64>() / kept.len() as f64;
        assert!((p.mean - mean).abs() <= 1e-12 * mean.abs());
    }
    assert!(r.correlation.iter().flatten().all(|v| v.is_finite()));
}

#[test]
fn failed_refits_are_counted_listed_and_excluded() {
    let x = grid(10, 0.0, 1.0);
    let s = vec![0.3; 10];
    let data = synthetic(&x, &s, |x| 2.0 * (9.01 - x).sqrt(), 200, 0, true);
    let model = edge_model();
    let params = free_params(&[("a", 10.0), ("b", 1.5)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);

    let mc_settings = MonteCarloSettings {
        replicates: B,
        ..MonteCarloSettings::default()
    };
    let mc = monte_carlo::run_with(&ctx, &mc_settings, &NoProgress);
    check_accounting(&mc);
    let bs_settings = BootstrapSettings {
        replicates: B,
        scheme: BootstrapScheme::Residual,
        weights: WildWeights::Rademacher,
    };
    let bs = bootstrap::run_with(&ctx, &bs_settings, true, &NoProgress);
    check_accounting(&bs);
    eprintln!(
        "failed: Monte Carlo {} of {B}, bootstrap {} of {B}",
        mc.failed, bs.failed
    );

    // A listed failure really is that replicate: rerun it alone.
    let k = mc.failures[0].index;
    let again = monte_carlo::trials(&ctx, &mc_settings, k..k + 1, &NoProgress);
    assert!(matches!(again[0], Outcome::Failed(_)));
    // And a kept replicate's row is that replicate's refit.
    let first_ok = (0..B)
        .find(|i| mc.failures.iter().all(|f| f.index != *i))
        .unwrap();
    let again = monte_carlo::trials(&ctx, &mc_settings, first_ok..first_ok + 1, &NoProgress);
    assert_eq!(again[0], Outcome::Ok(mc.estimates[0].clone()));

    // More than 1 % failed: every parameter is at least doubtful and the
    // reason says how many failed.
    let v = decide(&VerdictInputs {
        fit: &fit,
        bootstrap: Some(&bs),
        monte_carlo: Some(&mc),
        profile: None,
        multistart: None,
        tolerance: settings.tolerance,
        sigma_given: true,
        level: 0.6827,
    });
    assert_eq!(v.len(), 2);
    for vi in &v {
        assert!(vi.status >= Status::Doubtful, "{vi:?}");
        let want = format!("{} of {B} Monte Carlo refits failed", mc.failed);
        assert!(
            fitaudit::report::findings::reasons(vi)
                .iter()
                .any(|r| r.starts_with(&want)),
            "{:?}",
            fitaudit::report::findings::reasons(vi)
        );
        let want = format!("{} of {B} bootstrap refits failed", bs.failed);
        assert!(
            fitaudit::report::findings::reasons(vi)
                .iter()
                .any(|r| r.starts_with(&want)),
            "{:?}",
            fitaudit::report::findings::reasons(vi)
        );
    }
}
