//! `summary.md`: the verdicts and the interval comparison as Markdown
//! tables, for pasting into a notebook, a ticket or a validation file. No
//! line is longer than [`WIDTH`] characters where the content allows: wide
//! tables are split by columns ([`table_fitting`]), the verdict reasons are
//! a list, prose is wrapped ([`wrap_lines`]).
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
    // The reasons are sentences: a list under the table, so that no line
    // of the file runs past the page.
    let v = tables::verdicts(results);
    let short = Table {
        header: v.header.iter().take(3).cloned().collect(),
        rows: v
            .rows
            .iter()
            .map(|r| r.iter().take(3).cloned().collect())
            .collect(),
    };
    o.push_str(&table_fitting(&short, WIDTH));
    let reasons: Vec<&Vec<String>> = v
        .rows
        .iter()
        .filter(|r| r.get(3).is_some_and(|c| c != format::ABSENT))
        .collect();
    if !reasons.is_empty() {
        o.push_str("\nReasons:\n\n");
        for r in reasons {
            let _ = writeln!(o, "- {} ({}): {}", escape(&r[0]), escape(&r[2]), escape(&r[3]));
        }
    }
    o.push_str("\n## Fit\n\n");
    o.push_str(&table_fitting(&tables::fit_params(&results.fit), WIDTH));
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
    if !results.datasets.is_empty() {
        o.push_str("\n## Data sets\n\n");
        o.push_str(&table(&crate::report::datasets::table(results)));
        let _ = writeln!(o, "\n{}", escape(crate::report::datasets::NOTE));
    }
    if !results.derived.is_empty() {
        o.push_str("\n## Derived quantities\n\n");
        o.push_str(&table_fitting(&tables::derived(results), WIDTH));
        let _ = writeln!(o, "\n{}", escape(tables::DERIVED_NOTE));
    }
    if !results.inverse.is_empty() {
        o.push_str("\n## Inverse predictions\n\n");
        o.push_str(&table_fitting(&tables::inverse(results), WIDTH));
        let _ = writeln!(o, "\n{}", escape(tables::INVERSE_NOTE));
    }
    let _ = writeln!(
        o,
        "\n## Interval comparison ({} level)\n",
        format::percent(results.settings.level, 4)
    );
    for (heading, t) in tables::comparisons(results) {
        let _ = writeln!(o, "### {}\n", escape(&heading));
        o.push_str(&table_fitting(&t, WIDTH));
        o.push('\n');
    }
    nonlinearity_part(&mut o, results);
    if let Some(t) = crate::report::coverage::table(results) {
        o.push_str("\n## Coverage simulated at the fit\n\n");
        o.push_str(&table_fitting(&t, WIDTH));
        let line = crate::report::coverage::summary_line(results).unwrap_or_default();
        let _ = writeln!(o, "\n{} {}", escape(crate::report::coverage::NOTE), escape(&line));
    }
    let _ = writeln!(o, "\n{}", escape(CAUTION));
    wrap_lines(&o, WIDTH)
}

/// Longest line summary.md aims at, in characters.
pub const WIDTH: usize = 100;

/// A table as one or more Markdown tables no wider than `width` characters
/// where the cells allow: the first column (the row names) is repeated in
/// each, the other columns are taken in order while they fit.
pub fn table_fitting(t: &Table, width: usize) -> String {
    // Rendered length of the rows (header included) restricted to columns `g`.
    let widest = |g: &[usize]| -> usize {
        std::iter::once(&t.header)
            .chain(t.rows.iter())
            .map(|r| {
                1 + std::iter::once(0)
                    .chain(g.iter().copied())
                    .map(|j| r.get(j).map_or(0, |c| escape(c).chars().count()) + 3)
                    .sum::<usize>()
            })
            .max()
            .unwrap_or(0)
    };
    let mut groups: Vec<Vec<usize>> = Vec::new();
    let mut cur: Vec<usize> = Vec::new();
    for j in 1..t.header.len() {
        cur.push(j);
        if cur.len() > 1 && widest(&cur) > width {
            cur.pop();
            groups.push(std::mem::replace(&mut cur, vec![j]));
        }
    }
    if !cur.is_empty() || groups.is_empty() {
        groups.push(cur);
    }
    let pick = |r: &[String], g: &[usize]| -> Vec<String> {
        std::iter::once(0)
            .chain(g.iter().copied())
            .filter_map(|j| r.get(j).cloned())
            .collect()
    };
    groups
        .iter()
        .map(|g| {
            table(&Table {
                header: pick(&t.header, g),
                rows: t.rows.iter().map(|r| pick(r, g)).collect(),
            })
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// Wraps every prose line longer than `width` at spaces (a Markdown
/// paragraph may span lines); blockquote lines keep their `> ` and list
/// items indent their continuation. Table rows and headings are left
/// alone.
pub fn wrap_lines(text: &str, width: usize) -> String {
    let mut out = String::with_capacity(text.len() + 64);
    for line in text.lines() {
        if line.chars().count() <= width || line.starts_with('|') || line.starts_with('#') {
            out.push_str(line);
            out.push('\n');
            continue;
        }
        let (first, rest) = if let Some(t) = line.strip_prefix("> ") {
            ("> ", ("> ", t))
        } else if let Some(t) = line.strip_prefix("- ") {
            ("- ", ("  ", t))
        } else {
            ("", ("", line))
        };
        let (cont, body) = rest;
        let mut cur = String::from(first);
        let mut fresh = true;
        for word in body.split(' ') {
            if !fresh && cur.chars().count() + 1 + word.chars().count() > width {
                out.push_str(&cur);
                out.push('\n');
                cur = String::from(cont);
                fresh = true;
            }
            if !fresh {
                cur.push(' ');
            }
            cur.push_str(word);
            fresh = false;
        }
        out.push_str(&cur);
        out.push('\n');
    }
    out
}

/// The linear-approximation section: curvature measures and Box's bias in
/// plain words, then their numbers.
fn nonlinearity_part(o: &mut String, results: &AuditResults) {
    use crate::report::nonlinearity as nl;
    let r = &results.nonlinearity;
    let _ = writeln!(o, "\n## {}\n", nl::HEADING);
    for p in nl::paragraphs(r) {
        let _ = writeln!(o, "{}\n", escape(&p));
    }
    for (k, v) in nl::curvature_rows(r) {
        let _ = writeln!(o, "- {}: {}", escape(&k), escape(&v));
    }
    if !r.bias.is_empty() {
        o.push('\n');
        o.push_str(&table(&nl::bias_table(r, &results.fit)));
    }
    let _ = writeln!(o, "\n{}", escape(nl::NOTE));
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
