//! The rules of the multi-start search checked one by one, apart from the
//! refits: the Latin hypercube design, the sampling boxes, the clustering
//! tolerances, equivalent permutations, the same-fit merge, the
//! distinguishability threshold and the missed-minimum estimate.

use fitaudit::diagnostics::multistart::{
    boender_rinnooy_kan, design, sampling_box, summarise, threshold, Reference, ScaleHint, StartRun,
};
use fitaudit::diagnostics::sampling::{latin_hypercube, stratum, Interval, Scale};
use fitaudit::fit::ParamSpec;
use fitaudit::rng::{stream, Stream};
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]

    /// Defining property of a Latin hypercube (McKay, Beckman & Conover
    /// 1979, Technometrics 21:239-245; from memory): on every axis each of
    /// the n strata holds exactly one point.
    #[test]
    fn latin_hypercube_fills_each_stratum_once(n in 1usize..90, dims in 1usize..6, seed in any::<u64>()) {
        let mut rng = stream(seed, Stream::Other(7), 0);
        let pts = latin_hypercube(n, dims, &mut rng);
        prop_assert_eq!(pts.len(), n);
        for d in 0..dims {
            let mut hits = vec![0usize; n];
            for p in &pts {
                prop_assert_eq!(p.len(), dims);
                prop_assert!((0.0..1.0).contains(&p[d]));
                hits[stratum(p[d], n)] += 1;
            }
            prop_assert!(hits.iter().all(|&h| h == 1), "axis {}: {:?}", d, hits);
        }
    }

    /// The starts are the hypercube of stream (seed, multistart, 0) mapped
    /// through the boxes, one axis per free parameter; fixed ones stay put.
    #[test]
    fn design_is_the_mapped_hypercube(n in 2usize..40, seed in any::<u64>()) {
        let boxes = [
            Interval { low: -1.0, high: 3.0, scale: Scale::Linear },
            Interval::point(7.0),
            Interval { low: 1e-3, high: 10.0, scale: Scale::Log },
        ];
        let free = [true, false, true];
        let values = [0.5, 7.0, 0.2];
        let starts = design(&boxes, &free, &values, n, seed);
        let unit = latin_hypercube(n, 2, &mut stream(seed, Stream::Multistart, 0));
        prop_assert_eq!(starts.len(), n);
        for (s, u) in starts.iter().zip(&unit) {
            prop_assert_eq!(s[0], boxes[0].map(u[0]));
            prop_assert_eq!(s[1], 7.0);
            prop_assert_eq!(s[2], boxes[2].map(u[1]));
            prop_assert!(s[2] >= 1e-3 && s[2] <= 10.0);
        }
        // A different seed gives a different design.
        prop_assert_ne!(starts, design(&boxes, &free, &values, n, seed.wrapping_add(1)));
    }
}

fn spec(start: f64, min: f64, max: f64) -> ParamSpec {
    ParamSpec {
        name: "p".to_string(),
        start,
        min,
        max,
        fixed: false,
    }
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * a.abs().max(b.abs()).max(1.0)
}

