//! Checks of the chi-squared profiles: quantiles against a published table,
//! the linear-model identity (profile interval = estimate +- sigma sqrt(q)),
//! a non-identifiable model, and strongly nonlinear small-n problems against
//! a brute-force scan of the same profile.
#![allow(clippy::needless_range_loop)]

#[path = "common/nist.rs"]
mod nist;

use fitaudit::data::Dataset;
use fitaudit::diagnostics::profile::{self, threshold_1dof, EndStatus, ProfileResult};
use fitaudit::diagnostics::{Fitted, NoProgress};
use fitaudit::fit::{analyse, fit, DataView, FitOptions, FitResult, ParamSpec, Problem, Refitter};
use fitaudit::model::{ModelFn, NativeModel};
use fitaudit::settings::AuditSettings;

type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    g[0] = 1.0;
    g[1] = x[0];
    p[0] + p[1] * x[0]
}

/// Straight-line points with known sigma. The identities checked below
/// hold for any data; these numbers are only inputs, not reference results.
fn line_data(with_sigma: bool) -> Dataset {
    let x = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
    let y = vec![2.9, 5.2, 7.1, 8.8, 11.3, 12.9, 15.2, 16.8];
    let s = vec![0.1, 0.2, 0.1, 0.3, 0.2, 0.1, 0.4, 0.2];
    Dataset::single("x", x, "y", y, with_sigma.then_some(s))
}

fn settings(level: f64, points: usize) -> AuditSettings {
    let mut s = AuditSettings {
        level,
        ..AuditSettings::default()
    };
    s.profile.points = points;
    s
}

fn run_profile(
    model: &dyn ModelFn,
    params: Vec<ParamSpec>,
    data: &Dataset,
    st: &AuditSettings,
) -> (FitResult, ProfileResult) {
    let problem = Problem {
        model,
        params,
        options: FitOptions {
            level: st.level,
            ..FitOptions::default()
        },
    };
    let base = fit(&problem, data).expect("base fit");
    assert!(base.converged);
    let ctx = Fitted {
        problem,
        data,
        fit: &base,
        settings: st,
    };
    let result = profile::run(&ctx, &NoProgress);
    (base.clone(), result)
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

#[test]
fn quantiles_match_the_published_table() {
    // NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4,
    // "Critical Values of the Chi-Square Distribution", 1 degree of
    // freedom, upper-tail probabilities 0.10, 0.05, 0.01 (from memory).
    for (upper_tail, table) in [(0.10, 2.706), (0.05, 3.841), (0.01, 6.635)] {
        let q = threshold_1dof(1.0 - upper_tail);
        assert!((q - table).abs() < 5e-4, "{upper_tail}: {q} vs {table}");
    }
    // One standard deviation of a normal: P(|z| < 1) = 0.6827 gives the
    // threshold 1.000 (identity: chi2(1) is z^2).
    assert!((threshold_1dof(0.682_689_492_137_085_9) - 1.0).abs() < 1e-9);
    assert!((threshold_1dof(0.6827) - 1.000).abs() < 5e-4);
    assert!(threshold_1dof(1.0).is_nan() && threshold_1dof(0.0).is_nan());
}

#[test]
fn linear_model_interval_is_estimate_plus_minus_sigma_sqrt_q() {
    let model = NativeModel::new(2, line as PointFn);
    let params = vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)];
    let data = line_data(true);
    // Bevington & Robinson, "Data Reduction and Error Analysis for the
    // Physical Sciences", 3rd ed., ch. 6: with w = 1/sigma^2,
    // D = S Sxx - Sx^2, var a = Sxx/D, var b = S/D.
    let s = data.sigma.as_ref().unwrap();
    let (mut sw, mut sx, mut sxx) = (0.0, 0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (s[i] * s[i]);
        sw += w;
        sx += w * data.x[0][i];
        sxx += w * data.x[0][i] * data.x[0][i];
    }
    let d = sw * sxx - sx * sx;
    let sigmas = [(sxx / d).sqrt(), (sw / d).sqrt()];
    let mut worst: f64 = 0.0;
    for level in [0.6827, 0.95] {
        let st = settings(level, 21);
        let (base, r) = run_profile(&model, params.clone(), &data, &st);
        let q = r.threshold;
        assert_eq!(r.chi2_scale, 1.0);
        assert!(!r.base_not_minimum);
        assert_eq!(r.parameters.len(), 2);
        for (j, p) in r.parameters.iter().enumerate() {
            assert!(p.lower_found && p.upper_found, "{}", p.name);
            assert_eq!(
                (p.lower_status, p.upper_status),
                (EndStatus::Found, EndStatus::Found)
            );
            assert!(!p.non_identifiable);
            let est = base.parameters[j].value;
            let half = sigmas[j] * q.sqrt();
            // Relative error of each end's distance from the estimate.
            let e_lo = rel(est - p.lower, half);
            let e_hi = rel(p.upper - est, half);
            worst = worst.max(e_lo).max(e_hi);
            assert!(
                e_lo < 1e-6 && e_hi < 1e-6,
                "{} at {level}: {e_lo:e} {e_hi:e}",
                p.name
            );
            // Symmetric: asymmetry 1.
            assert!((p.asymmetry.unwrap() - 1.0).abs() < 2e-6);
            // A linear model's profile is its covariance parabola (identity).
            assert_eq!(p.parabola.len(), p.points.len());
            for (pt, pb) in p.points.iter().zip(&p.parabola) {
                assert_eq!(pt[0], pb[0]);
                assert!((pt[1] - pb[1]).abs() < 1e-7 * (1.0 + pb[1]), "{pt:?} {pb:?}");
            }
            // Grid of `points` plus the estimate's neighbours' crossings,
            // sorted, all re-optimised vectors holding a_j.
            assert_eq!(p.points.len(), 21 + 2);
            assert!(p.points.windows(2).all(|w| w[0][0] < w[1][0]));
            for (pt, other) in p.points.iter().zip(&p.others) {
                assert_eq!(other[j], pt[0]);
            }
            // The scan extends beyond the crossings so the plot shows them.
            assert!(p.points[0][0] < p.lower && p.points.last().unwrap()[0] > p.upper);
            assert_eq!(p.failed, 0);
        }
    }
    eprintln!("linear model: worst relative error of the interval half-widths {worst:.2e}");
}

