//! report.html: well-formed, self-contained, escaped, sections in order.

#[path = "common/fixture.rs"]
mod fixture;

use fitaudit::audit::AuditResults;
use fitaudit::report::{figures, format, html};

fn page(r: &AuditResults) -> String {
    let f = figures::build(r).unwrap();
    html::page(r, &f)
}

/// The page parsed as XML (the `<!DOCTYPE html>` line is a DTD to the parser).
fn parse(s: &str) -> Result<roxmltree::Document<'_>, roxmltree::Error> {
    let opt = roxmltree::ParsingOptions {
        allow_dtd: true,
        ..Default::default()
    };
    roxmltree::Document::parse_with_options(s, opt)
}

fn text_of(node: roxmltree::Node) -> String {
    node.descendants()
        .filter(|n| n.is_text())
        .map(|n| n.text().unwrap())
        .collect()
}

fn headings(doc: &roxmltree::Document, tag: &str) -> Vec<String> {
    doc.descendants()
        .filter(|n| n.has_tag_name(tag))
        .map(|n| text_of(n).trim().to_string())
        .collect()
}

fn assert_self_contained(s: &str) {
    for bad in [
        "<script", "http://", "https://", "<link", "<img", "src=", "url(", "@import", "<iframe", "<object",
    ] {
        assert!(!s.to_lowercase().contains(bad), "report contains {bad}");
    }
}

#[test]
fn well_formed_with_every_section_in_order() {
    let r = fixture::cooling();
    let s = page(&r);
    let doc = parse(&s).expect("well-formed XML");
    assert_eq!(doc.root_element().tag_name().name(), "html");
    assert_eq!(headings(&doc, "h2"), html::SECTIONS.to_vec());
    assert_eq!(headings(&doc, "h1"), vec!["Cooling of a sealed vial"]);
    assert_self_contained(&s);
    assert!(s.contains("@media print"));
    // The caution paragraph, in the required words.
    assert!(s.contains(
        "Statistics support, and do not replace, a laboratory&#39;s own validation procedure and the \
         applicable standards."
    ));
    // One inline figure per drawn figure, none of them external.
    let figures = doc.descendants().filter(|n| n.has_tag_name("figure")).count();
    assert_eq!(figures, 14);
    assert_eq!(doc.descendants().filter(|n| n.has_tag_name("svg")).count(), 14);
    // No notice when the base fit is the best minimum.
    assert!(!s.contains("class=\"notice\""));
}

