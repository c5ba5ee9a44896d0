//! The tables of a validation run ([`crate::validation`]) as Markdown:
//! false alarms and detections per case, objections per rule, coverage of
//! every interval type and of the quote, each share with its binomial
//! standard error.

use std::collections::BTreeSet;
use std::fmt::Write as _;

use crate::validation::{CaseTally, Count, RunSize};

fn share(c: &Count) -> String {
    if c.n == 0 {
        return "\u{2014}".to_string();
    }
    format!(
        "{:.1} % \u{b1} {:.1} ({}/{})",
        100.0 * c.rate(),
        100.0 * c.std_error(),
        c.hits,
        c.n
    )
}

fn coverage(c: Option<&Count>) -> String {
    match c {
        Some(c) if c.n > 0 => format!("{:.3} \u{b1} {:.3} ({})", c.rate(), c.std_error(), c.n),
        _ => "\u{2014}".to_string(),
    }
}

fn sum(counts: impl Iterator<Item = Count>) -> Count {
    counts.fold(Count::default(), |a, c| Count {
        hits: a.hits + c.hits,
        n: a.n + c.n,
    })
}

/// The interval types in table order, with their column headings.
pub const INTERVALS: [(&str, &str); 7] = [
    ("quote", "quote"),
    ("analytic", "value \u{b1} k u"),
    ("profile", "profile"),
    ("bootstrap-percentile", "bootstrap percentile"),
    ("bootstrap-bca", "bootstrap BCa"),
    ("monte-carlo-symmetric", "Monte Carlo symmetric"),
    ("monte-carlo-shortest", "Monte Carlo shortest"),
];

/// The Markdown tables of a validation run.
pub fn markdown(size: &RunSize, cases: &[CaseTally]) -> String {
    let mut o = String::new();
    let level = cases.first().map_or(f64::NAN, |c| c.level);
    let _ = writeln!(
        o,
        "{} data sets per case, {} bootstrap replicates and {} Monte Carlo trials each, {} multi-start \
         starts, seed {}, level {:.2} %. Shares are of parameters (one verdict each), with their binomial \
         standard error and the count.\n",
        size.datasets,
        size.replicates,
        size.replicates,
        size.starts,
        size.seed,
        100.0 * level
    );
    if size.coverage_replicates > 0 {
        let _ = writeln!(
            o,
            "Each audit also ran the coverage simulation with {} simulated data sets (rule `coverage`).\n",
            size.coverage_replicates
        );
    }
    for c in cases {
        let _ = writeln!(
            o,
            "- **{}**: {}{}{}",
            c.name,
            c.description,
            if c.null {
                " (quoted \u{b1} right: every flag is a false alarm)"
            } else {
                " (quoted \u{b1} misleading: a flag is a detection)"
            },
            if c.errors > 0 {
                format!("; {} data sets could not be audited", c.errors)
            } else {
                String::new()
            }
        );
        if c.rebased.hits > 0 {
            let _ = writeln!(o, "  - audit re-based at a better minimum: {}", share(&c.rebased));
        }
    }
    o.push_str("\n| case | parameter | measures | not holds | fails |\n|---|---|---|---|---|\n");
    for c in cases {
        let what = if c.null { "false alarms" } else { "detections" };
        for p in &c.parameters {
            let _ = writeln!(
                o,
                "| {} | {} | {what} | {} | {} |",
                c.name,
                p.name,
                share(&p.flagged),
                share(&p.fails)
            );
        }
        let _ = writeln!(
            o,
            "| {} | all | {what} | {} | {} |",
            c.name,
            share(&sum(c.parameters.iter().map(|p| p.flagged))),
            share(&sum(c.parameters.iter().map(|p| p.fails)))
        );
    }
    // Objections per rule (rule/diagnostic), share of parameters.
    let rules: BTreeSet<&String> = cases
        .iter()
        .flat_map(|c| c.parameters.iter().flat_map(|p| p.rules.keys()))
        .collect();
    o.push_str("\nObjections per rule (share of parameters whose verdict the rule made doubtful or failing):\n\n| rule / diagnostic |");
    for c in cases {
        let _ = write!(o, " {} |", c.name);
    }
    o.push_str("\n|---|");
    for _ in cases {
        o.push_str("---|");
    }
    o.push('\n');
    for r in &rules {
        let _ = write!(o, "| {r} |");
        for c in cases {
            let hits: usize = c
                .parameters
                .iter()
                .map(|p| p.rules.get(*r).copied().unwrap_or(0))
                .sum();
            let n: usize = c.parameters.iter().map(|p| p.flagged.n).sum();
            let _ = write!(o, " {} |", share(&Count { hits, n }));
        }
        o.push('\n');
    }
    // Coverage.
    o.push_str("\nCoverage of the truth (share of the intervals given that contain it; the count is of intervals given):\n\n| case | parameter |");
    for (_, h) in INTERVALS {
        let _ = write!(o, " {h} |");
    }
    o.push_str("\n|---|---|");
    for _ in INTERVALS {
        o.push_str("---|");
    }
    o.push('\n');
    for c in cases {
        for p in &c.parameters {
            let _ = write!(o, "| {} | {} |", c.name, p.name);
            for (k, _) in INTERVALS {
                let _ = write!(o, " {} |", coverage(p.coverage.get(k)));
            }
            o.push('\n');
        }
    }
    // Quotes.
    o.push_str("\nThe quote given (count of parameters):\n\n| case | parameter | quotes |\n|---|---|---|\n");
    for c in cases {
        for p in &c.parameters {
            let q: Vec<String> = p.quotes.iter().map(|(k, n)| format!("{k}: {n}")).collect();
            let _ = writeln!(o, "| {} | {} | {} |", c.name, p.name, q.join(", "));
        }
    }
    o
}
