//! The hand-written minimal peer of BENCHMARKS.md, "Refit against a
//! scripted loop": residual-bootstrap refits of the n = 200 two-component
//! decay with a plain Gauss-Newton loop written for this one model (normal
//! equations by Cholesky, no bounds, no damping, no checks), warm-started
//! from the base fit, one thread. It is the floor a general tool is
//! compared with, not something the tool should be.
//!
//! `cargo run --release --example minimal_refit -- /tmp/scale/decay_200.csv 20000`

use std::time::Instant;

use nalgebra::{Matrix4, Vector4};
use rand::{Rng, SeedableRng};

fn model(p: &Vector4<f64>, t: f64) -> (f64, Vector4<f64>) {
    let e1 = (-p[1] * t).exp();
    let e2 = (-p[3] * t).exp();
    (
        p[0] * e1 + p[2] * e2,
        Vector4::new(e1, -p[0] * t * e1, e2, -p[2] * t * e2),
    )
}

/// Gauss-Newton until the step is below 1e-10 relative (at most 20 steps).
fn gauss_newton(t: &[f64], y: &[f64], start: Vector4<f64>) -> (Vector4<f64>, usize) {
    let mut p = start;
    for it in 1..=20 {
        let mut a = Matrix4::zeros();
        let mut g = Vector4::zeros();
        for (&ti, &yi) in t.iter().zip(y) {
            let (f, d) = model(&p, ti);
            a += d * d.transpose();
            g += d * (yi - f);
        }
        let Some(ch) = a.cholesky() else {
            return (p, it);
        };
        let step = ch.solve(&g);
        p += step;
        if step.norm() <= 1e-10 * p.norm() {
            return (p, it);
        }
    }
    (p, 20)
}

fn cpu_ns() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
    s.split_whitespace().next()?.parse().ok()
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let path = args.next().ok_or("usage: minimal_refit CSV REPS")?;
    let reps: usize = args.next().ok_or("usage: minimal_refit CSV REPS")?.parse()?;
    let text = std::fs::read_to_string(path)?;
    let (mut t, mut y) = (Vec::new(), Vec::new());
    for line in text.lines().skip(1) {
        let mut c = line.split(',');
        t.push(c.next().ok_or("bad line")?.parse::<f64>()?);
        y.push(c.next().ok_or("bad line")?.parse::<f64>()?);
    }
    let (a_hat, _) = gauss_newton(&t, &y, Vector4::new(2.16, 1.404, 0.864, 0.216));
    let fitted: Vec<f64> = t.iter().map(|&ti| model(&a_hat, ti).0).collect();
    let r: Vec<f64> = y.iter().zip(&fitted).map(|(y, f)| y - f).collect();
    let mean = r.iter().sum::<f64>() / r.len() as f64;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
    let draws: Vec<Vec<f64>> = (0..reps)
        .map(|_| {
            fitted
                .iter()
                .map(|f| f + r[rng.gen_range(0..r.len())] - mean)
                .collect()
        })
        .collect();
    let c0 = cpu_ns();
    let t0 = Instant::now();
    let mut iterations = 0;
    let mut check = 0.0;
    for yy in &draws {
        let (p, it) = gauss_newton(&t, yy, a_hat);
        iterations += it;
        check += p[1];
    }
    let wall = t0.elapsed().as_secs_f64();
    // On-CPU time of this thread (Linux schedstat) when available.
    let dt = match (c0, cpu_ns()) {
        (Some(a), Some(b)) => (b - a) as f64 * 1e-9,
        _ => wall,
    };
    println!(
        "minimal Gauss-Newton: {:.1} us per refit on-CPU ({reps} refits, {:.1} iterations each; mean k1 {:.4})",
        1e6 * dt / reps as f64,
        iterations as f64 / reps as f64,
        check / reps as f64
    );
    Ok(())
}
