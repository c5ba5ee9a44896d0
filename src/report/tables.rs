//! The tables of the report as plain text cells, shared by the HTML page,
//! the Markdown summary and the terminal: every number is formatted here,
//! once, and each renderer only escapes and lays out the cells.

use std::collections::BTreeMap;

use crate::audit::AuditResults;
use crate::diagnostics::derived::DerivedResampled;
use crate::diagnostics::inverse::InverseProblem;
use crate::diagnostics::profile::EndStatus;
use crate::diagnostics::resample::{BcaWithheld, ResampleResult, ResampledParameter};
use crate::diagnostics::verdict::Status;
use crate::fit::{CoverageBasis, EndIssue, FitResult, Likelihood, ParamResult, StopReason};
use crate::report::{findings, format};
use crate::settings::{BootstrapScheme, WildWeights};

/// A table: header cells and rows of cells.
#[derive(Debug, Clone, PartialEq)]
pub struct Table {
    /// Column headings.
    pub header: Vec<String>,
    /// Rows, each as long as the header.
    pub rows: Vec<Vec<String>>,
}

fn s(x: impl Into<String>) -> String {
    x.into()
}

/// The word of a verdict status.
pub fn status_word(st: Status) -> &'static str {
    match st {
        Status::Holds => "holds",
        Status::Doubtful => "doubtful",
        Status::Fails => "fails",
    }
}

/// Why the optimiser stopped, in words.
pub fn stop_words(r: StopReason) -> &'static str {
    match r {
        StopReason::Gradient => "gradient below tolerance",
        StopReason::ChiSquaredChange => "chi-squared change below tolerance",
        StopReason::Step => "step below tolerance",
        StopReason::IterationLimit => "iteration limit reached",
        StopReason::NonFinite => "model not finite",
        StopReason::Stalled => "stalled short of a minimum (steps negligible, gradient not zero)",
        StopReason::Plateau => "on a plateau (the model no longer depends on a parameter)",
        StopReason::Runaway => "a parameter ran away",
    }
}

/// The p-value of chi2, or why there is none.
pub fn p_value_text(fit: &FitResult) -> String {
    match fit.p_value {
        Some(p) => format::p_value(p),
        None => s(
            "none (no sigma given: chi2 is a sum of squares in the units of y, not chi-squared distributed)",
        ),
    }
}

/// Label of chi2: a chi-squared with stated sigma, a sum of squares without.
pub fn chi2_label(fit: &FitResult) -> &'static str {
    if fit.likelihood == Likelihood::Poisson {
        "Deviance (Poisson likelihood ratio)"
    } else if fit.errors_in_x {
        "Chi-squared (effective variance, errors in x)"
    } else if fit.sigma_given {
        "Chi-squared"
    } else {
        "Sum of squared residuals (no sigma given)"
    }
}

/// Label and value of `chi2 / dof`: the reduced chi-squared with stated
/// sigma, the residual variance `s^2` without.
pub fn dispersion(fit: &FitResult) -> (&'static str, String) {
    if fit.likelihood == Likelihood::Poisson {
        ("Deviance / dof", format::sig(fit.reduced_chi2, 4))
    } else if fit.sigma_given {
        (
            "Reduced chi-squared (chi-squared / dof)",
            format::sig(fit.reduced_chi2, 4),
        )
    } else {
        (
            "Residual variance s^2 (sum of squares / dof)",
            format::sig(fit.reduced_chi2, 4),
        )
    }
}

/// The coverage factor in words: `2.571 (Student's t, 5 dof, 95 % level)`.
pub fn coverage_words(fit: &FitResult) -> String {
    let basis = match fit.coverage_basis {
        CoverageBasis::Normal => s("normal"),
        CoverageBasis::StudentT => format!("Student's t, {} dof", fit.dof),
    };
    format!(
        "{} ({basis}, {} level)",
        format::sig(fit.coverage_factor, 4),
        format::percent(fit.level, 4)
    )
}

/// Header of the expanded-uncertainty column: `U (k = 2.571)`.
pub fn expanded_header(fit: &FitResult) -> String {
    format!("U (k = {})", format::sig(fit.coverage_factor, 4))
}

