//! The Poisson likelihood (`fit.likelihood = "poisson"`): the fit minimises
//! the deviance of Baker and Cousins (NIM 221, 1984) through the one refit
//! primitive. Checked against closed forms (the constant-rate model, whose
//! maximum-likelihood estimate is the mean count) and an independent
//! maximum-likelihood computation written here (Newton on the
//! log-likelihood of an exponential decay with a hand-coded gradient and
//! Hessian).

use fitaudit::data::Dataset;
use fitaudit::diagnostics::{self, Fitted, NoProgress};
use fitaudit::fit::{self, FitOptions, Likelihood, Method, ParamSpec, Problem};
use fitaudit::model::NativeModel;
use fitaudit::rng::{self, Stream};
use fitaudit::settings::{AuditSettings, BootstrapSettings, MonteCarloSettings};
use rand_distr::{Distribution, Poisson};

type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

fn constant_model() -> NativeModel<PointFn> {
    fn c(p: &[f64], _x: &[f64], g: &mut [f64]) -> f64 {
        g[0] = 1.0;
        p[0]
    }
    NativeModel::new(1, c as PointFn)
}

fn decay_model() -> NativeModel<PointFn> {
    fn d(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        let e = (-p[1] * x[0]).exp();
        g[0] = e;
        g[1] = -p[0] * x[0] * e;
        p[0] * e
    }
    NativeModel::new(2, d as PointFn)
}

fn poisson_options() -> FitOptions {
    FitOptions {
        likelihood: Likelihood::Poisson,
        ..FitOptions::default()
    }
}

/// The deviance `2 sum (mu - n + n ln(n / mu))`, written out (Baker and
/// Cousins 1984).
fn deviance(mu: &[f64], n: &[f64]) -> f64 {
    mu.iter()
        .zip(n)
        .map(|(&m, &k)| 2.0 * (m - k + if k > 0.0 { k * (k / m).ln() } else { 0.0 }))
        .sum()
}

const COUNTS: [f64; 10] = [3.0, 0.0, 2.0, 5.0, 1.0, 0.0, 4.0, 2.0, 1.0, 3.0];

fn constant_data() -> Dataset {
    let x: Vec<f64> = (0..COUNTS.len()).map(|i| i as f64).collect();
    Dataset::single("bin", x, "n", COUNTS.to_vec(), None)
}

#[test]
fn constant_rate_mle_is_the_mean_count_with_se_root_mean_over_n() {
    // Closed form: for n_i ~ Poisson(c), the MLE is the mean count and the
    // Fisher information n / c gives u = sqrt(mean / n).
    let model = constant_model();
    let data = constant_data();
    let mean = COUNTS.iter().sum::<f64>() / COUNTS.len() as f64;
    for method in [Method::Lm, Method::Steepest] {
        let problem = Problem {
            model: &model,
            params: vec![ParamSpec::free("c", 1.0)],
            options: FitOptions {
                method,
                max_iterations: 100_000,
                ..poisson_options()
            },
        };
        let f = fit::fit(&problem, &data).unwrap();
        assert!(f.converged, "{method:?}: {:?}", f.stop_reason);
        let c = f.parameters[0].value;
        assert!((c - mean).abs() < 1e-9 * mean, "{method:?}: {c} vs {mean}");
        let u = f.parameters[0].std_error.unwrap();
        let want = (mean / COUNTS.len() as f64).sqrt();
        assert!((u - want).abs() < 1e-7 * want, "{u} vs {want}");
        // The statistic is the deviance, with its chi-squared p-value and
        // no scaling of the covariance.
        let mu = vec![mean; COUNTS.len()];
        assert!((f.chi2 - deviance(&mu, &COUNTS)).abs() < 1e-10);
        assert_eq!(f.statistic, "deviance");
        assert_eq!(f.likelihood, Likelihood::Poisson);
        assert!(!f.covariance_scaled && f.sigma_given);
        assert_eq!(f.dof, 9);
        let p = f.p_value.unwrap();
        // p = P(chi2_9 > D), by the regularised gamma function of statrs
        // (an independent implementation from the one in the fit).
        use statrs::distribution::{ChiSquared, ContinuousCDF};
        let want_p = ChiSquared::new(9.0).unwrap().sf(f.chi2);
        assert!((p - want_p).abs() < 1e-12);
        // 9 of 10 bins hold fewer than 5 counts: the documented rule warns.
        let sc = f.small_counts.unwrap();
        assert_eq!((sc.below, sc.bins), (9, 10));
        assert!(sc.warning);
        // Residuals are the signed deviance residuals (y - f convention):
        // their squares sum to the deviance, zero counts give -sqrt(2 mu).
        assert!((f.residuals[1] + (2.0 * mean).sqrt()).abs() < 1e-8);
        let sum: f64 = f.residuals.iter().map(|r| r * r).sum();
        assert!((sum - f.chi2).abs() < 1e-10);
    }
}