#[test]
fn linear_model_without_sigma_uses_the_scaled_threshold() {
    // With no sigma the covariance is scaled by chi2/dof; the profile
    // threshold is scaled alike, so the identity still holds with the
    // scaled standard error.
    let model = NativeModel::new(2, line as PointFn);
    let params = vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)];
    let data = line_data(false);
    let (base, r) = run_profile(&model, params, &data, &settings(0.95, 11));
    assert!(base.covariance_scaled);
    assert!(rel(r.chi2_scale, base.chi2 / base.dof as f64) < 1e-12);
    // 8 points, 2 parameters: Student's t with 6 dof at 95 %, 2.447
    // (NIST/SEMATECH e-Handbook 1.3.6.7.2), squared, is the threshold, so
    // the profile interval is exactly value +- k u with the fit's k.
    assert!((r.threshold.sqrt() - 2.447).abs() < 5e-4, "{}", r.threshold);
    assert!((base.coverage_factor - 2.447).abs() < 5e-4);
    for (j, p) in r.parameters.iter().enumerate() {
        let half = base.parameters[j].expanded_uncertainty.unwrap();
        assert!(rel(half, base.parameters[j].std_error.unwrap() * r.threshold.sqrt()) < 1e-12);
        let est = base.parameters[j].value;
        assert!(
            rel(est - p.lower, half) < 1e-6 && rel(p.upper - est, half) < 1e-6,
            "{}",
            p.name
        );
    }
}

#[test]
fn bound_inside_the_interval_ends_the_scan_there() {
    // Upper bound on a at estimate + sigma_a / 2, inside the 68 % interval
    // (a linear profile rises only 0.25 there): the upper end is the bound,
    // not found; the lower end is the linear identity.
    let model = NativeModel::new(2, line as PointFn);
    let data = line_data(true);
    let free = vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)];
    let (base, _) = run_profile(&model, free.clone(), &data, &settings(0.6827, 11));
    let (a, se) = (base.parameters[0].value, base.parameters[0].std_error.unwrap());
    let mut bounded = free;
    bounded[0].max = a + 0.5 * se;
    let (_, r) = run_profile(&model, bounded, &data, &settings(0.6827, 11));
    let p = &r.parameters[0];
    assert_eq!(p.upper_status, EndStatus::Bound);
    assert!(!p.upper_found && !p.non_identifiable);
    assert_eq!(p.upper, a + 0.5 * se);
    assert!(p.points.iter().all(|pt| pt[0] <= a + 0.5 * se));
    assert!(p.lower_found && rel(a - p.lower, se * r.threshold.sqrt()) < 1e-6);
    assert!(p.asymmetry.is_none());
}

