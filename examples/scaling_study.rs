//! Writes an invented large study for the scaling benchmarks of
//! BENCHMARKS.md: a two-component decay `a1*exp(-k1*t) + a2*exp(-k2*t)`
//! at (2, 1.3, 0.8, 0.2) on `n` points over t in [0, 10], seeded normal
//! noise with a stated sigma of 0.01, starts 8 % off.
//!
//! `cargo run --release --example scaling_study -- N DIR` writes
//! `DIR/decay_N.toml` and `DIR/decay_N.csv`; then time
//! `fitaudit audit DIR/decay_N.toml --quiet` (BENCHMARKS.md, "Scaling in n").

use std::fmt::Write as _;
use std::path::PathBuf;

use rand_distr::{Distribution, Normal};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let n: usize = args.next().ok_or("usage: scaling_study N DIR")?.parse()?;
    let dir = PathBuf::from(args.next().ok_or("usage: scaling_study N DIR")?);
    std::fs::create_dir_all(&dir)?;
    let mut rng = fitaudit::rng::stream(5, fitaudit::rng::Stream::Other(0), n as u64);
    let noise = Normal::new(0.0, 0.01)?;
    let mut csv = String::with_capacity(40 * n);
    csv.push_str("t,y\n");
    for i in 0..n {
        let t = 10.0 * i as f64 / (n.max(2) - 1) as f64;
        let y = 2.0 * (-1.3 * t).exp() + 0.8 * (-0.2 * t).exp() + noise.sample(&mut rng);
        let _ = writeln!(csv, "{t:.9},{y:.9}");
    }
    let stem = format!("decay_{n}");
    std::fs::write(dir.join(format!("{stem}.csv")), csv)?;
    let study = format!(
        "title = \"Two-component decay, {n} points\"\n\n[data]\nfile = \"{stem}.csv\"\nx = \"t\"\ny = \"y\"\nsigma = 0.01\n\n\
         [model]\nformula = \"a1*exp(-k1*t) + a2*exp(-k2*t)\"\n\n[parameters]\n\
         a1 = {{ start = 2.16 }}\nk1 = {{ start = 1.404, min = 0 }}\na2 = {{ start = 0.864 }}\nk2 = {{ start = 0.216, min = 0 }}\n"
    );
    std::fs::write(dir.join(format!("{stem}.toml")), study)?;
    println!("{}", dir.join(format!("{stem}.toml")).display());
    Ok(())
}
