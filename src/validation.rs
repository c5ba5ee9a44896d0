//! Measured error rates of the verdicts: simulations with a known truth.
//!
//! Each [`Case`] is an invented measurement with a generating model, a
//! design and a stated sigma. [`run_case`] draws fresh noise for every data
//! set (data set `k` from `rng::stream(seed, Stream::Other(case tag), k)`),
//! audits it with bootstrap, Monte Carlo, profiles and the multi-start
//! search (contours do not vote), and with the coverage simulation when
//! [`RunSize::coverage_replicates`] is not 0, and tallies per parameter: how often the
//! verdict is not *holds*, how often each rule objects, and how often each
//! interval (analytic `value +- k u`, profile, bootstrap percentile, BCa,
//! Monte Carlo symmetric and shortest, and the `quote`) contains the truth.
//! On a case whose quoted +- is right (`null == true`) every objection is a
//! false alarm; on the others a flag is a detection. The tables are
//! rendered by `report::validation`; `cargo run --release --example
//! validate_verdicts` writes them into docs/VALIDATION.md.

use std::collections::BTreeMap;

use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::audit::{self, AuditOptions, AuditResults};
use crate::data::Dataset;
use crate::diagnostics::verdict::{self, Status};
use crate::diagnostics::NoProgress;
use crate::rng::{self, Stream};
use crate::settings::Diagnostic;
use crate::study::{ParamEntry, Study, StudySpec};

/// One parameter of a case: name, true value, start, min, max.
pub type CaseParameter = (&'static str, f64, f64, Option<f64>, Option<f64>);

/// One invented measurement: model, truth, design, stated sigma, starts.
#[derive(Debug, Clone, PartialEq)]
pub struct Case {
    /// Short name.
    pub name: &'static str,
    /// What it is, for the table.
    pub description: &'static str,
    /// The formula (independent variable `x`).
    pub formula: &'static str,
    /// Parameters: name, true value, start, min, max.
    pub parameters: Vec<CaseParameter>,
    /// The design points.
    pub x: Vec<f64>,
    /// Stated (and true) sigma of each point.
    pub sigma: Vec<f64>,
    /// True when the quoted +- is right by construction (false alarms are
    /// counted), false when it is not (detections are counted).
    pub null: bool,
    /// Stream tag of its noise.
    pub tag: u32,
    /// Re-base the audit at the best minimum the multi-start search finds
    /// (`[audit.multistart] rebase`); false audits the fit from the start.
    pub rebase: bool,
}

impl Case {
    fn truth(&self, x: f64) -> f64 {
        let t: Vec<f64> = self.parameters.iter().map(|p| p.1).collect();
        match self.name {
            "line" => t[0] + t[1] * x,
            "decay" => t[0] * (-x / t[1]).exp() + t[2],
            "saturation" => t[0] * x / (t[1] + x),
            _ => t[0] * (2.0 * std::f64::consts::PI * t[1] * x + t[2]).sin() + t[3],
        }
    }

    fn sinusoid(name: &'static str, description: &'static str, null: bool, rebase: bool) -> Case {
        Case {
            name,
            description,
            formula: "A*sin(2*pi*f*x + phi) + c",
            parameters: vec![
                ("A", 1.2, 1.0, Some(0.0), Some(10.0)),
                ("f", 2.7, 1.1, Some(0.2), Some(8.0)),
                ("phi", -0.4, 0.0, Some(-3.5), Some(3.5)),
                ("c", 0.1, 0.0, Some(-5.0), Some(5.0)),
            ],
            x: (0..100).map(|i| 0.025 * i as f64).collect(),
            sigma: vec![0.15; 100],
            null,
            // The same noise for both sinusoid cases.
            tag: 1504,
            rebase,
        }
    }
}

/// The cases of the validation (invented truths): a straight line, a
/// decay, a few-point saturation curve and a wrong-start sinusoid (audited
/// at that start, and re-based at the best minimum found).
pub fn cases() -> Vec<Case> {
    let sat_x = [0.8, 1.6, 2.4, 3.6, 5.2, 7.2];
    let sat_sigma: Vec<f64> = sat_x.iter().map(|x| 0.05 * 9.0 * x / (30.0 + x)).collect();
    vec![
        Case {
            name: "line",
            description: "straight line a + b x, 20 points, stated sigma 0.3",
            formula: "a + b*x",
            parameters: vec![("a", 2.0, 0.0, None, None), ("b", 0.6, 1.0, None, None)],
            x: (0..20).map(|i| 0.5 * i as f64).collect(),
            sigma: vec![0.3; 20],
            null: true,
            tag: 1501,
            rebase: true,
        },
        Case {
            name: "decay",
            description: "decay A exp(-x/tau) + c, 40 points over 5 tau, stated sigma 0.08",
            formula: "A*exp(-x/tau) + c",
            parameters: vec![
                ("A", 8.0, 5.0, Some(0.0), Some(100.0)),
                ("tau", 2.0, 1.0, Some(0.01), Some(100.0)),
                ("c", 0.5, 0.0, Some(-10.0), Some(10.0)),
            ],
            x: (0..40).map(|i| 0.25 * i as f64).collect(),
            sigma: vec![0.08; 40],
            null: true,
            tag: 1502,
            rebase: true,
        },
        Case {
            name: "saturation",
            description: "saturation Vmax x/(Km + x), 6 points at x <= Km/4, 5 % sigma",
            formula: "Vmax*x/(Km + x)",
            parameters: vec![
                ("Vmax", 9.0, 5.0, Some(0.0), Some(1000.0)),
                ("Km", 30.0, 10.0, Some(0.01), Some(1000.0)),
            ],
            x: sat_x.to_vec(),
            sigma: sat_sigma,
            null: false,
            tag: 1503,
            rebase: true,
        },
        Case::sinusoid(
            "sinusoid",
            "sinusoid A sin(2 pi f x + phi) + c, 100 points, started at f = 1.1 (true 2.7), audited at \
             the fit from that start (`rebase = false`)",
            false,
            false,
        ),
        Case::sinusoid(
            "sinusoid-rebased",
            "the same data sets, audited with the default `rebase = true`: at the best minimum found, \
             where the quoted +- is right",
            true,
            true,
        ),
    ]
}

/// Size of a validation run.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct RunSize {
    /// Data sets per case.
    pub datasets: usize,
    /// Bootstrap replicates and Monte Carlo trials per data set.
    pub replicates: usize,
    /// Multi-start starts per data set.
    pub starts: usize,
    /// Seed of the noise and of every diagnostic.
    pub seed: u64,
    /// Data sets of the coverage simulation per audited data set (0: the
    /// coverage simulation does not run).
    #[serde(default)]
    pub coverage_replicates: usize,
}

