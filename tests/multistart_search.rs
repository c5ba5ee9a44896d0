//! The multi-start search on problems whose minima are known: a sinusoid
//! with a poor frequency start, a two-exponential model with its swapped
//! components, and a straight line (a single minimum).
//!
//! The data are exact model values (no noise) with a stated sigma, so the
//! global minimum is the generating parameter vector with chi-squared 0
//! (an identity of least squares), and sigma makes the covariance absolute.

use fitaudit::data::Dataset;
use fitaudit::diagnostics::multistart::{self, MultistartResult};
use fitaudit::diagnostics::{Fitted, NoProgress, Progress};
use fitaudit::fit::{fit, fit_from, FitOptions, FitResult, ParamSpec, Problem};
use fitaudit::model::{ModelFn, NativeModel};
use fitaudit::settings::AuditSettings;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;

type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

fn bounded(name: &str, start: f64, min: f64, max: f64) -> ParamSpec {
    ParamSpec {
        name: name.to_string(),
        start,
        min,
        max,
        fixed: false,
    }
}

/// One batch of `starts` starts (the cap is the first batch).
fn settings(starts: usize, seed: u64) -> AuditSettings {
    let mut s = AuditSettings::default();
    s.multistart.starts = starts;
    s.multistart.max_starts = starts;
    s.seed = seed;
    s
}

fn search(
    model: &dyn ModelFn,
    params: &[ParamSpec],
    data: &Dataset,
    base: &FitResult,
    settings: &AuditSettings,
    progress: &dyn Progress,
) -> MultistartResult {
    let ctx = Fitted {
        problem: Problem {
            model,
            params: params.to_vec(),
            options: FitOptions::default(),
        },
        data,
        fit: base,
        settings,
    };
    multistart::run(&ctx, progress)
}

// ---- sinusoid A sin(w t + phi) + c ----

fn sinusoid(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let (a, w, phi, c) = (p[0], p[1], p[2], p[3]);
    let t = x[0];
    let (s, co) = (w * t + phi).sin_cos();
    g[0] = s;
    g[1] = a * t * co;
    g[2] = a * co;
    g[3] = 1.0;
    a * s + c
}

const SINE_TRUE: [f64; 4] = [2.0, 3.0, 0.5, 1.0];

fn sine_data() -> Dataset {
    let t: Vec<f64> = (0..51).map(|i| i as f64 * 0.2).collect();
    let mut g = [0.0; 4];
    let y: Vec<f64> = t.iter().map(|&ti| sinusoid(&SINE_TRUE, &[ti], &mut g)).collect();
    let n = t.len();
    Dataset::single("t", t, "y", y, Some(vec![0.05; n]))
}

/// A >= 0 and phi in [-pi, pi] remove the sign and phase images
/// (A, phi) ~ (-A, phi + pi) ~ (A, phi + 2 pi), so the global minimum is unique.
fn sine_params() -> Vec<ParamSpec> {
    use std::f64::consts::PI;
    vec![
        bounded("A", 1.5, 0.0, 10.0),
        bounded("w", 1.0, 0.1, 6.0),
        bounded("phi", 0.0, -PI, PI),
        ParamSpec::free("c", 0.5),
    ]
}

struct Counting {
    total: AtomicU64,
    done: AtomicU64,
    stages: Mutex<Vec<String>>,
    finished: AtomicU64,
}

impl Progress for Counting {
    fn start(&self, stage: &str, total: u64) {
        self.total.store(total, Ordering::SeqCst);
        self.stages.lock().unwrap().push(stage.to_string());
    }
    fn advance(&self, n: u64) {
        self.done.fetch_add(n, Ordering::SeqCst);
    }
    fn finish(&self) {
        self.finished.fetch_add(1, Ordering::SeqCst);
    }
}