/// One sentence per end issue of the fit.
pub fn end_issue_words(fit: &FitResult) -> Vec<String> {
    fit.end_issues
        .iter()
        .map(|e| match e {
            EndIssue::Stalled {
                gn_decrease,
                tolerance,
            } => format!(
                "not at a minimum: a Gauss-Newton step would still lower chi2 by {} (tolerance {})",
                format::sig(*gn_decrease, 3),
                format::sig(*tolerance, 3)
            ),
            EndIssue::Plateau { parameter, value } => format!(
                "plateau: the model no longer depends on {parameter} (= {}) at the end point",
                format::sig(*value, 6)
            ),
            EndIssue::Runaway {
                parameter,
                start,
                value,
            } => format!(
                "runaway: {parameter} went from {} to {} and the data do not determine it there",
                format::sig(*start, 6),
                format::sig(*value, 6)
            ),
            EndIssue::RankDeficient { rank, estimated } => format!(
                "the weighted Jacobian has rank {rank} of {estimated} at the end point: the minimum \
                 is not unique"
            ),
        })
        .collect()
}

/// The verdict table: parameter, the interval to quote, status, reasons
/// (joined by "; ").
pub fn verdicts(results: &AuditResults) -> Table {
    Table {
        header: vec![s("Parameter"), s("Quote"), s("Verdict"), s("Reasons")],
        rows: results
            .verdicts
            .iter()
            .map(|v| {
                let reasons = findings::reasons_with(v, &results.fit.statistic);
                vec![
                    v.parameter.clone(),
                    findings::quote_cell(results, v),
                    s(status_word(v.status)),
                    if reasons.is_empty() {
                        s(format::ABSENT)
                    } else {
                        reasons.join("; ")
                    },
                ]
            })
            .chain(results.derived.iter().map(|d| {
                let v = &d.verdict;
                let reasons = findings::reasons_with(v, &results.fit.statistic);
                vec![
                    format!("{} (derived)", d.name),
                    findings::quote_text(v, Some(d.value), d.std_error),
                    s(status_word(v.status)),
                    if reasons.is_empty() {
                        s(format::ABSENT)
                    } else {
                        reasons.join("; ")
                    },
                ]
            }))
            .collect(),
    }
}

/// A resampled interval `[lower, upper]` at the precision of `se`.
fn derived_interval(r: Option<&DerivedResampled>, se: Option<f64>) -> (String, String) {
    match r {
        Some(r) if r.used >= 2 => (
            format::value_and_uncertainty(0.0, Some(r.summary.std)).1,
            format!(
                "[{}, {}]",
                format::at_precision_of(r.summary.lower, se),
                format::at_precision_of(r.summary.upper, se)
            ),
        ),
        _ => (s(format::ABSENT), s(format::ABSENT)),
    }
}

/// What the derived-quantity table shows, for the line under it.
pub const DERIVED_NOTE: &str = "Standard errors of derived quantities by the law of propagation of \
uncertainty with the full covariance (JCGM 100:2008, 5.2); bootstrap and Monte Carlo columns from the \
quantity evaluated at every replicate estimate (the Monte Carlo interval is the probabilistically \
symmetric one of JCGM 101:2008). Derived quantities have no profile interval.";

/// The derived-quantity table: name, formula, value, standard uncertainty
/// by propagation, expanded uncertainty, bootstrap and Monte Carlo SD and
/// interval, quote.
pub fn derived(results: &AuditResults) -> Table {
    Table {
        header: vec![
            s("Quantity"),
            s("Formula"),
            s("Value"),
            s("Standard error"),
            expanded_header(&results.fit),
            s("Bootstrap SD"),
            s("Bootstrap interval"),
            s("Monte Carlo SD"),
            s("Monte Carlo interval"),
            s("Quote"),
        ],
        rows: results
            .derived
            .iter()
            .map(|d| {
                let (v, u) = format::value_and_uncertainty(d.value, d.std_error);
                let (bsd, bint) = derived_interval(d.bootstrap.as_ref(), d.std_error);
                let (msd, mint) = derived_interval(d.monte_carlo.as_ref(), d.std_error);
                vec![
                    d.name.clone(),
                    d.formula.clone(),
                    v,
                    u,
                    d.expanded_uncertainty.map_or(s(format::ABSENT), |x| {
                        format::value_and_uncertainty(0.0, Some(x)).1
                    }),
                    bsd,
                    bint,
                    msd,
                    mint,
                    findings::quote_text(&d.verdict, Some(d.value), d.std_error),
                ]
            })
            .collect(),
    }
}

