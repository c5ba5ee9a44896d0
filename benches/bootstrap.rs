//! Bootstrap throughput: residual bootstrap, 4000 replicates, of the n = 200
//! two-component decay a1*exp(-k1*t) + a2*exp(-k2*t) (native closure and
//! compiled formula), on one thread and on two. Plain timing harness
//! (`harness = false`): best of several repetitions, wall-clock and on-CPU
//! time (Linux schedstat of every thread of the process). The data are
//! synthetic (model plus seeded Gaussian noise), for timing only.
//!
//! Run: `cargo bench --bench bootstrap`. Figures go to BENCHMARKS.md.

use std::hint::black_box;
use std::time::Instant;

use fitaudit::data::Dataset;
use fitaudit::diagnostics::resample::Outcome;
use fitaudit::diagnostics::{bootstrap, Fitted, NoProgress};
use fitaudit::fit::{fit, DataView, FitOptions, ParamSpec, Problem, Refitter};
use fitaudit::model::{compile, ModelFn, NativeModel, Symbols};
use fitaudit::rng::{self, Stream};
use fitaudit::settings::{AuditSettings, BootstrapScheme, BootstrapSettings, WildWeights};
use rand::Rng;
use rand_distr::{Distribution, Normal};

const REPLICATES: usize = 4000;
const REPEATS: usize = 5;

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
    let mut r = rng::stream(20260101, Stream::Other(9000), 0);
    let noise = Normal::new(0.0, 0.01).unwrap();
    let t: Vec<f64> = (0..n).map(|i| i as f64 * 0.05).collect();
    let y: Vec<f64> = t
        .iter()
        .map(|&t| 2.0 * (-1.3 * t).exp() + 0.8 * (-0.2 * t).exp() + noise.sample(&mut r))
        .collect();
    Dataset::single("t", t, "y", y, Some(vec![0.01; n]))
}

/// On-CPU nanoseconds of every thread of this process, by thread id.
fn thread_cpu_ns() -> Option<std::collections::BTreeMap<String, u64>> {
    let mut out = std::collections::BTreeMap::new();
    for task in std::fs::read_dir("/proc/self/task").ok()? {
        let task = task.ok()?;
        if let Ok(s) = std::fs::read_to_string(task.path().join("schedstat")) {
            let ns = s.split_whitespace().next()?.parse::<u64>().ok()?;
            out.insert(task.file_name().to_string_lossy().into_owned(), ns);
        }
    }
    Some(out)
}

/// On-CPU nanoseconds summed over every thread of this process.
fn process_cpu_ns() -> Option<u64> {
    Some(thread_cpu_ns()?.values().sum())
}

struct Timing {
    wall_s: f64,
    /// On-CPU seconds over all threads.
    cpu_s: Option<f64>,
    /// On-CPU seconds of the busiest thread: the run's length on dedicated
    /// cores, whatever else the machine is running.
    busiest_s: Option<f64>,
}

fn time_replicates(threads: usize, ctx: &Fitted, settings: &BootstrapSettings) -> Timing {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap();
    // Warm-up (spawns the workers, faults in the buffers).
    pool.install(|| black_box(bootstrap::replicates(ctx, settings, 0..200, &NoProgress)));
    let mut best = Timing {
        wall_s: f64::INFINITY,
        cpu_s: None,
        busiest_s: None,
    };
    for _ in 0..REPEATS {
        let c0 = thread_cpu_ns();
        let t0 = Instant::now();
        let out = pool.install(|| bootstrap::replicates(ctx, settings, 0..REPLICATES, &NoProgress));
        let wall = t0.elapsed().as_secs_f64();
        let c1 = thread_cpu_ns();
        let deltas: Option<Vec<f64>> = c0.zip(c1).map(|(a, b)| {
            b.iter()
                .map(|(tid, v)| (v - a.get(tid).copied().unwrap_or(0)) as f64 / 1e9)
                .collect()
        });
        let failed = out.iter().filter(|o| matches!(o, Outcome::Failed(_))).count();
        assert_eq!(failed, 0, "benchmark replicates must all converge");
        black_box(out);
        if wall < best.wall_s {
            best = Timing {
                wall_s: wall,
                cpu_s: deltas.as_ref().map(|d| d.iter().sum()),
                busiest_s: deltas.as_ref().map(|d| d.iter().copied().fold(0.0, f64::max)),
            };
        }
    }
    best
}