#[test]
fn sinusoid_poor_frequency_start_is_beaten_by_the_search() {
    let model = NativeModel::new(4, sinusoid as PointFn);
    let params = sine_params();
    let data = sine_data();
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, &data).unwrap();
    // The fit from the true values: exact data, so chi2 = 0 at SINE_TRUE
    // (least-squares identity).
    let best = fit_from(&problem, &data, &SINE_TRUE).unwrap();
    assert!(best.chi2 < 1e-12, "chi2 at the true values {}", best.chi2);
    assert!((best.parameters[1].value - 3.0).abs() < 1e-9);
    // The base fit from w = 1 really is stuck in a local minimum.
    assert!(base.converged);
    assert!(
        base.chi2 > 100.0,
        "base fit from w = 1 should be a local minimum, chi2 {} w {}",
        base.chi2,
        base.parameters[1].value
    );
    assert!((base.parameters[1].value - 3.0).abs() > 0.1);
    assert!(
        base.parameters.iter().all(|p| !p.at_bound),
        "interior local minimum"
    );

    // Frequencies are sampled linearly here: the basin of w = 3 is about
    // +-pi/T wide (T = 10 s the record length) whatever w is, so a uniform
    // spread gives it its fair share of the 64 starts.
    let mut s = settings(64, 7);
    s.multistart.log_uniform = false;
    let progress = Counting {
        total: AtomicU64::new(0),
        done: AtomicU64::new(0),
        stages: Mutex::new(Vec::new()),
        finished: AtomicU64::new(0),
    };
    let r = search(&model, &params, &data, &base, &s, &progress);
    assert_eq!(r.starts, 64);
    assert_eq!(r.runs.len(), 64);
    assert_eq!(progress.total.load(Ordering::SeqCst), 64);
    assert_eq!(progress.done.load(Ordering::SeqCst), 64);
    assert_eq!(progress.finished.load(Ordering::SeqCst), 1);
    assert_eq!(progress.stages.lock().unwrap().as_slice(), ["multi-start"]);

    let top = &r.minima[0];
    let w = top.parameters[1].value;
    assert_eq!(top.parameters[1].name, "w");
    assert!(
        (w - best.parameters[1].value).abs() <= 1e-3 * best.parameters[1].value,
        "best minimum w = {w}"
    );
    assert!(top.chi2 < 1e-6);
    assert!(top.count >= 1 && top.equivalent_permutations.is_empty());
    assert!(!r.base_is_best);
    assert_eq!(r.base_chi2, base.chi2);
    // The base fit's minimum is among the rivals and clearly worse.
    assert!(r.minima.len() >= 2);
    assert!(r.minima[1..]
        .iter()
        .all(|m| m.distinguishable && m.delta_chi2 > 1.0));
    // Bookkeeping: counts add up, fractions over the converged starts.
    let converged = r.starts - r.failed;
    assert_eq!(r.minima.iter().map(|m| m.count).sum::<usize>(), converged);
    let share: f64 = r.minima.iter().map(|m| m.fraction).sum();
    assert!((share - 1.0).abs() < 1e-12);
    // Only ends that are minima get one; degenerate ends are counted by kind.
    for run in &r.runs {
        assert_eq!(run.minimum.is_some(), run.degenerate.is_none());
        if run.degenerate.is_none() {
            assert!(run.converged && run.chi2.is_finite());
        }
    }
    assert_eq!(r.degenerate.total(), r.failed);
    // The sampling box of a doubly bounded parameter is its bounds; the
    // unbounded offset c gets start +- 3 |start| (start 0.5).
    assert_eq!(r.box_bounds[1], [0.1, 6.0]);
    assert_eq!(r.box_bounds[3], [0.5 - 1.5, 0.5 + 1.5]);
    for run in &r.runs {
        for (j, v) in run.start.iter().enumerate() {
            assert!(*v >= r.box_bounds[j][0] && *v <= r.box_bounds[j][1]);
        }
    }
    // Unseen share w (w + 1) / (N (N - 1)), Boender & Rinnooy Kan (1987)
    // (from memory), with N starts ending at a minimum and w minima.
    let (nf, wf) = (converged as f64, r.minima.len() as f64);
    if converged > r.minima.len() + 2 {
        let expect = 1.0 - (nf - wf - 1.0) * (nf + wf) / (nf * (nf - 1.0));
        assert!((r.unseen_share - expect).abs() < 1e-12);
        assert!((r.expected_minima - wf * (nf - 1.0) / (nf - wf - 2.0)).abs() < 1e-9);
    }
}

#[test]
fn design_does_not_depend_on_threads_and_does_on_seed() {
    let model = NativeModel::new(4, sinusoid as PointFn);
    let params = sine_params();
    let data = sine_data();
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, &data).unwrap();
    let s = settings(24, 11);
    let in_pool = |threads: usize, s: &AuditSettings| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| search(&model, &params, &data, &base, s, &NoProgress))
    };
    let one = in_pool(1, &s);
    let two = in_pool(2, &s);
    // JSON text compares NaN-free and NaN-carrying results alike.
    assert_eq!(
        serde_json::to_string(&one).unwrap(),
        serde_json::to_string(&two).unwrap()
    );
    let other = in_pool(2, &settings(24, 12));
    let starts = |r: &MultistartResult| r.runs.iter().map(|x| x.start.clone()).collect::<Vec<_>>();
    assert_ne!(starts(&one), starts(&other));
    // Same seed, same starts, whatever else changes.
    assert_eq!(starts(&one), starts(&in_pool(1, &s)));
}

