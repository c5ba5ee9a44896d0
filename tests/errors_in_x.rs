//! Errors in x (`data.sigma_x`): the effective-variance chi-squared
//! `sum (y - f)^2 / (sigma_y^2 + (df/dx)^2 sigma_x^2)` minimised with the
//! parameter dependence of the denominator (J. Orear, Am. J. Phys. 50
//! (1982) 912). Checked against an independent minimisation of the same
//! objective written here, and against the ordinary fit in the limit
//! sigma_x -> 0.

use fitaudit::data::Dataset;
use fitaudit::diagnostics::{self, Fitted, NoProgress};
use fitaudit::fit::{self, FitError, FitOptions, ParamSpec, Problem};
use fitaudit::model::{compile, NativeModel, Symbols, Tape};
use fitaudit::rng::{self, Stream};
use fitaudit::settings::{AuditSettings, MonteCarloSettings};
use rand_distr::{Distribution, StandardNormal};

fn line_tape() -> Tape {
    let params = vec!["a".to_string(), "b".to_string()];
    let vars = vec!["x".to_string()];
    let syms = Symbols {
        parameters: &params,
        constants: &[],
        variables: &vars,
    };
    compile("a + b*x", &syms).unwrap()
}

/// A line `1 + 2 x` observed with noise in both coordinates (fixed seed).
fn line_data(sy: f64, sx: f64) -> Dataset {
    let mut r = rng::stream(11, Stream::Other(1802), 0);
    let xt: Vec<f64> = (0..15).map(|i| 0.5 * i as f64).collect();
    let mut x = Vec::new();
    let mut y = Vec::new();
    for &xi in &xt {
        let ex: f64 = StandardNormal.sample(&mut r);
        let ey: f64 = StandardNormal.sample(&mut r);
        x.push(xi + sx * ex);
        y.push(1.0 + 2.0 * xi + sy * ey);
    }
    let mut d = Dataset::single("x", x, "y", y, Some(vec![sy; 15]));
    d.sigma_x = Some(vec![sx; 15]);
    d
}

fn problem(model: &Tape) -> Problem<'_> {
    Problem {
        model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    }
}

/// The same objective minimised independently: for a line, `a` given `b`
/// is the weighted mean `sum w (y - b x) / sum w` with `w = 1 / (sy^2 +
/// b^2 sx^2)`, so `S(b) = min_a S(a, b)` is one-dimensional; golden-section
/// search on it (Press et al., Numerical Recipes, 3rd ed., sec. 10.2).
fn independent_line(d: &Dataset) -> (f64, f64, f64) {
    let sy = d.sigma.as_ref().unwrap();
    let sx = d.sigma_x.as_ref().unwrap();
    let (x, y) = (&d.x[0], &d.y);
    let a_of = |b: f64| -> (f64, f64) {
        let (mut sw, mut swr) = (0.0, 0.0);
        for i in 0..y.len() {
            let w = 1.0 / (sy[i] * sy[i] + b * b * sx[i] * sx[i]);
            sw += w;
            swr += w * (y[i] - b * x[i]);
        }
        let a = swr / sw;
        let s: f64 = (0..y.len())
            .map(|i| (y[i] - a - b * x[i]).powi(2) / (sy[i] * sy[i] + b * b * sx[i] * sx[i]))
            .sum();
        (a, s)
    };
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let (mut lo, mut hi) = (0.0, 5.0);
    for _ in 0..200 {
        let c = hi - g * (hi - lo);
        let e = lo + g * (hi - lo);
        if a_of(c).1 < a_of(e).1 {
            hi = e;
        } else {
            lo = c;
        }
    }
    let b = 0.5 * (lo + hi);
    let (a, s) = a_of(b);
    (a, b, s)
}