#[test]
fn sampling_boxes_follow_the_documented_rules() {
    let inf = f64::INFINITY;
    let hint = ScaleHint {
        position: None,
        magnitude: 4.0,
    };
    // Fixed: a single value.
    let mut fixed = spec(2.0, -inf, inf);
    fixed.fixed = true;
    assert_eq!(sampling_box(&fixed, 2.0, &hint, true), Interval::point(2.0));
    // Two finite bounds: the bounds, linear within a decade...
    let b = sampling_box(&spec(2.0, 1.0, 5.0), 2.2, &hint, true);
    assert_eq!((b.low, b.high, b.scale), (1.0, 5.0, Scale::Linear));
    // ... logarithmic over more than a decade, unless switched off.
    let b = sampling_box(&spec(2.0, 0.1, 100.0), 2.2, &hint, true);
    assert_eq!((b.low, b.high, b.scale), (0.1, 100.0, Scale::Log));
    let b = sampling_box(&spec(2.0, 0.1, 100.0), 2.2, &hint, false);
    assert_eq!(b.scale, Scale::Linear);
    // Unbounded: start +- 3 |start|; the fit's value widens a box only
    // when it lies within the box's half-width of the start (so never this
    // symmetric one) ...
    let b = sampling_box(&spec(2.0, -inf, inf), 2.5, &hint, true);
    assert!(close(b.low, -4.0) && close(b.high, 8.0) && b.scale == Scale::Linear);
    let b = sampling_box(&spec(2.0, -inf, inf), -5.0, &hint, true);
    assert!(close(b.low, -4.0) && close(b.high, 8.0));
    // ... and never to a value far away (a fit that ran off), whatever
    // its standard error.
    let b = sampling_box(&spec(2.0, -inf, inf), 3.5e297, &hint, true);
    assert!(close(b.low, -4.0) && close(b.high, 8.0));
    // A zero start takes the data's magnitude (largest |y|, here 4).
    let b = sampling_box(&spec(0.0, -inf, inf), 0.0, &hint, true);
    assert_eq!((b.low, b.high), (-12.0, 12.0));
    // A bound that does not fix the sign: the same box cut at it.
    let b = sampling_box(&spec(2.0, -1.0, inf), 2.0, &hint, true);
    assert_eq!((b.low, b.high, b.scale), (-1.0, 8.0, Scale::Linear));
    // Sign-definite (a bound at or beyond zero): two decades on each side
    // of the start, cut at the bound, in the logarithm when positive.
    let b = sampling_box(&spec(2.0, 0.0, inf), 2.0, &hint, true);
    assert!(close(b.low, 0.02) && close(b.high, 200.0) && b.scale == Scale::Log);
    let b = sampling_box(&spec(2.0, 0.0, inf), 2.0, &hint, false);
    assert!(close(b.low, 0.02) && close(b.high, 200.0) && b.scale == Scale::Linear);
    let b = sampling_box(&spec(100.0, 5.0, inf), 100.0, &hint, true);
    assert!(close(b.low, 5.0) && close(b.high, 1e4) && b.scale == Scale::Log);
    let b = sampling_box(&spec(-2.0, -inf, 0.0), -2.0, &hint, true);
    assert!(close(b.low, -200.0) && close(b.high, -0.02) && b.scale == Scale::Linear);
    // A zero start on a zero bound: decades around the data's magnitude.
    let b = sampling_box(&spec(0.0, 0.0, inf), 0.0, &hint, true);
    assert!(close(b.low, 0.04) && close(b.high, 400.0) && b.scale == Scale::Log);
    // A position on an x axis (data 400 to 460): the data range widened by
    // 10 % on each side, wherever the start and the fit are inside it.
    let pos = ScaleHint {
        position: Some([400.0, 460.0]),
        magnitude: 1.0,
    };
    let b = sampling_box(&spec(445.0, -inf, inf), 445.3, &pos, true);
    assert!(close(b.low, 394.0) && close(b.high, 466.0) && b.scale == Scale::Linear);
    // A start outside the data joins the box, and so does a fit's value
    // within the half-width of the start; a far-off value does not.
    let b = sampling_box(&spec(500.0, -inf, inf), -918.0, &pos, true);
    assert!(close(b.low, 394.0) && close(b.high, 500.0));
    let b = sampling_box(&spec(445.0, -inf, inf), 475.0, &pos, true);
    assert!(close(b.low, 394.0) && close(b.high, 475.0));
    // A bound still cuts it.
    let b = sampling_box(&spec(445.0, 420.0, inf), 445.0, &pos, true);
    assert!(close(b.low, 420.0) && close(b.high, 466.0));
}

#[test]
fn boender_rinnooy_kan_values() {
    // Boender & Rinnooy Kan (1987), Math. Programming 37:59-80 (from memory):
    // expected minima w (N - 1)/(N - w - 2); unseen share w (w + 1)/(N (N - 1));
    // P(all found) = prod_{i=1..w} (N - 1 - i)/(N - 1 + i).
    let e = boender_rinnooy_kan(64, 1);
    assert!((e.missed - 2.0 / 64.0).abs() < 1e-15);
    assert!((e.unseen_share - 2.0 / 4032.0).abs() < 1e-15);
    assert!((e.expected - 63.0 / 61.0).abs() < 1e-12);
    let e = boender_rinnooy_kan(10, 3);
    assert!((e.missed - (1.0 - (8.0 * 7.0 * 6.0) / (10.0 * 11.0 * 12.0))).abs() < 1e-15);
    assert!((e.unseen_share - 12.0 / 90.0).abs() < 1e-15);
    assert!((e.expected - 5.4).abs() < 1e-12);
    // Too few starts for the rule (N <= w + 2): certainly incomplete,
    // expected minima capped at N, everything finite.
    let e = boender_rinnooy_kan(5, 3);
    assert_eq!((e.missed, e.unseen_share, e.expected), (1.0, 1.0, 5.0));
    let e = boender_rinnooy_kan(0, 0);
    assert_eq!((e.missed, e.expected), (1.0, 0.0));
}

