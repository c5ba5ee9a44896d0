//! Checks of the fit engine against closed forms and identities.
#![allow(clippy::needless_range_loop)]

use fitaudit::data::Dataset;
use fitaudit::fit::{
    analyse, fit, CovarianceScaling, DataView, FitError, FitOptions, Method, ParamSpec, Problem, Refitter,
    StopReason,
};
use fitaudit::model::NativeModel;

type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

fn line_model() -> NativeModel<PointFn> {
    fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        g[0] = 1.0;
        g[1] = x[0];
        p[0] + p[1] * x[0]
    }
    NativeModel::new(2, line as PointFn)
}

/// Points for the straight-line checks. The closed forms below hold for any
/// data (they are identities of weighted least squares), so these numbers
/// are only inputs, not reference results.
fn line_data() -> Dataset {
    let x = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
    let y = vec![2.9, 5.2, 7.1, 8.8, 11.3, 12.9, 15.2, 16.8];
    let s = vec![0.1, 0.2, 0.1, 0.3, 0.2, 0.1, 0.4, 0.2];
    Dataset::single("x", x, "y", y, Some(s))
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1e-300)
}

#[test]
fn straight_line_matches_weighted_least_squares_closed_form() {
    let data = line_data();
    let model = line_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    // Bevington & Robinson, "Data Reduction and Error Analysis for the
    // Physical Sciences", 3rd ed., ch. 6 (eqs. 6.12 and 6.21-6.22):
    // with w = 1/sigma^2, D = S Sxx - Sx^2, a = (Sxx Sy - Sx Sxy)/D,
    // b = (S Sxy - Sx Sy)/D, var a = Sxx/D, var b = S/D.
    let s = data.sigma.as_ref().unwrap();
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (s[i] * s[i]);
        let (x, y) = (data.x[0][i], data.y[i]);
        sw += w;
        sx += w * x;
        sy += w * y;
        sxx += w * x * x;
        sxy += w * x * y;
    }
    let d = sw * sxx - sx * sx;
    let a = (sxx * sy - sx * sxy) / d;
    let b = (sw * sxy - sx * sy) / d;
    assert!(r.converged, "{:?}", r.stop_reason);
    assert!(rel(r.parameters[0].value, a) < 1e-12);
    assert!(rel(r.parameters[1].value, b) < 1e-12);
    // sigma given: absolute covariance.
    assert!(!r.covariance_scaled);
    assert!(rel(r.parameters[0].std_error.unwrap(), (sxx / d).sqrt()) < 1e-10);
    assert!(rel(r.parameters[1].std_error.unwrap(), (sw / d).sqrt()) < 1e-10);
    // Covariance of a and b: -Sx/D (same source).
    assert!(rel(r.covariance[0][1], -sx / d) < 1e-10);
    assert_eq!(r.dof, 6);
    assert_eq!(r.rank, 2);
    // Leverages of a full-rank model sum to the number of parameters
    // (trace of the hat matrix, an identity).
    let tr: f64 = r.leverage.iter().sum();
    assert!((tr - 2.0).abs() < 1e-12);

    // Scaled on request: multiplied by chi2/dof.
    let scaled = Problem {
        model: &model,
        params: problem.params.clone(),
        options: FitOptions {
            covariance: CovarianceScaling::Scaled,
            ..FitOptions::default()
        },
    };
    let rs = fit(&scaled, &data).unwrap();
    assert!(rs.covariance_scaled);
    let f = (r.chi2 / 6.0).sqrt();
    assert!(rel(rs.parameters[1].std_error.unwrap(), f * (sw / d).sqrt()) < 1e-10);

    // The steepest-descent method reaches the same line.
    let sd = Problem {
        model: &model,
        params: problem.params.clone(),
        options: FitOptions {
            method: Method::Steepest,
            max_iterations: 200_000,
            ftol: 1e-15,
            gtol: 1e-10,
            ..FitOptions::default()
        },
    };
    let rsd = fit(&sd, &data).unwrap();
    assert!(rsd.converged, "{:?}", rsd.stop_reason);
    assert!(rel(rsd.chi2, r.chi2) < 1e-8);
    assert!(rsd.iterations > r.iterations);
}

