//! Verdicts from real resampling runs on a straight line (the rules
//! themselves are unit-tested on hand-built inputs in
//! src/diagnostics/verdict.rs).
//!
//! Identity used: for a linear model the residual bootstrap SD is
//! `sqrt(v)` times the absolute standard error, `v` the mean square of the
//! adjusted weighted residuals, which estimates (true noise / stated
//! sigma)^2; the Monte Carlo SD with the stated sigma equals the standard
//! error. So stating sigma three times too small must make the bootstrap
//! (and chi2 against its dof) fail the +- while the Monte Carlo (which
//! trusts sigma) agrees.

mod resample_common;

use fitaudit::diagnostics::verdict::{decide, Status, VerdictInputs};
use fitaudit::diagnostics::{bootstrap, monte_carlo, NoProgress};
use fitaudit::settings::{AuditSettings, BootstrapSettings, MonteCarloSettings};
use resample_common::*;

#[test]
fn understated_sigma_fails_by_bootstrap_and_correct_sigma_holds() {
    let n = 40;
    let x = grid(n, 0.0, 0.25);
    let model = line_model();
    let params = free_params(&[("a", 0.0), ("b", 1.0)]);
    let settings = AuditSettings::default();
    let bs = BootstrapSettings {
        replicates: 1000,
        ..BootstrapSettings::default()
    };
    let mc = MonteCarloSettings {
        replicates: 1000,
        ..MonteCarloSettings::default()
    };
    for (factor, want) in [(1.0, Status::Holds), (3.0, Status::Fails)] {
        let true_sigma = vec![0.2 * factor; n];
        let mut data = synthetic(&x, &true_sigma, |x| 1.0 + 2.0 * x, 500, 0, true);
        data.sigma = Some(vec![0.2; n]);
        let fit = base_fit(&model, &params, &data);
        let ctx = fitted(&model, &params, &data, &fit, &settings);
        let b = bootstrap::run_with(&ctx, &bs, false, &NoProgress);
        let m = monte_carlo::run_with(&ctx, &mc, &NoProgress);
        let v = decide(&VerdictInputs {
            fit: &fit,
            bootstrap: Some(&b),
            monte_carlo: Some(&m),
            profile: None,
            multistart: None,
            tolerance: settings.tolerance,
            sigma_given: true,
            level: 0.6827,
        });
        assert_eq!(v.len(), 2);
        for (j, vi) in v.iter().enumerate() {
            eprintln!(
                "factor {factor}: {:?} {:?}",
                vi.status,
                fitaudit::report::findings::reasons(vi)
            );
            assert_eq!(vi.status, want, "{vi:?}");
            let ratio = b.parameters[j].robust_ratio.unwrap();
            let reasons = fitaudit::report::findings::reasons(vi);
            if want == Status::Holds {
                assert!(reasons.iter().any(|r| r.starts_with("bootstrap spread agrees")));
                assert!(reasons.iter().any(|r| r.starts_with("Monte Carlo spread agrees")));
                assert!(reasons.iter().any(|r| r.contains("agrees with the stated sigma")));
            } else {
                // Two objections: chi2 against its dof, and the bootstrap
                // spread quoting its ratio; the Monte Carlo does not object.
                assert!(ratio > 2.0, "ratio {ratio}");
                assert_eq!(reasons.len(), 2, "{reasons:?}");
                assert!(
                    reasons[0].contains("either the stated sigma or the model is wrong"),
                    "{reasons:?}"
                );
                assert!(
                    reasons[1].contains(&format!("ratio {ratio:.2} to u")),
                    "{reasons:?}"
                );
            }
        }
    }
}
