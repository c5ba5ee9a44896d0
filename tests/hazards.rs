//! Numerical and file-system hazards: models that are not finite in part of
//! parameter space, overflow-prone exponentials, parameters and sigmas
//! spanning many orders of magnitude, exactly collinear parameters, refits
//! that fail inside the diagnostics, and output folders a hostile or careless
//! study could misuse.
//!
//! Each numerical check compares with an independent answer: a closed form
//! of weighted least squares (Bevington & Robinson, "Data Reduction and
//! Error Analysis for the Physical Sciences", 3rd ed., eqs. 6.12 and
//! 6.21-6.22), a mathematical identity (noise-free data are fitted exactly
//! by their generating values; least squares is invariant under a rescaling
//! of the parameters; at a minimum a linear parameter is the linear
//! least-squares solution given the others), or a fit of the same data from
//! a start far from the hazard. The data are synthetic inputs, generated
//! with a fixed seed; they are not reference results. The file-system
//! expectations are the tool's own contract (README, "Exit status" and the
//! atomic output folders).
#![allow(clippy::needless_range_loop)]

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use assert_cmd::Command;
use fitaudit::data::Dataset;
use fitaudit::diagnostics::{multistart, Fitted, NoProgress};
use fitaudit::fit::{fit, FitError, FitOptions, FitResult, ParamSpec, Problem, StopReason};
use fitaudit::model::{compile, ModelFn, Symbols, Tape};
use fitaudit::settings::AuditSettings;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn tape(formula: &str, params: &[&str], vars: &[&str]) -> Tape {
    let p: Vec<String> = params.iter().map(|s| s.to_string()).collect();
    let v: Vec<String> = vars.iter().map(|s| s.to_string()).collect();
    let symbols = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    compile(formula, &symbols).unwrap_or_else(|e| panic!("{formula}: {e}"))
}

fn problem<'a>(model: &'a Tape, names: &[&str], starts: &[f64]) -> Problem<'a> {
    Problem {
        model,
        params: names
            .iter()
            .zip(starts)
            .map(|(n, s)| ParamSpec::free(n, *s))
            .collect(),
        options: FitOptions::default(),
    }
}

fn fit_from_starts(model: &Tape, names: &[&str], starts: &[f64], data: &Dataset) -> FitResult {
    fit(&problem(model, names, starts), data).unwrap_or_else(|e| panic!("start {starts:?}: {e}"))
}

/// Standard normal draws from a fixed seed.
fn gauss(seed: u64, n: usize) -> Vec<f64> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, 1.0).unwrap();
    (0..n).map(|_| normal.sample(&mut rng)).collect()
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

fn values(r: &FitResult) -> Vec<f64> {
    r.parameters.iter().map(|p| p.value).collect()
}

/// Every number of a fit result is finite (a NaN would reach the report).
fn assert_all_finite(r: &FitResult, what: &str) {
    assert!(r.chi2.is_finite(), "{what}: chi2 {}", r.chi2);
    assert!(
        r.reduced_chi2.is_finite() && r.p_value.map_or(true, f64::is_finite),
        "{what}"
    );
    for p in &r.parameters {
        assert!(p.value.is_finite(), "{what}: {} = {}", p.name, p.value);
        if let Some(s) = p.std_error {
            assert!(s.is_finite() && s >= 0.0, "{what}: se({}) = {s}", p.name);
        }
    }
    for v in r.covariance.iter().chain(&r.correlation).flatten() {
        assert!(v.is_finite(), "{what}: covariance or correlation {v}");
    }
    for v in r.fitted.iter().chain(&r.residuals).chain(&r.leverage) {
        assert!(v.is_finite(), "{what}: fitted, residual or leverage {v}");
    }
    assert!(
        r.condition_number.is_finite() || r.condition_number == f64::MAX,
        "{what}"
    );
}

/// Weighted straight line `y = a + b x`: (a, b, se a, se b) by the closed
/// form of Bevington & Robinson, 3rd ed., eqs. 6.12 and 6.21-6.22.
fn weighted_line(x: &[f64], y: &[f64], s: &[f64]) -> (f64, f64, f64, f64) {
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
    (
        (sxx * sy - sx * sxy) / d,
        (sw * sxy - sx * sy) / d,
        (sxx / d).sqrt(),
        (sw / d).sqrt(),
    )
}

// ---------------------------------------------------------------------------
// Models that are not finite in part of parameter space
// ---------------------------------------------------------------------------

/// `b*sqrt(a - x)` is NaN for a < max x. From a start 1e-9 above max x the
/// first steps into the NaN region must be rejected and the fit must reach
/// the minimum found from a start far from the edge. At that minimum `b` is
/// the linear least-squares solution given `a` (identity of separable least
/// squares): b = sum(w y r) / sum(w r^2), r = sqrt(a - x).
#[test]
fn sqrt_model_converges_from_a_start_at_the_edge_of_its_domain() {
    let x: Vec<f64> = (0..20).map(|i| 0.5 * i as f64).collect();
    let e = gauss(101, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 2.0 * (10.0 - x).sqrt() + 0.05 * e)
        .collect();
    let sigma = vec![0.05; x.len()];
    let data = Dataset::single("x", x.clone(), "y", y.clone(), Some(sigma));
    let model = tape("b*sqrt(a - x)", &["a", "b"], &["x"]);
    let far = fit_from_starts(&model, &["a", "b"], &[12.0, 2.0], &data);
    assert!(far.converged, "{:?}", far.stop_reason);
    for start in [[9.5 + 1e-9, 1.0], [9.5001, 5.0]] {
        let edge = fit_from_starts(&model, &["a", "b"], &start, &data);
        assert!(edge.converged, "from {start:?}: {:?}", edge.stop_reason);
        assert_all_finite(&edge, "sqrt edge");
        assert!(
            rel(edge.chi2, far.chi2) < 1e-10,
            "chi2 {} vs {}",
            edge.chi2,
            far.chi2
        );
        for (a, b) in values(&edge).iter().zip(values(&far)) {
            assert!(rel(*a, b) < 1e-8, "from {start:?}: {a} vs {b}");
        }
        assert_eq!(edge.rank, 2);
    }
    let [a, b] = [far.parameters[0].value, far.parameters[1].value];
    let (num, den) = x.iter().zip(&y).fold((0.0, 0.0), |(n, d), (x, y)| {
        let r = (a - x).sqrt();
        (n + y * r, d + r * r)
    });
    assert!(
        rel(b, num / den) < 1e-10,
        "b {b} vs conditional solution {}",
        num / den
    );
}

