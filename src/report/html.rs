//! `report.html`: one self-contained page.
//!
//! Inline CSS and inline SVG only: no script, no external request, not a
//! single URL, so the file can be archived, mailed and printed as it is
//! (`@media print` rules keep figures and tables whole). The markup is
//! well-formed XML as well as HTML. Every string that comes from the user
//! (title, names, formula, paths, command line, reasons) is escaped.
//!
//! Sections, in order: the lead notice when the multi-start search found a
//! better minimum; verdict summary; fit; goodness of fit; interval
//! comparison (closed by the linear-approximation part: curvature measures
//! and Box's bias); figures; diagnostic failures; settings and provenance;
//! caution.

use std::fmt::Write as _;

use crate::audit::AuditResults;
use crate::diagnostics::verdict::Status;
use crate::report::figures::svg::inline;
use crate::report::tables::{self, Table};
use crate::report::{
    better_minimum, findings, format, profile_below_base, rebased_notice, Figures, Renderer, ReportError,
    CAUTION,
};

/// Section headings of the page, in order (the lead notice is not a section).
pub const SECTIONS: [&str; 8] = [
    "Verdict summary",
    "Fit",
    "Goodness of fit",
    "Interval comparison",
    "Figures",
    "Diagnostic failures",
    "Settings and provenance",
    "Caution",
];

/// Escapes text for HTML and XML content and attribute values; control
/// characters other than line feed and tab become U+FFFD.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            // Characters XML forbids (or that reorder text): never raw.
            c if c != '\n' && c != '\t' && crate::study::is_unsafe_char(c) => out.push('\u{fffd}'),
            c => out.push(c),
        }
    }
    out
}