#[test]
fn tables_hold_the_numbers_of_the_results() {
    let r = fixture::cooling();
    let s = page(&r);
    let doc = parse(&s).unwrap();
    let rows: Vec<Vec<String>> = doc
        .descendants()
        .filter(|n| n.has_tag_name("tr"))
        .map(|tr| {
            tr.children()
                .filter(|c| c.is_element())
                .map(|c| text_of(c).trim().to_string())
                .collect()
        })
        .collect();
    let row = |first: &str, second: Option<&str>| {
        rows.iter()
            .find(|r| r[0] == first && second.is_none_or(|s| r.get(1).map(String::as_str) == Some(s)))
            .unwrap_or_else(|| panic!("row {first}"))
            .clone()
    };
    // Fit table: tau = 340.0 +- 1.3 (two significant digits of the standard error, GUM 7.2.6).
    let tau = row("tau", Some("340.0"));
    // U = k u with the fixture's k = 1.
    assert_eq!(tau, vec!["tau", "340.0", "1.3", "1.3", "0.39 %", ""]);
    // The derived half time ln(2) tau after the parameters: its value and
    // propagated u (exactly ln 2 times those of tau) in the derived table,
    // its quote in the verdict table.
    let d = &r.derived[0];
    let half = row("half_time", None);
    let (v, u) = format::value_and_uncertainty(d.value, d.std_error);
    assert_eq!(half[1..4], ["ln(2)*tau".to_string(), v, u]);
    assert!(
        (d.std_error.unwrap() / r.fit.parameters[2].std_error.unwrap() - std::f64::consts::LN_2).abs()
            < 1e-12
    );
    assert!(row("half_time (derived)", None)[2].ends_with("holds"));
    // Goodness of fit.
    assert_eq!(row("Degrees of freedom", None)[1], "33");
    assert_eq!(row("Chi-squared", None)[1], format::chi2(r.fit.chi2));
    assert_eq!(
        row("Covariance", None)[1],
        "absolute (from the stated uncertainties)"
    );
    // Interval comparison, split into narrow tables: the bootstrap table
    // (parameter, u, analytic, SD, percentile, BCa, robust ratio: 7
    // columns) gives the percentile interval at the precision of u.
    let b = &r.bootstrap.as_ref().unwrap().parameters[2];
    let cmp = rows
        .iter()
        .find(|r| r[0] == "tau" && r.len() == 7 && r[3] == format::at_precision_of(b.std, Some(1.3)))
        .expect("bootstrap comparison row");
    assert_eq!(
        cmp[4],
        format!("[{}, {}]", format::at(b.lower, -1), format::at(b.upper, -1))
    );
    // The ratio with its uncertainty under a correct u, 1/sqrt(2 nu) (the
    // standard deviation of a chi-squared variate over its dof, sqrt(2/nu),
    // halved for the square root): u to two significant digits and the
    // ratio at the same place, the rule of every table (GUM 7.2.6).
    let u_ratio = (0.5 / b.null_dof.unwrap()).sqrt();
    let (rv, ru) = format::value_and_uncertainty(b.robust_ratio.unwrap(), Some(u_ratio));
    assert_eq!(cmp[6], format!("{rv} \u{b1} {ru}"));
    assert_eq!(
        rv.split('.').nth(1).map(str::len),
        ru.split('.').nth(1).map(str::len)
    );

    // Verdicts.
    let v = rows
        .iter()
        .find(|r| r[0] == "tau" && r.get(2).map(String::as_str) == Some("? doubtful"))
        .expect("verdict row");
    // The quote comes first: tau's profile interval.
    assert!(v[1].starts_with("profile ["), "{}", v[1]);
    assert!(
        v[3].contains("half-widths are 0.75 (below) and 1.30 (above)"),
        "{}",
        v[3]
    );
    // Failures: one bootstrap replicate failed, its reason counted.
    let f = row("Bootstrap", None);
    assert_eq!(f[2], "1");
    assert_eq!(
        f[3],
        "not-converged: 1; BCa acceleration from 36 linearised leave-one-out values, 0 failed"
    );
    // Provenance.
    assert_eq!(row("Seed", None)[1], "1");
    assert_eq!(row("Worker threads", None)[1], "2");
    assert_eq!(
        row("Study file SHA-256", None)[1],
        r.study.study_sha256.clone().unwrap()
    );
    assert_eq!(row("Confidence level", None)[1], "68.27 %");
}