/// `b*ln(x - a)` is NaN for a >= min x. Start 1e-9 below min x = 0.5: the
/// fit must reach the minimum found from a start far from the edge.
#[test]
fn log_model_converges_from_a_start_at_the_edge_of_its_domain() {
    let x: Vec<f64> = (1..=20).map(|i| 0.5 * i as f64).collect();
    let e = gauss(102, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 3.0 * (x - 0.2).ln() + 0.05 * e)
        .collect();
    let data = Dataset::single("x", x, "y", y, Some(vec![0.05; 20]));
    let model = tape("b*ln(x - a)", &["a", "b"], &["x"]);
    let far = fit_from_starts(&model, &["a", "b"], &[-1.0, 1.0], &data);
    assert!(far.converged, "{:?}", far.stop_reason);
    assert!(
        rel(far.parameters[1].value, 3.0) < 0.05,
        "b = {}",
        far.parameters[1].value
    );
    let edge = fit_from_starts(&model, &["a", "b"], &[0.5 - 1e-9, 1.0], &data);
    assert!(edge.converged, "{:?}", edge.stop_reason);
    assert_all_finite(&edge, "log edge");
    assert!(
        rel(edge.chi2, far.chi2) < 1e-10,
        "chi2 {} vs {}",
        edge.chi2,
        far.chi2
    );
    for (a, b) in values(&edge).iter().zip(values(&far)) {
        assert!(rel(*a, b) < 1e-8, "{a} vs {b}");
    }
}

/// `a*ln(b*x)` is NaN for b <= 0. It equals `a*ln(x) + a*ln(b)`, a straight
/// line in ln x, so the minimum has the closed form a = slope, b =
/// exp(intercept / slope) (Bevington & Robinson, eq. 6.12, on ln x). From
/// b = 0.1 (20 times below the answer, 0.1 from the edge) the fit reaches
/// it. From b = 0.01 chi2 falls towards b -> 0 (with a -> 0 and a*ln(b)
/// fixed the model tends to a constant), so the fit runs down that slope
/// to the smallest doubles; the multi-start search must then find the
/// closed-form minimum and say that the base fit is not the best.
#[test]
fn log_model_in_a_product_reaches_the_closed_form_or_multistart_flags_the_slope() {
    let x: Vec<f64> = (1..=20).map(|i| 0.5 * i as f64).collect();
    let e = gauss(103, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 3.0 * (2.0 * x).ln() + 0.05 * e)
        .collect();
    let s = vec![0.05; x.len()];
    let lnx: Vec<f64> = x.iter().map(|v| v.ln()).collect();
    let (intercept, slope, _, _) = weighted_line(&lnx, &y, &s);
    let (a_ref, b_ref) = (slope, (intercept / slope).exp());
    let data = Dataset::single("x", x, "y", y, Some(s));
    let model = tape("a*ln(b*x)", &["a", "b"], &["x"]);
    let near_edge = fit_from_starts(&model, &["a", "b"], &[1.0, 0.1], &data);
    assert!(near_edge.converged, "{:?}", near_edge.stop_reason);
    assert!(rel(near_edge.parameters[0].value, a_ref) < 1e-9);
    assert!(rel(near_edge.parameters[1].value, b_ref) < 1e-9);

    let slide = fit_from_starts(&model, &["a", "b"], &[1.0, 0.01], &data);
    assert_all_finite(&slide, "log slope");
    assert!(
        slide.chi2 > 100.0 * near_edge.chi2,
        "the start at 0.01 now reaches the minimum: update the test"
    );
    let settings = AuditSettings {
        multistart: fitaudit::settings::MultistartSettings {
            starts: 32,
            ..AuditSettings::default().multistart
        },
        ..AuditSettings::default()
    };
    // The search box comes from the study, not from the slid fit: b is
    // sign-definite (ln(b x) needs b > 0), which a study says with min = 0,
    // and is then sampled over two decades on each side of its start.
    let mut problem = problem(&model, &["a", "b"], &[1.0, 0.01]);
    problem.params[1].min = 0.0;
    let ctx = Fitted {
        problem,
        data: &data,
        fit: &slide,
        settings: &settings,
    };
    let ms = multistart::run(&ctx, &NoProgress);
    assert!(!ms.base_is_best, "multi-start did not flag the base fit");
    let best = &ms.minima[0];
    assert!(
        rel(best.chi2, near_edge.chi2) < 1e-8,
        "best {} vs {}",
        best.chi2,
        near_edge.chi2
    );
    assert!(rel(best.parameters[0].value, a_ref) < 1e-6);
    assert!(rel(best.parameters[1].value, b_ref) < 1e-6);
}