#[test]
fn json_field_names_are_the_contract() {
    let data = line_data();
    let model = line_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    let v = serde_json::to_value(&r).unwrap();
    for key in [
        "converged",
        "stop_reason",
        "iterations",
        "chi2",
        "dof",
        "reduced_chi2",
        "p_value",
        "parameters",
        "covariance",
        "correlation",
    ] {
        assert!(v.get(key).is_some(), "{key}");
    }
    let p0 = &v["parameters"][0];
    for key in ["name", "value", "std_error", "at_bound"] {
        assert!(p0.get(key).is_some(), "{key}");
    }
    let back: fitaudit::fit::FitResult = serde_json::from_value(v).unwrap();
    assert_eq!(back, r);
}

#[test]
fn lower_bound_is_reached_and_excluded_from_covariance() {
    // Falling data with the slope bounded below by 0: the solution is b = 0
    // on its bound and a the weighted mean of y, whose variance is 1/sum(w)
    // (identities of weighted least squares).
    let x = vec![0.0, 1.0, 2.0, 3.0, 4.0];
    let y = vec![5.0, 4.6, 4.1, 3.9, 3.2];
    let s = vec![0.2, 0.1, 0.2, 0.1, 0.2];
    let data = Dataset::single("x", x, "y", y.clone(), Some(s.clone()));
    let model = line_model();
    let mut b = ParamSpec::free("b", 1.0);
    b.min = 0.0;
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 1.0), b],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    let sw: f64 = s.iter().map(|v| 1.0 / (v * v)).sum();
    let mean: f64 = y.iter().zip(s.iter()).map(|(y, v)| y / (v * v)).sum::<f64>() / sw;
    assert!(r.converged, "{:?}", r.stop_reason);
    assert_eq!(r.parameters[1].value, 0.0);
    assert!(r.parameters[1].at_bound);
    assert_eq!(r.parameters[1].std_error, None);
    assert!(rel(r.parameters[0].value, mean) < 1e-12);
    assert!(rel(r.parameters[0].std_error.unwrap(), (1.0 / sw).sqrt()) < 1e-10);
    assert_eq!(r.covariance[1][1], 0.0);
    assert_eq!(r.correlation[1][1], 0.0);
    assert_eq!(r.correlation[0][0], 1.0);
}

#[test]
fn fixed_parameter_is_held() {
    // b fixed at 2: a is the weighted mean of y - 2x, variance 1/sum(w)
    // (identity).
    let data = line_data();
    let model = line_model();
    let mut b = ParamSpec::free("b", 2.0);
    b.fixed = true;
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), b],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    let s = data.sigma.as_ref().unwrap();
    let (mut sw, mut swr) = (0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (s[i] * s[i]);
        sw += w;
        swr += w * (data.y[i] - 2.0 * data.x[0][i]);
    }
    assert_eq!(r.parameters[1].value, 2.0);
    assert!(r.parameters[1].fixed);
    assert_eq!(r.parameters[1].std_error, None);
    assert!(rel(r.parameters[0].value, swr / sw) < 1e-12);
    assert!(rel(r.parameters[0].std_error.unwrap(), (1.0 / sw).sqrt()) < 1e-10);
    assert_eq!(r.dof, data.len() - 1);
}

#[test]
fn rank_deficient_product_is_diagnosed_without_nan() {
    // f = a*b*x: only the product is determined. The product must equal the
    // weighted slope through the origin sum(w x y)/sum(w x^2) (identity).
    let data = line_data();
    let model = NativeModel::new(2, |p: &[f64], x: &[f64], g: &mut [f64]| {
        g[0] = p[1] * x[0];
        g[1] = p[0] * x[0];
        p[0] * p[1] * x[0]
    });
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 1.0), ParamSpec::free("b", 1.5)],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    let s = data.sigma.as_ref().unwrap();
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (s[i] * s[i]);
        sxy += w * data.x[0][i] * data.y[i];
        sxx += w * data.x[0][i] * data.x[0][i];
    }
    let prod = r.parameters[0].value * r.parameters[1].value;
    assert!(rel(prod, sxy / sxx) < 1e-10);
    assert_eq!(r.rank, 1);
    assert_eq!(r.undetermined.len(), 1);
    let names: Vec<&str> = r.undetermined[0].iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, vec!["a", "b"]);
    assert!(r.parameters.iter().all(|p| p.std_error.is_none()));
    for row in r.covariance.iter().chain(r.correlation.iter()) {
        assert!(row.iter().all(|v| v.is_finite()));
    }
    assert!(r.condition_number > 1e10);
}

