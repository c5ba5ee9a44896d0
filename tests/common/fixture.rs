//! Fixed audit results for the report tests, built by hand so the report
//! layer is tested without the fit engine or the diagnostics.
//!
//! The base is the embedded `cooling` demo (invented data: 36 readings of
//! T = 21.5 + 58 exp(-t / 340 s), sigma 0.15 degC). The fixture takes the
//! generating values as the estimates; the residuals, chi-squared,
//! covariance (inverse of J'WJ), correlation, condition number and p-value
//! are computed from them, so the numbers hang together. Replicate
//! estimates are drawn from the covariance with fixed seeds; the profiles
//! and contours are the quadratic (covariance) forms, the tau profile with
//! an added cubic term so that its interval is asymmetric.

#![allow(dead_code)]

use fitaudit::audit::{AuditResults, Curve, Provenance, StudyInfo, SCHEMA_VERSION};
use fitaudit::data::Dataset;
use fitaudit::diagnostics::contour::{ContourGrid, ContourLine, ContourResult};
use fitaudit::diagnostics::multistart::{
    DegenerateEnds, EndKind, Minimum, MultistartResult, NamedValue, StartRun, StopRule,
};
use fitaudit::diagnostics::profile::{EndStatus, ParameterProfile, ProfileResult};
use fitaudit::diagnostics::resample::{FailedReplicate, ResampleResult, ResampledParameter};
use fitaudit::diagnostics::verdict::{Finding, Quote, QuoteKind, Rule, Source, Status, Verdict};
use fitaudit::fit::{FitResult, ParamResult, ParamSpec, StopReason};
use fitaudit::rng::{self, Stream};
use fitaudit::settings::{AuditSettings, Diagnostic};
use nalgebra::{DMatrix, DVector};
use rand_distr::{Distribution, StandardNormal};
use sha2::{Digest, Sha256};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// Parameter names of the cooling model.
pub const NAMES: [&str; 3] = ["T_env", "dT", "tau"];
/// Generating values of the demo data.
pub const VALUES: [f64; 3] = [21.5, 58.0, 340.0];
/// Bootstrap replicates kept (one more failed).
pub const BOOT: usize = 400;
/// Monte Carlo trials.
pub const MC: usize = 300;

fn model(a: &[f64], t: f64) -> f64 {
    a[0] + a[1] * (-t / a[2]).exp()
}

fn gradient(a: &[f64], t: f64) -> [f64; 3] {
    let e = (-t / a[2]).exp();
    [1.0, e, a[1] * e * t / (a[2] * a[2])]
}

fn demo_data() -> Dataset {
    let sc = &fitaudit::demo::SCENARIOS[0];
    let (mut t, mut y, mut s) = (Vec::new(), Vec::new(), Vec::new());
    for line in sc.data.lines().filter(|l| !l.starts_with('#')).skip(1) {
        let f: Vec<f64> = line.split(',').map(|v| v.trim().parse().unwrap()).collect();
        t.push(f[0]);
        y.push(f[1]);
        s.push(f[2]);
    }
    Dataset::single("t_s", t, "temp_C", y, Some(s))
}