/// Why an inverse prediction has no value, in words.
pub fn inverse_problem_words(p: InverseProblem) -> &'static str {
    match p {
        InverseProblem::NoRoot => "the fitted curve does not reach this response inside the data range",
        InverseProblem::SeveralRoots => {
            "the fitted curve reaches this response more than once inside the data range"
        }
        InverseProblem::NotEvaluable => "the model cannot be evaluated for it (one x column is needed)",
    }
}

/// The inverse-prediction table: one row per sample.
pub fn inverse(results: &AuditResults) -> Table {
    Table {
        header: vec![
            s("Sample"),
            s("Response"),
            s("Readings"),
            s("x"),
            s("Standard error"),
            expanded_header(&results.fit),
            s("Interval"),
            s("u from the fit"),
            s("u from the reading"),
            s("Monte Carlo SD"),
            s("Monte Carlo interval"),
            s("Note"),
        ],
        rows: results
            .inverse
            .iter()
            .map(|r| {
                let (x, u) = match r.x {
                    Some(x) => format::value_and_uncertainty(x, r.std_error),
                    None => (s(format::ABSENT), s(format::ABSENT)),
                };
                let unc = |v: Option<f64>| {
                    v.map_or(s(format::ABSENT), |u| {
                        format::value_and_uncertainty(0.0, Some(u)).1
                    })
                };
                let interval = match (r.lower, r.upper) {
                    (Some(l), Some(h)) => format!(
                        "[{}, {}]",
                        format::at_precision_of(l, r.std_error),
                        format::at_precision_of(h, r.std_error)
                    ),
                    _ => s(format::ABSENT),
                };
                let (mc_sd, mc_int) = match &r.monte_carlo {
                    Some(m) if m.used >= 2 => (
                        unc(Some(m.std)),
                        format!(
                            "[{}, {}]",
                            format::at_precision_of(m.lower, r.std_error),
                            format::at_precision_of(m.upper, r.std_error)
                        ),
                    ),
                    _ => (s(format::ABSENT), s(format::ABSENT)),
                };
                let mut note = r.problem.map(|p| s(inverse_problem_words(p))).unwrap_or_default();
                if let Some(m) = r.monte_carlo.as_ref().filter(|m| m.failed > 0) {
                    note = format!("{} Monte Carlo trials without a root in range", m.failed);
                }
                vec![
                    r.name.clone(),
                    format!("{}", r.y),
                    r.readings.to_string(),
                    x,
                    u,
                    unc(r.std_error.map(|u| r.coverage_factor * u)),
                    interval,
                    unc(r.u_fit),
                    unc(r.u_reading),
                    mc_sd,
                    mc_int,
                    note,
                ]
            })
            .collect(),
    }
}

/// What the inverse-prediction table shows, for the line under it.
pub const INVERSE_NOTE: &str = "x read off the fitted curve where it reaches each response, inside \
the data range; its standard error combines the fit's covariance and the reading (standard \
uncertainty of one reading over the square root of the readings), propagated through the implicit \
function (JCGM 100:2008, 5.2). The Monte Carlo columns solve each trial's refitted curve for a \
simulated reading.";

/// The note of a parameter: fixed, at a bound, undetermined.
pub fn param_note(p: &ParamResult) -> String {
    let mut notes = Vec::new();
    if p.fixed {
        notes.push("fixed");
    }
    if p.at_bound {
        notes.push("at a bound");
    }
    if !p.fixed && p.std_error.is_none() {
        notes.push("undetermined");
    }
    notes.join(", ")
}

/// Relative standard error as a percentage with two significant digits.
pub fn relative_error(p: &ParamResult) -> String {
    match p.std_error {
        Some(se) if p.value != 0.0 && p.value.is_finite() && se.is_finite() => {
            format::percent(se / p.value.abs(), 2)
        }
        _ => s(format::ABSENT),
    }
}

/// The fit table: parameter, value, standard error, expanded
/// uncertainty, relative error, note.
pub fn fit_params(fit: &FitResult) -> Table {
    Table {
        header: vec![
            s("Parameter"),
            s("Value"),
            s("Standard error"),
            expanded_header(fit),
            s("Relative error"),
            s("Note"),
        ],
        rows: fit
            .parameters
            .iter()
            .map(|p| {
                let (v, u) = format::value_and_uncertainty(p.value, p.std_error);
                vec![
                    p.name.clone(),
                    v,
                    u,
                    expanded(p),
                    relative_error(p),
                    param_note(p),
                ]
            })
            .collect(),
    }
}

