//! Reproducibility: replicate k draws from its own stream, so every scheme
//! gives bit-identical results in pools of 1, 2 and 3 threads and across
//! runs, and a different seed gives different results (the design rule of
//! src/rng.rs; common practice for parallel Monte Carlo).

mod resample_common;

use fitaudit::diagnostics::resample::ResampleResult;
use std::sync::atomic::{AtomicU64, Ordering};

use fitaudit::diagnostics::{bootstrap, monte_carlo, Fitted, NoProgress, Progress};
use fitaudit::settings::{
    AuditSettings, BootstrapScheme, BootstrapSettings, MonteCarloSettings, WildWeights,
};
use resample_common::*;

const B: usize = 120;

fn all_schemes(ctx: &Fitted) -> Vec<ResampleResult> {
    let mut out = Vec::new();
    for (scheme, weights) in [
        (BootstrapScheme::Case, WildWeights::Rademacher),
        (BootstrapScheme::Residual, WildWeights::Rademacher),
        (BootstrapScheme::Wild, WildWeights::Rademacher),
        (BootstrapScheme::Wild, WildWeights::Mammen),
    ] {
        let s = BootstrapSettings {
            replicates: B,
            scheme,
            weights,
        };
        out.push(bootstrap::run_with(ctx, &s, true, &NoProgress));
    }
    for t in [None, Some(5.0)] {
        let s = MonteCarloSettings {
            replicates: B,
            student_t_dof: t,
            ..MonteCarloSettings::default()
        };
        out.push(monte_carlo::run_with(ctx, &s, &NoProgress));
    }
    let adaptive = MonteCarloSettings {
        replicates: 1000,
        adaptive: true,
        adaptive_tolerance: 0.3,
        ..MonteCarloSettings::default()
    };
    out.push(monte_carlo::run_with(ctx, &adaptive, &NoProgress));
    out
}

#[test]
fn identical_for_any_thread_count_and_seed_dependent() {
    let t = grid(30, 0.0, 0.2);
    let data = synthetic(&t, &[0.3; 30], |t| 10.0 * (-0.5 * t).exp(), 300, 0, true);
    let model = decay_model();
    let params = free_params(&[("A", 8.0), ("k", 0.4)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings {
        seed: 42,
        ..AuditSettings::default()
    };
    let ctx = fitted(&model, &params, &data, &fit, &settings);

    let one = in_pool(1, || all_schemes(&ctx));
    let two = in_pool(2, || all_schemes(&ctx));
    let three = in_pool(3, || all_schemes(&ctx));
    let again = in_pool(2, || all_schemes(&ctx));
    assert_eq!(one.len(), 7);
    for r in &one {
        assert_eq!(r.failed, 0, "{}", r.scheme);
        assert!(r.estimates.len() >= B);
    }
    // Bit for bit: f64 equality of every field (no NaN in these results).
    assert_eq!(one, two, "1 vs 2 threads");
    assert_eq!(one, three, "1 vs 3 threads");
    assert_eq!(two, again, "run to run");
    // Each scheme draws differently.
    for i in 0..one.len() {
        for k in (i + 1)..one.len() {
            assert_ne!(one[i].estimates, one[k].estimates, "schemes {i} and {k}");
        }
    }

    let other_seed = AuditSettings {
        seed: 43,
        ..settings.clone()
    };
    let ctx2 = fitted(&model, &params, &data, &fit, &other_seed);
    let changed = in_pool(2, || all_schemes(&ctx2));
    for (a, b) in one.iter().zip(&changed) {
        assert_ne!(
            a.estimates[0], b.estimates[0],
            "{}: the seed must matter",
            a.scheme
        );
        assert_ne!(a.parameters[0].std, b.parameters[0].std, "{}", a.scheme);
    }
}

/// Counts what the diagnostics report to the progress bar.
#[derive(Default)]
struct Counter {
    starts: AtomicU64,
    total: AtomicU64,
    advanced: AtomicU64,
    finishes: AtomicU64,
}

impl Progress for Counter {
    fn start(&self, _stage: &str, total: u64) {
        self.starts.fetch_add(1, Ordering::SeqCst);
        self.total.fetch_add(total, Ordering::SeqCst);
    }
    fn advance(&self, n: u64) {
        self.advanced.fetch_add(n, Ordering::SeqCst);
    }
    fn finish(&self) {
        self.finishes.fetch_add(1, Ordering::SeqCst);
    }
}

#[test]
fn progress_reaches_its_total() {
    let t = grid(30, 0.0, 0.2);
    let data = synthetic(&t, &[0.3; 30], |t| 10.0 * (-0.5 * t).exp(), 300, 1, true);
    let model = decay_model();
    let params = free_params(&[("A", 8.0), ("k", 0.4)]);
    let fit = base_fit(&model, &params, &data);
    let settings = AuditSettings {
        bootstrap: BootstrapSettings {
            replicates: 100,
            ..BootstrapSettings::default()
        },
        monte_carlo: MonteCarloSettings {
            replicates: 5000,
            adaptive: true,
            adaptive_tolerance: 0.3,
            ..MonteCarloSettings::default()
        },
        ..AuditSettings::default()
    };
    let ctx = fitted(&model, &params, &data, &fit, &settings);
    let c = Counter::default();
    let b = bootstrap::run(&ctx, &c);
    let m = monte_carlo::run(&ctx, &c);
    assert_eq!(b.run, 100);
    // One linearised leave-one-out value per point, no refits.
    assert_eq!(b.jackknife_refits, 30);
    assert!(m.run < 5000, "stops early: {}", m.run);
    // Two stages, each started and finished once; the bar counts refits
    // (replicates only) and reaches its total even when the adaptive rule
    // stops early.
    assert_eq!(c.starts.load(Ordering::SeqCst), 2);
    assert_eq!(c.finishes.load(Ordering::SeqCst), 2);
    // The Monte Carlo runs no jackknife (BCa belongs to the bootstrap), and the
    // bootstrap's acceleration comes from the linearised jackknife (no refits).
    assert_eq!(c.total.load(Ordering::SeqCst), 100 + 5000);
    assert_eq!(c.advanced.load(Ordering::SeqCst), 100 + 5000);
}