fn sha(text: &str) -> String {
    Sha256::digest(text.as_bytes())
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn quantile(sorted: &[f64], p: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * p;
    let (lo, hi) = (h.floor() as usize, h.ceil() as usize);
    sorted[lo] + (sorted[hi] - sorted[lo]) * (h - lo as f64)
}

fn resample(
    scheme: &str,
    stream: Stream,
    n: usize,
    cov: &DMatrix<f64>,
    se: &[f64],
    level: f64,
    failures: Vec<FailedReplicate>,
) -> ResampleResult {
    let l = cov.clone().cholesky().expect("positive definite").l();
    let mut rng = rng::stream(7, stream, 0);
    let mut est = Vec::new();
    for _ in 0..n {
        let z = DVector::from_fn(3, |_, _| StandardNormal.sample(&mut rng));
        let d = &l * &z;
        // A skew in tau, as nonlinear fits show.
        let skew = 0.15 * (z[2] * z[2] - 1.0) * se[2];
        est.push(vec![VALUES[0] + d[0], VALUES[1] + d[1], VALUES[2] + d[2] + skew]);
    }
    let mut parameters = Vec::new();
    for j in 0..3 {
        let mut v: Vec<f64> = est.iter().map(|r| r[j]).collect();
        let mean = v.iter().sum::<f64>() / n as f64;
        let std = (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0)).sqrt();
        v.sort_by(f64::total_cmp);
        let lower = quantile(&v, (1.0 - level) / 2.0);
        let upper = quantile(&v, (1.0 + level) / 2.0);
        let ratio = std / se[j];
        parameters.push(ResampledParameter {
            name: NAMES[j].into(),
            estimate: VALUES[j],
            mean,
            bias: mean - VALUES[j],
            std,
            lower,
            upper,
            bca_lower: Some(lower - 0.05 * std),
            bca_upper: Some(upper - 0.02 * std),
            analytic_std_error: Some(se[j]),
            sd_ratio: Some(ratio),
            sd_ratio_uncertainty: Some(ratio / (2.0 * (n as f64 - 1.0)).sqrt()),
            asymmetry: Some((upper - VALUES[j]) / (VALUES[j] - lower)),
            fixed: false,
            acceleration: Some(0.004 * (j as f64 + 1.0)),
            bias_correction: Some(-0.02 * j as f64),
            bca_withheld: None,
            robust_std: 0.5 * (upper - lower),
            robust_ratio: Some(0.5 * (upper - lower) / se[j]),
            null_dof: fitaudit::diagnostics::resample::null_dof(n, None),
            runaways: 0,
            percentile_excludes_estimate: false,
            shortest_lower: (scheme == "normal").then_some(lower - 0.01 * std),
            shortest_upper: (scheme == "normal").then_some(upper - 0.01 * std),
        });
    }
    let mut corr = vec![vec![0.0; 3]; 3];
    for a in 0..3 {
        for b in 0..3 {
            let (ma, mb) = (parameters[a].mean, parameters[b].mean);
            let c: f64 = est.iter().map(|r| (r[a] - ma) * (r[b] - mb)).sum::<f64>() / (n as f64 - 1.0);
            corr[a][b] = c / (parameters[a].std * parameters[b].std);
        }
    }
    ResampleResult {
        scheme: scheme.into(),
        replicates: n + failures.len(),
        run: n + failures.len(),
        failed: failures.len(),
        failures,
        level,
        parameters,
        correlation: corr,
        estimates: est,
        adaptive_stable: if scheme == "normal" { Some(true) } else { None },
        jackknife_refits: 36,
        jackknife_failures: vec![],
        noise_scale: if scheme == "normal" { Some(1.0) } else { None },
    }
}