#[test]
fn profile_below_the_base_fit_is_noted() {
    // A "base fit" moved off the optimum along d = C e_b / sigma_b (one
    // standard error in b, a following its regression on b): chi2 is then
    // the minimum + d^T C^-1 d = + 1 (linear identity), and the profile of
    // a finds points up to 1 lower.
    let model = NativeModel::new(2, line as PointFn);
    let data = line_data(true);
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    let best = fit(&problem, &data).unwrap();
    let mut off: Vec<f64> = best.parameters.iter().map(|p| p.value).collect();
    let se_b = best.parameters[1].std_error.unwrap();
    off[0] += best.covariance[0][1] / se_b;
    off[1] += se_b;
    let refit = fitaudit::fit::Refit {
        chi2: f64::NAN,
        converged: true,
        stop: fitaudit::fit::StopReason::Gradient,
        iterations: 0,
        evaluations: 0,
        end: Default::default(),
    };
    let moved = analyse(&problem, &data, &off, &refit).unwrap();
    assert!((moved.chi2 - best.chi2 - 1.0).abs() < 1e-9);
    let st = settings(0.6827, 11);
    let ctx = Fitted {
        problem,
        data: &data,
        fit: &moved,
        settings: &st,
    };
    let r = profile::run(&ctx, &NoProgress);
    assert!(r.base_not_minimum);
    let low = r.parameters[0].below_minimum.as_ref().expect("noted");
    assert!(
        low.below_by > 0.5 && low.below_by <= 1.0 + 1e-9,
        "{}",
        low.below_by
    );
    assert!(low.chi2 >= best.chi2 - 1e-9);
}

fn product(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    g[0] = p[1] * x[0];
    g[1] = p[0] * x[0];
    p[0] * p[1] * x[0]
}

#[test]
fn product_of_parameters_is_flagged_non_identifiable() {
    // y = a b x determines only a b: the profile of either parameter is
    // flat (identity), so no end is found within the scan limit.
    let model = NativeModel::new(2, product as PointFn);
    let params = vec![ParamSpec::free("a", 1.5), ParamSpec::free("b", 1.0)];
    let data = line_data(true);
    let (_, r) = run_profile(&model, params, &data, &settings(0.95, 15));
    for p in &r.parameters {
        eprintln!(
            "{}: se {:?}, [{}, {}] {:?} {:?}, {} refits, {} failed",
            p.name, p.std_error, p.lower, p.upper, p.lower_status, p.upper_status, p.refits, p.failed
        );
        assert!(
            p.non_identifiable,
            "{}: {:?} {:?}",
            p.name, p.lower_status, p.upper_status
        );
        assert!(!(p.lower_found && p.upper_found), "{}", p.name);
        assert!(p.upper_status == EndStatus::ScanLimit || p.lower_status == EndStatus::ScanLimit);
        assert!(p.asymmetry.is_none());
        assert!(p.lower.is_finite() && p.upper.is_finite());
        for pt in &p.points {
            assert!(pt[0].is_finite() && pt[1].is_finite(), "{pt:?}");
        }
        for o in &p.others {
            assert!(o.iter().all(|v| v.is_finite()));
        }
    }
    // JSON shape of the issue.
    let v = serde_json::to_value(&r).unwrap();
    for key in ["level", "threshold", "chi2_min", "parameters"] {
        assert!(v.get(key).is_some(), "{key}");
    }
    for key in ["name", "lower", "upper", "lower_found", "upper_found", "points"] {
        assert!(v["parameters"][0].get(key).is_some(), "{key}");
    }
}

/// Brute-force profile crossing: walk from the estimate in steps of `h`
/// (direction `dir`), refitting every point from the previous one, until the
/// profile passes `chi2_min + threshold`; the crossing by linear
/// interpolation between the last two points. Returns the distance from the
/// estimate.
fn brute_crossing(
    problem: &Problem,
    data: &Dataset,
    base: &FitResult,
    j: usize,
    dir: f64,
    h: f64,
    threshold: f64,
) -> f64 {
    let xs = data.x_slices();
    let sigma = data.sigma_or_ones();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
        sigma_x: &[],
    };
    let mut rf = Refitter::new(problem, data.len());
    let mut start: Vec<f64> = base.parameters.iter().map(|p| p.value).collect();
    let mut free = vec![true; start.len()];
    free[j] = false;
    let est = start[j];
    let target = base.chi2 + threshold;
    let (mut d_prev, mut c_prev) = (0.0, base.chi2);
    for step in 1..200_000 {
        let d = step as f64 * h;
        start[j] = est + dir * d;
        let r = rf.refit(problem, &view, &start, &free);
        assert!(r.converged, "brute force refit failed at {}", start[j]);
        start.copy_from_slice(rf.params());
        if r.chi2 >= target {
            return d_prev + (target - c_prev) / (r.chi2 - c_prev) * (d - d_prev);
        }
        d_prev = d;
        c_prev = r.chi2;
    }
    panic!("brute force never crossed");
}