/// When the minimum sits on the edge of the domain (the last point at
/// x = 9.99 pulls a towards 9.99, where sqrt(a - x) ends), the fit cannot
/// converge: it must say so (converged = false, stop reason non-finite)
/// with finite numbers everywhere, never NaN.
#[test]
fn a_minimum_on_the_edge_of_the_domain_is_reported_as_not_converged() {
    let x = vec![0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 9.5, 9.9, 9.99];
    let e = gauss(104, x.len());
    let mut y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 2.0 * (10.0f64 - x).sqrt() + 0.3 * e)
        .collect();
    // The last point lies well below the curve, pulling a onto 9.99.
    *y.last_mut().unwrap() = -0.5;
    let data = Dataset::single("x", x, "y", y, Some(vec![0.3; 13]));
    let model = tape("b*sqrt(a - x)", &["a", "b"], &["x"]);
    for start in [[10.5, 1.0], [12.0, 2.0]] {
        let r = fit_from_starts(&model, &["a", "b"], &start, &data);
        assert_all_finite(&r, "edge minimum");
        assert!(
            !r.converged,
            "from {start:?}: claims convergence at {:?}",
            values(&r)
        );
        assert_eq!(r.stop_reason, StopReason::NonFinite, "from {start:?}");
        let a = r.parameters[0].value;
        assert!(a > 9.99 && a - 9.99 < 1e-6, "a = {a}");
    }
}

// ---------------------------------------------------------------------------
// Overflow-prone exponentials, extreme scales
// ---------------------------------------------------------------------------

/// `A*exp(k*x)` with x up to 700 (exp(700) = 1.0e304, next to the largest
/// double 1.8e308). Steps to k > 1.02 overflow the model and steps to
/// k > 0.5 overflow chi2; they must be rejected. Data: A = 2, k = 0.01,
/// 1 % noise with 1 % sigma.
fn exp_data() -> Dataset {
    let x: Vec<f64> = (0..15).map(|i| 50.0 * i as f64).collect();
    let e = gauss(105, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 2.0 * (0.01 * x).exp() * (1.0 + 0.01 * e))
        .collect();
    let s: Vec<f64> = y.iter().map(|y| 0.01 * y).collect();
    Dataset::single("x", x, "y", y, Some(s))
}

#[test]
fn overflowing_exponential_converges_from_a_start_whose_steps_overflow() {
    let data = exp_data();
    let model = tape("A*exp(k*x)", &["A", "k"], &["x"]);
    let good = fit_from_starts(&model, &["A", "k"], &[1.0, 0.02], &data);
    assert!(good.converged, "{:?}", good.stop_reason);
    // log-linear check of the good fit: ln y = ln A + k x, weights (y/sigma)^2 = 1e4.
    let lny: Vec<f64> = data.y.iter().map(|v| v.ln()).collect();
    let (ln_a, k, _, _) = weighted_line(&data.x[0], &lny, &[0.01; 15]);
    assert!(
        rel(good.parameters[1].value, k) < 1e-3,
        "k {} vs log-linear {k}",
        good.parameters[1].value
    );
    assert!(rel(good.parameters[0].value, ln_a.exp()) < 1e-2);
    // From k = 0.1 the model is 1e30 times too large at x = 700 and the
    // first steps overshoot into overflow.
    let r = fit_from_starts(&model, &["A", "k"], &[1.0, 0.1], &data);
    assert!(r.converged, "{:?}", r.stop_reason);
    assert_all_finite(&r, "exp from 0.1");
    for (a, b) in values(&r).iter().zip(values(&good)) {
        assert!(rel(*a, b) < 1e-8, "{a} vs {b}");
    }
    // From k = 0.5 (model 1e150 at x = 700) the fit is trapped where only
    // the last point counts: it must not claim a good, determined answer.
    let stuck = fit_from_starts(&model, &["A", "k"], &[1.0, 0.5], &data);
    assert_all_finite(&stuck, "exp from 0.5");
    let right = values(&stuck)
        .iter()
        .zip(values(&good))
        .all(|(a, b)| rel(*a, b) < 1e-6);
    if !right {
        assert!(
            !stuck.converged || stuck.rank < 2 || stuck.p_value.is_some_and(|p| p < 1e-10),
            "a wrong answer without any warning sign: {stuck:?}"
        );
        assert!(stuck.chi2 > 1e3 * good.chi2);
    }
}

/// Starting at k = 0.9 the model is finite (exp(630) = 1e273) but chi2
/// overflows from the point at x = 400 on (residual 2e156, squared beyond
/// the largest double). The error must name that point (the 9th), not the
/// first point, where the model equals 1 and nothing is wrong.
#[test]
fn overflowing_chi_squared_at_the_start_names_the_point_that_overflows() {
    let data = exp_data();
    let model = tape("A*exp(k*x)", &["A", "k"], &["x"]);
    match fit(&problem(&model, &["A", "k"], &[1.0, 0.9]), &data) {
        Err(FitError::NotFiniteAtStart { point }) => {
            assert_eq!(point, 8, "x = {} named", data.x[0][point]);
        }
        other => panic!("expected an error naming a point: {other:?}"),
    }
}

