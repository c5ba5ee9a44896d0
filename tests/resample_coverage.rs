//! Coverage of the resampled 68.27 % intervals on synthetic data from a
//! known truth: an interval procedure at level p must contain the truth in
//! a share p of repeated experiments (the definition of a confidence
//! interval; Neyman 1937). With N data sets the observed share is binomial,
//! so it must lie within p +- 3 sqrt(p (1 - p) / N).
//!
//! Truth: exponential decay A exp(-k t), A = 10, k = 0.5, n = 30 points at
//! t = 0, 0.2, ..., 5.8, known sigma = 0.3 (fixed seed; the check is of
//! the procedure, so synthetic data are the point here). Checked: the
//! Monte Carlo (JCGM 101 probabilistically symmetric and shortest
//! intervals) and the residual bootstrap (percentile and BCa intervals).
//! (The case bootstrap is not checked here: at n = 30 it under-covers, as
//! documented in docs/METHODS.md; measured 0.637 for A with this setup.)

#![allow(clippy::needless_range_loop)]

mod resample_common;

use fitaudit::diagnostics::resample::ResampleResult;
use fitaudit::diagnostics::{bootstrap, monte_carlo, NoProgress};
use fitaudit::settings::{
    AuditSettings, BootstrapScheme, BootstrapSettings, MonteCarloSettings, WildWeights,
};
use rayon::prelude::*;
use resample_common::*;

const DATASETS: u64 = 1000;
const B: usize = 200;
const TRUTH: [f64; 2] = [10.0, 0.5];

#[derive(Default)]
struct Tally {
    percentile: [usize; 2],
    bca: [usize; 2],
    bca_defined: [usize; 2],
}

impl Tally {
    fn add(&mut self, r: &ResampleResult) {
        for j in 0..2 {
            let p = &r.parameters[j];
            if p.lower <= TRUTH[j] && TRUTH[j] <= p.upper {
                self.percentile[j] += 1;
            }
            // BCa for the bootstrap, the shortest interval for the Monte Carlo.
            let other = match (p.bca_lower, p.bca_upper) {
                (Some(lo), Some(hi)) => Some((lo, hi)),
                _ => p.shortest_lower.zip(p.shortest_upper),
            };
            if let Some((lo, hi)) = other {
                self.bca_defined[j] += 1;
                if lo <= TRUTH[j] && TRUTH[j] <= hi {
                    self.bca[j] += 1;
                }
            }
        }
    }
}

#[test]
fn percentile_intervals_cover_the_truth_at_the_nominal_rate() {
    let t = grid(30, 0.0, 0.2);
    let sigma = vec![0.3; 30];
    let model = decay_model();
    let params = free_params(&[("A", 8.0), ("k", 0.4)]);
    let settings = AuditSettings {
        seed: 11,
        ..AuditSettings::default()
    };
    let mc = MonteCarloSettings {
        replicates: B,
        ..MonteCarloSettings::default()
    };
    let bs = BootstrapSettings {
        replicates: B,
        scheme: BootstrapScheme::Residual,
        weights: WildWeights::Rademacher,
    };
    // Data sets in parallel (each resampling run is parallel inside too);
    // results are collected in data-set order.
    let runs: Vec<(ResampleResult, ResampleResult)> = (0..DATASETS)
        .into_par_iter()
        .map(|k| {
            let data = synthetic(&t, &sigma, |t| TRUTH[0] * (-TRUTH[1] * t).exp(), 100, k, true);
            let fit = base_fit(&model, &params, &data);
            // Each data set gets its own seed so that the replicates differ too.
            let settings = AuditSettings {
                seed: settings.seed + k,
                ..settings.clone()
            };
            let ctx = fitted(&model, &params, &data, &fit, &settings);
            let m = monte_carlo::run_with(&ctx, &mc, &NoProgress);
            assert!(m.parameters.iter().all(|p| p.shortest_lower.is_some()));
            let b = bootstrap::run_with(&ctx, &bs, true, &NoProgress);
            assert_eq!(m.failed + b.failed, 0, "data set {k}");
            (m, b)
        })
        .collect();
    let (mut mct, mut bst) = (Tally::default(), Tally::default());
    let mut ratio_sum = [0.0; 2];
    for (m, b) in &runs {
        mct.add(m);
        bst.add(b);
        for j in 0..2 {
            ratio_sum[j] += m.parameters[j].sd_ratio.unwrap();
        }
    }
    let n = DATASETS as f64;
    let p = 0.6827;
    let band = 3.0 * (p * (1.0 - p) / n).sqrt();
    for (label, tally) in [("Monte Carlo", &mct), ("residual bootstrap", &bst)] {
        for (j, name) in ["A", "k"].iter().enumerate() {
            let rate = tally.percentile[j] as f64 / n;
            let bca = tally.bca[j] as f64 / tally.bca_defined[j].max(1) as f64;
            eprintln!(
                "{label} {name}: percentile coverage {rate:.4}, BCa or shortest {bca:.4} ({} defined); band {:.4}..{:.4}",
                tally.bca_defined[j],
                p - band,
                p + band
            );
            assert!(
                (rate - p).abs() < band,
                "{label} {name}: percentile coverage {rate}"
            );
            assert!((bca - p).abs() < band, "{label} {name}: BCa coverage {bca}");
        }
    }
    eprintln!(
        "mean Monte Carlo SD ratio: A {:.4}, k {:.4}",
        ratio_sum[0] / n,
        ratio_sum[1] / n
    );
}
