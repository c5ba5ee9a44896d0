//! The coverage table of the report and summary.md: per parameter and
//! interval kind, the simulated coverage with its binomial standard error
//! beside the nominal level (results.json `coverage`).

use crate::audit::AuditResults;
use crate::diagnostics::coverage::{CoverageKind, CoverageResult, IntervalCoverage};
use crate::diagnostics::verdict::{self, Status};
use crate::report::format;
use crate::report::tables::Table;

/// What the coverage table shows, for the text under it.
pub const NOTE: &str = "Coverage simulated at the fit: data sets drawn at the fitted values with the \
                        study's error model, each refitted and its intervals recomputed; the share that \
                        contains the fitted value, with its binomial standard error. An open profile end \
                        counts as covering on that side. It assumes that the fitted values are the truth \
                        and that the stated error model is right.";

/// The name of an interval kind in the table.
pub fn kind_words(k: CoverageKind) -> &'static str {
    match k {
        CoverageKind::Analytic => "value \u{b1} k u",
        CoverageKind::Profile => "profile",
        CoverageKind::Quote => "quoted",
    }
}

/// How a coverage compares with the level, in words: the verdict rule's
/// reading (clearly off by more than 3 null standard errors, and by a width
/// factor beyond the tolerance).
pub fn assessment(ic: &IntervalCoverage, level: f64, tol: f64) -> String {
    match verdict::coverage_departure(ic, level, tol) {
        None => format::ABSENT.to_string(),
        Some((false, _, _)) => "on the level".to_string(),
        Some((true, w, st)) => {
            let side = if ic.coverage > level { "above" } else { "below" };
            let how = match st {
                Status::Holds => "within the tolerance",
                Status::Doubtful => "beyond the tolerance",
                Status::Fails => "far beyond the tolerance",
            };
            format!(
                "clearly {side} the level, {how}: u \u{d7} {} would cover it",
                format::sig(w, 3)
            )
        }
    }
}

/// The coverage table, when the simulation ran: parameter and interval
/// (one column, so that each part of a split table names its row),
/// coverage +- SE, nominal level, data sets, misses below / above, open
/// profile ends, the assessment, and (for the quote) the kinds quoted.
/// Cells stay short so that summary.md can split the table to its line
/// width ([`crate::report::markdown::table_fitting`]).
pub fn table(results: &AuditResults) -> Option<Table> {
    let c: &CoverageResult = results.coverage.as_ref()?;
    let tol = results.settings.tolerance;
    let header = [
        "Parameter: interval",
        "Coverage \u{b1} SE",
        "Nominal",
        "Data sets",
        "Missed below / above",
        "Open ends below / above",
        "Assessment",
        "Quoted",
    ];
    let mut rows = Vec::new();
    for p in &c.parameters {
        for ic in &p.intervals {
            let cov = if ic.counted == 0 {
                format::ABSENT.to_string()
            } else {
                format!("{:.3} \u{b1} {:.3}", ic.coverage, ic.std_error)
            };
            let mut sets = ic.counted.to_string();
            if ic.unavailable > 0 {
                sets.push_str(&format!(" ({} without one)", ic.unavailable));
            }
            let open = if ic.kind == CoverageKind::Profile {
                format!("{} / {}", ic.open_below, ic.open_above)
            } else {
                format::ABSENT.to_string()
            };
            let quoted = if ic.kind == CoverageKind::Quote {
                let kinds: Vec<String> = ic
                    .quotes
                    .iter()
                    .map(|(k, n)| format!("{} {n}", quote_key_words(k)))
                    .collect();
                kinds.join(", ")
            } else {
                format::ABSENT.to_string()
            };
            rows.push(vec![
                format!("{}: {}", p.name, kind_words(ic.kind)),
                cov,
                format!("{:.4}", c.level),
                sets,
                format!("{} / {}", ic.missed_below, ic.missed_above),
                open,
                assessment(ic, c.level, tol),
                quoted,
            ]);
        }
    }
    Some(Table {
        header: header.iter().map(|h| h.to_string()).collect(),
        rows,
    })
}

/// A key of `quotes` in short words (`analytic`, `profile`, `none:
/// <reason>`, the reason's code with spaces; the verdict table gives the
/// reason in full).
pub fn quote_key_words(key: &str) -> String {
    match key.strip_prefix("none: ") {
        Some(code) => format!("none: {}", code.replace('-', " ")),
        None => key.to_string(),
    }
}

/// One line on the simulation itself: replicates, failures, noise, cost.
pub fn summary_line(results: &AuditResults) -> Option<String> {
    let c = results.coverage.as_ref()?;
    let law = match (c.noise.as_str(), c.student_t_dof) {
        ("poisson", _) => "Poisson counts at the fitted means".to_string(),
        (_, Some(nu)) => format!("Student-t noise with {} degrees of freedom", format::sig(nu, 3)),
        _ => "normal noise".to_string(),
    };
    let noise = if c.moves_x {
        format!("{law} in y and in x (errors in x)")
    } else {
        law
    };
    Some(format!(
        "{} of {} simulated data sets refitted ({} failed{}), {noise}, noise scale {}; {} refits in all.",
        c.run - c.failed,
        c.replicates,
        c.failed,
        if c.failures.is_empty() {
            String::new()
        } else {
            format!(
                ": {}",
                c.failures
                    .iter()
                    .map(|(k, n)| format!("{k} {n}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        },
        format::sig(c.noise_scale, 4),
        c.refits
    ))
}

/// The coverage simulation's row of the failures table: diagnostic, work
/// done, failed, details.
pub fn failures_row(c: &CoverageResult) -> Vec<String> {
    let reasons: Vec<String> = c.failures.iter().map(|(k, n)| format!("{k}: {n}")).collect();
    vec![
        "Coverage".to_string(),
        format!("{} data sets run of {}, {} refits", c.run, c.replicates, c.refits),
        c.failed.to_string(),
        reasons.join(", "),
    ]
}