/// The closed forms against the posterior itself: P(K | N, w) proportional
/// to K!/(K - w)! (K - 1)!/(N + K - 1)! for K >= w (the model of Boender &
/// Rinnooy Kan: flat prior on K, uniform basin shares), summed in logs until
/// the terms vanish. A mathematical identity, independent of the paper.
#[test]
fn boender_rinnooy_kan_closed_forms_are_the_posterior() {
    for (n, w) in [(128usize, 1usize), (128, 2), (20, 3), (50, 5), (10, 2), (300, 7)] {
        let terms: Vec<f64> = (w..w + 200_000)
            .map(|k| {
                // ln K!/(K-w)! + ln (K-1)! - ln (N+K-1)! by sums of logs of
                // the ranges, so the loop stays linear.
                let a: f64 = ((k - w + 1)..=k).map(|i| (i as f64).ln()).sum();
                let b: f64 = (k..(n + k)).map(|i| (i as f64).ln()).sum();
                a - b
            })
            .take_while({
                let mut first = None;
                move |t: &f64| {
                    let f = *first.get_or_insert(*t);
                    *t > f - 60.0
                }
            })
            .collect();
        let top = terms[0];
        let ps: Vec<f64> = terms.iter().map(|t| (t - top).exp()).collect();
        let total: f64 = ps.iter().sum();
        let p_all = ps[0] / total;
        let mean: f64 = ps
            .iter()
            .enumerate()
            .map(|(i, p)| (w + i) as f64 * p)
            .sum::<f64>()
            / total;
        let e = boender_rinnooy_kan(n, w);
        assert!(
            (e.missed - (1.0 - p_all)).abs() < 1e-9,
            "n {n} w {w}: {} vs {}",
            e.missed,
            1.0 - p_all
        );
        assert!(
            (e.expected - mean).abs() < 1e-6 * mean,
            "n {n} w {w}: {} vs {mean}",
            e.expected
        );
    }
}

#[test]
fn thresholds_are_chi_squared_quantiles() {
    // NIST/SEMATECH e-Handbook of Statistical Methods, 1.3.6.7.4 (critical
    // values of the chi-square distribution): 3.841 for 1 dof at 0.95 and
    // 6.635 at 0.99.
    assert!((threshold(0.95) - 3.841).abs() < 1e-3);
    assert!((threshold(0.99) - 6.635).abs() < 1e-3);
    // The one-standard-deviation level 0.6827 gives delta chi2 = 1 (identity:
    // P(|Z| < 1) = 0.6827 for Z normal, Z^2 chi-squared with 1 dof).
    assert!((threshold(0.6827) - 1.0).abs() < 1e-3);
}

fn reference(names: &[&str], se: &[Option<f64>], base_chi2: f64) -> Reference {
    Reference {
        names: names.iter().map(|s| s.to_string()).collect(),
        free: vec![true; names.len()],
        std_errors: se.to_vec(),
        base_chi2,
        dof: 10,
        scaled: false,
        level: 0.6827,
        missed_target: 0.05,
    }
}

fn run(end: &[f64], chi2: f64, converged: bool) -> StartRun {
    StartRun {
        start: vec![0.0; end.len()],
        end: end.to_vec(),
        chi2,
        converged,
        minimum: None,
        degenerate: None,
        rank_deficiency: 0,
        batch: 0,
        merged_early: false,
    }
}

/// Weighted model values that separate parameter vectors (a model whose
/// values are 100 times its parameters).
fn separating(a: &[f64]) -> Option<Vec<f64>> {
    Some(a.iter().map(|v| 100.0 * v).collect())
}

