//! The index of a batch: `index.json` (the [`BatchIndex`] record) and
//! `index.html` (one table row per study with its verdict counts, the
//! start-versus-best notice, failures and a link to its report).

use std::fmt::Write as _;

use crate::batch::BatchIndex;
use crate::report::format;
use crate::report::html::escape;
use crate::report::{ReportError, CAUTION};

/// The JSON text of the index (non-finite numbers as `null`).
pub fn json(index: &BatchIndex) -> Result<String, ReportError> {
    Ok(serde_json::to_string_pretty(index)? + "\n")
}

const CSS: &str = "body { font-family: sans-serif; font-size: 15px; max-width: 1180px; margin: 1.5em auto; padding: 0 1em; }
table { border-collapse: collapse; font-size: 0.92em; }
th, td { border: 1px solid #999; padding: 0.25em 0.55em; text-align: left; vertical-align: top; }
td.n { text-align: right; }
tr.error td { background: #fde8e8; }
p.caution { border-left: 4px solid #999; padding-left: 0.8em; color: #333; }";

/// The self-contained HTML page of the index.
pub fn html(index: &BatchIndex) -> String {
    let mut o = String::new();
    let audited = index.studies.iter().filter(|r| r.error.is_none()).count();
    let _ = writeln!(
        o,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>fitaudit batch: {} studies</title>\n<style>{CSS}</style>\n</head>\n<body>",
        index.studies.len()
    );
    let _ = writeln!(
        o,
        "<h1>Batch audit: {} studies</h1>\n<p>{} audited, {} could not be audited; exit status {}. {} {}, {}.</p>",
        index.studies.len(),
        audited,
        index.studies.len() - audited,
        index.exit_status,
        escape(&index.tool),
        escape(&index.version),
        escape(&index.date)
    );
    o.push_str("<table>\n<tr><th>study</th><th>title</th><th>holds</th><th>doubtful</th><th>fails</th><th>minimum</th><th>failed refits</th><th>report or error</th></tr>\n");
    for r in &index.studies {
        let minimum = match (r.start_chi2, r.best_chi2, r.rebased) {
            (Some(a), Some(b), true) => format!(
                "the start reaches a local minimum (chi2 = {}); audited at the best minimum found (chi2 = {})",
                format::chi2(a),
                format::chi2(b)
            ),
            (Some(a), Some(b), false) => format!(
                "the start reaches a local minimum (chi2 = {}); a lower one was found (chi2 = {}) but not audited",
                format::chi2(a),
                format::chi2(b)
            ),
            _ if r.error.is_some() => String::new(),
            _ => "no lower minimum found than the start's".to_string(),
        };
        let last = match (&r.report, &r.error) {
            (_, Some(e)) => format!("error: {}", escape(e)),
            (Some(link), None) => format!("<a href=\"{}\">report</a>", escape(link)),
            (None, None) => String::new(),
        };
        let _ = writeln!(
            o,
            "<tr{}><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            if r.error.is_some() { " class=\"error\"" } else { "" },
            escape(&r.name),
            escape(r.title.as_deref().unwrap_or("")),
            r.holds,
            r.doubtful,
            r.fails,
            escape(&minimum),
            r.failed_refits,
            last
        );
    }
    o.push_str("</table>\n");
    let _ = writeln!(
        o,
        "<p class=\"caution\">{}</p>\n</body>\n</html>",
        escape(CAUTION)
    );
    o
}
