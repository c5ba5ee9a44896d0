//! The BCa acceleration from the linearised leave-one-out values agrees
//! with the refitted leave-one-out jackknife: exactly (to rounding) for a
//! model linear in its parameters, where the deletion formula is exact
//! (R. D. Cook and S. Weisberg, "Residuals and Influence in Regression",
//! 1982, section 3.4), and closely for small nonlinear data sets. The data
//! are synthetic inputs with fixed seeds, not reference results.

use fitaudit::data::Dataset;
use fitaudit::diagnostics::influence::linearised_jackknife;
use fitaudit::diagnostics::resample::{jackknife, jackknife_acceleration, Outcome};
use fitaudit::diagnostics::{Fitted, NoProgress};
use fitaudit::fit::{fit, FitOptions, ParamSpec, Problem};
use fitaudit::model::{compile, Symbols};
use fitaudit::settings::AuditSettings;
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

fn rows(o: Vec<Outcome>) -> Vec<Vec<f64>> {
    o.into_iter()
        .map(|o| match o {
            Outcome::Ok(v) => v,
            Outcome::Failed(r) => panic!("leave-one-out failed: {r}"),
        })
        .collect()
}

/// (refitted, linearised) leave-one-out rows and accelerations per parameter.
fn compare(formula: &str, names: &[&str], starts: &[f64], data: &Dataset) -> Vec<(f64, f64, f64)> {
    let p: Vec<String> = names.iter().map(|s| s.to_string()).collect();
    let v = vec!["x".to_string()];
    let tape = compile(
        formula,
        &Symbols {
            parameters: &p,
            constants: &[],
            variables: &v,
        },
    )
    .unwrap();
    let problem = Problem {
        model: &tape,
        params: names
            .iter()
            .zip(starts)
            .map(|(n, s)| ParamSpec::free(n, *s))
            .collect(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, data).unwrap();
    assert!(base.converged);
    let settings = AuditSettings::default();
    let ctx = Fitted {
        problem,
        data,
        fit: &base,
        settings: &settings,
    };
    let exact = rows(jackknife(&ctx, &NoProgress));
    let linear = rows(linearised_jackknife(&ctx));
    assert_eq!(exact.len(), data.len());
    assert_eq!(linear.len(), data.len());
    (0..names.len())
        .map(|j| {
            let e: Vec<f64> = exact.iter().map(|r| r[j]).collect();
            let l: Vec<f64> = linear.iter().map(|r| r[j]).collect();
            // Largest difference of a leave-one-out value, in standard errors.
            let se = base.parameters[j].std_error.unwrap();
            let worst = e
                .iter()
                .zip(&l)
                .map(|(a, b)| (a - b).abs() / se)
                .fold(0.0, f64::max);
            (
                jackknife_acceleration(&e).unwrap(),
                jackknife_acceleration(&l).unwrap(),
                worst,
            )
        })
        .collect()
}

fn noise(seed: u64, n: usize) -> Vec<f64> {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let d = Normal::new(0.0, 1.0).unwrap();
    (0..n).map(|_| d.sample(&mut rng)).collect()
}

#[test]
fn linear_model_deletion_formula_is_exact() {
    // A quadratic in x is linear in its parameters: the deletion formula
    // gives the refitted leave-one-out estimates exactly.
    let x: Vec<f64> = (0..15).map(|i| i as f64 * 0.7).collect();
    let e = noise(21, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 1.0 + 0.4 * x - 0.05 * x * x + 0.1 * e)
        .collect();
    let s: Vec<f64> = (0..15).map(|i| 0.1 + 0.01 * i as f64).collect();
    let data = Dataset::single("x", x, "y", y, Some(s));
    for (exact, lin, worst) in compare("a + b*x + c*x^2", &["a", "b", "c"], &[0.0, 0.0, 0.0], &data) {
        assert!(
            worst < 1e-7,
            "leave-one-out values differ by {worst} standard errors"
        );
        assert!(
            (exact - lin).abs() <= 1e-6 * exact.abs().max(1e-3),
            "{exact} vs {lin}"
        );
    }
}

#[test]
fn nonlinear_small_data_accelerations_agree() {
    // Michaelis-Menten on 10 points, 4 % noise, and a decay on 12 points:
    // the linearised values agree with the refits to a small fraction of a
    // standard error, and the accelerations to within 0.005 (they are of
    // order 0.01-0.1 here; BCa moves the interval ends by about a z^2 per
    // unit of acceleration, so 0.005 is far below what the interval shows).
    let x: Vec<f64> = (1..=10).map(|i| 0.5 * i as f64).collect();
    let e = noise(5, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 3.0 * x / (2.0 + x) * (1.0 + 0.04 * e))
        .collect();
    let s: Vec<f64> = y.iter().map(|y| 0.04 * y).collect();
    let data = Dataset::single("x", x, "y", y, Some(s));
    let mm = compare("V*x/(K + x)", &["V", "K"], &[2.0, 1.0], &data);
    let x: Vec<f64> = (0..12).map(|i| i as f64).collect();
    let e = noise(6, x.len());
    let y: Vec<f64> = x
        .iter()
        .zip(&e)
        .map(|(x, e)| 5.0 * (-0.25 * x).exp() + 0.5 + 0.05 * e)
        .collect();
    let data = Dataset::single("x", x, "y", y, Some(vec![0.05; 12]));
    let decay = compare("A*exp(-k*x) + c", &["A", "k", "c"], &[4.0, 0.2, 0.0], &data);
    for (exact, lin, worst) in mm.into_iter().chain(decay) {
        eprintln!("acceleration refitted {exact:.5}, linearised {lin:.5}, worst value gap {worst:.3} se");
        assert!(
            worst < 0.2,
            "leave-one-out values differ by {worst} standard errors"
        );
        assert!((exact - lin).abs() < 0.005, "{exact} vs {lin}");
    }
}