#[test]
fn straight_line_agrees_with_an_independent_minimisation_of_the_same_objective() {
    let tape = line_tape();
    let data = line_data(0.2, 0.15);
    let f = fit::fit(&problem(&tape), &data).unwrap();
    assert!(f.converged, "{:?}", f.stop_reason);
    assert!(f.errors_in_x);
    let (a, b, s) = independent_line(&data);
    assert!(
        (f.parameters[0].value - a).abs() < 1e-7,
        "{} vs {a}",
        f.parameters[0].value
    );
    assert!(
        (f.parameters[1].value - b).abs() < 1e-7,
        "{} vs {b}",
        f.parameters[1].value
    );
    assert!((f.chi2 - s).abs() < 1e-9 * s);
    // Standard errors from J^T diag(1/V) J at the solution (effective
    // weights), inverted by hand.
    let sy = 0.2f64;
    let sx = 0.15f64;
    let w = 1.0 / (sy * sy + b * b * sx * sx);
    let (mut s0, mut s1, mut s2) = (0.0, 0.0, 0.0);
    for &xi in &data.x[0] {
        s0 += w;
        s1 += w * xi;
        s2 += w * xi * xi;
    }
    let det = s0 * s2 - s1 * s1;
    assert!((f.parameters[0].std_error.unwrap() - (s2 / det).sqrt()).abs() < 1e-6);
    assert!((f.parameters[1].std_error.unwrap() - (s0 / det).sqrt()).abs() < 1e-6);
    // Ignoring the denominator's dependence on b (a fit with the weights
    // frozen at the start's slope) would land elsewhere: the dependence
    // matters here.
    let frozen = {
        let mut d = data.clone();
        let v: Vec<f64> = (0..15).map(|_| (sy * sy + 1.0 * sx * sx).sqrt()).collect();
        d.sigma = Some(v);
        d.sigma_x = None;
        fit::fit(&problem(&tape), &d).unwrap()
    };
    assert!((frozen.parameters[1].value - b).abs() > 1e-6);
    // Curvature measures: not available with errors in x (the effective
    // weights move with the slope); without sigma_x the straight line is
    // linear in its parameters, so both curvatures are 0 (identity: the
    // second derivatives of a + b x vanish; Bates & Watts 1980).
    use fitaudit::diagnostics::nonlinearity::{compute, NotAvailable};
    let nl = compute(&tape, &data, &f);
    assert_eq!(nl.not_available, Some(NotAvailable::ErrorsInX));
    let mut plain = data.clone();
    plain.sigma_x = None;
    let nl = compute(&tape, &plain, &frozen);
    assert_eq!(nl.not_available, None);
    assert!(nl.intrinsic_curvature.is_some_and(|c| c.abs() < 1e-12));
    assert!(nl.parameter_effects_curvature.is_some_and(|c| c.abs() < 1e-12));
}

#[test]
fn vanishing_sigma_x_is_the_ordinary_fit() {
    let tape = line_tape();
    let data = line_data(0.2, 0.15);
    let mut ordinary = data.clone();
    ordinary.sigma_x = None;
    let plain = fit::fit(&problem(&tape), &ordinary).unwrap();
    for sx in [0.0, 1e-9] {
        let mut d = data.clone();
        d.sigma_x = Some(vec![sx; 15]);
        let f = fit::fit(&problem(&tape), &d).unwrap();
        for (p, q) in f.parameters.iter().zip(&plain.parameters) {
            assert!(
                (p.value - q.value).abs() < 1e-9,
                "{sx}: {} vs {}",
                p.value,
                q.value
            );
            assert!((p.std_error.unwrap() - q.std_error.unwrap()).abs() < 1e-9);
        }
        assert!((f.chi2 - plain.chi2).abs() < 1e-9 * plain.chi2);
    }
}

#[test]
fn nonlinear_model_minimises_the_effective_chi2() {
    // A decay with errors in time: at the fit, the gradient of the
    // effective chi2 (by central differences of the objective written
    // here) vanishes, and small moves raise it.
    let params = vec!["A".to_string(), "k".to_string()];
    let vars = vec!["t".to_string()];
    let syms = Symbols {
        parameters: &params,
        constants: &[],
        variables: &vars,
    };
    let tape = compile("A*exp(-k*t)", &syms).unwrap();
    let mut r = rng::stream(12, Stream::Other(1803), 0);
    let t: Vec<f64> = (0..20).map(|i| 0.25 * i as f64).collect();
    let (sy, sx) = (0.05, 0.08);
    let mut tx = Vec::new();
    let mut y = Vec::new();
    for &ti in &t {
        let ex: f64 = StandardNormal.sample(&mut r);
        let ey: f64 = StandardNormal.sample(&mut r);
        tx.push(ti + sx * ex);
        y.push(4.0 * (-0.6 * ti).exp() + sy * ey);
    }
    let mut data = Dataset::single("t", tx.clone(), "y", y.clone(), Some(vec![sy; 20]));
    data.sigma_x = Some(vec![sx; 20]);
    let p = Problem {
        model: &tape,
        params: vec![ParamSpec::free("A", 3.0), ParamSpec::free("k", 0.4)],
        options: FitOptions::default(),
    };
    let f = fit::fit(&p, &data).unwrap();
    assert!(f.converged);
    let s = |a: f64, k: f64| -> f64 {
        tx.iter()
            .zip(&y)
            .map(|(&ti, &yi)| {
                let m = a * (-k * ti).exp();
                let slope = -k * m; // df/dt by hand
                (yi - m).powi(2) / (sy * sy + slope * slope * sx * sx)
            })
            .sum()
    };
    let (a, k) = (f.parameters[0].value, f.parameters[1].value);
    assert!((s(a, k) - f.chi2).abs() < 1e-9 * f.chi2);
    for (da, dk) in [(1e-5, 0.0), (0.0, 1e-5)] {
        let g = (s(a + da, k + dk) - s(a - da, k - dk)) / 2e-5;
        assert!(g.abs() < 1e-4, "gradient {g}");
    }
}