#[test]
fn clustering_uses_chi2_and_standard_error_tolerances() {
    let r = reference(&["a", "b"], &[Some(0.1), Some(0.2)], 10.0);
    let runs = vec![
        run(&[1.0, 2.0], 10.0, true),
        // 0.05 SE on both and chi2 within 1e-3: same minimum.
        run(&[1.005, 2.01], 10.0005, true),
        // 0.2 SE away: another minimum.
        run(&[1.02, 2.0], 10.0, true),
        // Same point, chi2 0.01 higher: another minimum.
        run(&[1.0, 2.0], 10.01, true),
        // Not converged, and not finite: failed.
        run(&[1.0, 2.0], 10.0, false),
        run(&[1.0, 2.0], f64::NAN, true),
    ];
    let res = summarise(&r, runs, vec![[0.0, 3.0], [0.0, 4.0]], &separating);
    assert_eq!(res.starts, 6);
    assert_eq!(res.failed, 2);
    let counts: Vec<usize> = res.minima.iter().map(|m| m.count).collect();
    assert_eq!(counts, vec![2, 1, 1]);
    let fr: Vec<f64> = res.minima.iter().map(|m| m.fraction).collect();
    assert_eq!(fr, vec![0.5, 0.25, 0.25]);
    let which: Vec<Option<usize>> = res.runs.iter().map(|x| x.minimum).collect();
    assert_eq!(which, vec![Some(0), Some(0), Some(1), Some(2), None, None]);
    // Representative: the lowest-chi2 endpoint of its cluster.
    assert_eq!(res.minima[0].parameters[0].value, 1.0);
    assert_eq!(res.minima[0].parameters[1].name, "b");
    assert!((res.minima[2].delta_chi2 - 0.01).abs() < 1e-12);
    assert!(res.minima.iter().all(|m| !m.distinguishable));
    assert!(res.base_is_best);
    // N = 4 converged starts, w = 3 minima: N <= w + 2.
    assert_eq!((res.missed_minimum_estimate, res.expected_minima), (1.0, 4.0));
    assert_eq!(res.box_bounds, vec![[0.0, 3.0], [0.0, 4.0]]);
}

#[test]
fn relative_tolerance_without_standard_error() {
    let r = reference(&["a"], &[None], 1.0);
    let runs = vec![
        run(&[100.0], 1.0, true),
        run(&[100.05], 1.0, true),
        run(&[100.2], 1.0, true),
    ];
    let res = summarise(&r, runs, vec![[0.0, 200.0]], &separating);
    let counts: Vec<usize> = res.minima.iter().map(|m| m.count).collect();
    assert_eq!(counts, vec![2, 1]);
}

#[test]
fn base_fit_is_compared_with_the_best_minimum() {
    // Better by 10 (> 1 = q at 0.6827): the base fit is not the best.
    let r = reference(&["a"], &[Some(0.1)], 20.0);
    let res = summarise(
        &r,
        vec![run(&[1.0], 10.0, true), run(&[5.0], 20.0, true)],
        vec![[0.0, 6.0]],
        &separating,
    );
    assert!(!res.base_is_best);
    assert!(res.minima[1].distinguishable && res.minima[1].delta_chi2 == 10.0);
    assert!(!res.minima[0].distinguishable);
    // Better by 0.5 only: not distinguishable, the base fit stands.
    let r = reference(&["a"], &[Some(0.1)], 10.5);
    let res = summarise(
        &r,
        vec![run(&[1.0], 10.0, true), run(&[5.0], 10.5, true)],
        vec![[0.0, 6.0]],
        &separating,
    );
    assert!(res.base_is_best);
    assert!(!res.minima[1].distinguishable);
    // At level 0.95 (q = 3.841), better by 3 is not enough, by 4 is.
    let mut r = reference(&["a"], &[Some(0.1)], 13.0);
    r.level = 0.95;
    let res = summarise(&r, vec![run(&[1.0], 10.0, true)], vec![[0.0, 6.0]], &separating);
    assert!(res.base_is_best);
    r.base_chi2 = 14.0;
    let res = summarise(&r, vec![run(&[1.0], 10.0, true)], vec![[0.0, 6.0]], &separating);
    assert!(!res.base_is_best);
    // No converged start: nothing to contradict the base fit.
    let res = summarise(&r, vec![run(&[1.0], 1.0, false)], vec![[0.0, 6.0]], &separating);
    assert!(res.base_is_best && res.minima.is_empty() && res.failed == 1);
    assert_eq!(res.missed_minimum_estimate, 1.0);
}

