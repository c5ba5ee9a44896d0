//! Built-in demonstration scenarios on embedded data.
//!
//! Four invented scenarios show what the audit is for: one fit whose quoted
//! uncertainties hold, one small-sample nonlinear fit where the symmetric +-
//! misleads, one whose starting guess leads into a local minimum, and a
//! counting experiment with a few counts per bin (Poisson likelihood). Their
//! data are generated reproducibly by [`scenarios_csv`] (see the example
//! `generate_demo_data`), stored in `demo-data/` and embedded in the binary,
//! so `fitaudit demo` works from any folder.

use std::path::{Path, PathBuf};

use rand::Rng;
use rand_distr::{Distribution, Normal, Poisson};
use serde::{Deserialize, Serialize};

use crate::rng::{self, Stream};

/// One embedded scenario: its name, study file and data file.
#[derive(Debug, Clone, Copy)]
pub struct Scenario {
    /// Short name; the report goes to `<out>/<name>/`.
    pub name: &'static str,
    /// What the scenario shows.
    pub purpose: &'static str,
    /// Study file text (TOML).
    pub study: &'static str,
    /// Name of the data file the study refers to.
    pub data_file: &'static str,
    /// Data file text (CSV).
    pub data: &'static str,
}

/// The embedded scenarios, in the order the demo runs them.
pub const SCENARIOS: [Scenario; 4] = [
    Scenario {
        name: "cooling",
        purpose: "a well-behaved fit: analytic and resampled uncertainties agree",
        study: include_str!("../demo-data/cooling.toml"),
        data_file: "cooling.csv",
        data: include_str!("../demo-data/cooling.csv"),
    },
    Scenario {
        name: "enzyme",
        purpose: "few points, strongly nonlinear: the symmetric +- misleads",
        study: include_str!("../demo-data/enzyme.toml"),
        data_file: "enzyme.csv",
        data: include_str!("../demo-data/enzyme.csv"),
    },
    Scenario {
        name: "vibration",
        purpose: "a poor frequency guess: the start reaches a local minimum, the audit is re-based",
        study: include_str!("../demo-data/vibration.toml"),
        data_file: "vibration.csv",
        data: include_str!("../demo-data/vibration.csv"),
    },
    Scenario {
        name: "tracer",
        purpose: "a few counts per bin: the Poisson likelihood instead of chi-squared",
        study: include_str!("../demo-data/tracer.toml"),
        data_file: "tracer.csv",
        data: include_str!("../demo-data/tracer.csv"),
    },
];

fn gaussian_noise(scenario: u32, n: usize) -> Vec<f64> {
    let mut rng = rng::stream(20261201, Stream::Other(scenario), 0);
    let normal = Normal::new(0.0, 1.0).expect("unit normal");
    (0..n).map(|_| normal.sample(&mut rng)).collect()
}

/// Generates the CSV files of the scenarios: `(file name, contents)`.
///
/// Cooling: T = 21.5 + 58 exp(-t / 340 s), 36 readings every 50 s, sigma
/// 0.15 degC. Enzyme: v = 12 S / (25 + S), 6 substrate levels well below
/// saturation, sigma 6 % of v. Vibration: y = 1.8 sin(2 pi 3.3 t + 0.7) +
/// 0.25, 80 samples over 2.4 s, sigma 0.2. Tracer: Poisson counts of mean
/// 1.2 + 16 exp(-t / 45 s) in 30 bins of 10 s (bin starts t = 0, 10, ...,
/// 290 s).
pub fn scenarios_csv() -> Vec<(String, String)> {
    let mut out = Vec::new();

    let noise = gaussian_noise(1, 36);
    let mut csv = String::from("# invented demo data: cooling of a sealed vial\nt_s,temp_C,u_temp_C\n");
    for (i, e) in noise.iter().enumerate() {
        let t = 50.0 * i as f64;
        let sigma = 0.15;
        let y = 21.5 + 58.0 * (-t / 340.0).exp() + sigma * e;
        csv.push_str(&format!("{t:.1},{y:.4},{sigma:.2}\n"));
    }
    out.push(("cooling.csv".to_string(), csv));

    let noise = gaussian_noise(2, 6);
    let mut csv = String::from("# invented demo data: initial rates of a slow enzyme\nS_mM,v,u_v\n");
    for (s, e) in [0.5, 1.0, 1.6, 2.4, 3.5, 5.0].iter().zip(&noise) {
        let v = 12.0 * s / (25.0 + s);
        let sigma = 0.06 * v;
        let y = v + sigma * e;
        csv.push_str(&format!("{s:.2},{y:.4},{sigma:.4}\n"));
    }
    out.push(("enzyme.csv".to_string(), csv));

    let noise = gaussian_noise(3, 80);
    let mut jitter = rng::stream(20261201, Stream::Other(4), 0);
    let mut csv =
        String::from("# invented demo data: accelerometer on a vibrating bracket\nt,accel,u_accel\n");
    for (i, e) in noise.iter().enumerate() {
        let t = 0.03 * i as f64 + 0.005 * jitter.gen::<f64>();
        let sigma = 0.2;
        let y = 1.8 * (2.0 * std::f64::consts::PI * 3.3 * t + 0.7).sin() + 0.25 + sigma * e;
        csv.push_str(&format!("{t:.4},{y:.4},{sigma:.2}\n"));
    }
    out.push(("vibration.csv".to_string(), csv));

    let mut rng = rng::stream(20261201, Stream::Other(5), 0);
    let mut csv =
        String::from("# invented demo data: a short-lived tracer in a well counter, 10 s bins\nt_s,counts\n");
    for i in 0..30 {
        let t = 10.0 * i as f64;
        let mu = 1.2 + 16.0 * (-t / 45.0f64).exp();
        let n: f64 = Poisson::new(mu).expect("positive mean").sample(&mut rng);
        csv.push_str(&format!("{t:.0},{n:.0}\n"));
    }
    out.push(("tracer.csv".to_string(), csv));
    out
}