/// a = 1e-6 and b = 1e4 (10 orders apart): least squares is invariant under
/// a rescaling of the parameters, so `a*exp(-x/b)` must give exactly the
/// rescaled solution and standard errors of `A*1e-6*exp(-x/(B*1e4))`,
/// whose parameters are of order 1 (identity).
#[test]
fn parameters_ten_orders_apart_give_the_rescaled_solution() {
    let x: Vec<f64> = (0..20).map(|i| 2500.0 * i as f64).collect();
    let e = gauss(106, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 1e-6 * (-x / 1e4).exp() * (1.0 + 0.01 * e))
        .collect();
    let s: Vec<f64> = y.iter().map(|y| 0.01 * y).collect();
    let data = Dataset::single("x", x, "y", y, Some(s));
    let unit = tape("A*1e-6*exp(-x/(B*1e4))", &["A", "B"], &["x"]);
    let scaled = fit_from_starts(&unit, &["A", "B"], &[2.0, 0.5], &data);
    assert!(scaled.converged, "{:?}", scaled.stop_reason);
    let raw = tape("a*exp(-x/b)", &["a", "b"], &["x"]);
    for start in [[2e-6, 5e3], [1e-5, 1e3], [1e-7, 1e5]] {
        let r = fit_from_starts(&raw, &["a", "b"], &start, &data);
        assert!(r.converged, "from {start:?}: {:?}", r.stop_reason);
        assert_all_finite(&r, "ten orders");
        assert_eq!(r.rank, 2, "from {start:?}");
        let factor = [1e-6, 1e4];
        for j in 0..2 {
            let (p, q) = (&r.parameters[j], &scaled.parameters[j]);
            assert!(
                rel(p.value, factor[j] * q.value) < 1e-9,
                "from {start:?}: {} {} vs {}",
                p.name,
                p.value,
                q.value
            );
            let (sp, sq) = (p.std_error.unwrap(), q.std_error.unwrap());
            assert!(rel(sp, factor[j] * sq) < 1e-6, "se {} {sp} vs {sq}", p.name);
        }
    }
}

/// Sigma from 1e-3 to 1e3 (weights over 12 orders). A straight line must
/// match the weighted closed form, and an exponential fitted to noise-free
/// data must return its generating values (identity: chi2 = 0 there).
#[test]
fn sigmas_spanning_six_orders_of_magnitude() {
    let x: Vec<f64> = (0..13).map(|i| i as f64).collect();
    let s: Vec<f64> = (0..13).map(|i| 10f64.powf(-3.0 + 0.5 * i as f64)).collect();
    let e = gauss(107, x.len());
    let y: Vec<f64> = (0..13).map(|i| 1.5 + 0.7 * x[i] + s[i] * e[i]).collect();
    let data = Dataset::single("x", x.clone(), "y", y.clone(), Some(s.clone()));
    let line = tape("a + b*x", &["a", "b"], &["x"]);
    let r = fit_from_starts(&line, &["a", "b"], &[0.0, 0.0], &data);
    let (a, b, sa, sb) = weighted_line(&x, &y, &s);
    assert!(r.converged, "{:?}", r.stop_reason);
    assert!(rel(r.parameters[0].value, a) < 1e-10 && rel(r.parameters[1].value, b) < 1e-10);
    assert!(rel(r.parameters[0].std_error.unwrap(), sa) < 1e-8);
    assert!(rel(r.parameters[1].std_error.unwrap(), sb) < 1e-8);

    let exact: Vec<f64> = x.iter().map(|x| 5.0 * (-x / 3.0f64).exp() + 1.0).collect();
    let data = Dataset::single("x", x, "y", exact, Some(s));
    let model = tape("a*exp(-x/b) + c", &["a", "b", "c"], &["x"]);
    let r = fit_from_starts(&model, &["a", "b", "c"], &[1.0, 1.0, 0.0], &data);
    assert!(r.converged, "{:?}", r.stop_reason);
    assert_all_finite(&r, "six orders");
    for (v, t) in values(&r).iter().zip([5.0, 3.0, 1.0]) {
        assert!(rel(*v, t) < 1e-9, "{v} vs {t}");
    }
}

// ---------------------------------------------------------------------------
// Exactly collinear parameters
// ---------------------------------------------------------------------------

fn collinear_data() -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let x: Vec<f64> = (0..10).map(|i| i as f64).collect();
    let e = gauss(108, x.len());
    let y: Vec<f64> = x.iter().zip(&e).map(|(x, e)| 2.0 + 1.5 * x + 0.1 * e).collect();
    (x, y, vec![0.1; 10])
}

/// `a*x + b*x + c`: only a + b is determined. The fit must name the
/// undetermined direction (a and b, with components of equal size and
/// opposite sign), give no standard error for a and b, and match the
/// weighted straight line for a + b and for c, including the standard
/// error of c (Bevington & Robinson, eqs. 6.12, 6.21-6.22).
#[test]
fn collinear_parameters_are_diagnosed_not_nan() {
    let (x, y, s) = collinear_data();
    let (c_ref, slope, sc, _) = weighted_line(&x, &y, &s);
    let data = Dataset::single("x", x, "y", y, Some(s));
    let model = tape("a*x + b*x + c", &["a", "b", "c"], &["x"]);
    let r = fit_from_starts(&model, &["a", "b", "c"], &[1.0, 1.0, 0.0], &data);
    assert_all_finite(&r, "collinear");
    assert_eq!(r.rank, 2);
    assert_eq!(r.undetermined.len(), 1);
    let dir: BTreeMap<&str, f64> = r.undetermined[0].iter().map(|(n, v)| (n.as_str(), *v)).collect();
    let (da, db) = (dir["a"], dir["b"]);
    assert!(rel(da.abs(), std::f64::consts::FRAC_1_SQRT_2) < 1e-9, "{dir:?}");
    assert!(rel(da, -db) < 1e-9, "{dir:?}");
    assert!(dir.get("c").map_or(true, |v| v.abs() < 1e-9), "{dir:?}");
    assert!(r.parameters[0].std_error.is_none() && r.parameters[1].std_error.is_none());
    assert!(rel(r.parameters[0].value + r.parameters[1].value, slope) < 1e-10);
    assert!(rel(r.parameters[2].value, c_ref) < 1e-10);
    assert!(rel(r.parameters[2].std_error.unwrap(), sc) < 1e-8);
}