#[test]
fn refusals_name_what_is_missing() {
    type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;
    fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        g[0] = 1.0;
        g[1] = x[0];
        p[0] + p[1] * x[0]
    }
    let native = NativeModel::new(2, line as PointFn);
    let data = line_data(0.2, 0.15);
    let p = Problem {
        model: &native,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    assert_eq!(fit::fit(&p, &data).unwrap_err(), FitError::NoXSlope);
    let tape = line_tape();
    let mut no_sigma = data.clone();
    no_sigma.sigma = None;
    assert_eq!(
        fit::fit(&problem(&tape), &no_sigma).unwrap_err(),
        FitError::XErrorsNeedSigma
    );
    let mut neg = data.clone();
    neg.sigma_x.as_mut().unwrap()[4] = -0.1;
    assert!(matches!(
        fit::fit(&problem(&tape), &neg),
        Err(FitError::InvalidSigmaX { point: 4, .. })
    ));
}

#[test]
fn monte_carlo_moves_x_as_well_as_y() {
    // With sigma_y tiny, all the scatter comes from x: the Monte Carlo
    // spread of the slope matches the effective-variance standard error
    // only if the trials perturb x (a y-only simulation would give a
    // spread of sigma_y-size).
    let tape = line_tape();
    let data = line_data(0.01, 0.2);
    let f = fit::fit(&problem(&tape), &data).unwrap();
    let settings = AuditSettings::default();
    let ctx = Fitted {
        problem: problem(&tape),
        data: &data,
        fit: &f,
        settings: &settings,
    };
    let mc = diagnostics::monte_carlo::run_with(
        &ctx,
        &MonteCarloSettings {
            replicates: 300,
            ..MonteCarloSettings::default()
        },
        &NoProgress,
    );
    assert_eq!(mc.failed, 0);
    let u = f.parameters[1].std_error.unwrap();
    // SD estimate from 300 trials: about 4 % relative; allow 5 of them.
    assert!(
        (mc.parameters[1].std - u).abs() < 0.2 * u,
        "{} vs {u}",
        mc.parameters[1].std
    );
    // The residual bootstrap moves x too (a second draw from the pool
    // times sigma_x): its spread also matches u rather than sigma_y.
    let bs = diagnostics::bootstrap::run_with(
        &ctx,
        &fitaudit::settings::BootstrapSettings {
            replicates: 300,
            ..Default::default()
        },
        false,
        &NoProgress,
    );
    assert_eq!(bs.failed, 0);
    // 15 residuals in the pool add their own chance scatter: allow 35 %.
    assert!(
        (bs.parameters[1].std - u).abs() < 0.35 * u,
        "{} vs {u}",
        bs.parameters[1].std
    );
}

#[test]
fn coverage_moves_x_and_says_so() {
    // All the scatter from x (sigma_y tiny): a straight line's analytic
    // interval covers at the level only if the simulated data sets move x
    // as the effective variance assumes (a y-only simulation would cover
    // almost always, its spread being sigma_y-size). 400 data sets: SE
    // 0.023 at 68.27 %.
    let tape = line_tape();
    let data = line_data(0.01, 0.2);
    let f = fit::fit(&problem(&tape), &data).unwrap();
    let mut settings = AuditSettings::default();
    settings.coverage.replicates = 400;
    let ctx = Fitted {
        problem: problem(&tape),
        data: &data,
        fit: &f,
        settings: &settings,
    };
    let c = diagnostics::coverage::run(&ctx, &NoProgress);
    assert!(c.moves_x);
    assert_eq!(c.noise, "normal");
    let slope = &c.parameters[1].intervals[0];
    assert_eq!(slope.kind, diagnostics::coverage::CoverageKind::Analytic);
    let se = (0.6827f64 * 0.3173 / slope.counted as f64).sqrt();
    assert!((slope.coverage - 0.6827).abs() < 3.5 * se, "{}", slope.coverage);
}
