//! `summary.md`: the verdicts and the interval comparison as Markdown
//! tables, for pasting into a notebook, a ticket or a validation file.
//!
//! User strings are escaped for Markdown: `|` cannot break a table cell,
//! `<` cannot open inline HTML, emphasis and code marks are literal, and
//! line breaks become spaces.

use std::fmt::Write as _;

use crate::audit::AuditResults;
use crate::report::tables::{self, Table};
use crate::report::{
    better_minimum, format, profile_below_base, rebased_notice, Figures, Renderer, ReportError, CAUTION,
};

/// Escapes text for a Markdown table cell or paragraph.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '\\' | '|' | '*' | '_' | '`' | '[' | ']' | '#' => {
                out.push('\\');
                out.push(c);
            }
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '\n' | '\r' => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// A Markdown table.
pub fn table(t: &Table) -> String {
    let mut o = String::new();
    let row = |cells: &[String]| {
        let cells: Vec<String> = cells.iter().map(|c| escape(c)).collect();
        format!("| {} |\n", cells.join(" | "))
    };
    o.push_str(&row(&t.header));
    let _ = writeln!(o, "|{}", "---|".repeat(t.header.len()));
    for r in &t.rows {
        o.push_str(&row(r));
    }
    o
}

/// The summary text.
pub fn summary(results: &AuditResults) -> String {
    let title = results
        .study
        .title
        .clone()
        .unwrap_or_else(|| format!("Study {}", results.study.name));
    let mut o = String::new();
    let _ = writeln!(o, "# Fit audit: {}\n", escape(&title));
    if let Some(n) = rebased_notice(results) {
        let _ = writeln!(o, "> **Re-based audit.** {}\n", escape(&n.sentence()));
    }
    if let Some((base, best)) = better_minimum(results) {
        let _ = writeln!(
            o,
            "> **The base fit is not the best minimum found.** The multi-start search found \
             chi-squared = {} where the base fit has chi-squared = {}; the values below describe a \
             local minimum.\n",
            format::chi2(best),
            format::chi2(base)
        );
    }
    for (name, value, chi2) in profile_below_base(results) {
        let _ = writeln!(
            o,
            "> **The base fit is not the minimum.** The profile of {} reaches chi-squared = {} at {} = {}, \
             below the base fit's {}.\n",
            escape(&name),
            format::chi2(chi2),
            escape(&name),
            format::sig(value, 6),
            format::chi2(results.fit.chi2)
        );
    }
    let _ = writeln!(
        o,
        "Study {}, model {}, {} points; {} {}, {}.\n",
        escape(&results.study.name),
        escape(&results.study.formula),
        results.study.points,
        escape(&results.provenance.tool),
        escape(&results.provenance.version),
        escape(&results.provenance.date)
    );
    o.push_str("## Verdict summary\n\n");
    o.push_str(&table(&tables::verdicts(results)));
    o.push_str("\n## Fit\n\n");
    o.push_str(&table(&tables::fit_params(&results.fit)));
    let f = &results.fit;
    let (disp_label, disp) = tables::dispersion(f);
    let _ = writeln!(
        o,
        "\n{} {} with {} degrees of freedom; {} {}; p-value {}; covariance {}; coverage factor k = {}.",
        tables::chi2_label(f),
        format::chi2(f.chi2),
        f.dof,
        disp_label.to_lowercase(),
        disp,
        escape(&tables::p_value_text(f)),
        if f.covariance_scaled { "scaled" } else { "absolute" },
        escape(&tables::coverage_words(f))
    );
    for line in tables::end_issue_words(f) {
        let _ = writeln!(o, "\nAt the end point: {}.", escape(&line));
    }
    if let Some(w) = tables::small_counts_warning(f) {
        let _ = writeln!(o, "\nSmall counts: {}.", escape(&w));
    }
    if !results.derived.is_empty() {
        o.push_str("\n## Derived quantities\n\n");
        o.push_str(&table(&tables::derived(results)));
        let _ = writeln!(o, "\n{}", escape(tables::DERIVED_NOTE));
    }
    if !results.inverse.is_empty() {
        o.push_str("\n## Inverse predictions\n\n");
        o.push_str(&table(&tables::inverse(results)));
        let _ = writeln!(o, "\n{}", escape(tables::INVERSE_NOTE));
    }
    let _ = writeln!(
        o,
        "\n## Interval comparison ({} level)\n",
        format::percent(results.settings.level, 4)
    );
    o.push_str(&table(&tables::comparison(results)));
    let _ = writeln!(o, "\n{}", escape(CAUTION));
    o
}

/// Writes `summary.md`.
pub struct Markdown;

impl Renderer for Markdown {
    fn name(&self) -> &'static str {
        "markdown"
    }

    fn render(
        &self,
        results: &AuditResults,
        _figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(vec![("summary.md".into(), summary(results).into_bytes())])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cells_cannot_break_the_table() {
        assert_eq!(escape("a|b"), "a\\|b");
        assert_eq!(escape("x<y>\nz"), "x&lt;y&gt; z");
        assert_eq!(escape("T_env*2"), "T\\_env\\*2");
        let t = Table {
            header: vec!["p".into(), "q".into()],
            rows: vec![vec!["a|b".into(), "1".into()]],
        };
        assert_eq!(table(&t), "| p | q |\n|---|---|\n| a\\|b | 1 |\n");
    }
}
