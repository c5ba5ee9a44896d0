//! The adaptive Monte Carlo procedure of JCGM 101:2008, clause 7.9
//! (applied to the standard uncertainties): batches of h trials; stable
//! when twice the standard deviation of the mean of the batch standard
//! deviations is at most the numerical tolerance (here relative to u) for
//! every free parameter. The test recomputes the rule from the recorded
//! trials: it must hold where the run stopped and not one batch earlier.

mod resample_common;

use fitaudit::diagnostics::monte_carlo::{self, batch_size};
use fitaudit::diagnostics::NoProgress;
use fitaudit::settings::{AuditSettings, MonteCarloSettings};
use resample_common::*;

fn sd(v: &[f64]) -> f64 {
    let m = v.iter().sum::<f64>() / v.len() as f64;
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
}

/// The clause 7.9.4 criterion after `batches` batches of `h` rows.
fn rule_holds(rows: &[Vec<f64>], h: usize, batches: usize, tol: f64) -> bool {
    (0..2).all(|j| {
        let col: Vec<f64> = rows[..h * batches].iter().map(|r| r[j]).collect();
        let u = sd(&col);
        let per_batch: Vec<f64> = col.chunks(h).map(sd).collect();
        let s_u = sd(&per_batch) / (batches as f64).sqrt();
        2.0 * s_u <= tol * u
    })
}

#[test]
fn adaptive_trials_stop_when_the_uncertainties_are_stable() {
    let t = grid(30, 0.0, 0.2);
    let data = synthetic(&t, &[0.3; 30], |t| 10.0 * (-0.5 * t).exp(), 400, 0, true);
    let model = decay_model();
    let params = free_params(&[("A", 8.0), ("k", 0.4)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings::default();
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let h = batch_size(settings.level);
    assert_eq!(h, 316, "JCGM 101:2008, 7.2.2: ceil(100 / (1 - 0.6827))");

    // 2 s_u ~ 2 u / sqrt(2 h B) <= tol u needs B ~ 2 / (h tol^2) = 7 batches
    // at tol = 0.03 (estimate, normal theory): it stops well below the cap.
    let tol = 0.03;
    let mc = MonteCarloSettings {
        replicates: 30 * h,
        adaptive: true,
        adaptive_tolerance: tol,
        ..MonteCarloSettings::default()
    };
    let r = monte_carlo::run_with(&ctx, &mc, &NoProgress);
    assert_eq!(r.failed, 0);
    assert_eq!(r.adaptive_stable, Some(true));
    assert_eq!(r.run % h, 0, "stops at the end of a batch");
    let batches = r.run / h;
    eprintln!(
        "adaptive: stable after {batches} batches of {h} ({} trials)",
        r.run
    );
    assert!(batches >= 2 && r.run < mc.replicates);
    assert!(rule_holds(&r.estimates, h, batches, tol));
    if batches > 2 {
        assert!(
            !rule_holds(&r.estimates, h, batches - 1, tol),
            "it should have stopped earlier"
        );
    }

    // A tolerance the cap cannot reach: runs every trial, records instability.
    let mc = MonteCarloSettings {
        replicates: 3 * h + 50,
        adaptive: true,
        adaptive_tolerance: 0.001,
        ..MonteCarloSettings::default()
    };
    let r = monte_carlo::run_with(&ctx, &mc, &NoProgress);
    assert_eq!(r.run, 3 * h + 50);
    assert_eq!(r.adaptive_stable, Some(false));
    // The non-adaptive run records no stability.
    let plain = MonteCarloSettings {
        replicates: 200,
        ..MonteCarloSettings::default()
    };
    assert_eq!(
        monte_carlo::run_with(&ctx, &plain, &NoProgress).adaptive_stable,
        None
    );
}