fn bench(label: &str, model: &dyn ModelFn, data: &Dataset) {
    let names = ["a1", "k1", "a2", "k2"];
    let guess = [2.0, 1.3, 0.8, 0.2];
    let params: Vec<ParamSpec> = names
        .iter()
        .zip(guess)
        .map(|(n, s)| ParamSpec::free(n, s))
        .collect();
    let problem = Problem {
        model,
        params: params.clone(),
        options: FitOptions::default(),
    };
    let base = fit(&problem, data).unwrap();
    let settings = AuditSettings::default();
    let ctx = Fitted {
        problem,
        data,
        fit: &base,
        settings: &settings,
    };
    let bs = BootstrapSettings {
        replicates: REPLICATES,
        scheme: BootstrapScheme::Residual,
        weights: WildWeights::Rademacher,
    };
    let one = time_replicates(1, &ctx, &bs);
    let two = time_replicates(2, &ctx, &bs);
    let per = |t: &Timing| t.wall_s / REPLICATES as f64 * 1e6;
    let cpu = |t: &Timing| {
        t.cpu_s
            .map(|c| format!("{:.1}", c / REPLICATES as f64 * 1e6))
            .unwrap_or("-".into())
    };
    println!(
        "{label}: 1 thread {:.3} s wall ({:.1} us/refit wall, {} us/refit on-CPU)",
        one.wall_s,
        per(&one),
        cpu(&one)
    );
    println!(
        "{label}: 2 threads {:.3} s wall ({:.1} us/refit wall, {} us/refit on-CPU); speed-up {:.2}x wall",
        two.wall_s,
        per(&two),
        cpu(&two),
        one.wall_s / two.wall_s
    );
    if let (Some(c1), Some(b2)) = (one.cpu_s, two.busiest_s) {
        println!(
            "{label}: speed-up on dedicated cores (1-thread on-CPU / busiest 2-thread worker on-CPU) {:.2}x",
            c1 / b2
        );
    }
    // Baseline on one thread: the same replicate data built beforehand (as
    // the residual scheme does), then only the refits timed, to separate the
    // optimiser's cost from the scheme's (random streams, data filling).
    let pool = bootstrap::residual_pool(&ctx);
    let sigma = data.sigma_or_ones();
    let ys: Vec<Vec<f64>> = (0..REPLICATES)
        .map(|k| {
            let mut r = rng::stream(settings.seed, Stream::Bootstrap, k as u64);
            (0..data.len())
                .map(|i| base.fitted[i] + sigma[i] * pool[r.gen_range(0..pool.len())])
                .collect()
        })
        .collect();
    let xs = data.x_slices();
    let start: Vec<f64> = base.parameters.iter().map(|p| p.value).collect();
    let mut rf = Refitter::new(&ctx.problem, data.len());
    let (mut iterations, mut evaluations) = (0usize, 0usize);
    let mut best_cpu = f64::INFINITY;
    for _ in 0..REPEATS {
        let c0 = process_cpu_ns();
        iterations = 0;
        evaluations = 0;
        for y in &ys {
            let view = DataView {
                x: &xs,
                y,
                sigma: &sigma,
                sigma_x: &[],
            };
            let r = rf.refit(&ctx.problem, &view, &start, &[true; 4]);
            iterations += r.iterations;
            evaluations += r.evaluations;
        }
        if let (Some(a), Some(b)) = (c0, process_cpu_ns()) {
            best_cpu = best_cpu.min((b - a) as f64 / 1e9);
        }
    }
    println!(
        "{label}: refits alone {:.1} us/refit on-CPU; {:.2} iterations, {:.2} evaluations per refit",
        best_cpu / REPLICATES as f64 * 1e6,
        iterations as f64 / REPLICATES as f64,
        evaluations as f64 / REPLICATES as f64
    );
    // The whole diagnostic: replicates, jackknife (n refits) and statistics.
    let t0 = Instant::now();
    let full = rayon::ThreadPoolBuilder::new()
        .num_threads(2)
        .build()
        .unwrap()
        .install(|| bootstrap::run_with(&ctx, &bs, true, &NoProgress));
    println!(
        "{label}: full bootstrap::run_with (BCa from {} linearised leave-one-out values) on 2 threads {:.3} s",
        full.jackknife_refits,
        t0.elapsed().as_secs_f64()
    );
}

fn main() {
    let d = data();
    let native = NativeModel::new(4, decay);
    bench("bootstrap/residual/decay200/native", &native, &d);
    let p: Vec<String> = ["a1", "k1", "a2", "k2"].iter().map(|s| s.to_string()).collect();
    let v = vec!["t".to_string()];
    let syms = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    let tape = compile("a1*exp(-k1*t) + a2*exp(-k2*t)", &syms).unwrap();
    bench("bootstrap/residual/decay200/compiled", &tape, &d);
    if let Ok(l) = std::fs::read_to_string("/proc/loadavg") {
        println!("load average: {}", l.trim());
    }
}