/// Counts of `b exp(-k t)` drawn with a fixed seed.
fn decay_counts(b: f64, k: f64, bins: usize) -> Dataset {
    let mut r = rng::stream(7, Stream::Other(1801), 0);
    let t: Vec<f64> = (0..bins).map(|i| 0.5 * i as f64).collect();
    let n: Vec<f64> = t
        .iter()
        .map(|&ti| Poisson::new(b * (-k * ti).exp()).unwrap().sample(&mut r))
        .collect();
    Dataset::single("t", t, "n", n, None)
}

/// Maximum likelihood written independently: Newton's method with step
/// halving on `log L = sum n (beta - k t) - exp(beta - k t)` (constants
/// dropped), `beta = ln b`, with the exact gradient and Hessian.
fn newton_mle(t: &[f64], n: &[f64]) -> (f64, f64) {
    let logl = |beta: f64, k: f64| -> f64 {
        t.iter()
            .zip(n)
            .map(|(&ti, &ni)| ni * (beta - k * ti) - (beta - k * ti).exp())
            .sum()
    };
    let (mut beta, mut k) = ((n[0] + 1.0).ln(), 0.0);
    for _ in 0..200 {
        let (mut g1, mut g2, mut h11, mut h12, mut h22) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (&ti, &ni) in t.iter().zip(n) {
            let mu = (beta - k * ti).exp();
            g1 += ni - mu;
            g2 += -ti * (ni - mu);
            h11 -= mu;
            h12 += ti * mu;
            h22 -= ti * ti * mu;
        }
        let det = h11 * h22 - h12 * h12;
        let (d1, d2) = (-(h22 * g1 - h12 * g2) / det, -(-h12 * g1 + h11 * g2) / det);
        let base = logl(beta, k);
        let mut s = 1.0;
        while logl(beta + s * d1, k + s * d2) < base && s > 1e-10 {
            s *= 0.5;
        }
        beta += s * d1;
        k += s * d2;
        if (d1.abs() + d2.abs()) < 1e-14 {
            break;
        }
    }
    (beta.exp(), k)
}