// ---------------------------------------------------------------------------
// Model evaluation: the value and value-and-Jacobian programs agree
// ---------------------------------------------------------------------------

/// Found by the `formula` fuzz target (docs/FUZZING.md). `x*x*b` evaluated
/// as written is `(x*x)*b`. The value-and-Jacobian program computes it so
/// (it shares `x*x`, which is also d/db), but the value-only program fuses
/// the product into one instruction computing `(b*x)*x`: a different
/// rounding (0.9000000000000001 instead of 0.9 at x = 3, b = 0.1) and a
/// different overflow (0 instead of NaN at x = 1e300, b = 0). A fit then
/// sees different values for the same parameters depending on whether it
/// asked for the Jacobian.
#[test]
fn value_only_and_jacobian_programs_agree_on_a_fused_product() {
    let model = tape("x*x*b", &["a", "b"], &["x"]);
    let x = [3.0, 1e300, 1e200];
    for (i, b) in [0.1, 0.0, 1e200].into_iter().enumerate() {
        let params = [1.0, b];
        let cols: [&[f64]; 1] = [&x[i..=i]];
        let (mut v_plain, mut v_full) = ([0.0], [0.0]);
        let mut jac = [0.0; 2];
        let mut scratch = Vec::new();
        let _ = model.eval(&params, &cols, &mut v_plain, None, &mut scratch);
        let _ = model.eval(&params, &cols, &mut v_full, Some(&mut jac), &mut scratch);
        // The formula read as written.
        let reference = (x[i] * x[i]) * b;
        for (what, v) in [("value only", v_plain[0]), ("with Jacobian", v_full[0])] {
            assert!(
                v.to_bits() == reference.to_bits() || (v.is_nan() && reference.is_nan()),
                "x = {}, b = {b}: {what} gives {v}, the formula as written {reference}",
                x[i]
            );
        }
    }
}

/// A positive expression over a, b, c and x: sums, products, quotients and
/// exponentials of positive terms, so that every printed formula has a
/// value free of cancellation and rounding stays within a few units in the
/// last place.
#[derive(Debug, Clone)]
enum Pos {
    Num(f64),
    P(usize),
    X,
    Add(Box<Pos>, Box<Pos>),
    Mul(Box<Pos>, Box<Pos>),
    Div(Box<Pos>, Box<Pos>),
    Exp(Box<Pos>),
}

fn pos_tree() -> impl proptest::strategy::Strategy<Value = Pos> {
    use proptest::prelude::*;
    let leaf = prop_oneof![
        (1u32..4000).prop_map(|k| Pos::Num(k as f64 / 1000.0)),
        (0..3usize).prop_map(Pos::P),
        Just(Pos::X),
    ];
    leaf.prop_recursive(6, 40, 2, |inner| {
        prop_oneof![
            (inner.clone(), inner.clone()).prop_map(|(a, b)| Pos::Add(Box::new(a), Box::new(b))),
            (inner.clone(), inner.clone()).prop_map(|(a, b)| Pos::Mul(Box::new(a), Box::new(b))),
            (inner.clone(), inner.clone()).prop_map(|(a, b)| Pos::Div(Box::new(a), Box::new(b))),
            inner.prop_map(|a| Pos::Exp(Box::new(Pos::Mul(Box::new(Pos::Num(0.1)), Box::new(a))))),
        ]
    })
}

/// The formula, fully parenthesised.
fn pos_text(e: &Pos) -> String {
    match e {
        Pos::Num(v) => format!("{v}"),
        Pos::P(j) => ["a", "b", "c"][*j].to_string(),
        Pos::X => "x".to_string(),
        Pos::Add(a, b) => format!("({} + {})", pos_text(a), pos_text(b)),
        Pos::Mul(a, b) => format!("({} * {})", pos_text(a), pos_text(b)),
        Pos::Div(a, b) => format!("({} / {})", pos_text(a), pos_text(b)),
        Pos::Exp(a) => format!("exp({})", pos_text(a)),
    }
}

/// Reference interpreter: the tree evaluated as written.
fn pos_eval(e: &Pos, p: &[f64; 3], x: f64) -> f64 {
    match e {
        Pos::Num(v) => *v,
        Pos::P(j) => p[*j],
        Pos::X => x,
        Pos::Add(a, b) => pos_eval(a, p, x) + pos_eval(b, p, x),
        Pos::Mul(a, b) => pos_eval(a, p, x) * pos_eval(b, p, x),
        Pos::Div(a, b) => pos_eval(a, p, x) / pos_eval(b, p, x),
        Pos::Exp(a) => pos_eval(a, p, x).exp(),
    }
}