fn profile(cov: &DMatrix<f64>, se: &[f64], chi2: f64) -> ProfileResult {
    let threshold = 1.0; // chi-squared quantile, 1 dof, at 68.27 % (GUM G.1.3: k = 1)
    let mut parameters = Vec::new();
    for j in 0..3 {
        let cubic = if j == 2 { 0.12 } else { 0.0 };
        let delta = |z: f64| z * z + cubic * z * z * z;
        let solve = |sign: f64| {
            let (mut lo, mut hi) = (0.0, 3.0);
            for _ in 0..60 {
                let mid = 0.5 * (lo + hi);
                if delta(sign * mid) < threshold {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            VALUES[j] + sign * 0.5 * (lo + hi) * se[j]
        };
        let zs: Vec<f64> = (0..21).map(|i| -3.0 + 0.3 * i as f64).collect();
        let points: Vec<[f64; 2]> = zs
            .iter()
            .map(|&z| [VALUES[j] + z * se[j], chi2 + delta(z)])
            .collect();
        let parabola: Vec<[f64; 2]> = zs
            .iter()
            .map(|&z| [VALUES[j] + z * se[j], chi2 + z * z])
            .collect();
        let others: Vec<Vec<f64>> = zs
            .iter()
            .map(|&z| {
                (0..3)
                    .map(|k| VALUES[k] + z * se[j] * cov[(k, j)] / cov[(j, j)])
                    .collect()
            })
            .collect();
        let (lower, upper) = (solve(-1.0), solve(1.0));
        parameters.push(ParameterProfile {
            name: NAMES[j].into(),
            estimate: VALUES[j],
            std_error: Some(se[j]),
            lower,
            upper,
            lower_found: true,
            upper_found: true,
            points,
            others,
            parabola,
            asymmetry: Some((upper - VALUES[j]) / (VALUES[j] - lower)),
            failed: 0,
            lower_status: EndStatus::Found,
            upper_status: EndStatus::Found,
            non_identifiable: false,
            scale: se[j],
            below_minimum: None,
            refits: 30,
        });
    }
    ProfileResult {
        level: 0.6827,
        threshold,
        chi2_min: chi2,
        parameters,
        failed: 0,
        chi2_scale: 1.0,
        base_not_minimum: false,
    }
}

fn contours(cov: &DMatrix<f64>, se: &[f64], chi2: f64) -> Vec<ContourResult> {
    // Delta chi-squared for 2 parameters jointly at 68.27 % and 95.45 %:
    // 2.30 and 6.18 (Press et al., Numerical Recipes, 3rd ed., 15.6.5, table).
    let levels = vec![2.30, 6.18];
    let mut out = Vec::new();
    for (a, b) in [(0, 1), (0, 2), (1, 2)] {
        let sub = DMatrix::from_row_slice(2, 2, &[cov[(a, a)], cov[(a, b)], cov[(b, a)], cov[(b, b)]]);
        let l = sub.clone().cholesky().unwrap().l();
        let inv = sub.try_inverse().unwrap();
        let ring = |r: f64, wobble: f64| -> Vec<[f64; 2]> {
            (0..=72)
                .map(|i| {
                    let th = i as f64 * std::f64::consts::PI / 36.0;
                    let k = r.sqrt() * (1.0 + wobble * th.sin());
                    let u = DVector::from_vec(vec![k * th.cos(), k * th.sin()]);
                    let d = &l * u;
                    [VALUES[a] + d[0], VALUES[b] + d[1]]
                })
                .collect()
        };
        let gx: Vec<f64> = (0..9)
            .map(|i| VALUES[a] + (-3.5 + 7.0 * i as f64 / 8.0) * se[a])
            .collect();
        let gy: Vec<f64> = (0..9)
            .map(|i| VALUES[b] + (-3.5 + 7.0 * i as f64 / 8.0) * se[b])
            .collect();
        let grid_chi2 = gy
            .iter()
            .map(|&y| {
                gx.iter()
                    .map(|&x| {
                        let d = DVector::from_vec(vec![x - VALUES[a], y - VALUES[b]]);
                        chi2 + (d.transpose() * &inv * &d)[0]
                    })
                    .collect()
            })
            .collect();
        let wob = if b == 2 { 0.06 } else { 0.0 };
        out.push(ContourResult {
            pair: [NAMES[a].into(), NAMES[b].into()],
            levels: levels.clone(),
            level_probabilities: vec![0.6827, 0.9545],
            grid: ContourGrid {
                x: gx,
                y: gy,
                chi2: grid_chi2,
            },
            lines: levels
                .iter()
                .map(|&lv| ContourLine {
                    level: lv,
                    paths: vec![ring(lv, wob)],
                })
                .collect(),
            ellipse: levels
                .iter()
                .map(|&lv| ContourLine {
                    level: lv,
                    paths: vec![ring(lv, 0.0)],
                })
                .collect(),
            failed: 0,
            chi2_min: chi2,
            chi2_scale: 1.0,
            skipped: None,
        });
    }
    out
}

fn multistart(chi2: f64, se: &[f64]) -> MultistartResult {
    let other = [24.0, 40.0, 120.0];
    let mut rng = rng::stream(7, Stream::Multistart, 0);
    let mut runs = Vec::new();
    for i in 0..24 {
        let z: f64 = StandardNormal.sample(&mut rng);
        let start = vec![20.0 + z, 50.0 + 10.0 * z, 300.0 + 100.0 * z];
        let (end, c, minimum, converged) = match i % 12 {
            10 => (start.clone(), 30.0 * chi2, None, false),
            7 | 3 => (other.to_vec(), chi2 + 40.0, Some(1), true),
            _ => (
                (0..3).map(|k| VALUES[k] + 1e-4 * z * se[k]).collect(),
                chi2,
                Some(0),
                true,
            ),
        };
        runs.push(StartRun {
            start,
            end,
            chi2: c,
            converged,
            minimum,
            degenerate: (!converged).then_some(EndKind::NotConverged),
            rank_deficiency: 0,
            batch: 0,
            merged_early: false,
        });
    }
    let named = |v: &[f64]| {
        NAMES
            .iter()
            .zip(v)
            .map(|(n, x)| NamedValue {
                name: n.to_string(),
                value: *x,
            })
            .collect()
    };
    MultistartResult {
        starts: 24,
        batches: 1,
        stopped: StopRule::EstimateSmall,
        failed: 2,
        degenerate: DegenerateEnds {
            not_converged: 2,
            ..DegenerateEnds::default()
        },
        merged_early: 0,
        base_chi2: chi2,
        base_is_best: true,
        audited_is_best: true,
        minima: vec![
            Minimum {
                chi2,
                delta_chi2: 0.0,
                fraction: 18.0 / 22.0,
                count: 18,
                distinguishable: false,
                equivalent_permutations: vec![],
                parameters: named(&VALUES),
            },
            Minimum {
                chi2: chi2 + 40.0,
                delta_chi2: 40.0,
                fraction: 4.0 / 22.0,
                count: 4,
                distinguishable: true,
                equivalent_permutations: vec![],
                parameters: named(&other),
            },
        ],
        missed_minimum_estimate: 0.013,
        unseen_share: 0.0079,
        expected_minima: 2.1,
        box_bounds: vec![[0.0, 50.0], [0.0, 200.0], [1.0, 1e5]],
        runs,
    }
}

/// The full audit of the cooling demo: every diagnostic present.
pub fn cooling() -> AuditResults {
    let data = demo_data();
    let t = &data.x[0];
    let sigma = data.sigma.clone().unwrap();
    let n = data.len();
    let fitted: Vec<f64> = t.iter().map(|&x| model(&VALUES, x)).collect();
    let residuals: Vec<f64> = (0..n).map(|i| (data.y[i] - fitted[i]) / sigma[i]).collect();
    let chi2: f64 = residuals.iter().map(|r| r * r).sum();
    let dof = n - 3;
    let jw = DMatrix::from_fn(n, 3, |i, j| gradient(&VALUES, t[i])[j] / sigma[i]);
    let cov = (jw.transpose() * &jw).try_inverse().unwrap();
    let se: Vec<f64> = (0..3).map(|j| cov[(j, j)].sqrt()).collect();
    let corr: Vec<Vec<f64>> = (0..3)
        .map(|a| (0..3).map(|b| cov[(a, b)] / (se[a] * se[b])).collect())
        .collect();
    let sv = jw.clone().svd(false, false).singular_values;
    let condition_number = sv.max() / sv.min();
    let hat = &jw * (jw.transpose() * &jw).try_inverse().unwrap() * jw.transpose();
    let p_value = ChiSquared::new(dof as f64).unwrap().sf(chi2);
    let fit = FitResult {
        likelihood: fitaudit::fit::Likelihood::Gaussian,
        statistic: "chi2".to_string(),
        small_counts: None,
        errors_in_x: false,
        converged: true,
        stop_reason: StopReason::ChiSquaredChange,
        iterations: 9,
        evaluations: 14,
        chi2,
        dof,
        reduced_chi2: chi2 / dof as f64,
        p_value: Some(p_value),
        sigma_given: true,
        level: 0.6827,
        coverage_factor: 1.0,
        coverage_basis: fitaudit::fit::CoverageBasis::Normal,
        end: Default::default(),
        end_issues: vec![],
        parameters: (0..3)
            .map(|j| ParamResult {
                name: NAMES[j].into(),
                value: VALUES[j],
                std_error: Some(se[j]),
                expanded_uncertainty: Some(se[j]),
                at_bound: false,
                fixed: false,
            })
            .collect(),
        covariance: (0..3).map(|a| (0..3).map(|b| cov[(a, b)]).collect()).collect(),
        correlation: corr,
        covariance_scaled: false,
        condition_number,
        rank: 3,
        undetermined: vec![],
        fitted,
        residuals,
        leverage: (0..n).map(|i| hat[(i, i)]).collect(),
    };
    let curve_x: Vec<f64> = (0..400).map(|i| 1750.0 * i as f64 / 399.0).collect();
    let curve = Curve {
        y: curve_x.iter().map(|&x| model(&VALUES, x)).collect(),
        x: curve_x,
    };
    let settings = AuditSettings::default();
    let level = settings.level;
    let bootstrap = resample(
        "residual",
        Stream::Bootstrap,
        BOOT,
        &cov,
        &se,
        level,
        vec![FailedReplicate {
            index: 7,
            reason: "not-converged".into(),
        }],
    );
    let monte_carlo = resample("normal", Stream::MonteCarlo, MC, &cov, &se, level, vec![]);
    // The analytic bands of the model with its exact gradient, and the
    // percentile bands of the replicates above.
    let native = fitaudit::model::NativeModel::new(3, |a: &[f64], x: &[f64], g: &mut [f64]| {
        g.copy_from_slice(&gradient(a, x[0]));
        model(a, x[0])
    });
    let bands = fitaudit::diagnostics::bands::compute(
        &native,
        &data,
        &fit,
        &curve.x,
        Some(&bootstrap),
        Some(&monte_carlo),
    );
    // A derived quantity (the half time ln 2 tau) through the library's
    // propagation and resampled summaries.
    let ms = multistart(chi2, &se);
    let names: Vec<String> = NAMES.iter().map(|s| s.to_string()).collect();
    let symbols = fitaudit::model::Symbols {
        parameters: &names,
        constants: &[],
        variables: &[],
    };
    let half = fitaudit::diagnostics::derived::DerivedQuantity {
        name: "half_time".into(),
        formula: "ln(2)*tau".into(),
        tape: fitaudit::model::compile("ln(2)*tau", &symbols).unwrap(),
    };
    let derived = fitaudit::diagnostics::derived::evaluate(
        &[half],
        &fitaudit::diagnostics::verdict::VerdictInputs {
            fit: &fit,
            bootstrap: Some(&bootstrap),
            monte_carlo: Some(&monte_carlo),
            profile: None,
            multistart: Some(&ms),
            tolerance: settings.tolerance,
            sigma_given: true,
            level,
        },
    );
    // A sample read off the curve at 50 degC (mean of two readings).
    let mut with_t = names.clone();
    with_t.push("t_s".into());
    let inverse_model = fitaudit::diagnostics::inverse::InverseModel {
        tape: fitaudit::model::compile(
            "T_env + dT*exp(-t_s/tau)",
            &fitaudit::model::Symbols {
                parameters: &with_t,
                constants: &[],
                variables: &[],
            },
        )
        .unwrap(),
    };
    let inverse = fitaudit::diagnostics::inverse::evaluate(
        &[fitaudit::diagnostics::inverse::InverseRequest {
            name: "sample".into(),
            y: 50.0,
            readings: 2,
            sigma: None,
        }],
        &fitaudit::diagnostics::inverse::InverseInputs {
            model: &native,
            inverse_model: &inverse_model,
            data: &data,
            fit: &fit,
            monte_carlo: Some(&monte_carlo),
            seed: 1,
        },
    );
    // Curvature measures and Box's bias through the library (the native
    // model has no exact second derivatives: central differences).
    let nonlinearity = fitaudit::diagnostics::nonlinearity::compute(&native, &data, &fit);
    let sc = &fitaudit::demo::SCENARIOS[0];
    AuditResults {
        schema_version: SCHEMA_VERSION,
        provenance: Provenance {
            tool: "fitaudit".into(),
            version: "0.1.0".into(),
            command_line: "fitaudit audit demo-data/cooling.toml --out out/cooling".into(),
            date: "2026-12-01T20:07:42Z".into(),
            threads: 2,
        },
        study: StudyInfo {
            name: "cooling".into(),
            title: Some("Cooling of a sealed vial".into()),
            path: "demo-data/cooling.toml".into(),
            data_file: Some("demo-data/cooling.csv".into()),
            formula: "T_env + dT*exp(-t_s/tau)".into(),
            points: n,
            sigma_given: true,
            study_sha256: Some(sha(sc.study)),
            data_sha256: Some(sha(sc.data)),
        },
        settings,
        diagnostics_run: Diagnostic::SELECTABLE.to_vec(),
        start_fit: None,
        rebased: false,
        bootstrap: Some(bootstrap),
        monte_carlo: Some(monte_carlo),
        profile: Some(profile(&cov, &se, chi2)),
        contours: Some(contours(&cov, &se, chi2)),
        multistart: Some(ms),
        coverage: Some(coverage(&se, level)),
        nonlinearity,
        verdicts: verdicts(&se, level),
        derived,
        inverse,
        data,
        fit,
        curve: Some(curve),
        bands,
        datasets: Vec::new(),
        reduction: None,
        report: Default::default(),
    }
}

fn finding(rule: Rule, diagnostic: Source, status: Status, numbers: &[(&str, f64)]) -> Finding {
    Finding {
        rule,
        diagnostic,
        status,
        numbers: numbers.iter().map(|(k, v)| (k.to_string(), *v)).collect(),
        detail: None,
    }
}

/// Hand-made verdicts: T_env and dT hold (analytic quote), tau is doubtful
/// by its profile half-widths and its bootstrap spread (profile quote).
fn verdicts(se: &[f64], level: f64) -> Vec<Verdict> {
    let agree = |j: usize| {
        vec![
            finding(
                Rule::SpreadRatio,
                Source::Bootstrap,
                Status::Holds,
                &[
                    ("ratio", 1.03),
                    ("robust_std", 1.03 * se[j]),
                    ("std", 1.04 * se[j]),
                    ("null_dof", 216.2),
                    ("p_value", 0.52),
                    ("clear_p", 0.001),
                    ("tolerance", 0.2),
                ],
            ),
            finding(
                Rule::GoodnessOfFit,
                Source::Fit,
                Status::Holds,
                &[
                    ("chi2", 30.1),
                    ("dof", 33.0),
                    ("birge_ratio", (30.1f64 / 33.0).sqrt()),
                    ("p_value", 0.78),
                    ("clear_p", 0.001),
                    ("tolerance", 0.2),
                ],
            ),
        ]
    };
    let quote = |j: usize| {
        Some(Quote {
            kind: QuoteKind::Analytic,
            lower: VALUES[j] - se[j],
            upper: VALUES[j] + se[j],
            level,
        })
    };
    vec![
        Verdict {
            parameter: "T_env".into(),
            status: Status::Holds,
            quote: quote(0),
            no_quote: None,
            findings: agree(0),
        },
        Verdict {
            parameter: "dT".into(),
            status: Status::Holds,
            quote: quote(1),
            no_quote: None,
            findings: agree(1),
        },
        Verdict {
            parameter: "tau".into(),
            status: Status::Doubtful,
            quote: Some(Quote {
                kind: QuoteKind::Profile,
                lower: VALUES[2] - 0.75 * se[2],
                upper: VALUES[2] + 1.3 * se[2],
                level,
            }),
            no_quote: None,
            findings: vec![
                finding(
                    Rule::ProfileHalfWidths,
                    Source::Profile,
                    Status::Doubtful,
                    &[
                        ("ratio_below", 0.75),
                        ("ratio_above", 1.3),
                        ("covariance_half_width", se[2]),
                        ("tolerance", 0.2),
                        ("fail_low", 0.5),
                        ("fail_high", 2.0),
                    ],
                ),
                finding(
                    Rule::SpreadRatio,
                    Source::Bootstrap,
                    Status::Doubtful,
                    &[
                        ("ratio", 1.25),
                        ("robust_std", 1.25 * se[2]),
                        ("std", 1.3 * se[2]),
                        ("null_dof", 216.2),
                        ("p_value", 1e-6),
                        ("clear_p", 0.001),
                        ("tolerance", 0.2),
                    ],
                ),
            ],
        },
    ]
}

/// The parameter specs of the cooling study.
pub fn specs() -> Vec<ParamSpec> {
    vec![
        ParamSpec::free("T_env", 20.0),
        ParamSpec {
            min: 0.0,
            ..ParamSpec::free("dT", 50.0)
        },
        ParamSpec {
            min: 1.0,
            max: 1e5,
            ..ParamSpec::free("tau", 300.0)
        },
    ]
}

/// Renames the parameters everywhere in the record.
pub fn rename(r: &mut AuditResults, new: [&str; 3]) {
    let map = |s: &mut String| {
        if let Some(j) = NAMES.iter().position(|n| n == s) {
            *s = new[j].to_string();
        }
    };
    r.fit.parameters.iter_mut().for_each(|p| map(&mut p.name));
    for rs in [r.bootstrap.as_mut(), r.monte_carlo.as_mut()]
        .into_iter()
        .flatten()
    {
        rs.parameters.iter_mut().for_each(|p| map(&mut p.name));
    }
    if let Some(p) = r.profile.as_mut() {
        p.parameters.iter_mut().for_each(|p| map(&mut p.name));
    }
    for c in r.contours.iter_mut().flatten() {
        c.pair.iter_mut().for_each(map);
    }
    if let Some(ms) = r.multistart.as_mut() {
        for m in &mut ms.minima {
            m.parameters.iter_mut().for_each(|p| map(&mut p.name));
        }
    }
    if let Some(c) = r.coverage.as_mut() {
        c.parameters.iter_mut().for_each(|p| map(&mut p.name));
    }
    r.verdicts.iter_mut().for_each(|v| map(&mut v.parameter));
}

/// A coverage simulation summarised by the library from hand-made
/// replicate outcomes: 300 replicates, one refit failed; replicate `k`'s
/// analytic interval is `truth + d_k +- k u` with `d_k` spread evenly over
/// `[-1.5, 1.5] k u` (so that about two thirds cover), the profile the
/// same interval with its upper end open in every tenth replicate, and the
/// quote the analytic interval except for every twentieth (none: the
/// profile agrees).
pub fn coverage(se: &[f64], level: f64) -> fitaudit::diagnostics::coverage::CoverageResult {
    use fitaudit::diagnostics::coverage::{
        summarise, CoverageSetup, ProfileEnds, ReplicateIntervals, ReplicateOutcome,
    };
    use fitaudit::diagnostics::verdict::NoQuote;
    let r = 300;
    let outcomes: Vec<ReplicateOutcome> = (0..r)
        .map(|k| {
            if k == 17 {
                return ReplicateOutcome {
                    index: k,
                    failed: Some("not-converged".into()),
                    parameters: Vec::new(),
                    refits: 1,
                };
            }
            let d = 3.0 * (k as f64 + 0.5) / r as f64 - 1.5;
            let parameters = (0..3)
                .map(|j| {
                    let iv = [VALUES[j] + (d - 1.0) * se[j], VALUES[j] + (d + 1.0) * se[j]];
                    ReplicateIntervals {
                        analytic: Some(iv),
                        profile: Some(ProfileEnds {
                            lower: iv[0],
                            upper: iv[1],
                            open_below: false,
                            open_above: k % 10 == 3,
                        }),
                        quote: (k % 20 != 5).then_some((QuoteKind::Analytic, iv)),
                        no_quote: (k % 20 == 5).then_some(NoQuote::ProfileAgrees),
                    }
                })
                .collect();
            ReplicateOutcome {
                index: k,
                failed: None,
                parameters,
                refits: 40,
            }
        })
        .collect();
    summarise(
        &CoverageSetup {
            names: NAMES.iter().map(|s| s.to_string()).collect(),
            truth: VALUES.to_vec(),
            level,
            replicates: r,
            noise: "normal".into(),
            student_t_dof: None,
            noise_scale: 1.0,
            moves_x: false,
        },
        &outcomes,
    )
}

/// The cooling audit with hostile user strings everywhere a user can put
/// one, and a base fit that is not the best minimum.
pub fn hostile() -> AuditResults {
    let mut r = cooling();
    rename(&mut r, ["T&env", "d\"T", "tau<1"]);
    r.study.title = Some("<script>alert(1)</script> & \"quotes\" | pipes".into());
    r.study.name = "cool<ing>".into();
    r.study.path = "studies/a&b/<cooling>.toml".into();
    r.study.data_file = Some("data/\"x\"|y.csv".into());
    r.study.formula = "T&env + d\"T*exp(-t/tau<1) <script>".into();
    r.provenance.command_line = "fitaudit audit '<script>x</script>' --out \"a&b\"".into();
    r.data.x_names = vec!["t <s>".into()];
    r.data.y_name = "temp|&C".into();
    let ms = r.multistart.as_mut().unwrap();
    ms.base_is_best = false;
    ms.audited_is_best = false;
    ms.minima.swap(0, 1);
    ms.minima[0].chi2 = ms.base_chi2 - 25.0;
    ms.minima[1].delta_chi2 = 25.0;
    r
}

/// The cooling audit re-based: the study's start reached a local minimum
/// 25 above the audited fit, which is the best minimum the search found.
pub fn rebased() -> AuditResults {
    let mut r = cooling();
    let mut start = r.fit.clone();
    start.chi2 += 25.0;
    start.parameters[2].value *= 3.0;
    r.start_fit = Some(start);
    r.rebased = true;
    let ms = r.multistart.as_mut().unwrap();
    ms.base_chi2 += 25.0;
    ms.base_is_best = false;
    ms.audited_is_best = true;
    ms.minima[1].chi2 = ms.base_chi2;
    ms.minima[1].delta_chi2 = 25.0;
    r
}

/// Only the base fit: no diagnostic ran.
pub fn fit_only() -> AuditResults {
    let mut r = cooling();
    r.diagnostics_run.clear();
    r.bootstrap = None;
    r.monte_carlo = None;
    r.profile = None;
    r.contours = None;
    r.multistart = None;
    r.coverage = None;
    for v in &mut r.verdicts {
        v.status = Status::Holds;
        v.findings.clear();
    }
    r
}

/// Non-finite numbers in places where failed refits leave them.
pub fn with_non_finite() -> AuditResults {
    let mut r = cooling();
    r.fit.condition_number = f64::INFINITY;
    r.profile.as_mut().unwrap().parameters[2].points[20][1] = f64::NAN;
    r.profile.as_mut().unwrap().parameters[2].upper_found = false;
    r.profile.as_mut().unwrap().parameters[2].upper = f64::INFINITY;
    r.profile.as_mut().unwrap().parameters[2].upper_status = EndStatus::ScanLimit;
    r.profile.as_mut().unwrap().parameters[2].non_identifiable = true;
    r.contours.as_mut().unwrap()[0].grid.chi2[0][0] = f64::NAN;
    r.contours.as_mut().unwrap()[0].failed = 1;
    r.fit.correlation[0][2] = f64::NAN;
    r.multistart.as_mut().unwrap().runs[10].chi2 = f64::NAN;
    r
}

/// Two independent variables (no curve).
pub fn two_variables() -> AuditResults {
    let mut r = cooling();
    let t = r.data.x[0].clone();
    r.data.x.push(t.iter().map(|v| 0.5 * v + 3.0).collect());
    r.data.x_names.push("u".into());
    r.curve = None;
    r.bands = None;
    r
}

/// The profile of tau dips below the base fit, and one contour pair was skipped.
pub fn profile_below() -> AuditResults {
    use fitaudit::diagnostics::contour::ContourError;
    use fitaudit::diagnostics::profile::LowerPoint;
    let mut r = cooling();
    let chi2 = r.fit.chi2;
    let p = r.profile.as_mut().unwrap();
    p.base_not_minimum = true;
    p.parameters[2].below_minimum = Some(LowerPoint {
        value: 343.5,
        chi2: chi2 - 0.75,
        below_by: 0.75,
        parameters: vec![21.45, 58.1, 343.5],
    });
    let c = &mut r.contours.as_mut().unwrap()[2];
    c.skipped = Some(ContourError::EmptyRange { name: "tau".into() });
    c.grid = ContourGrid {
        x: vec![],
        y: vec![],
        chi2: vec![],
    };
    c.lines.clear();
    c.ellipse.clear();
    r
}

/// The cooling audit as if its readings were two data sets sharing every
/// parameter: the first 20 readings (`early`) and the rest (`late`), with
/// the data-set column, the groups and each data set's share computed from
/// the residuals (contributions add up to chi2, dof shares to dof).
pub fn joint() -> AuditResults {
    use fitaudit::audit::DatasetShare;
    use fitaudit::data::DataGroup;
    let mut r = cooling();
    let n = r.data.len();
    let split = 20;
    let names: Vec<String> = r.fit.parameters.iter().map(|p| p.name.clone()).collect();
    r.data
        .x
        .push((0..n).map(|i| if i < split { 0.0 } else { 1.0 }).collect());
    r.data.x_names.push("dataset".into());
    let m = names.len() as f64;
    let mut shares = Vec::new();
    for (g, (name, range)) in [("early", 0..split), ("late", split..n)].into_iter().enumerate() {
        r.data.groups.push(DataGroup {
            name: name.into(),
            formula: r.study.formula.clone(),
            file: Some(format!("demo-data/cooling_{name}.csv")),
            sha256: Some(format!("{:064x}", g + 1)),
            x_names: vec![r.data.x_names[0].clone()],
            y_name: r.data.y_name.clone(),
            parameters: names.clone(),
            start: range.start,
            len: range.len(),
        });
        let chi2: f64 = r.fit.residuals[range.clone()].iter().map(|v| v * v).sum();
        let dof_share = range.len() as f64 - m / 2.0;
        let curve = r.curve.as_ref().map(|c| Curve {
            x: c.x.clone(),
            y: c.y.clone(),
        });
        shares.push(DatasetShare {
            name: name.into(),
            formula: r.study.formula.clone(),
            points: range.len(),
            start: range.start,
            parameters: names.clone(),
            shared: names.clone(),
            chi2,
            chi2_fraction: chi2 / r.fit.chi2,
            dof_share,
            reduced_chi2: Some(chi2 / dof_share),
            curve,
        });
    }
    r.datasets = shares;
    r.study.formula = "early: T_env + dT*exp(-t_s/tau); late: T_env + dT*exp(-t_s/tau)".into();
    r.curve = None;
    r.bands = None;
    r
}
