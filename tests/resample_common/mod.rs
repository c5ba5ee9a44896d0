//! Helpers shared by the resampling tests: models, synthetic data with
//! fixed seeds, and a base fit wrapped into a `Fitted`.
#![allow(dead_code)]

use fitaudit::data::Dataset;
use fitaudit::diagnostics::Fitted;
use fitaudit::fit::{self, FitOptions, FitResult, ParamSpec, Problem};
use fitaudit::model::{ModelFn, NativeModel};
use fitaudit::rng::{self, Stream};
use fitaudit::settings::AuditSettings;
use rand_distr::{Distribution, StandardNormal};

/// A model given as a plain function pointer.
pub type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

/// `a + b x`.
pub fn line_model() -> NativeModel<PointFn> {
    fn line(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        g[0] = 1.0;
        g[1] = x[0];
        p[0] + p[1] * x[0]
    }
    NativeModel::new(2, line as PointFn)
}

/// `A exp(-k t)`.
pub fn decay_model() -> NativeModel<PointFn> {
    fn decay(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
        let e = (-p[1] * x[0]).exp();
        g[0] = e;
        g[1] = -p[0] * x[0] * e;
        p[0] * e
    }
    NativeModel::new(2, decay as PointFn)
}

/// `truth(x) + sigma_i * N(0, 1)` at the given abscissae, drawn from the
/// test stream `Stream::Other(tag)`, replicate `index` (fixed seed).
pub fn synthetic(
    x: &[f64],
    sigma: &[f64],
    truth: impl Fn(f64) -> f64,
    tag: u32,
    index: u64,
    give_sigma: bool,
) -> Dataset {
    let mut r = rng::stream(20240611, Stream::Other(tag), index);
    let y: Vec<f64> = x
        .iter()
        .zip(sigma)
        .map(|(&xi, &s)| {
            let e: f64 = StandardNormal.sample(&mut r);
            truth(xi) + s * e
        })
        .collect();
    Dataset::single("x", x.to_vec(), "y", y, give_sigma.then(|| sigma.to_vec()))
}

/// Free, unbounded parameters with these names and starts.
pub fn free_params(spec: &[(&str, f64)]) -> Vec<ParamSpec> {
    spec.iter().map(|(n, s)| ParamSpec::free(n, *s)).collect()
}

/// Base fit of `model` to `data`; panics (test failure) if it does not converge.
pub fn base_fit(model: &dyn ModelFn, params: &[ParamSpec], data: &Dataset) -> FitResult {
    let problem = Problem {
        model,
        params: params.to_vec(),
        options: FitOptions::default(),
    };
    let f = fit::fit(&problem, data).expect("base fit");
    assert!(f.converged, "base fit did not converge: {:?}", f.stop_reason);
    f
}

/// The diagnostic context of a base fit.
pub fn fitted<'a>(
    model: &'a dyn ModelFn,
    params: &[ParamSpec],
    data: &'a Dataset,
    fit: &'a FitResult,
    settings: &'a AuditSettings,
) -> Fitted<'a> {
    Fitted {
        problem: Problem {
            model,
            params: params.to_vec(),
            options: FitOptions::default(),
        },
        data,
        fit,
        settings,
    }
}

/// Evenly spaced abscissae `x0, x0 + dx, ...`.
pub fn grid(n: usize, x0: f64, dx: f64) -> Vec<f64> {
    (0..n).map(|i| x0 + dx * i as f64).collect()
}

/// Runs `f` in a rayon pool of `threads` threads.
pub fn in_pool<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("pool")
        .install(f)
}