proptest::proptest! {
    #![proptest_config(proptest::test_runner::Config {
        cases: 400,
        rng_seed: proptest::test_runner::RngSeed::Fixed(10),
        failure_persistence: None,
        ..proptest::test_runner::Config::default()
    })]

    /// The value-only program (what a fit evaluates for trial steps) and the
    /// value-and-Jacobian program agree with a reference interpreter of the
    /// formula as written, over 130 points (more than one evaluation block).
    /// tests/model_props.rs checks only the value-and-Jacobian program.
    #[test]
    fn value_only_program_matches_the_reference_interpreter(
        e in pos_tree(),
        params in proptest::array::uniform3(0.5f64..2.0),
    ) {
        let formula = pos_text(&e);
        let model = tape(&formula, &["a", "b", "c"], &["x"]);
        let x: Vec<f64> = (0..130).map(|i| 0.5 + i as f64 / 86.0).collect();
        let mut plain = vec![0.0; x.len()];
        let mut full = vec![0.0; x.len()];
        let mut jac = vec![0.0; 3 * x.len()];
        let mut scratch = Vec::new();
        let cols: [&[f64]; 1] = [&x];
        let r1 = model.eval(&params, &cols, &mut plain, None, &mut scratch);
        let r2 = model.eval(&params, &cols, &mut full, Some(&mut jac), &mut scratch);
        proptest::prop_assert_eq!(r1, r2);
        for i in 0..x.len() {
            let want = pos_eval(&e, &params, x[i]);
            proptest::prop_assume!(want.is_finite() && want < 1e300);
            for (what, got) in [("value only", plain[i]), ("with Jacobian", full[i])] {
                proptest::prop_assert!(rel(got, want) < 1e-12,
                    "{} at x = {}: {} gives {}, reference {}", formula, x[i], what, got, want);
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Through the command line
// ---------------------------------------------------------------------------

fn fitaudit() -> Command {
    Command::cargo_bin("fitaudit").unwrap()
}

fn csv(x: &[f64], y: &[f64], s: &[f64]) -> String {
    let mut out = String::from("x,y,u\n");
    for i in 0..x.len() {
        out.push_str(&format!("{:e},{:e},{:e}\n", x[i], y[i], s[i]));
    }
    out
}

const SMALL_AUDIT: &str = "[audit]\nbootstrap = { replicates = 40, scheme = \"case\" }\nmonte_carlo = { replicates = 40 }\nmultistart = { starts = 16 }\nprofile = { points = 11 }\ncontours = { grid = 7 }\n";

/// Writes `name.toml` and `name.csv` into `dir`; returns the study path.
fn write_study(dir: &Path, name: &str, formula: &str, params: &str, data: &str) -> PathBuf {
    std::fs::write(dir.join(format!("{name}.csv")), data).unwrap();
    let study = format!(
        "[data]\nfile = \"{name}.csv\"\nx = \"x\"\ny = \"y\"\nsigma = \"u\"\n[model]\nformula = \"{formula}\"\n[parameters]\n{params}{SMALL_AUDIT}"
    );
    let path = dir.join(format!("{name}.toml"));
    std::fs::write(&path, study).unwrap();
    path
}

fn collinear_study(dir: &Path, name: &str) -> PathBuf {
    let (x, y, s) = collinear_data();
    write_study(
        dir,
        name,
        "a*x + b*x + c",
        "a = { start = 1 }\nb = { start = 1 }\nc = { start = 0 }\n",
        &csv(&x, &y, &s),
    )
}

fn text(out: &std::process::Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    )
}

/// `fit --json` on a collinear study: valid JSON without NaN or infinity
/// literals, std_error null for the undetermined a and b, a number for c.
#[test]
fn cli_fit_json_of_collinear_parameters_has_null_standard_errors() {
    let tmp = tempfile::tempdir().unwrap();
    let study = collinear_study(tmp.path(), "collinear");
    let out = fitaudit().args(["fit", "--json"]).arg(&study).output().unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let stdout = String::from_utf8(out.stdout).unwrap();
    for bad in ["NaN", "nan", "inf", "Infinity"] {
        assert!(!stdout.contains(bad), "{bad} in {stdout}");
    }
    let json: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let params = json["fit"]["parameters"].as_array().unwrap();
    assert!(params[0]["std_error"].is_null() && params[1]["std_error"].is_null());
    assert!(params[2]["std_error"].as_f64().unwrap() > 0.0);
    assert_eq!(json["fit"]["rank"], 2);
    let names: Vec<&str> = json["fit"]["undetermined"][0]
        .as_array()
        .unwrap()
        .iter()
        .map(|pair| pair[0].as_str().unwrap())
        .collect();
    assert!(names.contains(&"a") && names.contains(&"b"), "{names:?}");
}

/// `audit` on the collinear study completes; results.json holds no NaN and
/// the undetermined parameters do not get the verdict `holds`.
#[test]
fn cli_audit_of_collinear_parameters_completes() {
    let tmp = tempfile::tempdir().unwrap();
    let study = collinear_study(tmp.path(), "collinear");
    let dest = tmp.path().join("report");
    let out = fitaudit()
        .arg("audit")
        .arg(&study)
        .arg("--out")
        .arg(&dest)
        .args(["--quiet", "--threads", "2"])
        .output()
        .unwrap();
    let t = text(&out);
    assert!(!t.contains("panicked"), "{t}");
    assert_eq!(out.status.code(), Some(0), "{t}");
    let results = std::fs::read_to_string(dest.join("results.json")).unwrap();
    assert!(!results.contains("NaN") && !results.contains("Infinity"));
    let json: serde_json::Value = serde_json::from_str(&results).unwrap();
    for v in json["verdicts"].as_array().unwrap() {
        if v["parameter"] == "a" || v["parameter"] == "b" {
            assert_ne!(v["status"], "holds", "{v}");
        }
    }
}

/// `b*sqrt(a - x)` with points up to x = 9.99, next to the edge a = 10:
/// refits fail in the diagnostics (starts and resamples that reach the NaN
/// region). Every diagnostic's failure count must be in results.json, the
/// counts must agree with the lists of failures, and some must be non-zero.
#[test]
fn cli_audit_records_the_failed_refits_of_every_diagnostic() {
    let tmp = tempfile::tempdir().unwrap();
    let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 9.5, 9.9, 9.99];
    let e = gauss(109, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 2.0 * (10.0f64 - x).sqrt() + 0.3 * e)
        .collect();
    let study = write_study(
        tmp.path(),
        "edge",
        "b*sqrt(a - x)",
        "a = { start = 10.5 }\nb = { start = 1 }\n",
        &csv(&x, &y, &[0.3; 13]),
    );
    let dest = tmp.path().join("report");
    let out = fitaudit()
        .arg("audit")
        .arg(&study)
        .arg("--out")
        .arg(&dest)
        .args(["--quiet", "--threads", "2"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dest.join("results.json")).unwrap()).unwrap();
    let count = |v: &serde_json::Value, what: &str| -> u64 {
        v["failed"]
            .as_u64()
            .unwrap_or_else(|| panic!("{what}: no integer `failed` in {v}"))
    };
    let mut total = 0;
    for key in ["bootstrap", "monte_carlo"] {
        let d = &json[key];
        let n = count(d, key);
        assert_eq!(n as usize, d["failures"].as_array().unwrap().len(), "{key}");
        assert!(n <= d["run"].as_u64().unwrap(), "{key}");
        total += n;
    }
    let profile = &json["profile"];
    let per_parameter: u64 = profile["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| count(p, "profile parameter"))
        .sum();
    assert_eq!(count(profile, "profile"), per_parameter);
    total += per_parameter;
    let contours = json["contours"].as_array().unwrap();
    assert!(!contours.is_empty());
    for c in contours {
        total += count(c, "contour");
    }
    let ms = &json["multistart"];
    let ms_failed = count(ms, "multistart");
    let runs = ms["runs"].as_array().unwrap();
    let unclustered = runs.iter().filter(|r| r["minimum"].is_null()).count();
    assert_eq!(
        ms_failed as usize, unclustered,
        "multistart failures vs runs without a minimum"
    );
    total += ms_failed;
    assert!(
        total > 0,
        "no refit failed: the study no longer exercises failures"
    );
}

// ---------------------------------------------------------------------------
// Output safety
// ---------------------------------------------------------------------------

/// Every file under `root` with its contents.
fn snapshot(root: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![root.to_path_buf()];
    while let Some(dir) = stack.pop() {
        for entry in std::fs::read_dir(&dir).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                out.insert(path.strip_prefix(root).unwrap().join(""), Vec::new());
                stack.push(path);
            } else {
                let bytes = std::fs::read(&path).unwrap();
                out.insert(path.strip_prefix(root).unwrap().to_path_buf(), bytes);
            }
        }
    }
    out
}

