//! The multi-start search and the re-based audit on invented problems
//! whose global minimum is known: a peak on a sloping baseline whose
//! centre is unbounded and started off the band, and a sinusoid started at
//! a wrong frequency with a bounded phase. Every data set is generated
//! here from fixed seeds.
//!
//! "Global minimum" is the fit from the generating parameters (the data
//! are the generating curve plus small noise, so that fit is the deepest
//! minimum: checked against the search, which never finds a lower one).

use fitaudit::audit::{self, AuditInput, AuditOptions, AuditResults, StudyInfo};
use fitaudit::data::Dataset;
use fitaudit::diagnostics::NoProgress;
use fitaudit::fit::{fit_from, FitOptions, FitResult, ParamSpec, Problem};
use fitaudit::model::{compile, ModelFn, Symbols, Tape};
use fitaudit::rng::{stream, Stream};
use fitaudit::settings::{AuditSettings, Diagnostic};
use rand_distr::{Distribution, StandardNormal};

fn bounded(name: &str, start: f64, min: f64, max: f64) -> ParamSpec {
    ParamSpec {
        name: name.to_string(),
        start,
        min,
        max,
        fixed: false,
    }
}

fn tape(formula: &str, params: &[ParamSpec], var: &str) -> Tape {
    let names: Vec<String> = params.iter().map(|p| p.name.clone()).collect();
    let vars = vec![var.to_string()];
    compile(
        formula,
        &Symbols {
            parameters: &names,
            constants: &[],
            variables: &vars,
        },
    )
    .unwrap()
}

fn noise(tag: u32, seed: u64, n: usize) -> Vec<f64> {
    let mut rng = stream(seed, Stream::Other(tag), 0);
    (0..n).map(|_| StandardNormal.sample(&mut rng)).collect()
}

fn info(name: &str, formula: &str, data: &Dataset) -> StudyInfo {
    StudyInfo {
        name: name.into(),
        title: None,
        path: format!("{name}.toml"),
        data_file: None,
        formula: formula.into(),
        points: data.len(),
        sigma_given: data.sigma.is_some(),
        study_sha256: None,
        data_sha256: None,
    }
}

struct Case {
    formula: &'static str,
    params: Vec<ParamSpec>,
    truth: Vec<f64>,
    data: Dataset,
    var: &'static str,
}

impl Case {
    fn run(&self, settings: &AuditSettings, only: &[Diagnostic]) -> AuditResults {
        let model = tape(self.formula, &self.params, self.var);
        let input = AuditInput {
            info: info("case", self.formula, &self.data),
            model: &model,
            params: self.params.clone(),
            fit_options: FitOptions::default(),
            data: &self.data,
            settings: settings.clone(),
            derived: &[],
            inverse: &[],
            inverse_model: None,
            report: Default::default(),
        };
        let options = AuditOptions {
            only: only.to_vec(),
            ..AuditOptions::default()
        };
        audit::run(&input, &options, &NoProgress).unwrap()
    }

    /// The fit from the generating parameters.
    fn global(&self) -> FitResult {
        let model = tape(self.formula, &self.params, self.var);
        let problem = Problem {
            model: &model as &dyn ModelFn,
            params: self.params.clone(),
            options: FitOptions::default(),
        };
        fit_from(&problem, &self.data, &self.truth).unwrap()
    }
}

// ---- an absorption band on a sloping baseline, no sigma ----

const PEAK: &str = "c0 + c1*(wl - 400) + H*exp(-0.5*((wl - mu)/w)^2)";