/// Verdict counts of one scenario, for the closing lines of the demo.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ScenarioOutcome {
    /// Scenario name.
    pub name: String,
    /// What it shows.
    pub purpose: String,
    /// Folder of its report.
    pub folder: PathBuf,
    /// Parameters whose verdict is `holds`.
    pub holds: usize,
    /// ... `doubtful`.
    pub doubtful: usize,
    /// ... `fails`.
    pub fails: usize,
    /// Whether the fit from the study's start was the best minimum found
    /// (None if not searched).
    pub base_is_best: Option<bool>,
    /// Whether the audit was re-based at the best minimum found.
    pub rebased: bool,
}

/// What the demo did.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DemoSummary {
    /// The output folder.
    pub out: PathBuf,
    /// One entry per scenario.
    pub scenarios: Vec<ScenarioOutcome>,
}

/// Output folder of scenario `name` under `out`.
pub fn scenario_folder(out: &Path, name: &str) -> PathBuf {
    out.join(name)
}

/// Errors of the demo: an embedded scenario that does not load (a defect of
/// the build), or an output folder that cannot be written.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    /// Writing the scenario inputs into a working folder failed.
    #[error("cannot prepare the demo inputs in {path}: {source}")]
    Io {
        /// The folder.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// An embedded study did not load.
    #[error("embedded scenario {name}: {source}")]
    Study {
        /// Scenario name.
        name: String,
        /// Why.
        source: Box<crate::study::StudyError>,
    },
    /// An output folder cannot be written.
    #[error(transparent)]
    Output(#[from] crate::output::OutputError),
    /// The audit failed.
    #[error(transparent)]
    Audit(#[from] crate::audit::AuditError),
    /// The report could not be written.
    #[error(transparent)]
    Report(#[from] crate::report::ReportError),
}

/// Loads an embedded scenario as a study (its files are written to a
/// private working folder first, so the record carries their SHA-256).
pub fn load_scenario(scenario: &Scenario, work: &Path) -> Result<crate::study::Study, DemoError> {
    let io = |source| DemoError::Io {
        path: work.to_path_buf(),
        source,
    };
    std::fs::create_dir_all(work).map_err(io)?;
    let study_path = work.join(format!("{}.toml", scenario.name));
    std::fs::write(&study_path, scenario.study).map_err(io)?;
    std::fs::write(work.join(scenario.data_file), scenario.data).map_err(io)?;
    crate::study::load(&study_path).map_err(|source| DemoError::Study {
        name: scenario.name.to_string(),
        source: Box::new(source),
    })
}

/// Runs every scenario and writes its report under `out/<name>/`.
pub fn run_all(
    out: &Path,
    command_line: &str,
    progress: &dyn crate::diagnostics::Progress,
) -> Result<DemoSummary, DemoError> {
    use crate::diagnostics::verdict::Status;
    let work = std::env::temp_dir().join(format!("fitaudit-demo-{}", std::process::id()));
    let mut scenarios = Vec::new();
    let result = (|| {
        for sc in &SCENARIOS {
            crate::output::preflight(&scenario_folder(out, sc.name))?;
        }
        for sc in &SCENARIOS {
            let study = load_scenario(sc, &work)?;
            let options = crate::audit::AuditOptions {
                command_line: command_line.to_string(),
                ..Default::default()
            };
            let results = crate::audit::run(&crate::audit::input_from_study(&study), &options, progress)?;
            let folder = crate::report::write_report(&results, &scenario_folder(out, sc.name), &options)?;
            let count = |s: Status| results.verdicts.iter().filter(|v| v.status == s).count();
            scenarios.push(ScenarioOutcome {
                name: sc.name.to_string(),
                purpose: sc.purpose.to_string(),
                folder,
                holds: count(Status::Holds),
                doubtful: count(Status::Doubtful),
                fails: count(Status::Fails),
                base_is_best: results.multistart.as_ref().map(|m| m.base_is_best),
                rebased: results.rebased,
            });
        }
        Ok(())
    })();
    let _ = std::fs::remove_dir_all(&work);
    result.map(|()| DemoSummary {
        out: out.to_path_buf(),
        scenarios,
    })
}