#[test]
fn decay_fit_agrees_with_an_independent_newton_mle_and_fisher_information() {
    let data = decay_counts(12.0, 0.35, 24);
    let (b, k) = newton_mle(&data.x[0], &data.y);
    let model = decay_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("b", 5.0), ParamSpec::free("k", 0.1)],
        options: poisson_options(),
    };
    let f = fit::fit(&problem, &data).unwrap();
    assert!(f.converged);
    assert!(
        (f.parameters[0].value - b).abs() < 1e-7 * b,
        "{} vs {b}",
        f.parameters[0].value
    );
    assert!((f.parameters[1].value - k).abs() < 1e-7 * k);
    // Standard errors from the Fisher information J^T diag(1/mu) J,
    // J = (d mu / d b, d mu / d k), inverted by hand.
    let (mut i11, mut i12, mut i22) = (0.0, 0.0, 0.0);
    for &ti in &data.x[0] {
        let e = (-k * ti).exp();
        let mu = b * e;
        let (jb, jk) = (e, -b * ti * e);
        i11 += jb * jb / mu;
        i12 += jb * jk / mu;
        i22 += jk * jk / mu;
    }
    let det = i11 * i22 - i12 * i12;
    let (ub, uk) = ((i22 / det).sqrt(), (i11 / det).sqrt());
    assert!((f.parameters[0].std_error.unwrap() - ub).abs() < 1e-5 * ub);
    assert!((f.parameters[1].std_error.unwrap() - uk).abs() < 1e-5 * uk);
    let mu: Vec<f64> = data.x[0].iter().map(|&ti| b * (-k * ti).exp()).collect();
    assert!((f.chi2 - deviance(&mu, &data.y)).abs() < 1e-8);
    assert!(data.y.contains(&0.0), "the test data include zero counts");
}

#[test]
fn curvature_measures_are_not_available_for_a_poisson_fit() {
    // The Bates-Watts curvatures and Box's bias are formulas of Gaussian
    // weighted least squares with fixed weights (Bates & Watts 1980;
    // Box 1971); a Poisson fit gets "not available" with its reason, while
    // the same model and points fitted by least squares get the measures.
    use fitaudit::diagnostics::nonlinearity::{compute, NotAvailable};
    let data = decay_counts(12.0, 0.35, 24);
    let model = decay_model();
    let params = vec![ParamSpec::free("b", 5.0), ParamSpec::free("k", 0.1)];
    let problem = Problem {
        model: &model,
        params: params.clone(),
        options: poisson_options(),
    };
    let f = fit::fit(&problem, &data).unwrap();
    let nl = compute(&model, &data, &f);
    assert_eq!(nl.not_available, Some(NotAvailable::PoissonLikelihood));
    assert!(nl.intrinsic_curvature.is_none() && nl.bias.is_empty());
    let gaussian = Problem {
        model: &model,
        params,
        options: FitOptions::default(),
    };
    let g = fit::fit(&gaussian, &data).unwrap();
    let nl = compute(&model, &data, &g);
    assert_eq!(nl.not_available, None);
    assert!(nl.parameter_effects_curvature.is_some_and(|c| c > 0.0));
}

#[test]
fn a_step_to_a_non_positive_mean_is_rejected_not_a_crash() {
    // A straight line through counts that fall to zero: the least-squares
    // line would go negative in the tail; every accepted point keeps mu > 0
    // (the refit rejects steps where the deviance is not finite).
    fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        g[0] = 1.0;
        g[1] = x[0];
        p[0] + p[1] * x[0]
    }
    let model = NativeModel::new(2, line as PointFn);
    let x: Vec<f64> = (0..8).map(|i| i as f64).collect();
    let data = Dataset::single(
        "x",
        x.clone(),
        "n",
        vec![14.0, 11.0, 9.0, 6.0, 2.0, 1.0, 0.0, 0.0],
        None,
    );
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 8.0), ParamSpec::free("b", -0.5)],
        options: poisson_options(),
    };
    let f = fit::fit(&problem, &data).unwrap();
    assert!(f.chi2.is_finite());
    assert!(f.fitted.iter().all(|&m| m > 0.0), "{:?}", f.fitted);
    assert!((f.chi2 - deviance(&f.fitted, &data.y)).abs() < 1e-8);
    // A start with a negative mean where a count exists is refused.
    let bad = Problem {
        model: &model,
        params: vec![ParamSpec::free("a", 1.0), ParamSpec::free("b", -1.0)],
        options: poisson_options(),
    };
    assert!(matches!(
        fit::fit(&bad, &data),
        Err(fit::FitError::NotFiniteAtStart { .. })
    ));
}