/// Paths in `after` that are not in `before`.
fn added(before: &BTreeMap<PathBuf, Vec<u8>>, after: &BTreeMap<PathBuf, Vec<u8>>) -> Vec<PathBuf> {
    after
        .keys()
        .filter(|p| !before.contains_key(*p))
        .cloned()
        .collect()
}

/// `p` lies in `folder` or is one of the folders leading to it.
fn inside(p: &Path, folder: &str) -> bool {
    p.starts_with(folder) || Path::new(folder).starts_with(p)
}

fn line_study(dir: &Path, name: &str) -> PathBuf {
    let x: Vec<f64> = (0..8).map(|i| i as f64).collect();
    let e = gauss(110, x.len());
    let y: Vec<f64> = x.iter().zip(&e).map(|(x, e)| 1.0 + 2.0 * x + 0.1 * e).collect();
    write_study(
        dir,
        name,
        "a + b*x",
        "a = { start = 0 }\nb = { start = 1 }\n",
        &csv(&x, &y, &[0.1; 8]),
    )
}

fn audit_profile_only(cwd: &Path, study: &Path, out: Option<&Path>) -> std::process::Output {
    let mut cmd = fitaudit();
    cmd.current_dir(cwd).arg("audit").arg(study);
    if let Some(o) = out {
        cmd.arg("--out").arg(o);
    }
    cmd.args(["--quiet", "--only", "profile", "--threads", "1"])
        .output()
        .unwrap()
}

/// A folder that exists and was not written by fitaudit is refused with
/// exit 2 and left byte for byte as it was; an earlier fitaudit output is
/// replaced, unless it holds a file fitaudit did not write.
#[test]
fn foreign_folders_are_refused_and_earlier_outputs_replaced() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let study = line_study(root, "line");
    let foreign = root.join("measurements");
    std::fs::create_dir_all(foreign.join("raw")).unwrap();
    std::fs::write(foreign.join("raw/run1.csv"), "1,2,3\n").unwrap();
    std::fs::write(foreign.join("notes.txt"), "keep").unwrap();
    let before = snapshot(root);
    let out = audit_profile_only(root, &study, Some(&foreign));
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(text(&out).contains("measurements"), "{}", text(&out));
    assert_eq!(snapshot(root), before, "the refused run changed files");

    let dest = root.join("report");
    let out = audit_profile_only(root, &study, Some(&dest));
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    assert!(dest.join(fitaudit::output::MARKER).is_file());
    // A file fitaudit did not write makes the earlier output foreign: the
    // run is refused and the file kept (issue 21: a user's study kept in
    // the report folder was deleted by the replace).
    std::fs::write(dest.join("stale.txt"), "not written by fitaudit").unwrap();
    let first = std::fs::read_to_string(dest.join("results.json")).unwrap();
    let out = audit_profile_only(root, &study, Some(&dest));
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(text(&out).contains("stale.txt"), "{}", text(&out));
    assert!(dest.join("stale.txt").exists());
    std::fs::remove_file(dest.join("stale.txt")).unwrap();
    let out = audit_profile_only(root, &study, Some(&dest));
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let second = std::fs::read_to_string(dest.join("results.json")).unwrap();
    let fit = |s: &str| serde_json::from_str::<serde_json::Value>(s).unwrap()["fit"].clone();
    assert_eq!(fit(&first), fit(&second), "same study, same fit");
    let names: Vec<String> = std::fs::read_dir(root)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    assert!(!names.iter().any(|n| n.contains("partial")), "{names:?}");
}