/// Compares each profile end with the brute-force crossing; returns the
/// worst relative difference of the distances and the asymmetries.
fn compare_with_brute_force(
    model: &dyn ModelFn,
    params: Vec<ParamSpec>,
    data: &Dataset,
    level: f64,
    steps_per_se: f64,
) -> (f64, Vec<f64>) {
    let st = settings(level, 21);
    let (base, r) = run_profile(model, params.clone(), data, &st);
    let problem = Problem {
        model,
        params,
        options: FitOptions::default(),
    };
    let threshold = r.threshold * r.chi2_scale;
    let mut worst: f64 = 0.0;
    let mut asym = Vec::new();
    for (j, p) in r.parameters.iter().enumerate() {
        assert!(
            p.lower_found && p.upper_found,
            "{}: {:?} {:?}",
            p.name,
            p.lower_status,
            p.upper_status
        );
        let h = base.parameters[j].std_error.unwrap() / steps_per_se;
        let lo = brute_crossing(&problem, data, &base, j, -1.0, h, threshold);
        let hi = brute_crossing(&problem, data, &base, j, 1.0, h, threshold);
        let est = p.estimate;
        let e_lo = rel(est - p.lower, lo);
        let e_hi = rel(p.upper - est, hi);
        eprintln!(
            "{}: profile [{:.8}, {:.8}], brute force [{:.8}, {:.8}], rel. diff {e_lo:.1e} {e_hi:.1e}, asymmetry {:.4}",
            p.name,
            p.lower,
            p.upper,
            est - lo,
            est + hi,
            p.asymmetry.unwrap()
        );
        worst = worst.max(e_lo).max(e_hi);
        asym.push(p.asymmetry.unwrap());
    }
    (worst, asym)
}

#[test]
fn boxbod_profile_matches_brute_force_scan() {
    // NIST StRD BoxBOD (Box, Hunter & Hunter 1978): y = b1 (1 - exp(-b2 x)),
    // 6 observations, "higher level of difficulty"; strongly nonlinear.
    let dir = nist::data_dir();
    let path = dir.join("BoxBOD.dat");
    if !path.exists() {
        if std::env::var("CI").map(|v| v == "true").unwrap_or(false) {
            panic!(
                "NIST StRD data missing at {} (set FITAUDIT_NIST_DIR)",
                dir.display()
            );
        }
        eprintln!(
            "skipped: NIST StRD data not found at {} (set FITAUDIT_NIST_DIR)",
            dir.display()
        );
        return;
    }
    let p = nist::read(&path).expect("BoxBOD.dat");
    let m = nist::models().into_iter().find(|m| m.name == "BoxBOD").unwrap();
    let model = NativeModel::new(2, m.f);
    let data = Dataset::single("x", p.x[0].clone(), "y", p.y.clone(), None);
    // Start from the certified values (the base fit reproduces them; the
    // fit engine's own tests check that).
    let params = vec![
        ParamSpec::free("b1", p.certified[0]),
        ParamSpec::free("b2", p.certified[1]),
    ];
    let (worst, asym) = compare_with_brute_force(&model, params, &data, 0.95, 4000.0);
    assert!(worst < 1e-4, "worst relative difference {worst:e}");
    // The interval is clearly asymmetric (the point of profiling).
    assert!(asym.iter().any(|a| (a - 1.0).abs() > 0.2), "{asym:?}");
}

fn michaelis_menten(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let d = p[1] + x[0];
    g[0] = x[0] / d;
    g[1] = -p[0] * x[0] / (d * d);
    p[0] * x[0] / d
}

#[test]
fn michaelis_menten_at_low_substrate_matches_brute_force_scan() {
    // Puromycin, treated cells (Treloar 1974, as tabulated in Bates & Watts,
    // "Nonlinear Regression Analysis and Its Applications", 1988): the six
    // lowest concentrations (ppm) and rates (counts/min^2) (from memory).
    // At low S the maximum rate is poorly determined: strongly asymmetric.
    let s = vec![0.02, 0.02, 0.06, 0.06, 0.11, 0.11];
    let v = vec![76.0, 47.0, 97.0, 107.0, 123.0, 139.0];
    let data = Dataset::single("S", s, "v", v, None);
    let model = NativeModel::new(2, michaelis_menten as PointFn);
    let params = vec![ParamSpec::free("Vmax", 200.0), ParamSpec::free("Km", 0.05)];
    let (worst, asym) = compare_with_brute_force(&model, params, &data, 0.6827, 4000.0);
    assert!(worst < 1e-4, "worst relative difference {worst:e}");
    assert!(asym.iter().all(|a| *a > 1.2), "{asym:?}");
}
