//! Plain-text renderers for the terminal: the fit table, the verdict lines
//! and the catalogue of the formula language. Columns are aligned by
//! character count (so `±` and Greek names line up) and every number goes
//! through [`crate::report::format`].

use std::fmt::Write as _;

use crate::audit::AuditResults;
use crate::fit::{FitResult, ParamSpec};
use crate::model::FunctionInfo;
use crate::report::tables::{self, relative_error, status_word, stop_words};
use crate::report::{better_minimum, findings, format, profile_below_base, rebased_notice};

/// Lays out rows in columns separated by two spaces; columns listed in
/// `right` are right-aligned. Trailing spaces are trimmed.
pub fn columns(rows: &[Vec<String>], right: &[usize]) -> String {
    let ncol = rows.iter().map(Vec::len).max().unwrap_or(0);
    let mut width = vec![0usize; ncol];
    for r in rows {
        for (j, c) in r.iter().enumerate() {
            width[j] = width[j].max(c.chars().count());
        }
    }
    let mut out = String::new();
    for r in rows {
        let mut line = String::new();
        for (j, c) in r.iter().enumerate() {
            let pad = width[j] - c.chars().count();
            if j > 0 {
                line.push_str("  ");
            }
            if right.contains(&j) {
                line.push_str(&" ".repeat(pad));
                line.push_str(c);
            } else {
                line.push_str(c);
                line.push_str(&" ".repeat(pad));
            }
        }
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}

/// The note of a parameter, naming the bound it ended on when the spec
/// tells which.
fn bound_note(spec: Option<&ParamSpec>, p: &crate::fit::ParamResult) -> String {
    if p.fixed {
        return "fixed".into();
    }
    if p.at_bound {
        if let Some(s) = spec {
            let near = |b: f64| b.is_finite() && (p.value - b).abs() <= 1e-12 * b.abs().max(1.0);
            if near(s.min) {
                return format!("at lower bound {}", format::sig(s.min, 6));
            }
            if near(s.max) {
                return format!("at upper bound {}", format::sig(s.max, 6));
            }
        }
        return "at a bound".into();
    }
    if p.std_error.is_none() {
        return "undetermined".into();
    }
    String::new()
}

/// The fit as a table: value, standard error, relative error and bound
/// flag per parameter, then chi-squared, degrees of freedom, reduced
/// chi-squared, p-value, stop reason and convergence.
pub fn fit_table(title: Option<&str>, params: &[ParamSpec], fit: &FitResult) -> String {
    let mut out = String::new();
    if let Some(t) = title {
        let _ = writeln!(out, "{t}\n");
    }
    let mut rows = vec![vec![
        "parameter".to_string(),
        "value".into(),
        "std error".into(),
        tables::expanded_header(fit),
        "rel. error".into(),
        "note".into(),
    ]];
    for (j, p) in fit.parameters.iter().enumerate() {
        let spec = params.iter().find(|s| s.name == p.name).or(params.get(j));
        let (v, u) = format::value_and_uncertainty(p.value, p.std_error);
        rows.push(vec![
            p.name.clone(),
            v,
            u,
            tables::expanded(p),
            relative_error(p),
            bound_note(spec, p),
        ]);
    }
    out.push_str(&columns(&rows, &[1, 2, 3, 4]));
    if fit.likelihood == crate::fit::Likelihood::Poisson {
        let _ = writeln!(
            out,
            "\ndeviance = {}   dof = {}   deviance/dof = {}   p-value = {} (chi-squared approximation)",
            format::chi2(fit.chi2),
            fit.dof,
            format::sig(fit.reduced_chi2, 4),
            tables::p_value_text(fit)
        );
        if let Some(w) = tables::small_counts_warning(fit) {
            let _ = writeln!(out, "WARNING: {w}");
        }
    } else if fit.sigma_given {
        let _ = writeln!(
            out,
            "\nchi2 = {}   dof = {}   reduced chi2 = {}   p-value = {}",
            format::chi2(fit.chi2),
            fit.dof,
            format::sig(fit.reduced_chi2, 4),
            tables::p_value_text(fit)
        );
    } else {
        let _ = writeln!(
            out,
            "\nsum of squares = {}   dof = {}   residual variance s^2 = {}   (s = {})",
            format::chi2(fit.chi2),
            fit.dof,
            format::sig(fit.reduced_chi2, 4),
            format::sig(fit.reduced_chi2.sqrt(), 4),
        );
        let _ = writeln!(
            out,
            "p-value: none (no sigma given: the sum of squares is in the units of y, not chi-squared distributed)"
        );
    }
    let _ = writeln!(out, "coverage factor k = {}", tables::coverage_words(fit));
    let _ = writeln!(
        out,
        "stopped: {} after {} iterations; {}",
        stop_words(fit.stop_reason),
        fit.iterations,
        if fit.converged {
            "converged"
        } else {
            "NOT converged"
        }
    );
    for line in tables::end_issue_words(fit) {
        let _ = writeln!(out, "at the end point: {line}");
    }
    out
}

/// The derived quantities of a fit (empty text without any): name, value,
/// standard uncertainty by propagation, expanded uncertainty, formula.
pub fn derived_table(fit: &FitResult, derived: &[crate::diagnostics::derived::DerivedResult]) -> String {
    if derived.is_empty() {
        return String::new();
    }
    let mut rows = vec![vec![
        "derived".to_string(),
        "value".into(),
        "std error".into(),
        tables::expanded_header(fit),
        "formula".into(),
    ]];
    for d in derived {
        let (v, u) = format::value_and_uncertainty(d.value, d.std_error);
        rows.push(vec![
            d.name.clone(),
            v,
            u,
            d.expanded_uncertainty.map_or(format::ABSENT.to_string(), |x| {
                format::value_and_uncertainty(0.0, Some(x)).1
            }),
            d.formula.clone(),
        ]);
    }
    format!(
        "\n{}(standard errors by propagation with the full covariance, JCGM 100:2008, 5.2)\n",
        columns(&rows, &[1, 2, 3])
    )
}

/// The data sets of a joint fit: points, parameters (shared ones starred),
/// chi2 contribution, its share, dof share and chi2 per dof share; empty
/// for one data set.
pub fn datasets_table(shares: &[crate::audit::DatasetShare], sigma_given: bool, poisson: bool) -> String {
    if shares.is_empty() {
        return String::new();
    }
    let t = crate::report::datasets::table_for(shares, sigma_given, poisson);
    // The formula is long and already printed by `check`: the terminal
    // table leaves it out; headings start in lower case as in `fit_table`.
    let without_formula = |r: &[String]| -> Vec<String> {
        r.iter()
            .enumerate()
            .filter(|(j, _)| *j != 1)
            .map(|(_, c)| c.clone())
            .collect()
    };
    let header = without_formula(&t.header)
        .into_iter()
        .map(|h| {
            let mut c = h.chars();
            c.next()
                .map(|f| f.to_lowercase().collect::<String>() + c.as_str())
                .unwrap_or_default()
        })
        .collect();
    let mut rows = vec![header];
    rows.extend(t.rows.iter().map(|r| without_formula(r)));
    format!(
        "\n{}(one joint fit; * marks a shared parameter; the contributions add up to chi2, the dof shares to dof)\n",
        columns(&rows, &[1, 3, 4, 5, 6])
    )
}

/// Every reason of a verdict in a few words: the rule and the diagnostic it
/// read of each finding that decided it (`profile-half-widths (profile);
/// spread-ratio (bootstrap)`), or, for a verdict that holds, how many
/// checks agreed. The sentences are in the report.
pub fn compact_reasons(v: &crate::diagnostics::verdict::Verdict) -> String {
    use crate::diagnostics::verdict::Status;
    let code = |x: serde_json::Value| x.as_str().map(str::to_string).unwrap_or_default();
    if v.status == Status::Holds {
        return match v.findings.len() {
            0 => "no diagnostic ran".to_string(),
            n => format!("{n} checks agree"),
        };
    }
    let mut parts: Vec<String> = Vec::new();
    for f in v.findings.iter().filter(|f| f.status != Status::Holds) {
        let rule = code(serde_json::to_value(f.rule).unwrap_or_default());
        let source = code(serde_json::to_value(f.diagnostic).unwrap_or_default());
        let part = if source.is_empty() || source == rule {
            rule
        } else {
            format!("{rule} ({source})")
        };
        if !parts.contains(&part) {
            parts.push(part);
        }
    }
    if parts.is_empty() {
        format::ABSENT.to_string()
    } else {
        parts.join("; ")
    }
}

/// One line per parameter: name, the interval to quote, status, every
/// reason in a few words ([`compact_reasons`]); led by a warning
/// line when the multi-start search found a better minimum than the base fit.
pub fn verdict_lines(results: &AuditResults) -> String {
    let mut out = String::new();
    if let Some(n) = rebased_notice(results) {
        let _ = writeln!(out, "NOTICE: {}", n.sentence());
    }
    if let Some((base, best)) = better_minimum(results) {
        let _ = writeln!(
            out,
            "WARNING: the base fit is not the best minimum found: multi-start chi2 = {} < base fit chi2 = {}",
            format::chi2(best),
            format::chi2(base)
        );
    }
    for (name, value, chi2) in profile_below_base(results) {
        let _ = writeln!(
            out,
            "WARNING: the base fit is not the minimum: the profile of {name} reaches chi2 = {} at {name} = {} \
             (base fit chi2 = {})",
            format::chi2(chi2),
            format::sig(value, 6),
            format::chi2(results.fit.chi2)
        );
    }
    let rows: Vec<Vec<String>> = results
        .verdicts
        .iter()
        .map(|v| {
            vec![
                v.parameter.clone(),
                findings::quote_cell(results, v),
                status_word(v.status).to_string(),
                compact_reasons(v),
            ]
        })
        .collect();
    out.push_str(&columns(&rows, &[]));
    out
}

fn signature(f: &FunctionInfo) -> String {
    // Functions whose arguments are not interchangeable say which is which:
    // atan2 takes the ordinate first, as the evaluation does (`y.atan2(x)`).
    if (f.name, f.arity) == ("atan2", 2) {
        return "atan2(y, x)".into();
    }
    let args: Vec<String> = match f.arity {
        0 => return f.name.to_string(),
        1 => vec!["x".into()],
        2 => vec!["x".into(), "y".into()],
        3 => vec!["x".into(), "y".into(), "z".into()],
        n => (1..=n).map(|i| format!("a{i}")).collect(),
    };
    format!("{}({})", f.name, args.join(", "))
}

/// The functions and constants of the formula language (`fitaudit models`),
/// from [`crate::model::catalogue`] and [`crate::model::constants`].
pub fn models_table() -> String {
    catalogue_table(crate::model::catalogue(), crate::model::constants())
}

/// [`models_table`] for a given catalogue: functions with their arguments
/// and description, then constants with their values (shortest exact
/// decimal form).
pub fn catalogue_table(functions: &[FunctionInfo], constants: &[(&str, f64)]) -> String {
    if functions.is_empty() && constants.is_empty() {
        return "No functions or constants are known to this build.\n".into();
    }
    let mut out = String::new();
    if !functions.is_empty() {
        let rows: Vec<Vec<String>> = functions
            .iter()
            .map(|f| vec![format!("  {}", signature(f)), f.description.to_string()])
            .collect();
        out.push_str("Functions:\n");
        out.push_str(&columns(&rows, &[]));
    }
    if !constants.is_empty() {
        if !out.is_empty() {
            out.push('\n');
        }
        let rows: Vec<Vec<String>> = constants
            .iter()
            .map(|(n, v)| vec![format!("  {n}"), format!("{v}")])
            .collect();
        out.push_str("Constants:\n");
        out.push_str(&columns(&rows, &[]));
    }
    out
}

/// What `fitaudit audit` prints after a batch: one line per study.
pub fn index_lines(index: &crate::batch::BatchIndex) -> String {
    let mut out = String::new();
    for r in &index.studies {
        match &r.error {
            Some(e) => {
                let _ = writeln!(out, "  {:<14} error (exit status {}): {e}", r.name, r.exit_status);
            }
            None => {
                let notice = match (r.rebased, r.best_chi2) {
                    (true, _) => "; the start reaches a local minimum: audited at the best minimum found",
                    (false, Some(_)) => "; a lower minimum than the start's was found but not audited",
                    _ => "",
                };
                let _ = writeln!(
                    out,
                    "  {:<14} {} holds, {} doubtful, {} fails{notice}  -> {}",
                    r.name,
                    r.holds,
                    r.doubtful,
                    r.fails,
                    r.report.as_deref().unwrap_or("")
                );
            }
        }
    }
    let _ = writeln!(
        out,
        "exit status {} (the gravest of {} studies)",
        index.exit_status,
        index.studies.len()
    );
    out
}

/// What `fitaudit audit --shard` prints: which work the part holds.
pub fn part_lines(part: &crate::batch::PartFile) -> String {
    let mut out = String::new();
    for s in &part.studies {
        let what = match (&s.error, s.slice) {
            (Some((e, _)), _) => format!("error: {e}"),
            (None, Some(sl)) if sl.is_whole() => "whole study".to_string(),
            (None, Some(sl)) => format!("slice {sl} of its work"),
            (None, None) => "in another shard".to_string(),
        };
        let _ = writeln!(out, "  {:<14} {what}", s.name);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn catalogue_lists_functions_then_constants() {
        let entries = [
            FunctionInfo {
                name: "exp",
                arity: 1,
                description: "exponential",
            },
            FunctionInfo {
                name: "atan2",
                arity: 2,
                description: "angle of (x, y)",
            },
        ];
        let t = catalogue_table(&entries, &[("pi", std::f64::consts::PI)]);
        assert_eq!(
            t,
            "Functions:\n  exp(x)       exponential\n  atan2(y, x)  angle of (x, y)\n\n\
             Constants:\n  pi  3.141592653589793\n"
        );
        assert_eq!(
            catalogue_table(&[], &[]),
            "No functions or constants are known to this build.\n"
        );
        // The language's own catalogue: exp is there, and pi and e with their
        // values (mathematical constants to 16 digits).
        let real = models_table();
        // atan2 is documented with the argument order the evaluation uses:
        // atan2(1, 0) is the angle of the point (0, 1), pi/2 (ISO C 7.12.4.4,
        // atan2(y, x)); the catalogue line names y first.
        let t = crate::model::compile(
            "atan2(a, b)",
            &crate::model::Symbols {
                parameters: &["a".to_string(), "b".to_string()],
                constants: &[],
                variables: &[],
            },
        )
        .unwrap();
        assert!((t.eval_point(&[1.0, 0.0], &[]).0 - std::f64::consts::FRAC_PI_2).abs() < 1e-15);
        assert!(t.eval_point(&[0.0, -1.0], &[]).0 == std::f64::consts::PI);
        assert!(real.lines().any(|l| l.starts_with("  atan2(y, x) ")), "{real}");
        assert!(real.lines().any(|l| l.starts_with("  exp(x) ")), "{real}");
        assert!(real.lines().any(|l| l == "  pi  3.141592653589793"), "{real}");
        assert!(
            real.lines().any(|l| l.trim_end() == "  e   2.718281828459045"),
            "{real}"
        );
    }

    #[test]
    fn columns_align_by_characters() {
        let rows = vec![
            vec!["\u{3c4}".to_string(), "1.5".into()],
            vec!["tau".to_string(), "10.25".into()],
        ];
        assert_eq!(columns(&rows, &[1]), "\u{3c4}      1.5\ntau  10.25\n");
    }
}