/// A count out of a total.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize)]
pub struct Count {
    /// Successes.
    pub hits: usize,
    /// Trials.
    pub n: usize,
}

impl Count {
    fn add(&mut self, hit: bool) {
        self.n += 1;
        self.hits += usize::from(hit);
    }

    /// The share `hits / n` (NaN without trials).
    pub fn rate(&self) -> f64 {
        self.hits as f64 / self.n as f64
    }

    /// Binomial standard error of the share, `sqrt(p (1 - p) / n)`.
    pub fn std_error(&self) -> f64 {
        let p = self.rate();
        (p * (1.0 - p) / self.n as f64).sqrt()
    }
}

/// The tallies of one parameter of one case.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ParameterTally {
    /// Parameter name.
    pub name: String,
    /// True value.
    pub truth: f64,
    /// Verdict not *holds*.
    pub flagged: Count,
    /// Verdict *fails*.
    pub fails: Count,
    /// Per rule and diagnostic (`"spread-ratio/bootstrap"`): objections
    /// (status above holds), out of the data sets.
    pub rules: BTreeMap<String, usize>,
    /// Coverage of each interval type that was given: `analytic`,
    /// `profile`, `bootstrap-percentile`, `bootstrap-bca`,
    /// `monte-carlo-symmetric`, `monte-carlo-shortest`, `quote`.
    pub coverage: BTreeMap<String, Count>,
    /// Which quote was given (`analytic`, `profile`) or why none.
    pub quotes: BTreeMap<String, usize>,
}

/// The tallies of one case.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CaseTally {
    /// Case name.
    pub name: String,
    /// Its description.
    pub description: String,
    /// Quoted +- right by construction.
    pub null: bool,
    /// Data sets audited.
    pub datasets: usize,
    /// Data sets whose audit could not run (base fit error).
    pub errors: usize,
    /// Data sets whose audit was re-based at a better minimum.
    pub rebased: Count,
    /// Confidence level of the intervals.
    pub level: f64,
    /// One tally per parameter.
    pub parameters: Vec<ParameterTally>,
}

/// The audit of data set `k` of `case`.
pub fn audit_dataset(case: &Case, size: &RunSize, k: usize) -> Option<AuditResults> {
    let mut rng = rng::stream(size.seed, Stream::Other(case.tag), k as u64);
    let y: Vec<f64> = case
        .x
        .iter()
        .zip(&case.sigma)
        .map(|(&x, &s)| {
            let e: f64 = StandardNormal.sample(&mut rng);
            case.truth(x) + s * e
        })
        .collect();
    let data = Dataset::single("x", case.x.clone(), "y", y, Some(case.sigma.clone()));
    let mut spec = StudySpec::new(
        case.formula,
        case.parameters
            .iter()
            .map(|(n, _, start, min, max)| {
                (
                    n.to_string(),
                    ParamEntry {
                        min: *min,
                        max: *max,
                        ..ParamEntry::start(*start)
                    },
                )
            })
            .collect(),
    );
    spec.audit.seed = size.seed.wrapping_mul(1_000_003).wrapping_add(k as u64);
    spec.audit.bootstrap.replicates = size.replicates;
    spec.audit.monte_carlo.replicates = size.replicates;
    spec.audit.multistart.starts = size.starts;
    spec.audit.multistart.rebase = case.rebase;
    spec.audit.coverage.replicates = size.coverage_replicates.max(2);
    let study = Study::from_dataset(spec, data, case.name).ok()?;
    let mut only = vec![
        Diagnostic::Bootstrap,
        Diagnostic::MonteCarlo,
        Diagnostic::Profile,
        Diagnostic::Multistart,
    ];
    if size.coverage_replicates > 0 {
        only.push(Diagnostic::Coverage);
    }
    let options = AuditOptions {
        only,
        ..AuditOptions::default()
    };
    audit::run(&audit::input_from_study(&study), &options, &NoProgress).ok()
}

