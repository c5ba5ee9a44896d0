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

/// One line per parameter: name, the interval to quote, status, first
/// reason; led by a warning
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
                findings::reasons(v)
                    .first()
                    .cloned()
                    .unwrap_or_else(|| format::ABSENT.to_string()),
            ]
        })
        .collect();
    out.push_str(&columns(&rows, &[]));
    out
}

fn signature(f: &FunctionInfo) -> String {
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
            "Functions:\n  exp(x)       exponential\n  atan2(x, y)  angle of (x, y)\n\n\
             Constants:\n  pi  3.141592653589793\n"
        );
        assert_eq!(
            catalogue_table(&[], &[]),
            "No functions or constants are known to this build.\n"
        );
        // The language's own catalogue: exp is there, and pi and e with their
        // values (mathematical constants to 16 digits).
        let real = models_table();
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