// ---- two exponentials a1 exp(-k1 t) + a2 exp(-k2 t) ----

fn two_exp(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = x[0];
    let e1 = (-p[1] * t).exp();
    let e2 = (-p[3] * t).exp();
    g[0] = e1;
    g[1] = -p[0] * t * e1;
    g[2] = e2;
    g[3] = -p[2] * t * e2;
    p[0] * e1 + p[2] * e2
}

#[test]
fn two_exponential_swapped_components_are_one_minimum() {
    let model = NativeModel::new(4, two_exp as PointFn);
    let truth = [5.0, 0.5, 2.0, 3.0];
    let t: Vec<f64> = (0..40).map(|i| i as f64 * 0.15).collect();
    let mut g = [0.0; 4];
    let y: Vec<f64> = t.iter().map(|&ti| two_exp(&truth, &[ti], &mut g)).collect();
    let n = t.len();
    let data = Dataset::single("t", t, "y", y, Some(vec![0.01; n]));
    // Same bounds for both components, so the box is symmetric under the swap.
    let params = vec![
        bounded("a1", 4.0, 0.0, 10.0),
        bounded("k1", 0.4, 0.05, 10.0),
        bounded("a2", 1.0, 0.0, 10.0),
        bounded("k2", 2.0, 0.05, 10.0),
    ];
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, &data).unwrap();
    assert!(base.chi2 < 1e-12, "base chi2 {}", base.chi2);
    let r = search(&model, &params, &data, &base, &settings(64, 5), &NoProgress);

    let top = &r.minima[0];
    assert!(top.chi2 < 1e-9);
    let names = |v: &[&str]| v.iter().map(|s| s.to_string()).collect::<Vec<_>>();
    assert_eq!(
        top.equivalent_permutations,
        vec![names(&["a1", "a2"]), names(&["k1", "k2"])]
    );
    // No rival with the same chi-squared: every other minimum is clearly worse.
    assert!(r.minima[1..]
        .iter()
        .all(|m| m.delta_chi2 > 1.0 && m.distinguishable));
    // Both labellings were reached, and both are counted in the one minimum.
    let ends: Vec<&Vec<f64>> = r
        .runs
        .iter()
        .filter(|x| x.minimum == Some(0))
        .map(|x| &x.end)
        .collect();
    let slow_first = ends.iter().filter(|e| e[1] < e[3]).count();
    assert!(
        slow_first > 0 && slow_first < ends.len(),
        "{slow_first} of {}",
        ends.len()
    );
    assert_eq!(ends.len(), top.count);
    for e in ends {
        let (slow, fast) = if e[1] < e[3] {
            ((e[0], e[1]), (e[2], e[3]))
        } else {
            ((e[2], e[3]), (e[0], e[1]))
        };
        assert!(
            (slow.0 - 5.0).abs() < 1e-6 && (slow.1 - 0.5).abs() < 1e-6,
            "{e:?}"
        );
        assert!(
            (fast.0 - 2.0).abs() < 1e-6 && (fast.1 - 3.0).abs() < 1e-6,
            "{e:?}"
        );
    }
    assert!(r.base_is_best);
}

// ---- a straight line: one minimum ----

fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    g[0] = 1.0;
    g[1] = x[0];
    p[0] + p[1] * x[0]
}

