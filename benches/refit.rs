//! Refit cost: the n = 200 two-component decay a1*exp(-k1*t) + a2*exp(-k2*t)
//! refitted from a start within 10 % of the optimum, with the model as a
//! native closure and as a compiled formula. The data are synthetic (model
//! plus seeded Gaussian noise), for timing only.

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use fitaudit::data::Dataset;
use fitaudit::fit::{fit, DataView, FitOptions, ParamSpec, Problem, Refitter};
use fitaudit::model::{compile, ModelFn, NativeModel, Symbols};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};
use std::time::Duration;

fn decay(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = x[0];
    let e1 = (-p[1] * t).exp();
    let e2 = (-p[3] * t).exp();
    g[0] = e1;
    g[1] = -p[0] * t * e1;
    g[2] = e2;
    g[3] = -p[2] * t * e2;
    p[0] * e1 + p[2] * e2
}

fn data() -> Dataset {
    let n = 200;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20260101);
    let noise = Normal::new(0.0, 0.01).unwrap();
    let t: Vec<f64> = (0..n).map(|i| i as f64 * 0.05).collect();
    let y: Vec<f64> = t
        .iter()
        .map(|&t| 2.0 * (-1.3 * t).exp() + 0.8 * (-0.2 * t).exp() + noise.sample(&mut rng))
        .collect();
    Dataset::single("t", t, "y", y, Some(vec![0.01; n]))
}

fn bench_model(c: &mut Criterion, label: &str, model: &dyn ModelFn, data: &Dataset) {
    let names = ["a1", "k1", "a2", "k2"];
    let guess = [2.0, 1.3, 0.8, 0.2];
    let problem = Problem {
        model,
        params: names
            .iter()
            .zip(guess)
            .map(|(n, s)| ParamSpec::free(n, s))
            .collect(),
        options: FitOptions::default(),
    };
    let best: Vec<f64> = fit(&problem, data)
        .unwrap()
        .parameters
        .iter()
        .map(|p| p.value)
        .collect();
    // Within 10 % of the optimum, alternating in sign.
    let start: Vec<f64> = best
        .iter()
        .enumerate()
        .map(|(j, v)| v * if j % 2 == 0 { 1.08 } else { 0.92 })
        .collect();
    let sigma = data.sigma_or_ones();
    let xs = data.x_slices();
    let view = DataView {
        x: &xs,
        y: &data.y,
        sigma: &sigma,
        sigma_x: &[],
    };
    let free = [true; 4];
    let mut rf = Refitter::new(&problem, data.len());
    let r = rf.refit(&problem, &view, &start, &free);
    assert!(r.converged);
    println!(
        "{label}: {} iterations, {} evaluations per refit",
        r.iterations, r.evaluations
    );
    // On-CPU time of this thread (Linux schedstat), insensitive to other
    // load on the machine.
    if let Some(t0) = cpu_ns() {
        let reps = 5000;
        for _ in 0..reps {
            black_box(rf.refit(&problem, &view, black_box(&start), &free));
        }
        if let Some(t1) = cpu_ns() {
            println!(
                "{label}: {:.1} us/refit on-CPU ({reps} refits)",
                (t1 - t0) as f64 / reps as f64 / 1e3
            );
        }
    }
    if let Some(t0) = cpu_ns() {
        let reps = 20000;
        let mut vals = vec![0.0; data.len()];
        let mut jac = vec![0.0; 4 * data.len()];
        let mut scratch = Vec::new();
        for _ in 0..reps {
            black_box(model.eval(black_box(&start), &xs, &mut vals, Some(&mut jac), &mut scratch)).ok();
        }
        if let Some(t1) = cpu_ns() {
            println!(
                "{label}: {:.2} us/eval with Jacobian",
                (t1 - t0) as f64 / reps as f64 / 1e3
            );
        }
    }
    c.bench_function(label, |b| {
        b.iter(|| {
            let r = rf.refit(&problem, &view, black_box(&start), &free);
            black_box(r.chi2)
        })
    });
}

fn cpu_ns() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
    s.split_whitespace().next()?.parse().ok()
}

fn refit(c: &mut Criterion) {
    let d = data();
    let native = NativeModel::new(4, decay);
    bench_model(c, "refit/decay200/native", &native, &d);
    let p: Vec<String> = ["a1", "k1", "a2", "k2"].iter().map(|s| s.to_string()).collect();
    let v = vec!["t".to_string()];
    let syms = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    let tape = compile("a1*exp(-k1*t) + a2*exp(-k2*t)", &syms).unwrap();
    bench_model(c, "refit/decay200/compiled", &tape, &d);
}

criterion_group! {
    name = benches;
    config = Criterion::default()
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2))
        .sample_size(20);
    targets = refit
}
criterion_main!(benches);