const CSS: &str = r#"
:root { color: #111; background: #fff; }
body { font-family: sans-serif; font-size: 15px; line-height: 1.45; max-width: 1180px; margin: 1.5em auto; padding: 0 1em; }
h1 { font-size: 1.6em; margin-bottom: 0.2em; }
h2 { font-size: 1.25em; border-bottom: 2px solid #444; padding-bottom: 0.15em; margin-top: 1.8em; }
p.sub { color: #444; margin-top: 0; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.92em; }
th, td { border: 1px solid #999; padding: 0.25em 0.55em; text-align: left; vertical-align: top; }
th { background: #e8e8e8; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td, th { overflow-wrap: break-word; }
h3 { font-size: 1.05em; margin: 1.2em 0 0.3em 0; }
table { max-width: 100%; }
code { font-family: monospace; font-size: 0.95em; overflow-wrap: anywhere; }
.notice { border: 4px double #000; padding: 0.8em 1em; margin: 1em 0 1.5em 0; font-size: 1.08em; background: #f2f2f2; }
.notice strong { font-size: 1.1em; }
.status { font-weight: bold; white-space: nowrap; }
.status.holds { border: 1px solid #555; padding: 0 0.3em; }
.status.doubtful { border: 1px dashed #000; padding: 0 0.3em; font-style: italic; }
.status.fails { border: 2px solid #000; padding: 0 0.3em; background: #000; color: #fff; }
figure { margin: 1.2em 0; }
figure svg { max-width: 100%; height: auto; border: 1px solid #ccc; }
figcaption { font-size: 0.9em; color: #333; max-width: 60em; }
.caution { border-left: 4px solid #444; padding-left: 0.8em; }
footer { margin-top: 2.5em; padding-top: 0.6em; border-top: 1px solid #999; font-size: 0.88em; color: #333; }
@media print {
  body { font-size: 10pt; max-width: none; margin: 0; }
  h2 { break-after: avoid; page-break-after: avoid; }
  figure, table, .notice { break-inside: avoid; page-break-inside: avoid; }
  table { font-size: 8.5pt; }
  td, th { overflow-wrap: anywhere; }
  td.num { white-space: normal; }
  figure svg { border: none; }
  .notice { background: none; }
}
"#;

fn status_cell(st: Status) -> String {
    let (sym, word) = match st {
        Status::Holds => ("\u{2713}", "holds"),
        Status::Doubtful => ("?", "doubtful"),
        Status::Fails => ("\u{2717}", "fails"),
    };
    format!("<span class=\"status {word}\">{sym} {word}</span>")
}

/// Writes a table; `numeric` says which columns are right-aligned numbers.
fn table(out: &mut String, t: &Table, numeric: &[usize], class: Option<&str>) {
    let _ = match class {
        Some(c) => writeln!(out, "<table class=\"{c}\">"),
        None => writeln!(out, "<table>"),
    };
    out.push_str("<thead><tr>");
    for h in &t.header {
        let _ = write!(out, "<th scope=\"col\">{}</th>", escape(h));
    }
    out.push_str("</tr></thead>\n<tbody>\n");
    for row in &t.rows {
        out.push_str("<tr>");
        for (j, cell) in row.iter().enumerate() {
            if j == 0 {
                let _ = write!(out, "<th scope=\"row\">{}</th>", escape(cell));
            } else if numeric.contains(&j) {
                let _ = write!(out, "<td class=\"num\">{}</td>", escape(cell));
            } else {
                let _ = write!(out, "<td>{}</td>", escape(cell));
            }
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody>\n</table>\n");
}

fn pairs(out: &mut String, rows: &[(String, String)], code_for: &[&str]) {
    out.push_str("<table>\n<tbody>\n");
    for (k, v) in rows {
        let value = if code_for.contains(&k.as_str()) {
            format!("<code>{}</code>", escape(v))
        } else {
            escape(v)
        };
        let _ = writeln!(
            out,
            "<tr><th scope=\"row\">{}</th><td>{value}</td></tr>",
            escape(k)
        );
    }
    out.push_str("</tbody>\n</table>\n");
}

/// The whole page.
pub fn page(results: &AuditResults, figures: &Figures) -> String {
    let title = results
        .study
        .title
        .clone()
        .unwrap_or_else(|| format!("Study {}", results.study.name));
    let mut o = String::with_capacity(256 * 1024);
    o.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n");
    o.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n");
    let _ = writeln!(o, "<title>Fit audit: {}</title>", escape(&title));
    let _ = writeln!(o, "<style>{CSS}</style>\n</head>\n<body>");

    // The lead notice comes before everything else.
    if let Some(n) = rebased_notice(results) {
        let _ = writeln!(
            o,
            "<div class=\"notice\" role=\"alert\"><p><strong>The study's start reaches a local minimum \
             (chi-squared = {}); this audit is re-based at the best minimum found (chi-squared = {}).</strong></p>\
             <p>Every diagnostic and verdict below describes the best minimum. Put these start values in the \
             study to fit it directly:</p><p><code>{}</code></p></div>",
            format::chi2(n.start_chi2),
            format::chi2(n.audited_chi2),
            escape(&n.start_lines())
        );
    }
    let mut lead = Vec::new();
    if let Some((base, best)) = better_minimum(results) {
        lead.push(format!(
            "The multi-start search found a minimum with chi-squared = {} where the base fit has \
             chi-squared = {}.",
            format::chi2(best),
            format::chi2(base)
        ));
    }
    for (name, value, chi2) in profile_below_base(results) {
        lead.push(format!(
            "The profile of {name} reaches chi-squared = {} at {name} = {}, below the base fit's {}.",
            format::chi2(chi2),
            format::sig(value, 6),
            format::chi2(results.fit.chi2)
        ));
    }
    if !lead.is_empty() {
        let paras: Vec<String> = lead.iter().map(|p| format!("<p>{}</p>", escape(p))).collect();
        let _ = writeln!(
            o,
            "<div class=\"notice\" role=\"alert\"><p><strong>The base fit is not the best minimum \
             found.</strong></p>{}<p>The values and uncertainties below describe the base fit, which is a \
             local minimum: refit from the better minimum before quoting any of them.</p></div>",
            paras.join("")
        );
    }

    let _ = writeln!(o, "<header>\n<h1>{}</h1>", escape(&title));
    let _ = writeln!(
        o,
        "<p class=\"sub\">Study <code>{}</code>, model <code>{}</code>, {} points; audited {} by {} {}.</p>\n</header>",
        escape(&results.study.name),
        escape(&results.study.formula),
        results.study.points,
        escape(&results.provenance.date),
        escape(&results.provenance.tool),
        escape(&results.provenance.version)
    );

    // Verdict summary.
    let _ = writeln!(o, "<section id=\"verdicts\">\n<h2>{}</h2>", SECTIONS[0]);
    o.push_str(
        "<p>Does each quoted \u{b1} hold? <em>holds</em>: every diagnostic agrees with the analytic \
         standard error; <em>doubtful</em>: some diagnostic disagrees clearly, or a warning applies; \
         <em>fails</em>: the \u{b1} cannot be trusted. <em>Quote</em> is the interval to quote: \
         value \u{b1} k u when the verdict holds, the profile interval when the profile disagrees with \
         the parabola, none (with the reason) when no interval can be recommended.</p>\n",
    );
    o.push_str("<table>\n<thead><tr><th scope=\"col\">Parameter</th><th scope=\"col\">Quote</th><th scope=\"col\">Verdict</th><th scope=\"col\">Reasons</th></tr></thead>\n<tbody>\n");
    for v in &results.verdicts {
        let texts = findings::reasons_with(v, &results.fit.statistic);
        let reasons = if texts.is_empty() {
            format::ABSENT.to_string()
        } else if texts.len() == 1 {
            escape(&texts[0])
        } else {
            let items: Vec<String> = texts.iter().map(|r| format!("<li>{}</li>", escape(r))).collect();
            format!("<ul>{}</ul>", items.join(""))
        };
        let _ = writeln!(
            o,
            "<tr><th scope=\"row\">{}</th><td>{}</td><td>{}</td><td>{reasons}</td></tr>",
            escape(&v.parameter),
            escape(&findings::quote_cell(results, v)),
            status_cell(v.status)
        );
    }
    for d in &results.derived {
        let v = &d.verdict;
        let texts = findings::reasons_with(v, &results.fit.statistic);
        let reasons = if texts.is_empty() {
            format::ABSENT.to_string()
        } else {
            let items: Vec<String> = texts.iter().map(|r| format!("<li>{}</li>", escape(r))).collect();
            format!("<ul>{}</ul>", items.join(""))
        };
        let _ = writeln!(
            o,
            "<tr><th scope=\"row\">{} (derived)</th><td>{}</td><td>{}</td><td>{reasons}</td></tr>",
            escape(&d.name),
            escape(&findings::quote_text(v, Some(d.value), d.std_error)),
            status_cell(v.status)
        );
    }
    o.push_str("</tbody>\n</table>\n</section>\n");

    // Fit.
    let _ = writeln!(o, "<section id=\"fit\">\n<h2>{}</h2>", SECTIONS[1]);
    if results.datasets.is_empty() {
        let _ = writeln!(
            o,
            "<p>Model <code>{}</code> fitted to {} against {} by weighted least squares. Values are rounded \
             at the second significant digit of their standard error.</p>",
            escape(&results.study.formula),
            escape(&results.data.y_name),
            escape(&results.data.x_names.join(", "))
        );
    } else {
        let _ = writeln!(
            o,
            "<p>{} data sets fitted jointly by weighted least squares, each with its own formula, sharing \
             the parameters they have in common (table \"Data sets\" under the goodness of fit). Values are \
             rounded at the second significant digit of their standard error.</p>",
            results.datasets.len()
        );
    }
    table(&mut o, &tables::fit_params(&results.fit), &[1, 2, 3], None);
    if !results.derived.is_empty() {
        o.push_str("<h3>Derived quantities</h3>\n");
        table(
            &mut o,
            &tables::derived(results),
            &[2, 3, 4, 5, 6, 7, 8],
            Some("wide"),
        );
        let _ = writeln!(o, "<p>{}</p>", escape(tables::DERIVED_NOTE));
    }
    if !results.inverse.is_empty() {
        o.push_str("<h3>Inverse predictions</h3>\n");
        table(
            &mut o,
            &tables::inverse(results),
            &[1, 2, 3, 4, 5, 6, 7, 8, 9, 10],
            Some("wide"),
        );
        let _ = writeln!(o, "<p>{}</p>", escape(tables::INVERSE_NOTE));
    }
    o.push_str("</section>\n");

    // Goodness of fit.
    let _ = writeln!(o, "<section id=\"goodness\">\n<h2>{}</h2>", SECTIONS[2]);
    pairs(&mut o, &tables::goodness(&results.fit), &[]);
    if !results.datasets.is_empty() {
        o.push_str("<h3>Data sets</h3>\n");
        table(
            &mut o,
            &crate::report::datasets::table(results),
            &[2, 4, 5, 6, 7],
            Some("wide"),
        );
        let _ = writeln!(o, "<p>{}</p>", escape(crate::report::datasets::NOTE));
    }
    o.push_str("</section>\n");

    // Interval comparison.
    let _ = writeln!(o, "<section id=\"intervals\">\n<h2>{}</h2>", SECTIONS[3]);
    let _ = writeln!(
        o,
        "<p>Every interval at the {} level. A ratio SD / u near 1 (within its own uncertainty) means \
         the resampled spread agrees with the analytic standard error; the profile half-width is \
         compared with the analytic half-width. An em dash marks a diagnostic that did not run.</p>",
        escape(&format::percent(results.settings.level, 4))
    );
    for (heading, t) in tables::comparisons(results) {
        let _ = writeln!(o, "<h3>{}</h3>", escape(&heading));
        let numeric: Vec<usize> = (1..t.header.len()).collect();
        table(&mut o, &t, &numeric, Some("compare"));
    }
    nonlinearity_part(&mut o, results);
    if let Some(t) = crate::report::coverage::table(results) {
        o.push_str("<h3 id=\"coverage\">Coverage simulated at the fit</h3>\n");
        table(&mut o, &t, &[1, 2, 3, 4, 5], Some("wide"));
        let line = crate::report::coverage::summary_line(results).unwrap_or_default();
        let _ = writeln!(
            o,
            "<p>{} {}</p>",
            escape(crate::report::coverage::NOTE),
            escape(&line)
        );
    }
    o.push_str("</section>\n");

    // Figures.
    let _ = writeln!(o, "<section id=\"figures\">\n<h2>{}</h2>", SECTIONS[4]);
    if figures.list.is_empty() {
        o.push_str("<p>No figure could be drawn.</p>\n");
    }
    for (i, f) in figures.list.iter().enumerate() {
        let id = f.file.trim_end_matches(".svg");
        let _ = writeln!(
            o,
            "<figure id=\"fig-{}\">\n{}\n<figcaption><strong>Figure {}. {}.</strong> {} <code>figures/{}</code></figcaption>\n</figure>",
            escape(id),
            inline(&f.svg).trim(),
            i + 1,
            escape(&f.title),
            escape(&f.caption),
            escape(&f.file)
        );
    }
    o.push_str("</section>\n");

    // Failures.
    let _ = writeln!(o, "<section id=\"failures\">\n<h2>{}</h2>", SECTIONS[5]);
    o.push_str(
        "<p>Refits that failed are excluded from the statistics and counted here, so that nothing \
         is dropped silently.</p>\n",
    );
    table(&mut o, &tables::failures(results), &[2], None);
    o.push_str("</section>\n");

    // Settings and provenance.
    let _ = writeln!(o, "<section id=\"provenance\">\n<h2>{}</h2>", SECTIONS[6]);
    pairs(
        &mut o,
        &tables::provenance(results),
        &[
            "Command line",
            "Study file",
            "Data file",
            "Formula",
            "Study file SHA-256",
            "Data file SHA-256",
        ],
    );
    o.push_str("</section>\n");

    // Caution.
    let _ = writeln!(
        o,
        "<section id=\"caution\">\n<h2>{}</h2>\n<p class=\"caution\">{}</p>\n</section>",
        SECTIONS[7],
        escape(CAUTION)
    );
    let _ = writeln!(
        o,
        "<footer><p><strong>Caution.</strong> {}</p><p>{} {}</p></footer>",
        escape(FOOTER_CAUTION),
        escape(&results.provenance.tool),
        escape(&results.provenance.version)
    );
    o.push_str("</body>\n</html>\n");
    o
}

/// The linear-approximation part of the interval comparison: curvature
/// measures and Box's bias read in plain words, then their numbers.
fn nonlinearity_part(o: &mut String, results: &AuditResults) {
    use crate::report::nonlinearity as nl;
    let r = &results.nonlinearity;
    let _ = writeln!(o, "<h3 id=\"nonlinearity\">{}</h3>", nl::HEADING);
    for p in nl::paragraphs(r) {
        let _ = writeln!(o, "<p>{}</p>", escape(&p));
    }
    pairs(o, &nl::curvature_rows(r), &[]);
    if !r.bias.is_empty() {
        table(o, &nl::bias_table(r, &results.fit), &[1, 2, 3, 4, 5], None);
    }
    let _ = writeln!(o, "<p>{}</p>", escape(nl::NOTE));
}

/// The caution of the README, repeated in the footer of every page (and so
/// on the last printed page).
pub const FOOTER_CAUTION: &str = "Statistics support, and do not replace, a laboratory's own \
validation procedure and the applicable standards. A holds verdict says that the diagnostics found no \
disagreement with the quoted uncertainty; it does not validate the model, the data or the measurement \
method.";

/// Writes `report.html`.
pub struct Html;

impl Renderer for Html {
    fn name(&self) -> &'static str {
        "html"
    }

    fn render(
        &self,
        results: &AuditResults,
        figures: &Figures,
    ) -> Result<Vec<(String, Vec<u8>)>, ReportError> {
        Ok(vec![("report.html".into(), page(results, figures).into_bytes())])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_the_five_xml_characters() {
        assert_eq!(
            escape("<script>alert('x') & \"y\"</script>"),
            "&lt;script&gt;alert(&#39;x&#39;) &amp; &quot;y&quot;&lt;/script&gt;"
        );
        assert_eq!(escape("plain \u{b1} text"), "plain \u{b1} text");
    }
}