#[test]
fn straight_line_has_one_minimum() {
    let model = NativeModel::new(2, line as PointFn);
    let x = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
    let y = vec![2.9, 5.2, 7.1, 8.8, 11.3, 12.9, 15.2, 16.8];
    let s = vec![0.1, 0.2, 0.1, 0.3, 0.2, 0.1, 0.4, 0.2];
    let data = Dataset::single("x", x.clone(), "y", y.clone(), Some(s.clone()));
    let params = vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)];
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, &data).unwrap();
    let n = 64;
    let r = search(&model, &params, &data, &base, &settings(n, 3), &NoProgress);

    // Weighted least squares for a line has a single minimum (the normal
    // equations have one solution), so every start ends there.
    assert_eq!(r.failed, 0);
    assert_eq!(r.minima.len(), 1);
    let m = &r.minima[0];
    assert_eq!(m.count, n);
    assert_eq!(m.fraction, 1.0);
    assert_eq!(m.delta_chi2, 0.0);
    assert!(!m.distinguishable);
    assert!(m.equivalent_permutations.is_empty());
    assert!(r.base_is_best);
    // Its parameters are the closed form: Bevington & Robinson, "Data
    // Reduction and Error Analysis for the Physical Sciences", 3rd ed.,
    // eq. 6.12: a = (Sxx Sy - Sx Sxy)/D, b = (S Sxy - Sx Sy)/D.
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for i in 0..x.len() {
        let w = 1.0 / (s[i] * s[i]);
        sw += w;
        sx += w * x[i];
        sy += w * y[i];
        sxx += w * x[i] * x[i];
        sxy += w * x[i] * y[i];
    }
    let d = sw * sxx - sx * sx;
    let a = (sxx * sy - sx * sxy) / d;
    let b = (sw * sxy - sx * sy) / d;
    assert!((m.parameters[0].value - a).abs() < 1e-9 * a.abs());
    assert!((m.parameters[1].value - b).abs() < 1e-9 * b.abs());
    assert!((m.chi2 - base.chi2).abs() < 1e-9 * base.chi2);
    // Boender & Rinnooy Kan (1987) (from memory) with N = 64, w = 1:
    // unseen share 1 - (N - 2)(N + 1)/(N (N - 1)) = 2/4032 = 4.96e-4,
    // P(missed) = 1 - (N - 2)/N = 2/64, expected minima w (N - 1)/(N - w - 2) = 63/61.
    assert!((r.unseen_share - 2.0 / 4032.0).abs() < 1e-15);
    assert!((r.missed_minimum_estimate - 2.0 / 64.0).abs() < 1e-15);
    assert!((r.expected_minima - 63.0 / 61.0).abs() < 1e-12);
    // No degenerate end, one batch, and no re-basing to do.
    assert_eq!(r.degenerate.total(), 0);
    assert_eq!((r.batches, r.merged_early), (1, 0));
    assert!(r.audited_is_best);
    // Unbounded parameters: start +- 3 |start|, a start of 0 taking the
    // largest |y| (16.8) as its magnitude.
    assert_eq!(r.box_bounds[0], [-3.0 * 16.8, 3.0 * 16.8]);
    assert_eq!(r.box_bounds[1], [1.0 - 3.0, 1.0 + 3.0]);
}

/// Early merging: starts of later batches that reach a minimum already found
/// after the short polish are counted there (merged_early) without
/// finishing their refit; the minima found and the best one do not change,
/// and the result does not depend on the thread count.
#[test]
fn early_merging_counts_polished_starts_for_known_minima() {
    let model = NativeModel::new(4, sinusoid as PointFn);
    let params = sine_params();
    let data = sine_data();
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, &data).unwrap();
    let mut plain = settings(32, 9);
    plain.multistart.max_starts = 128;
    plain.multistart.log_uniform = false;
    let mut merging = plain.clone();
    merging.multistart.merge_early = true;
    let a = search(&model, &params, &data, &base, &plain, &NoProgress);
    let in_pool = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| search(&model, &params, &data, &base, &merging, &NoProgress))
    };
    let b = in_pool(2);
    assert_eq!(a.starts, b.starts);
    assert_eq!(a.merged_early, 0);
    assert!(b.merged_early > 0, "nothing merged early");
    // Merged starts are of later batches only, and each is a minimum's member.
    for r in b.runs.iter().filter(|r| r.merged_early) {
        assert!(r.batch > 0 && r.minimum.is_some() && r.degenerate.is_none());
    }
    assert_eq!(b.merged_early, b.runs.iter().filter(|r| r.merged_early).count());
    // Same best minimum (chi2 0 at the generating values).
    assert!(a.minima[0].chi2 < 1e-6 && b.minima[0].chi2 < 1e-6);
    assert!((a.minima[0].parameters[1].value - b.minima[0].parameters[1].value).abs() < 1e-6);
    assert!(!b.base_is_best);
    let one = in_pool(1);
    assert_eq!(
        serde_json::to_string(&one).unwrap(),
        serde_json::to_string(&b).unwrap()
    );
}