#[test]
fn counts_must_be_whole_and_non_negative_and_take_no_sigma() {
    let model = constant_model();
    let problem = Problem {
        model: &model,
        params: vec![ParamSpec::free("c", 1.0)],
        options: poisson_options(),
    };
    let mut data = constant_data();
    data.y[3] = 2.5;
    assert!(matches!(
        fit::fit(&problem, &data),
        Err(fit::FitError::InvalidCount { point: 3, .. })
    ));
    data.y[3] = -1.0;
    assert!(matches!(
        fit::fit(&problem, &data),
        Err(fit::FitError::InvalidCount { point: 3, .. })
    ));
    let mut data = constant_data();
    data.sigma = Some(vec![1.0; data.len()]);
    assert!(matches!(
        fit::fit(&problem, &data),
        Err(fit::FitError::SigmaWithCounts)
    ));
}

/// The Poisson fit of the constant-rate model to [`constant_data`].
fn constant_fit(model: &NativeModel<PointFn>, data: &Dataset) -> fit::FitResult {
    let problem = Problem {
        model,
        params: vec![ParamSpec::free("c", 1.0)],
        options: poisson_options(),
    };
    fit::fit(&problem, data).unwrap()
}

fn constant_ctx<'a>(
    model: &'a NativeModel<PointFn>,
    data: &'a Dataset,
    f: &'a fit::FitResult,
    settings: &'a AuditSettings,
) -> Fitted<'a> {
    Fitted {
        problem: Problem {
            model,
            params: vec![ParamSpec::free("c", 1.0)],
            options: poisson_options(),
        },
        data,
        fit: f,
        settings,
    }
}