/// 61 points at 400-460 nm; band centre 431 nm (jittered by seed), width
/// `width` nm, height 0.6; baseline 0.05 + 0.002 (wl - 400); noise 0.01.
/// The centre is unbounded and started at 445, off the band; the width is
/// bounded below.
fn peak(seed: u64, width: f64) -> Case {
    let wl: Vec<f64> = (0..61).map(|i| 400.0 + i as f64).collect();
    let e = noise(14, seed, wl.len() + 1);
    let mu = 431.0 + 0.5 * e[wl.len()];
    let truth = vec![0.05, 0.002, 0.6, mu, width];
    let y: Vec<f64> = wl
        .iter()
        .zip(&e)
        .map(|(x, e)| 0.05 + 0.002 * (x - 400.0) + 0.6 * (-0.5 * ((x - mu) / width).powi(2)).exp() + 0.01 * e)
        .collect();
    let inf = f64::INFINITY;
    Case {
        formula: PEAK,
        params: vec![
            ParamSpec::free("c0", 0.0),
            ParamSpec::free("c1", 0.0),
            ParamSpec::free("H", 0.3),
            ParamSpec::free("mu", 445.0),
            bounded("w", 3.0, 0.5, inf),
        ],
        truth,
        data: Dataset::single("wl", wl, "A", y, None),
        var: "wl",
    }
}

// ---- a sinusoid from a wrong frequency, bounded phase, known sigma ----

const SINE: &str = "A*sin(2*pi*f*t + phi) + c";

/// 80 samples over 2.4 s of 1.8 sin(2 pi 3.3 t + 0.7) + 0.25 (frequency
/// jittered by seed), sigma 0.2; started at 1.2 Hz.
fn sine(seed: u64) -> Case {
    use std::f64::consts::PI;
    let e = noise(15, seed, 81);
    let f = 3.3 + 0.05 * e[80];
    let t: Vec<f64> = (0..80).map(|i| 0.03 * i as f64).collect();
    let y: Vec<f64> = t
        .iter()
        .zip(&e)
        .map(|(t, e)| 1.8 * (2.0 * PI * f * t + 0.7).sin() + 0.25 + 0.2 * e)
        .collect();
    Case {
        formula: SINE,
        params: vec![
            bounded("A", 1.0, 0.0, 10.0),
            bounded("f", 1.2, 0.2, 8.0),
            bounded("phi", 0.0, -PI, PI),
            ParamSpec::free("c", 0.0),
        ],
        truth: vec![1.8, f, 0.7, 0.25],
        data: Dataset::single("t", t, "y", y.clone(), Some(vec![0.2; y.len()])),
        var: "t",
    }
}