fn code<T: Serialize>(x: T) -> String {
    serde_json::to_value(x)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

/// Adds one audit to the tallies of its parameters.
pub fn tally(results: &AuditResults, truth: &[(&str, f64)], out: &mut [ParameterTally]) {
    let inside = |lo: f64, hi: f64, t: f64| lo <= t && t <= hi;
    for (j, (name, t)) in truth.iter().enumerate() {
        let pt = &mut out[j];
        let Some(v) = results.verdicts.iter().find(|v| v.parameter == *name) else {
            continue;
        };
        pt.flagged.add(v.status != Status::Holds);
        pt.fails.add(v.status == Status::Fails);
        let mut objected: Vec<String> = v
            .findings
            .iter()
            .filter(|f| f.status != Status::Holds)
            .map(|f| format!("{}/{}", code(f.rule), code(f.diagnostic)))
            .collect();
        objected.sort();
        objected.dedup();
        for r in objected {
            *pt.rules.entry(r).or_default() += 1;
        }
        let quote_key = match (&v.quote, v.no_quote) {
            (Some(q), _) => code(q.kind),
            (None, Some(n)) => format!("none: {}", code(n)),
            _ => "none".to_string(),
        };
        *pt.quotes.entry(quote_key).or_default() += 1;
        let mut cover = |key: &str, iv: Option<(f64, f64)>| {
            if let Some((lo, hi)) = iv.filter(|(lo, hi)| lo.is_finite() && hi.is_finite()) {
                pt.coverage
                    .entry(key.to_string())
                    .or_default()
                    .add(inside(lo, hi, *t));
            }
        };
        cover("quote", v.quote.as_ref().map(|q| (q.lower, q.upper)));
        let fit = &results.fit;
        if let Some(p) = fit.parameters.iter().find(|p| p.name == *name) {
            let k = verdict::coverage_factor(fit, results.settings.level);
            cover(
                "analytic",
                p.std_error.map(|u| (p.value - k * u, p.value + k * u)),
            );
        }
        if let Some(q) = results
            .profile
            .as_ref()
            .and_then(|pr| pr.parameters.iter().find(|q| q.name == *name))
        {
            cover(
                "profile",
                (q.lower_found && q.upper_found).then_some((q.lower, q.upper)),
            );
        }
        if let Some(b) = results
            .bootstrap
            .as_ref()
            .and_then(|r| r.parameters.iter().find(|q| q.name == *name))
        {
            cover("bootstrap-percentile", Some((b.lower, b.upper)));
            cover("bootstrap-bca", b.bca_lower.zip(b.bca_upper));
        }
        if let Some(m) = results
            .monte_carlo
            .as_ref()
            .and_then(|r| r.parameters.iter().find(|q| q.name == *name))
        {
            cover("monte-carlo-symmetric", Some((m.lower, m.upper)));
            cover("monte-carlo-shortest", m.shortest_lower.zip(m.shortest_upper));
        }
    }
}

/// Audits `size.datasets` data sets of `case` (in parallel, tallied in
/// data-set order, so the result does not depend on the thread count).
pub fn run_case(case: &Case, size: &RunSize) -> CaseTally {
    let runs: Vec<Option<AuditResults>> = (0..size.datasets)
        .into_par_iter()
        .map(|k| audit_dataset(case, size, k))
        .collect();
    let truth: Vec<(&str, f64)> = case.parameters.iter().map(|p| (p.0, p.1)).collect();
    let mut params: Vec<ParameterTally> = truth
        .iter()
        .map(|(n, t)| ParameterTally {
            name: n.to_string(),
            truth: *t,
            ..ParameterTally::default()
        })
        .collect();
    let mut errors = 0;
    let mut level = f64::NAN;
    let mut rebased = Count::default();
    for r in &runs {
        match r {
            Some(r) => {
                level = r.settings.level;
                rebased.add(r.rebased);
                tally(r, &truth, &mut params);
            }
            None => errors += 1,
        }
    }
    CaseTally {
        name: case.name.to_string(),
        description: case.description.to_string(),
        null: case.null,
        datasets: size.datasets,
        errors,
        rebased,
        level,
        parameters: params,
    }
}