#[test]
fn user_strings_are_escaped_everywhere() {
    let r = fixture::hostile();
    let s = page(&r);
    assert_self_contained(&s);
    assert!(s.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    let doc = parse(&s).expect("well-formed despite hostile strings");
    // The decoded text is the user's, unchanged.
    assert_eq!(
        headings(&doc, "h1"),
        vec!["<script>alert(1)</script> & \"quotes\" | pipes"]
    );
    let all = text_of(doc.root_element());
    for raw in [
        "T&env",
        "d\"T",
        "tau<1",
        "studies/a&b/<cooling>.toml",
        "'<script>x</script>'",
    ] {
        assert!(all.contains(raw), "{raw}");
    }
    assert!(
        doc.descendants().all(|n| !n.has_tag_name("b")),
        "no markup from a reason"
    );
}

#[test]
fn a_better_minimum_leads_the_report_with_both_chi_squared_values() {
    let r = fixture::hostile();
    let ms = r.multistart.as_ref().unwrap();
    let s = page(&r);
    let doc = parse(&s).unwrap();
    let body = doc.descendants().find(|n| n.has_tag_name("body")).unwrap();
    let first = body.children().find(|n| n.is_element()).unwrap();
    assert_eq!(first.attribute("class"), Some("notice"));
    let notice = text_of(first);
    assert!(
        notice.contains(&format!("chi-squared = {}", format::chi2(ms.minima[0].chi2))),
        "{notice}"
    );
    assert!(notice.contains(&format!("chi-squared = {}", format::chi2(ms.base_chi2))));
    assert!(format::chi2(ms.minima[0].chi2) != format::chi2(ms.base_chi2));
}

#[test]
fn a_fit_without_diagnostics_still_has_every_section() {
    let r = fixture::fit_only();
    let s = page(&r);
    let doc = parse(&s).unwrap();
    assert_eq!(headings(&doc, "h2"), html::SECTIONS.to_vec());
    assert_eq!(s.matches("<td>not run</td>").count(), 5);
}

#[test]
fn a_profile_below_the_base_fit_also_leads_and_skipped_pairs_are_listed() {
    let r = fixture::profile_below();
    let s = page(&r);
    let doc = parse(&s).unwrap();
    let body = doc.descendants().find(|n| n.has_tag_name("body")).unwrap();
    let first = body.children().find(|n| n.is_element()).unwrap();
    assert_eq!(first.attribute("class"), Some("notice"));
    let notice = text_of(first);
    // chi2 - 0.75 at tau = 343.5 (the fixture's below-minimum point).
    assert!(
        notice.contains(&format!(
            "chi-squared = {} at tau = 343.5",
            format::chi2(r.fit.chi2 - 0.75)
        )),
        "{notice}"
    );
    let all = text_of(doc.root_element());
    assert!(
        all.contains("dT / tau skipped: parameter `tau`: no range to map around the estimate"),
        "skipped pair"
    );
    assert!(all.contains("the base fit is not the minimum"));
    assert!(!s.contains("fig-contour_dT_tau"));
}

#[test]
fn a_joint_study_has_the_data_set_table_and_a_figure_per_data_set() {
    let r = fixture::joint();
    let s = page(&r);
    let doc = parse(&s).unwrap();
    assert_self_contained(&s);
    assert!(headings(&doc, "h3").iter().any(|h| h == "Data sets"));
    let rows: Vec<Vec<String>> = doc
        .descendants()
        .filter(|n| n.has_tag_name("tr"))
        .map(|tr| {
            tr.children()
                .filter(|c| c.is_element())
                .map(|c| text_of(c).trim().to_string())
                .collect()
        })
        .collect();
    for d in &r.datasets {
        let row = rows
            .iter()
            .find(|row| row[0] == d.name)
            .unwrap_or_else(|| panic!("row {}", d.name));
        // The numbers of the record, formatted as the table formats them.
        assert_eq!(row[2], d.points.to_string());
        assert_eq!(row[3], "T_env*, dT*, tau*");
        assert_eq!(row[4], format::chi2(d.chi2));
        assert_eq!(row[6], format::sig(d.dof_share, 4));
    }
    // The fixture's shares: 20 and 16 points, three parameters shared by
    // both, so dof shares 18.5 and 14.5 (sum 33 = 36 - 3).
    assert_eq!(
        r.datasets[0].dof_share + r.datasets[1].dof_share,
        r.fit.dof as f64
    );
    assert!(s.contains("2 data sets fitted jointly"));
    for file in ["fit_early.svg", "fit_late.svg"] {
        assert!(s.contains(file), "{file}");
    }
}

#[test]
fn footer_carries_the_readme_caution() {
    let s = page(&fixture::cooling());
    let doc = parse(&s).unwrap();
    let footer = doc
        .descendants()
        .find(|n| n.has_tag_name("footer"))
        .expect("a footer");
    let text = text_of(footer);
    // The README's caution, word for word (its first sentence).
    let readme = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/README.md")).unwrap();
    let flat = readme
        .split_whitespace()
        .filter(|w| *w != ">")
        .collect::<Vec<_>>()
        .join(" ");
    let first = "Statistics support, and do not replace, a laboratory's own validation procedure and the applicable standards.";
    assert!(flat.contains(first));
    assert!(
        text.split_whitespace()
            .collect::<Vec<_>>()
            .join(" ")
            .contains(first),
        "{text}"
    );
    // The footer is the last element of the body.
    let body = doc.descendants().find(|n| n.has_tag_name("body")).unwrap();
    let last = body.children().rfind(|c| c.is_element()).unwrap();
    assert!(last.has_tag_name("footer"));
}