/// Study files named `..toml` and `...toml` have the names `.` and `..`;
/// the default output folder `out/<name>/` must stay inside `out/` (here
/// `out/study/`), whatever the working folder holds. Before the fix,
/// `...toml` made the tool replace the working folder itself when that
/// carried an output marker, deleting its files.
#[test]
fn hostile_study_names_cannot_leave_the_output_folder() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let src = line_study(root, "line");
    let text_of_study = std::fs::read_to_string(&src).unwrap();
    for hostile in ["..toml", "...toml"] {
        let work = root.join(format!("work{}", hostile.len()));
        std::fs::create_dir_all(&work).unwrap();
        std::fs::copy(root.join("line.csv"), work.join("line.csv")).unwrap();
        std::fs::write(work.join(hostile), &text_of_study).unwrap();
        // The working folder looks like an earlier output and holds a file
        // that must survive.
        std::fs::write(work.join(fitaudit::output::MARKER), "").unwrap();
        std::fs::write(work.join("precious.txt"), "keep").unwrap();
        let before = snapshot(&work);
        let out = audit_profile_only(&work, Path::new(hostile), None);
        assert_eq!(out.status.code(), Some(0), "{hostile}: {}", text(&out));
        let after = snapshot(&work);
        for (path, bytes) in &before {
            assert_eq!(
                after.get(path),
                Some(bytes),
                "{hostile}: {} changed",
                path.display()
            );
        }
        let new = added(&before, &after);
        assert!(
            new.iter().all(|p| inside(p, "out/study")),
            "{hostile}: written outside out/study/: {new:?}"
        );
        assert!(
            work.join("out/study/results.json").is_file(),
            "{hostile}: {new:?}"
        );
    }
}

/// `--out` ending in `.` or `..` names no folder of its own: the staging
/// folder would land beside the wrong folder, and replacing "it" would
/// replace a parent. Refused with exit 2 before any work, nothing written.
#[test]
fn output_paths_ending_in_dot_components_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    let study = line_study(root, "line");
    std::fs::create_dir_all(root.join("sub")).unwrap();
    let before = snapshot(root);
    for dest in [".", "..", "sub/.", "sub/..", "sub/./"] {
        let out = audit_profile_only(root, &study, Some(Path::new(dest)));
        assert_eq!(out.status.code(), Some(2), "--out {dest}: {}", text(&out));
        assert!(
            text(&out).contains(dest.trim_end_matches('/')),
            "--out {dest}: {}",
            text(&out)
        );
        assert_eq!(snapshot(root), before, "--out {dest} changed files");
    }
}

/// A data file reached through `..` is only read: the run writes nothing
/// but its output folder, and the study and data stay as they were.
#[test]
fn data_paths_with_parent_components_only_read() {
    let tmp = tempfile::tempdir().unwrap();
    let root = tmp.path();
    line_study(root, "line");
    let sub = root.join("studies/deep");
    std::fs::create_dir_all(&sub).unwrap();
    let study = std::fs::read_to_string(root.join("line.toml"))
        .unwrap()
        .replace("file = \"line.csv\"", "file = \"../../line.csv\"");
    std::fs::write(sub.join("up.toml"), study).unwrap();
    let run = root.join("run");
    std::fs::create_dir_all(&run).unwrap();
    let before = snapshot(root);
    let out = audit_profile_only(&run, &sub.join("up.toml"), None);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out));
    let after = snapshot(root);
    for (path, bytes) in &before {
        assert_eq!(after.get(path), Some(bytes), "{} changed", path.display());
    }
    let new = added(&before, &after);
    assert!(new.iter().all(|p| inside(p, "run/out/up")), "{new:?}");
    assert!(run.join("out/up/results.json").is_file());
}

/// An error that quotes its cause is printed once, not followed by the same
/// cause again ("Is a directory (os error 21): Is a directory (os error 21)").
#[test]
fn error_messages_do_not_repeat_their_cause() {
    let tmp = tempfile::tempdir().unwrap();
    let study = line_study(tmp.path(), "line");
    let text_of_study = std::fs::read_to_string(&study)
        .unwrap()
        .replace("file = \"line.csv\"", "file = \".\"");
    std::fs::write(&study, text_of_study).unwrap();
    let out = fitaudit().arg("check").arg(&study).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("data.file"), "{err}");
    // A folder is refused before it is read (issue 21), once.
    assert_eq!(
        err.matches("it is a folder, not a regular file").count(),
        1,
        "{err}"
    );
}

/// A data cell of a million digits is an error naming line and column; the
/// message must quote the cell shortened, not print a megabyte.
#[test]
fn a_huge_cell_is_not_echoed_in_full() {
    let tmp = tempfile::tempdir().unwrap();
    let study = line_study(tmp.path(), "line");
    let csv_path = tmp.path().join("line.csv");
    let mut lines: Vec<String> = std::fs::read_to_string(&csv_path)
        .unwrap()
        .lines()
        .map(str::to_string)
        .collect();
    lines[2] = format!("1,{},0.1", "9".repeat(1_000_000));
    std::fs::write(&csv_path, lines.join("\n") + "\n").unwrap();
    let out = fitaudit().arg("check").arg(&study).output().unwrap();
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("line 3"), "{}", &err[..err.len().min(300)]);
    assert!(err.len() < 2000, "the message is {} bytes long", err.len());
}