#[test]
fn scaled_covariance_measures_chi2_in_reduced_units() {
    // sigma unknown (chi2 in squared y units, here tiny): chi2 differences
    // are read in units of the best reduced chi2, 1e-6 / 10.
    let mut r = reference(&["a"], &[Some(0.1)], 5e-6);
    r.scaled = true;
    let res = summarise(
        &r,
        vec![run(&[1.0], 1e-6, true), run(&[3.0], 5e-6, true)],
        vec![[0.0, 6.0]],
        &separating,
    );
    assert!(!res.base_is_best);
    assert!(res.minima[1].distinguishable);
    // The same numbers read as absolute chi2 are all within 1e-3: no verdict.
    r.scaled = false;
    let res = summarise(
        &r,
        vec![run(&[1.0], 1e-6, true), run(&[3.0], 5e-6, true)],
        vec![[0.0, 6.0]],
        &separating,
    );
    assert!(res.base_is_best);
    assert!(!res.minima[1].distinguishable);
}

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

#[test]
fn permuted_minima_are_merged() {
    // Two components swapped: (a1, k1) <-> (a2, k2).
    let r = reference(&["a1", "k1", "a2", "k2"], &[Some(0.01); 4], 1.0);
    let res = summarise(
        &r,
        vec![
            run(&[5.0, 0.5, 2.0, 3.0], 1.0, true),
            run(&[2.0, 3.0, 5.0, 0.5], 1.0, true),
            run(&[2.0, 3.0, 5.0, 0.5], 1.0, true),
        ],
        vec![[0.0, 10.0]; 4],
        &separating,
    );
    assert_eq!(res.minima.len(), 1);
    assert_eq!(res.minima[0].count, 3);
    assert_eq!(res.minima[0].fraction, 1.0);
    assert_eq!(
        res.minima[0].equivalent_permutations,
        vec![names(&["a1", "a2"]), names(&["k1", "k2"])]
    );
    assert!(res.runs.iter().all(|x| x.minimum == Some(0)));

    // A single transposition and a three-cycle.
    let r = reference(&["x", "y", "z"], &[Some(0.01); 3], 1.0);
    let res = summarise(
        &r,
        vec![
            run(&[1.0, 2.0, 3.0], 1.0, true),
            run(&[2.0, 1.0, 3.0], 1.0, true),
            run(&[2.0, 3.0, 1.0], 1.0, true),
        ],
        vec![[0.0, 4.0]; 3],
        &separating,
    );
    assert_eq!(res.minima.len(), 1);
    let p = &res.minima[0].equivalent_permutations;
    assert!(p.contains(&names(&["x", "y"])), "{p:?}");
    assert!(p.iter().any(|c| c.len() == 3), "{p:?}");

    // Different chi2: rivals, not images.
    let res = summarise(
        &r,
        vec![run(&[1.0, 2.0, 3.0], 1.0, true), run(&[2.0, 1.0, 3.0], 5.0, true)],
        vec![[0.0, 4.0]; 3],
        &separating,
    );
    assert_eq!(res.minima.len(), 2);
    assert!(res.minima.iter().all(|m| m.equivalent_permutations.is_empty()));

    // A fixed parameter may not move: swapping x and z is no image.
    let mut r = reference(&["x", "y", "z"], &[Some(0.01); 3], 1.0);
    r.free[2] = false;
    let res = summarise(
        &r,
        vec![run(&[1.0, 2.0, 3.0], 1.0, true), run(&[3.0, 2.0, 1.0], 1.0, true)],
        vec![[0.0, 4.0]; 3],
        &separating,
    );
    assert_eq!(res.minima.len(), 2);
}

#[test]
fn same_fit_along_a_flat_direction_is_one_minimum() {
    // f = A * w: with A = 0, w is not seen by the data.
    let r = reference(&["A", "w"], &[Some(0.01), Some(0.01)], 4.0);
    let product = |a: &[f64]| Some(vec![a[0] * a[1]; 3]);
    let res = summarise(
        &r,
        vec![
            run(&[0.0, 1.0], 4.0, true),
            run(&[0.0, 2.5], 4.0, true),
            run(&[1.0, 1.0], 1.0, true),
        ],
        vec![[0.0, 2.0], [0.0, 3.0]],
        &product,
    );
    assert_eq!(res.minima.len(), 2);
    assert_eq!(res.minima[1].count, 2);
    assert!(res.minima[1].equivalent_permutations.is_empty());
    assert!(!res.base_is_best);
}
