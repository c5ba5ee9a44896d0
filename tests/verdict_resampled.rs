//! Verdicts from real resampling runs on a straight line (the rules
//! themselves are unit-tested on hand-built inputs in
//! src/diagnostics/verdict.rs).
//!
//! Identity used: for a linear model the residual bootstrap SD is
//! `sqrt(v)` times the absolute standard error, `v` the mean square of the
//! adjusted weighted residuals, which estimates (true noise / stated
//! sigma)^2; the Monte Carlo SD with the stated sigma equals the standard
//! error. So stating sigma three times too small must make the bootstrap
//! fail the +- while the Monte Carlo (which trusts sigma) agrees.

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
        let m = monte_carlo::run_with(&ctx, &mc, false, &NoProgress);
        let v = decide(&VerdictInputs {
            fit: &fit,
            bootstrap: Some(&b),
            monte_carlo: Some(&m),
            profile: None,
            multistart: None,
            tolerance: settings.tolerance,
        });
        assert_eq!(v.len(), 2);
        for (j, vi) in v.iter().enumerate() {
            eprintln!("factor {factor}: {:?} {:?}", vi.status, vi.reasons);
            assert_eq!(vi.status, want, "{vi:?}");
            let ratio = b.parameters[j].sd_ratio.unwrap();
            if want == Status::Holds {
                assert!(vi.reasons.iter().any(|r| r.starts_with("bootstrap SD agrees")));
                assert!(vi.reasons.iter().any(|r| r.starts_with("Monte Carlo SD agrees")));
            } else {
                // The reason quotes the ratio; the Monte Carlo does not object.
                assert!(ratio > 2.0, "ratio {ratio}");
                assert_eq!(vi.reasons.len(), 1, "{:?}", vi.reasons);
                assert!(
                    vi.reasons[0].contains(&format!("ratio {ratio:.2}")),
                    "{:?}",
                    vi.reasons
                );
            }
        }
    }
}