#[test]
fn monte_carlo_and_bootstrap_draw_poisson_counts_and_profiles_use_the_deviance() {
    let model = constant_model();
    let data = constant_data();
    let f = constant_fit(&model, &data);
    let settings = AuditSettings::default();
    let ctx = constant_ctx(&model, &data, &f, &settings);
    let mean = 2.1;
    let u = (mean / 10.0f64).sqrt();

    // Each Monte Carlo trial refits the mean of 10 Poisson(2.1) counts: its
    // standard deviation is sqrt(2.1 / 10) and every estimate is a multiple
    // of 1/10 (the counts are integers), to the refits' optimality
    // tolerance (1e-3 standard errors).
    let mc = diagnostics::monte_carlo::run_with(
        &ctx,
        &MonteCarloSettings {
            replicates: 400,
            ..MonteCarloSettings::default()
        },
        &NoProgress,
    );
    assert_eq!(mc.scheme, "poisson");
    assert_eq!(mc.failed, 0);
    // SD of an SD estimate from 400 draws: about u / sqrt(800) = 3.5 %; 4 of them.
    assert!(
        (mc.parameters[0].std - u).abs() < 0.14 * u,
        "{} vs {u}",
        mc.parameters[0].std
    );
    assert!((mc.parameters[0].mean - mean).abs() < 4.0 * u / 20.0);
    for e in &mc.estimates {
        assert!((e[0] - (e[0] * 10.0).round() / 10.0).abs() < 2e-3 * u, "{}", e[0]);
    }

    let bs = diagnostics::bootstrap::run_with(
        &ctx,
        &BootstrapSettings {
            replicates: 400,
            ..BootstrapSettings::default()
        },
        false,
        &NoProgress,
    );
    assert_eq!(bs.scheme, "parametric-poisson");
    assert!((bs.parameters[0].std - u).abs() < 0.14 * u);

    // The profile interval at 68.27 % is the likelihood-ratio interval
    // D(c) - D(c_hat) = q with q the 68.27 % quantile of chi-squared(1):
    // D(c) - D(c_hat) = 2 N (c - c_hat) - 2 S ln(c / c_hat), N bins and S
    // counts, solved here by bisection.
    let pr = diagnostics::profile::run(&ctx, &NoProgress);
    let q = pr.threshold;
    use statrs::distribution::{ChiSquared, ContinuousCDF};
    let want_q = ChiSquared::new(1.0).unwrap().inverse_cdf(settings.level);
    assert!((q - want_q).abs() < 1e-6, "{q} vs {want_q}");
    let dd = |c: f64| 2.0 * 10.0 * (c - mean) - 2.0 * 21.0 * (c / mean).ln() - q;
    let bisect = |mut lo: f64, mut hi: f64| {
        for _ in 0..200 {
            let mid = 0.5 * (lo + hi);
            if (dd(mid) > 0.0) == (dd(lo) > 0.0) {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        0.5 * (lo + hi)
    };
    let (lo, hi) = (bisect(1e-3, mean), bisect(mean, 10.0));
    let p = &pr.parameters[0];
    assert!(p.lower_found && p.upper_found);
    assert!((p.lower - lo).abs() < 2e-3 * u, "{} vs {lo}", p.lower);
    assert!((p.upper - hi).abs() < 2e-3 * u, "{} vs {hi}", p.upper);
    // The interval is lopsided (upper half-width larger), as counts are.
    assert!(hi - mean > mean - lo);
}

#[test]
fn coverage_draws_counts_and_matches_the_exact_poisson_coverage() {
    // Ten bins at the fitted mean 2.1: the simulated total S of a data set
    // is Poisson(21) and its estimate S / 10. The analytic interval
    // c +- k sqrt(c / 10) (k = 1.00 at 68.27 %) covers 2.1 exactly when
    // |S - 21| <= k sqrt(S), i.e. S in 17..=26; the likelihood-ratio
    // (profile) interval when 2 (S ln(S / 21) - (S - 21)) <= q. Both
    // coverages follow from the Poisson(21) probabilities, computed here
    // without the tool; with counts they lie well off the nominal level
    // (normal draws would not give these values).
    use statrs::distribution::{ChiSquared, ContinuousCDF, Discrete, Poisson as PoissonLaw};
    let model = constant_model();
    let data = constant_data();
    let f = constant_fit(&model, &data);
    let mut settings = AuditSettings::default();
    settings.coverage.replicates = 2000;
    // A Student-t setting has no meaning for counts and is not recorded.
    settings.monte_carlo.student_t_dof = Some(5.0);
    let ctx = constant_ctx(&model, &data, &f, &settings);
    let c = diagnostics::coverage::run(&ctx, &NoProgress);
    assert_eq!(c.noise, "poisson");
    assert_eq!(c.student_t_dof, None);
    assert!(!c.moves_x);
    assert_eq!(c.failed, 0);

    let law = PoissonLaw::new(21.0).unwrap();
    let k = f.coverage_factor;
    let q = ChiSquared::new(1.0).unwrap().inverse_cdf(settings.level);
    let (mut analytic, mut profile) = (0.0, 0.0);
    for s in 1..200u64 {
        let sf = s as f64;
        if (sf - 21.0).abs() <= k * sf.sqrt() {
            analytic += law.pmf(s);
        }
        if 2.0 * (sf * (sf / 21.0).ln() - (sf - 21.0)) <= q {
            profile += law.pmf(s);
        }
    }
    let got = |kind: diagnostics::coverage::CoverageKind| {
        c.parameters[0]
            .intervals
            .iter()
            .find(|i| i.kind == kind)
            .unwrap()
            .clone()
    };
    for (kind, want) in [
        (diagnostics::coverage::CoverageKind::Analytic, analytic),
        (diagnostics::coverage::CoverageKind::Profile, profile),
    ] {
        let i = got(kind);
        let se = (want * (1.0 - want) / i.counted as f64).sqrt();
        eprintln!("{kind:?}: simulated {} exact {want:.4} SE {se:.4}", i.coverage);
        assert!(
            (i.coverage - want).abs() < 3.5 * se,
            "{kind:?}: simulated {} against exact {want} (SE {se})",
            i.coverage
        );
    }
    // The exact analytic coverage is well above 0.6827 here (0.7196:
    // the discreteness of the counts).
    assert!(analytic > 0.71, "{analytic}");
}
