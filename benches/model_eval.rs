//! Formula evaluation: value + Jacobian of the two-component decay
//! `a1*exp(-k1*t) + a2*exp(-k2*t)` through the compiled tape, against a
//! hand-written Rust loop computing the same into the same buffers.
//!
//! Run: `cargo bench --bench model_eval -- --warm-up-time 1 --measurement-time 3`
//! (results in BENCHMARKS.md, section "Formula evaluation").
//!
//! After the criterion measurements, the same two paths are also timed
//! interleaved (tape, native, tape, native, ... in short rounds) and the
//! fastest round of each is compared: on a shared, loaded machine this
//! ratio is far steadier than two criterion runs taken seconds apart.

use criterion::{black_box, criterion_group, BenchmarkId, Criterion};
use fitaudit::model::{compile, ModelFn, Symbols};
use std::time::Instant;

const DECAY: &str = "a1*exp(-k1*t) + a2*exp(-k2*t)";

/// The same model written by hand: values and column-major Jacobian.
fn native(p: &[f64], t: &[f64], values: &mut [f64], jac: &mut [f64]) {
    let n = t.len();
    let (a1, k1, a2, k2) = (p[0], p[1], p[2], p[3]);
    let (j0, rest) = jac.split_at_mut(n);
    let (j1, rest) = rest.split_at_mut(n);
    let (j2, j3) = rest.split_at_mut(n);
    for i in 0..n {
        let ti = t[i];
        let e1 = (-k1 * ti).exp();
        let e2 = (-k2 * ti).exp();
        values[i] = a1 * e1 + a2 * e2;
        j0[i] = e1;
        j1[i] = -a1 * ti * e1;
        j2[i] = e2;
        j3[i] = -a2 * ti * e2;
    }
}

fn decay_tape() -> fitaudit::model::Tape {
    let params: Vec<String> = ["a1", "k1", "a2", "k2"].iter().map(|s| s.to_string()).collect();
    let vars = vec!["t".to_string()];
    let syms = Symbols {
        parameters: &params,
        constants: &[],
        variables: &vars,
    };
    compile(DECAY, &syms).unwrap()
}

fn bench(c: &mut Criterion) {
    let tape = decay_tape();
    let p = [3.0, 1.3, 0.8, 0.07];
    let mut group = c.benchmark_group("decay_value_jacobian");
    for n in [200usize, 20_000] {
        let t: Vec<f64> = (0..n).map(|i| 10.0 * i as f64 / n as f64).collect();
        let mut values = vec![0.0; n];
        let mut jac = vec![0.0; 4 * n];
        let mut scratch = Vec::new();
        group.bench_with_input(BenchmarkId::new("tape", n), &n, |b, _| {
            b.iter(|| {
                tape.eval(black_box(&p), &[&t], &mut values, Some(&mut jac), &mut scratch)
                    .unwrap();
                black_box(&values);
            })
        });
        group.bench_with_input(BenchmarkId::new("native", n), &n, |b, _| {
            b.iter(|| {
                native(black_box(&p), &t, &mut values, &mut jac);
                black_box(&values);
            })
        });
    }
    group.finish();
}

/// Fastest of many short interleaved rounds, per path; prints the ratio.
fn interleaved() {
    let tape = decay_tape();
    let p = [3.0, 1.3, 0.8, 0.07];
    for n in [200usize, 20_000] {
        let t: Vec<f64> = (0..n).map(|i| 10.0 * i as f64 / n as f64).collect();
        let mut values = vec![0.0; n];
        let mut jac = vec![0.0; 4 * n];
        let mut scratch = Vec::new();
        let reps = (100_000 / n).max(1);
        let (mut best_tape, mut best_native) = (f64::MAX, f64::MAX);
        for _ in 0..400 {
            let s = Instant::now();
            for _ in 0..reps {
                tape.eval(black_box(&p), &[&t], &mut values, Some(&mut jac), &mut scratch)
                    .unwrap();
                black_box(&values);
            }
            best_tape = best_tape.min(s.elapsed().as_secs_f64() / reps as f64);
            let s = Instant::now();
            for _ in 0..reps {
                native(black_box(&p), &t, &mut values, &mut jac);
                black_box(&values);
            }
            best_native = best_native.min(s.elapsed().as_secs_f64() / reps as f64);
        }
        println!(
            "interleaved n={n}: tape {:.3} us, native {:.3} us, ratio tape/native {:.3}",
            best_tape * 1e6,
            best_native * 1e6,
            best_tape / best_native
        );
    }
}

criterion_group!(benches, bench);

fn main() {
    benches();
    Criterion::default().configure_from_args().final_summary();
    // Only when benchmarking (`cargo bench` passes --bench), not in test mode.
    if std::env::args().any(|a| a == "--bench") {
        interleaved();
    }
}