#[test]
fn converges_from_a_start_next_to_a_non_finite_region() {
    // f = b*sqrt(a - x) is not finite for a < max x. The data are the model
    // itself at a = 10, b = 2, so the generating values are the exact
    // solution (identity). Start with a just above max x = 9.
    let x: Vec<f64> = (0..10).map(|i| i as f64).collect();
    let y: Vec<f64> = x.iter().map(|x| 2.0 * (10.0 - x).sqrt()).collect();
    let data = Dataset::single("x", x, "y", y, None);
    let model = NativeModel::new(2, |p: &[f64], x: &[f64], g: &mut [f64]| {
        let r = (p[0] - x[0]).sqrt();
        g[0] = p[1] * 0.5 / r;
        g[1] = r;
        p[1] * r
    });
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 9.0001), ParamSpec::free("b", 0.5)],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    assert!(r.converged, "{:?}", r.stop_reason);
    assert!(rel(r.parameters[0].value, 10.0) < 1e-9);
    assert!(rel(r.parameters[1].value, 2.0) < 1e-9);

    // A start inside the non-finite region is an error naming the point.
    let bad = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 8.5), ParamSpec::free("b", 0.5)],
        options: FitOptions::default(),
    };
    match fit(&bad, &data) {
        Err(FitError::NotFiniteAtStart { point }) => assert_eq!(point, 9),
        other => panic!("{other:?}"),
    }
}

#[test]
fn p_value_matches_chi_squared_table() {
    // NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4,
    // upper-tail critical values of chi-squared (from memory):
    // nu = 10: 18.307 at 0.05 and 23.209 at 0.01.
    let model = NativeModel::new(1, |p: &[f64], _x: &[f64], g: &mut [f64]| {
        g[0] = 1.0;
        p[0]
    });
    for (target, p_expected) in [(18.307, 0.05), (23.209, 0.01)] {
        // 11 points with zero mean and sum of squares `target`: fitting a
        // constant gives chi2 = target with 10 degrees of freedom.
        let z: Vec<f64> = (-5..=5).map(|i| i as f64).collect();
        let c = (target / 110.0f64).sqrt();
        let y: Vec<f64> = z.iter().map(|v| c * v).collect();
        let data = Dataset::single("x", z.clone(), "y", y, Some(vec![1.0; 11]));
        let problem = Problem {
            model: &model,
            params: vec![ParamSpec::free("a", 1.0)],
            options: FitOptions::default(),
        };
        let r = fit(&problem, &data).unwrap();
        assert_eq!(r.dof, 10);
        assert!((r.chi2 - target).abs() < 1e-10);
        let p = r.p_value.expect("sigma given: a p-value");
        assert!((p - p_expected).abs() < 1e-4, "{p}");
    }
}

#[test]
fn refitter_warm_start_and_held_parameters() {
    let data = line_data();
    let model = line_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    let full = fit(&problem, &data).unwrap();
    let sigma = data.sigma_or_ones();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
        sigma_x: &[],
    };
    let mut rf = Refitter::new(&problem, data.len());
    let best: Vec<f64> = full.parameters.iter().map(|p| p.value).collect();
    // From the solution itself: converges at once (linear model).
    let r = rf.refit(&problem, &view, &best, &[true, true]);
    assert!(r.converged);
    assert!(r.iterations <= 2, "{}", r.iterations);
    assert!(rel(r.chi2, full.chi2) < 1e-12);
    // Holding b by the free mask: b stays at its start.
    let r = rf.refit(&problem, &view, &[0.0, 1.5], &[true, false]);
    assert!(r.converged);
    assert_eq!(rf.params()[1], 1.5);
    // analyse at the refit's solution agrees with the refit's chi2.
    let a = analyse(&problem, &data, rf.params(), &r).unwrap();
    assert!(rel(a.chi2, r.chi2) < 1e-12);
    assert_eq!(a.stop_reason, r.stop);
    // Mismatched lengths are reported, not a panic.
    let bad = rf.refit(&problem, &view, &[0.0], &[true]);
    assert!(!bad.converged);
    assert_eq!(bad.stop, StopReason::NonFinite);
}

#[test]
fn bad_input_is_an_error() {
    let model = line_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions::default(),
    };
    let one = Dataset::single("x", vec![1.0], "y", vec![2.0], None);
    assert!(matches!(
        fit(&problem, &one),
        Err(FitError::TooFewPoints { points: 1, free: 2 })
    ));
    let neg = Dataset::single("x", vec![1.0, 2.0], "y", vec![2.0, 3.0], Some(vec![1.0, -1.0]));
    assert!(matches!(
        fit(&problem, &neg),
        Err(FitError::InvalidSigma { point: 1, .. })
    ));
}