fn settings(seed: u64) -> AuditSettings {
    AuditSettings {
        seed,
        ..AuditSettings::default()
    }
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

/// Checks one re-based audit against the global minimum; returns the
/// number of degenerate ends.
fn check_rebased(label: &str, seed: u64, case: &Case, r: &AuditResults) -> usize {
    let global = case.global();
    let ms = r.multistart.as_ref().unwrap();
    // Audited at the global minimum, re-based from the start's local one.
    assert!(
        rel(r.fit.chi2, global.chi2) < 1e-6,
        "{label} seed {seed}: audited chi2 {} against the global {}",
        r.fit.chi2,
        global.chi2
    );
    assert!(r.rebased, "{label} seed {seed}: not re-based");
    let start = r.start_fit.as_ref().expect("start_fit when re-based");
    assert!(
        start.chi2 > 10.0 * global.chi2,
        "{label} seed {seed}: start chi2 {}",
        start.chi2
    );
    assert_eq!(ms.base_chi2, start.chi2);
    assert!(!ms.base_is_best && ms.audited_is_best);
    // The best minimum is the global one, never a degenerate end.
    assert!(rel(ms.minima[0].chi2, global.chi2) < 1e-6);
    for (j, p) in r.fit.parameters.iter().enumerate() {
        assert!(
            (p.value - global.parameters[j].value).abs() <= 1e-4 * global.parameters[j].value.abs().max(1.0),
            "{label} seed {seed}: {} = {} against {}",
            p.name,
            p.value,
            global.parameters[j].value
        );
    }
    // Degenerate ends: counted by kind, no minimum, no share.
    assert_eq!(ms.degenerate.total(), ms.failed);
    for run in &ms.runs {
        assert_eq!(run.minimum.is_some(), run.degenerate.is_none());
    }
    let share: f64 = ms.minima.iter().map(|m| m.fraction).sum();
    assert!((share - 1.0).abs() < 1e-9);
    assert_eq!(
        ms.minima.iter().map(|m| m.count).sum::<usize>(),
        ms.starts - ms.failed
    );
    ms.failed
}

/// 20 data sets: the search finds the band at 431 nm from a start at 445
/// every time, the audit runs there, and the "no band" ends (height 0,
/// width or centre run off) are reported as degenerate, not as minima.
#[test]
fn peak_global_minimum_is_found_and_audited_for_every_seed() {
    let mut degenerate = fitaudit::diagnostics::multistart::DegenerateEnds::default();
    for seed in 1..=20u64 {
        let case = peak(seed, 3.0);
        let r = case.run(&settings(seed), &[Diagnostic::Multistart]);
        check_rebased("peak", seed, &case, &r);
        let ms = r.multistart.as_ref().unwrap();
        // The centre is a position on the wl axis: its box is the data range
        // (400-460 nm) widened by 10 % on each side.
        assert_eq!(ms.box_bounds[3], [394.0, 466.0]);
        // The width is bounded below only: two decades around its start 3.
        assert!((ms.box_bounds[4][0] - 0.5).abs() < 1e-12 && (ms.box_bounds[4][1] - 300.0).abs() < 1e-9);
        let d = ms.degenerate;
        degenerate.not_converged += d.not_converged;
        degenerate.runaway += d.runaway;
        degenerate.vanished_column += d.vanished_column;
        degenerate.rank_drop += d.rank_drop;
    }
    // Measured: 25 not converged, 606 runaway, 1912 vanished column, 0 rank
    // drop over the 20 searches (384 starts each).
    eprintln!("peak, 20 searches: {degenerate:?}");
    assert!(
        degenerate.runaway > 0 && degenerate.vanished_column > 0,
        "{degenerate:?}"
    );
}

/// 20 data sets: the sinusoid started at 1.2 Hz (true 3.3 Hz) with its phase
/// bounded to [-pi, pi] is audited at the true frequency every time; the
/// zero-amplitude ends are degenerate (vanished frequency and phase columns).
#[test]
fn sine_global_minimum_is_found_and_audited_for_every_seed() {
    for seed in 1..=20u64 {
        let case = sine(seed);
        let r = case.run(&settings(seed), &[Diagnostic::Multistart]);
        let failed = check_rebased("sine", seed, &case, &r);
        let ms = r.multistart.as_ref().unwrap();
        assert!(failed > 0 && ms.degenerate.vanished_column > 0);
        // Dozens of local minima (one per frequency alias): the estimate of a
        // missed minimum stays high, and the search says it stopped at the cap.
        assert!(ms.minima.len() > 10);
        assert_eq!(
            ms.stopped,
            fitaudit::diagnostics::multistart::StopRule::CapReached
        );
        assert_eq!(ms.starts, 1024);
        assert_eq!(ms.batches, 8);
    }
}

/// The whole battery runs at the best minimum: bootstrap and profile of the
/// centre sit at the band (431 nm), not at the start's local minimum.
#[test]
fn peak_battery_runs_at_the_best_minimum() {
    let case = peak(3, 3.0);
    let mut s = settings(3);
    s.bootstrap.replicates = 100;
    s.monte_carlo.replicates = 100;
    s.profile.points = 11;
    s.contours.grid = 7;
    s.contours.pairs = Some(vec![["mu".to_string(), "w".to_string()]]);
    let r = case.run(&s, &Diagnostic::ALL);
    check_rebased("peak battery", 3, &case, &r);
    let mu = r.fit.parameters[3].value;
    assert!((mu - 431.0).abs() < 2.0, "mu {mu}");
    let start_mu = r.start_fit.as_ref().unwrap().parameters[3].value;
    assert!((start_mu - mu).abs() > 5.0, "start mu {start_mu}");
    let boot = r.bootstrap.as_ref().unwrap();
    let mean_mu: f64 = boot.estimates.iter().map(|e| e[3]).sum::<f64>() / boot.estimates.len() as f64;
    assert!(
        (mean_mu - mu).abs() < 0.5,
        "bootstrap mean {mean_mu} against {mu}"
    );
    let prof = &r.profile.as_ref().unwrap().parameters[3];
    let lo = prof.lower;
    let hi = prof.upper;
    assert!(
        lo < mu && mu < hi && hi - lo < 2.0,
        "profile [{lo}, {hi}] around {mu}"
    );
    let c = &r.contours.as_ref().unwrap()[0];
    assert_eq!(c.pair, ["mu".to_string(), "w".to_string()]);
    // Verdicts from the best minimum: the multi-start rule agrees.
    for v in &r.verdicts {
        assert!(
            !fitaudit::report::findings::reasons(v)
                .iter()
                .any(|x| x.contains("a better minimum exists")),
            "{v:?}"
        );
    }
}

/// A straight line: one minimum, no re-basing, no start_fit.
#[test]
fn straight_line_is_one_minimum_without_rebasing() {
    let x: Vec<f64> = (0..12).map(|i| i as f64).collect();
    let e = noise(16, 1, x.len());
    let y: Vec<f64> = x.iter().zip(&e).map(|(x, e)| 1.5 + 0.7 * x + 0.1 * e).collect();
    let case = Case {
        formula: "a + b*x",
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        truth: vec![1.5, 0.7],
        data: Dataset::single("x", x, "y", y, Some(vec![0.1; 12])),
        var: "x",
    };
    let r = case.run(&settings(1), &[Diagnostic::Multistart]);
    let ms = r.multistart.as_ref().unwrap();
    assert_eq!(ms.minima.len(), 1);
    assert_eq!(ms.failed, 0);
    assert!(ms.base_is_best && ms.audited_is_best);
    assert!(!r.rebased && r.start_fit.is_none());
    // One batch: with N = 128 and w = 1, 1 - (N - 2)/N = 1/64 <= 0.05.
    assert_eq!((ms.starts, ms.batches), (128, 1));
    assert_eq!(
        ms.stopped,
        fitaudit::diagnostics::multistart::StopRule::EstimateSmall
    );
    assert!((ms.missed_minimum_estimate - 2.0 / 128.0).abs() < 1e-15);
    let json = serde_json::to_value(&r).unwrap();
    assert!(json.get("start_fit").is_none());
    assert_eq!(json["rebased"], false);
}

/// Calibration on a harder variant: a 1 nm band and a fixed budget of 8
/// starts (most of which end degenerate), 100 data sets. Missing the global
/// minimum implies missing a minimum, so the printed estimate (the posterior
/// probability that some minimum was missed) must be at least the observed
/// rate of missing the global one, within binomial noise; and every search
/// that missed it must warn (estimate of at least 0.5).
///
/// Measured: 19 of 100 searches miss the global minimum; the printed
/// estimates average 0.905 and are all >= 0.5 where the global one was
/// missed. With batches (8 per batch up to 64) no search misses it and the
/// estimates average 0.305.
#[test]
fn missed_minimum_estimate_is_consistent_with_observed_misses() {
    for (starts, cap, want_misses) in [(8usize, 8usize, true), (8, 64, false)] {
        let (mut misses, mut sum, mut var) = (0usize, 0.0, 0.0);
        let seeds = 100u64;
        for seed in 1..=seeds {
            let case = peak(1000 + seed, 1.0);
            let global = case.global();
            let mut s = settings(seed);
            s.multistart.starts = starts;
            s.multistart.max_starts = cap;
            let r = case.run(&s, &[Diagnostic::Multistart]);
            let ms = r.multistart.as_ref().unwrap();
            let p = ms.missed_minimum_estimate;
            let missed = r.fit.chi2 > global.chi2 * (1.0 + 1e-6);
            if missed {
                misses += 1;
                assert!(p >= 0.5, "seed {seed}: missed the global minimum but printed {p}");
            }
            sum += p;
            var += p * (1.0 - p);
        }
        eprintln!("starts {starts} cap {cap}: {misses} misses of {seeds}, estimates sum {sum}");
        // One-sided: the observed count is not above the expected count by
        // more than 3 standard deviations of a Poisson-binomial count.
        assert!(
            (misses as f64) <= sum + 3.0 * var.sqrt() + 1.0,
            "{misses} misses against estimates summing to {sum}"
        );
        if want_misses {
            assert!(misses >= 5, "the harder variant should miss: {misses}");
        } else {
            assert!(sum < 0.5 * seeds as f64);
        }
    }
}