/// The expanded uncertainty, to two significant digits like the standard
/// uncertainty.
pub fn expanded(p: &ParamResult) -> String {
    match p.expanded_uncertainty {
        Some(u) => format::value_and_uncertainty(0.0, Some(u)).1,
        None => s(format::ABSENT),
    }
}

/// The warning on a Poisson fit with many small counts, if it applies.
pub fn small_counts_warning(fit: &FitResult) -> Option<String> {
    let sc = fit.small_counts?;
    sc.warning.then(|| {
        format!(
            "{} of {} bins ({}) hold fewer than {} counts: the chi-squared approximation of the deviance's \
             distribution is unreliable there, so its p-value is only indicative and the goodness-of-fit rule \
             does not vote",
            sc.below,
            sc.bins,
            format::percent(sc.share, 2),
            crate::fit::SMALL_COUNT
        )
    })
}

/// Goodness of fit as (quantity, value) pairs.
pub fn goodness(fit: &FitResult) -> Vec<(String, String)> {
    let mut out = vec![
        (s(chi2_label(fit)), format::chi2(fit.chi2)),
        (s("Degrees of freedom"), fit.dof.to_string()),
        (s(dispersion(fit).0), dispersion(fit).1),
        (
            s(if fit.likelihood == Likelihood::Poisson {
                "p-value, P(chi-squared_dof > deviance) (chi-squared approximation)"
            } else {
                "p-value, P(chi-squared_dof > observed)"
            }),
            p_value_text(fit),
        ),
        (s("Coverage factor k of value +- k u"), coverage_words(fit)),
        (
            s("Condition number of the weighted Jacobian"),
            if fit.condition_number == f64::MAX {
                s("infinite (the weighted Jacobian is singular)")
            } else {
                format::sig(fit.condition_number, 3)
            },
        ),
        (s("Rank"), format!("{} of {}", fit.rank, fit.parameters.len())),
        (
            s("Covariance"),
            s(if fit.covariance_scaled {
                "scaled by the reduced chi-squared"
            } else if fit.likelihood == Likelihood::Poisson {
                "absolute (Fisher information of the Poisson likelihood)"
            } else {
                "absolute (from the stated uncertainties)"
            }),
        ),
        (
            s("Converged"),
            format!(
                "{} ({})",
                if fit.converged { "yes" } else { "no" },
                stop_words(fit.stop_reason)
            ),
        ),
        (
            s("Iterations / model evaluations"),
            format!("{} / {}", fit.iterations, fit.evaluations),
        ),
    ];
    for line in end_issue_words(fit) {
        out.push((s("At the end point"), line));
    }
    if let Some(w) = small_counts_warning(fit) {
        out.push((s("Small counts"), w));
    }
    for (k, dir) in fit.undetermined.iter().enumerate() {
        let terms: Vec<String> = dir
            .iter()
            .map(|(n, c)| format!("{} {}", format::sig(*c, 3), n))
            .collect();
        out.push((format!("Undetermined direction {}", k + 1), terms.join(" + ")));
    }
    out
}

fn interval(lo: f64, hi: f64, se: Option<f64>) -> String {
    format!(
        "[{}, {}]",
        format::at_precision_of(lo, se),
        format::at_precision_of(hi, se)
    )
}

/// Why a BCa interval is withheld, in words.
pub fn bca_withheld_words(w: BcaWithheld) -> &'static str {
    match w {
        BcaWithheld::NotRequested => "not requested",
        BcaWithheld::JackknifeFailed => "a jackknife refit failed",
        BcaWithheld::OneSided => "every replicate lies on one side of the estimate",
        BcaWithheld::BiasCorrection => "degenerate bias correction",
        BcaWithheld::Acceleration => "degenerate acceleration",
        BcaWithheld::ExtremeQuantile => "an end falls among the outermost replicates",
        BcaWithheld::ZeroWidth => "zero width",
        BcaWithheld::ExcludesEstimate => "it does not contain the estimate",
        BcaWithheld::TooFewReplicates => "too few replicates",
    }
}

/// The robust SD ratio with its standard uncertainty under a correct u,
/// `1 / sqrt(2 null_dof)`.
fn robust_ratio_cell(p: &ResampledParameter) -> String {
    ratio_pm(p.robust_ratio, p.null_dof.map(|nu| (0.5 / nu).sqrt()))
}