#[test]
fn iteration_cap_is_reported_as_not_converged() {
    // Exponential decay y = 5 exp(-0.3 x) sampled exactly; one iteration
    // from far away cannot reach it.
    let x: Vec<f64> = (0..12).map(|i| i as f64).collect();
    let y: Vec<f64> = x.iter().map(|x| 5.0 * (-0.3 * x).exp()).collect();
    let data = Dataset::single("x", x, "y", y, None);
    let model = NativeModel::new(2, |p: &[f64], x: &[f64], g: &mut [f64]| {
        let e = (-p[1] * x[0]).exp();
        g[0] = e;
        g[1] = -p[0] * x[0] * e;
        p[0] * e
    });
    let capped = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 1.0), ParamSpec::free("k", 1.0)],
        options: FitOptions {
            max_iterations: 1,
            ..FitOptions::default()
        },
    };
    let r = fit(&capped, &data).unwrap();
    assert!(!r.converged);
    assert_eq!(r.stop_reason, StopReason::IterationLimit);
    // With the default cap it converges onto the generating values
    // (identity for exact data).
    let free = Problem {
        model: &model,
        params: capped.params.clone(),
        options: FitOptions::default(),
    };
    let r = fit(&free, &data).unwrap();
    assert!(r.converged);
    assert!(rel(r.parameters[0].value, 5.0) < 1e-10);
    assert!(rel(r.parameters[1].value, 0.3) < 1e-10);
    // Zero residuals with no sigma: scaled covariance is zero, never NaN.
    assert!(r.covariance_scaled);
    assert!(r
        .parameters
        .iter()
        .all(|p| p.std_error.map(|s| s.is_finite()).unwrap_or(false)));
    assert!(r.correlation.iter().flatten().all(|v| v.is_finite()));
}

#[test]
fn a_model_finite_only_at_the_start_stops_as_non_finite() {
    // Not finite for any a other than 1: no step can avoid it.
    let data = line_data();
    let model = NativeModel::new(1, |p: &[f64], x: &[f64], g: &mut [f64]| {
        g[0] = x[0];
        if p[0] == 1.0 {
            x[0]
        } else {
            f64::NAN
        }
    });
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 1.0)],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    assert!(!r.converged);
    assert_eq!(r.stop_reason, StopReason::NonFinite);
    assert_eq!(r.parameters[0].value, 1.0);
}

#[test]
fn geodesic_acceleration_reaches_the_same_line() {
    let data = line_data();
    let model = line_model();
    let mk = |geodesic| Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), ParamSpec::free("b", 1.0)],
        options: FitOptions {
            geodesic,
            ..FitOptions::default()
        },
    };
    let plain = fit(&mk(false), &data).unwrap();
    let geo = fit(&mk(true), &data).unwrap();
    assert!(geo.converged);
    for (a, b) in plain.parameters.iter().zip(geo.parameters.iter()) {
        assert!(rel(a.value, b.value) < 1e-12);
    }
}

#[test]
fn refitter_is_send() {
    fn assert_send<T: Send + Sync>() {}
    assert_send::<Refitter>();
    assert_send::<fitaudit::fit::FitResult>();
}

#[test]
fn partial_rank_deficiency_keeps_the_determined_parameter() {
    // f = a*b*x + c: a and b only determined through a*b, while c is the
    // intercept of the weighted straight line, with variance Sxx/D
    // (Bevington & Robinson ch. 6, as above); the variance of an estimable
    // parameter does not depend on the other parameters' parametrisation.
    let data = line_data();
    let model = NativeModel::new(3, |p: &[f64], x: &[f64], g: &mut [f64]| {
        g[0] = p[1] * x[0];
        g[1] = p[0] * x[0];
        g[2] = 1.0;
        p[0] * p[1] * x[0] + p[2]
    });
    let problem = Problem {
        model: &model,
        params: vec![
            ParamSpec::free("a", 1.0),
            ParamSpec::free("b", 1.0),
            ParamSpec::free("c", 0.0),
        ],
        options: FitOptions::default(),
    };
    let r = fit(&problem, &data).unwrap();
    let s = data.sigma.as_ref().unwrap();
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (s[i] * s[i]);
        let (x, y) = (data.x[0][i], data.y[i]);
        sw += w;
        sx += w * x;
        sy += w * y;
        sxx += w * x * x;
        sxy += w * x * y;
    }
    let d = sw * sxx - sx * sx;
    assert_eq!(r.rank, 2);
    assert_eq!(r.undetermined.len(), 1);
    let names: Vec<&str> = r.undetermined[0].iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, vec!["a", "b"]);
    assert_eq!(r.parameters[0].std_error, None);
    assert_eq!(r.parameters[1].std_error, None);
    assert!(rel(r.parameters[2].value, (sxx * sy - sx * sxy) / d) < 1e-10);
    assert!(rel(r.parameters[2].std_error.unwrap(), (sxx / d).sqrt()) < 1e-8);
    assert!(
        rel(
            r.parameters[0].value * r.parameters[1].value,
            (sw * sxy - sx * sy) / d
        ) < 1e-10
    );
    assert_eq!(r.correlation[2][2], 1.0);
    assert_eq!(r.correlation[0][0], 0.0);
}

