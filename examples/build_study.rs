//! Building a study programmatically and running the whole audit on it.
//!
//! An invented first-order kinetics run, `c = c0*exp(-k*t) + c_inf`, is
//! described in code (no study file), audited with a reduced battery, and
//! its report written to `out/example-kinetics/`.
//! Run with `cargo run --release --example build_study`.

use std::path::Path;

use fitaudit::audit::{self, AuditOptions};
use fitaudit::data::Dataset;
use fitaudit::diagnostics::NoProgress;
use fitaudit::study::{ParamEntry, Study, StudySpec};
use rand_distr::{Distribution, Normal};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    // Invented concentrations with seeded normal noise of sigma 0.005.
    let mut rng = fitaudit::rng::stream(11, fitaudit::rng::Stream::Other(0), 0);
    let noise = Normal::new(0.0, 0.005)?;
    let t: Vec<f64> = (0..20).map(|i| 30.0 * i as f64).collect();
    let c: Vec<f64> = t
        .iter()
        .map(|&t| 2.0 * (-t / 150.0f64).exp() + 0.3 + noise.sample(&mut rng))
        .collect();
    let data = Dataset::single("t", t, "c", c, Some(vec![0.005; 20]));

    let mut spec = StudySpec::new(
        "c0*exp(-k*t) + c_inf",
        vec![
            ("c0".to_string(), ParamEntry::start(1.0)),
            (
                "k".to_string(),
                ParamEntry {
                    min: Some(0.0),
                    ..ParamEntry::start(0.01)
                },
            ),
            ("c_inf".to_string(), ParamEntry::start(0.0)),
        ],
    );
    spec.title = Some("First-order kinetics (built in code)".to_string());
    spec.audit.bootstrap.replicates = 400;
    spec.audit.monte_carlo.replicates = 400;
    spec.audit.multistart.starts = 32;
    let study = Study::from_dataset(spec, data, "example-kinetics")?;

    let options = AuditOptions::default();
    let results = audit::run(&audit::input_from_study(&study), &options, &NoProgress)?;
    for v in &results.verdicts {
        println!(
            "{:<6} {:?}: {}",
            v.parameter,
            v.status,
            fitaudit::report::findings::reasons(v).join(" ")
        );
    }
    let dir = fitaudit::report::write_report(&results, Path::new("out/example-kinetics"), &options)?;
    println!("report written to {}", dir.display());
    Ok(())
}