fn ratio_pm(r: Option<f64>, u: Option<f64>) -> String {
    match (r, u) {
        // The one rounding rule: u to two significant digits, r at its place.
        (Some(r), Some(u)) if u.is_finite() && u > 0.0 => {
            let (r, u) = format::value_and_uncertainty(r, Some(u));
            format!("{r} \u{b1} {u}")
        }
        (Some(r), _) => format::ratio(r),
        _ => s(format::ABSENT),
    }
}

fn resampled<'a>(rs: Option<&'a ResampleResult>, name: &str) -> Option<&'a ResampledParameter> {
    rs.and_then(|rs| rs.parameters.iter().find(|p| p.name == name))
}

/// How one side of a profile scan ended, in words.
pub fn end_status_words(st: EndStatus) -> &'static str {
    match st {
        EndStatus::Found => "crossed the threshold",
        EndStatus::Bound => "stayed below the threshold up to the parameter's bound",
        EndStatus::ScanLimit => "stayed below the threshold up to the scan limit",
        EndStatus::Unresolved => "refits failed before the crossing",
    }
}

/// One profile end: the value, or why it is open.
fn profile_end(x: f64, found: bool, status: EndStatus, se: Option<f64>) -> String {
    let v = format::at_precision_of(x, se);
    match (found, status) {
        (true, _) | (false, EndStatus::Found) if x.is_finite() => v,
        (_, EndStatus::Bound) => format!("open to the bound {v}"),
        (_, EndStatus::Unresolved) => format!("unresolved near {v}"),
        _ if x.is_finite() => format!("open beyond {v}"),
        _ => "open".to_string(),
    }
}

/// The interval comparison, split into readable tables (each fits a
/// 1280 px page and an A4 print): `(heading, table)` for the bootstrap, the
/// Monte Carlo and the profile, each beside the analytic value and
/// interval. Per parameter, at the study's level; an SD ratio carries its
/// standard uncertainty under a correct u.
pub fn comparisons(results: &AuditResults) -> Vec<(String, Table)> {
    let k = crate::diagnostics::verdict::coverage_factor(&results.fit, results.settings.level);
    let ku = format!("\u{b1}{}u", format::sig(k, 3));
    let absent = || s(format::ABSENT);
    let params: Vec<&ParamResult> = results.fit.parameters.iter().filter(|p| !p.fixed).collect();
    let lead = |p: &ParamResult| -> Vec<String> {
        let se = p.std_error.filter(|u| u.is_finite() && *u > 0.0);
        let (v, u) = format::value_and_uncertainty(p.value, p.std_error);
        vec![
            p.name.clone(),
            v,
            u,
            match se {
                Some(u) => interval(p.value - k * u, p.value + k * u, se),
                None => absent(),
            },
        ]
    };
    let head = |rest: &[&str]| -> Vec<String> {
        let mut h = vec![s("Parameter"), s("Value"), s("u"), format!("Analytic {ku}")];
        h.extend(rest.iter().map(|r| s(*r)));
        h
    };
    // The resampling tables leave out the value (the analytic interval is
    // centred on it) so that they stay narrow.
    let no_value = |mut r: Vec<String>| {
        r.remove(1);
        r
    };

    let mut boot = Table {
        header: no_value(head(&["SD", "Percentile", "BCa", "Robust SD / u"])),
        rows: Vec::new(),
    };
    let mut mc = Table {
        header: no_value(head(&["SD", "Symmetric", "Shortest", "Robust SD / u"])),
        rows: Vec::new(),
    };
    let mut prof = Table {
        header: head(&["Profile interval", "Half-width / (ku)", "Asymmetry"]),
        rows: Vec::new(),
    };
    for p in &params {
        let se = p.std_error.filter(|u| u.is_finite() && *u > 0.0);
        if let Some(b) = resampled(results.bootstrap.as_ref(), &p.name) {
            let mut row = lead(p);
            row.push(format::at_precision_of(b.std, se.or(Some(b.std))));
            row.push(interval(b.lower, b.upper, se));
            row.push(match (b.bca_lower, b.bca_upper, b.bca_withheld) {
                (Some(l), Some(h), _) => interval(l, h, se),
                (_, _, Some(w)) => format!("withheld: {}", bca_withheld_words(w)),
                _ => absent(),
            });
            row.push(robust_ratio_cell(b));
            boot.rows.push(no_value(row));
        }
        if let Some(m) = resampled(results.monte_carlo.as_ref(), &p.name) {
            let mut row = lead(p);
            row.push(format::at_precision_of(m.std, se.or(Some(m.std))));
            row.push(interval(m.lower, m.upper, se));
            row.push(match (m.shortest_lower, m.shortest_upper) {
                (Some(l), Some(h)) => interval(l, h, se),
                _ => absent(),
            });
            row.push(robust_ratio_cell(m));
            mc.rows.push(no_value(row));
        }
        if let Some(q) = results
            .profile
            .as_ref()
            .and_then(|pr| pr.parameters.iter().find(|q| q.name == p.name))
        {
            let mut row = lead(p);
            row.push(format!(
                "[{}, {}]",
                profile_end(q.lower, q.lower_found, q.lower_status, se),
                profile_end(q.upper, q.upper_found, q.upper_status, se)
            ));
            row.push(match se {
                Some(u) if q.lower_found && q.upper_found => {
                    format::ratio((q.upper - q.lower) / (2.0 * k * u))
                }
                _ => absent(),
            });
            row.push(q.asymmetry.map(format::ratio).unwrap_or_else(absent));
            prof.rows.push(row);
        }
    }
    let mut out = Vec::new();
    if results.bootstrap.is_some() {
        out.push((s("Bootstrap"), boot));
    }
    if results.monte_carlo.is_some() {
        out.push((s("Monte Carlo (symmetric and shortest coverage intervals)"), mc));
    }
    if results.profile.is_some() {
        out.push((s("Chi-squared profile"), prof));
    }
    if out.is_empty() {
        // Only the analytic values: one table, so the section is never empty.
        out.push((
            s("Analytic"),
            Table {
                header: head(&[]),
                rows: params.iter().map(|p| lead(p)).collect(),
            },
        ));
    }
    out
}