#[test]
fn refitter_handles_a_different_number_of_points_and_clamps_starts() {
    let data = line_data();
    let model = line_model();
    let mut b = ParamSpec::free("b", 1.0);
    b.max = 1.5;
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 0.0), b],
        options: FitOptions::default(),
    };
    let mut rf = Refitter::new(&problem, 3);
    let sigma = data.sigma_or_ones();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
        sigma_x: &[],
    };
    // The data rise with slope about 2, so b ends on its upper bound; a start
    // above the bound is moved onto it.
    let r = rf.refit(&problem, &view, &[0.0, 3.0], &[true, true]);
    assert!(r.converged);
    assert_eq!(rf.params()[1], 1.5);
    // a is then the weighted mean of y - 1.5 x (identity).
    let (mut sw, mut swr) = (0.0, 0.0);
    for i in 0..data.len() {
        let w = 1.0 / (sigma[i] * sigma[i]);
        sw += w;
        swr += w * (data.y[i] - 1.5 * data.x[0][i]);
    }
    assert!(rel(rf.params()[0], swr / sw) < 1e-12);
    // fit() refuses a start outside the bounds, naming the parameter.
    let outside = Problem {
        model: &model,
        params: vec![
            ParamSpec::free("a", 0.0),
            ParamSpec {
                start: 3.0,
                ..problem.params[1].clone()
            },
        ],
        options: FitOptions::default(),
    };
    match fit(&outside, &data) {
        Err(FitError::InvalidStart { name, .. }) => assert_eq!(name, "b"),
        other => panic!("{other:?}"),
    }
}

#[test]
fn nonlinear_parameter_converges_onto_its_bound() {
    // y = 5 exp(-0.3 x) exactly, fitted with k >= 0.4: the constrained
    // minimum has k = 0.4 on the bound and the linear a = sum(y e)/sum(e^2)
    // with e = exp(-0.4 x) (least-squares identity for a linear parameter).
    let x: Vec<f64> = (0..15).map(|i| i as f64 * 0.5).collect();
    let y: Vec<f64> = x.iter().map(|x| 5.0 * (-0.3 * x).exp()).collect();
    let data = Dataset::single("x", x.clone(), "y", y.clone(), None);
    let model = NativeModel::new(2, |p: &[f64], x: &[f64], g: &mut [f64]| {
        let e = (-p[1] * x[0]).exp();
        g[0] = e;
        g[1] = -p[0] * x[0] * e;
        p[0] * e
    });
    let mut k = ParamSpec::free("k", 1.0);
    k.min = 0.4;
    for method in [Method::Lm, Method::Steepest] {
        let problem = Problem {
            model: &model,
            params: vec![ParamSpec::free("a", 1.0), k.clone()],
            options: FitOptions {
                method,
                max_iterations: 100_000,
                ..FitOptions::default()
            },
        };
        let r = fit(&problem, &data).unwrap();
        let (mut sye, mut see) = (0.0, 0.0);
        for (xi, yi) in x.iter().zip(y.iter()) {
            let e = (-0.4 * xi).exp();
            sye += yi * e;
            see += e * e;
        }
        assert!(r.converged, "{method:?} {:?}", r.stop_reason);
        assert_eq!(r.parameters[1].value, 0.4, "{method:?}");
        assert!(r.parameters[1].at_bound);
        assert!(rel(r.parameters[0].value, sye / see) < 1e-8, "{method:?}");
        assert!(r.parameters[0].std_error.is_some());
        assert_eq!(r.parameters[1].std_error, None);
    }
}