fn reasons_counted(rs: &ResampleResult) -> String {
    let mut counts: BTreeMap<&str, usize> = BTreeMap::new();
    for f in &rs.failures {
        *counts.entry(f.reason.as_str()).or_default() += 1;
    }
    counts
        .iter()
        .map(|(r, n)| format!("{r}: {n}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Failure counts of every diagnostic: diagnostic, work done, failed, details.
pub fn failures(results: &AuditResults) -> Table {
    let mut rows = Vec::new();
    let not_run = |name: &str| vec![s(name), s("not run"), s(format::ABSENT), String::new()];
    let resample_row = |name: &str, unit: &str, rs: &ResampleResult| {
        let mut details = vec![reasons_counted(rs)];
        if let Some(stable) = rs.adaptive_stable {
            details.push(s(if stable {
                "adaptive rule reached stability"
            } else {
                "adaptive rule did not reach stability"
            }));
        }
        if rs.jackknife_refits > 0 {
            details.push(format!(
                "BCa acceleration from {1} linearised leave-one-out values, {0} failed{2}",
                rs.jackknife_failures.len(),
                rs.jackknife_refits,
                if rs.jackknife_failures.is_empty() {
                    ""
                } else {
                    " (BCa interval not computed)"
                }
            ));
        }
        let runaways: Vec<String> = rs
            .parameters
            .iter()
            .filter(|p| p.runaways > 0)
            .map(|p| format!("{} {}", p.name, p.runaways))
            .collect();
        if !runaways.is_empty() {
            details.push(format!(
                "runaway refits (kept, ignored by the robust spread): {}",
                runaways.join(", ")
            ));
        }
        if let Some(ns) = rs.noise_scale {
            details.push(format!("noise scale {}", format::sig(ns, 4)));
        }
        details.retain(|d| !d.is_empty());
        let details = details.join("; ");
        vec![
            s(name),
            format!(
                "{} {unit} run of {} ({} scheme)",
                rs.run, rs.replicates, rs.scheme
            ),
            rs.failed.to_string(),
            details,
        ]
    };
    match &results.bootstrap {
        Some(b) => rows.push(resample_row("Bootstrap", "replicates", b)),
        None => rows.push(not_run("Bootstrap")),
    }
    match &results.monte_carlo {
        Some(m) => rows.push(resample_row("Monte Carlo", "trials", m)),
        None => rows.push(not_run("Monte Carlo")),
    }
    match &results.profile {
        Some(p) => {
            let per: Vec<String> = p
                .parameters
                .iter()
                .filter(|q| q.failed > 0)
                .map(|q| format!("{}: {}", q.name, q.failed))
                .collect();
            let open: Vec<String> = p
                .parameters
                .iter()
                .filter(|q| !(q.lower_found && q.upper_found))
                .map(|q| q.name.clone())
                .collect();
            let mut details = vec![per.join(", ")];
            if !open.is_empty() {
                details.push(format!("interval open for {}", open.join(", ")));
            }
            let flat: Vec<String> = p
                .parameters
                .iter()
                .filter(|q| q.non_identifiable)
                .map(|q| q.name.clone())
                .collect();
            if !flat.is_empty() {
                details.push(format!("practically non-identifiable: {}", flat.join(", ")));
            }
            if p.base_not_minimum {
                details.push(s(
                    "a profile point lies below the base fit: the base fit is not the minimum",
                ));
            }
            details.retain(|d| !d.is_empty());
            let details = details.join("; ");
            rows.push(vec![
                s("Profile"),
                format!(
                    "{} profiles, {} points",
                    p.parameters.len(),
                    p.parameters.iter().map(|q| q.points.len()).sum::<usize>()
                ),
                p.failed.to_string(),
                details,
            ]);
        }
        None => rows.push(not_run("Profile")),
    }
    match &results.contours {
        Some(cs) => {
            let nodes: usize = cs.iter().map(|c| c.grid.x.len() * c.grid.y.len()).sum();
            let failed: usize = cs.iter().map(|c| c.failed).sum();
            let mut per: Vec<String> = cs
                .iter()
                .filter(|c| c.failed > 0)
                .map(|c| format!("{} / {}: {}", c.pair[0], c.pair[1], c.failed))
                .collect();
            per.extend(cs.iter().filter_map(|c| {
                c.skipped
                    .as_ref()
                    .map(|e| format!("{} / {} skipped: {e}", c.pair[0], c.pair[1]))
            }));
            rows.push(vec![
                s("Contours"),
                format!("{} pairs, {nodes} grid nodes", cs.len()),
                failed.to_string(),
                per.join(", "),
            ]);
        }
        None => rows.push(not_run("Contours")),
    }
    match &results.multistart {
        Some(m) => {
            let d = &m.degenerate;
            let stopped = match m.stopped {
                crate::diagnostics::multistart::StopRule::EstimateSmall => format!(
                    "stopped when the estimate fell to {} or below",
                    format::sig(results.settings.multistart.missed_target, 2)
                ),
                crate::diagnostics::multistart::StopRule::CapReached => format!(
                    "stopped at the cap of {} starts with the estimate above {}",
                    results
                        .settings
                        .multistart
                        .max_starts
                        .max(results.settings.multistart.starts),
                    format::sig(results.settings.multistart.missed_target, 2)
                ),
            };
            let merged = if m.merged_early > 0 {
                format!(
                    "; {} starts merged early into a minimum already found",
                    m.merged_early
                )
            } else {
                String::new()
            };
            rows.push(vec![
                s("Multi-start"),
                format!(
                    "{} starts in {} batch{}, {} distinct minima",
                    m.starts,
                    m.batches,
                    if m.batches == 1 { "" } else { "es" },
                    m.minima.len()
                ),
                m.failed.to_string(),
                format!(
                    "degenerate ends (no minimum): {} not converged, {} runaway, {} vanished Jacobian column, \
                     {} rank drop; estimated probability of a missed minimum {}, unseen share of the box {}, \
                     expected number of minima {}; {stopped}{merged}",
                    d.not_converged,
                    d.runaway,
                    d.vanished_column,
                    d.rank_drop,
                    format::sig(m.missed_minimum_estimate, 2),
                    format::sig(m.unseen_share, 2),
                    format::sig(m.expected_minima, 3)
                ),
            ])
        }
        None => rows.push(not_run("Multi-start")),
    }
    if let Some(c) = &results.coverage {
        rows.push(crate::report::coverage::failures_row(c));
    }
    Table {
        header: vec![s("Diagnostic"), s("Work"), s("Failed"), s("Details")],
        rows,
    }
}

fn scheme_word(b: BootstrapScheme, w: WildWeights) -> String {
    match b {
        BootstrapScheme::Case => s("case resampling"),
        BootstrapScheme::Residual => s("residual resampling"),
        BootstrapScheme::Wild => format!(
            "wild, {} weights",
            match w {
                WildWeights::Rademacher => "Rademacher",
                WildWeights::Mammen => "Mammen",
            }
        ),
    }
}

/// Settings and provenance as (item, value) pairs.
pub fn provenance(results: &AuditResults) -> Vec<(String, String)> {
    let st = &results.settings;
    let pv = &results.provenance;
    let study = &results.study;
    let none = || s(format::ABSENT);
    let ran: Vec<&str> = results.diagnostics_run.iter().map(|d| d.cli_name()).collect();
    let poisson = results.fit.likelihood == Likelihood::Poisson;
    let mut out = vec![
        (s("Tool"), format!("{} {}", pv.tool, pv.version)),
        (s("Command line"), pv.command_line.clone()),
        (s("Date (UTC)"), pv.date.clone()),
        (s("Worker threads"), pv.threads.to_string()),
        (s("Study"), study.name.clone()),
        (s("Study file"), study.path.clone()),
        (
            s("Study file SHA-256"),
            study.study_sha256.clone().unwrap_or_else(none),
        ),
    ];
    let groups = &results.data.groups;
    if !groups.is_empty() {
        // A study of [[datasets]]: each file with its own digest, then the
        // digest of the digests (what a merge of shards compares).
        for g in groups {
            out.push((
                format!("Data file of {}", g.name),
                format!(
                    "{} (SHA-256 {})",
                    g.file.clone().unwrap_or_else(none),
                    g.sha256.clone().unwrap_or_else(none)
                ),
            ));
        }
        out.push((
            s("SHA-256 of the data files' digests"),
            study.data_sha256.clone().unwrap_or_else(none),
        ));
    } else {
        out.push((s("Data file"), study.data_file.clone().unwrap_or_else(none)));
        out.push((
            s("Data file SHA-256"),
            study.data_sha256.clone().unwrap_or_else(none),
        ));
    }
    out.extend([
        (s("Formula"), study.formula.clone()),
        (s("Points"), study.points.to_string()),
        (
            s("Uncertainties of the data"),
            s(if poisson {
                "counts (Poisson likelihood: the variance of a count is its mean)"
            } else if study.sigma_given {
                "given (absolute covariance)"
            } else {
                "not given (covariance scaled)"
            }),
        ),
        (s("Seed"), st.seed.to_string()),
        (s("Confidence level"), format::percent(st.level, 4)),
        (s("Tolerance of the verdicts"), format::percent(st.tolerance, 3)),
        (
            s("Diagnostics run"),
            if ran.is_empty() { s("none") } else { ran.join(", ") },
        ),
        (
            s("Bootstrap settings"),
            format!(
                "{} replicates, {}",
                st.bootstrap.replicates,
                if poisson && st.bootstrap.scheme == BootstrapScheme::Residual {
                    s("parametric Poisson (counts drawn at the fitted means)")
                } else {
                    scheme_word(st.bootstrap.scheme, st.bootstrap.weights)
                }
            ),
        ),
        (
            s("Monte Carlo settings"),
            format!(
                "{} trials, {} noise{}",
                st.monte_carlo.replicates,
                match st.monte_carlo.student_t_dof {
                    _ if poisson => s("Poisson-count"),
                    Some(nu) => format!("Student-t ({} degrees of freedom)", format::sig(nu, 3)),
                    None => s("normal"),
                },
                if st.monte_carlo.adaptive {
                    format!(
                        ", adaptive (tolerance {})",
                        format::percent(st.monte_carlo.adaptive_tolerance, 2)
                    )
                } else {
                    String::new()
                }
            ),
        ),
        (
            s("Profile settings"),
            format!("{} points per profile", st.profile.points),
        ),
        (
            s("Contour settings"),
            format!(
                "{0} x {0} grid; pairs {1}",
                st.contours.grid,
                match &st.contours.pairs {
                    Some(p) => p
                        .iter()
                        .map(|[a, b]| format!("{a} / {b}"))
                        .collect::<Vec<_>>()
                        .join(", "),
                    None => s("chosen automatically"),
                }
            ),
        ),
        (
            s("Multi-start settings"),
            format!(
                "batches of {} starts up to {} until the estimated probability of a missed minimum is at \
                 most {}{}{}{}",
                st.multistart.starts,
                st.multistart.max_starts.max(st.multistart.starts),
                format::sig(st.multistart.missed_target, 2),
                if st.multistart.log_uniform {
                    ", log-uniform sampling of wide positive ranges"
                } else {
                    ""
                },
                if st.multistart.merge_early {
                    ", early merging of starts into minima already found"
                } else {
                    ""
                },
                if st.multistart.rebase {
                    ", re-based at a clearly better minimum"
                } else {
                    ", kept at the study's start"
                }
            ),
        ),
    ]);
    if let Some(t) = &study.title {
        out.insert(5, (s("Title"), t.clone()));
    }
    out
}
