//! The figures: the expected files, well-formed self-contained SVG,
//! labelled axes, colours of one palette only, escaped text, safe file names.

#[path = "common/fixture.rs"]
mod fixture;

use fitaudit::report::figures::{self, multistart_plane_order, palette, Figures};

fn svg_texts(svg: &str) -> Vec<String> {
    let doc = roxmltree::Document::parse(svg).expect("well-formed SVG");
    doc.descendants()
        .filter(|n| n.has_tag_name("text"))
        .map(|n| n.text().unwrap_or("").trim().to_string())
        .collect()
}

fn check_svg(name: &str, svg: &str) {
    let doc = roxmltree::Document::parse(svg).unwrap_or_else(|e| panic!("{name}: not well-formed: {e}"));
    let root = doc.root_element();
    assert_eq!(root.tag_name().name(), "svg", "{name}");
    assert_eq!(
        root.tag_name().namespace(),
        Some("http://www.w3.org/2000/svg"),
        "{name}"
    );
    // Self-contained: the namespace is the only URL; no links, images, fonts or styles from outside.
    assert_eq!(svg.matches("http").count(), 1, "{name}");
    for bad in ["href", "<image", "url(", "@import", "<script", "@font-face"] {
        assert!(!svg.contains(bad), "{name} contains {bad}");
    }
    // One palette: every colour is a grey, one of the eight colours of
    // Okabe and Ito (2008), or a tint of one (mixed with white).
    for node in doc.descendants() {
        for attr in ["fill", "stroke"] {
            if let Some(c) = node.attribute(attr) {
                if let Some(hex) = c.strip_prefix('#') {
                    assert_eq!(hex.len(), 6, "{name}: colour {c}");
                    let v = |i: usize| u8::from_str_radix(&hex[i..i + 2], 16).unwrap();
                    let (r, g, b) = (v(0), v(2), v(4));
                    let grey = r == g && g == b;
                    let in_palette = palette::OKABE_ITO.iter().any(|ink| {
                        (0..=100).any(|k| palette::tint(*ink, k as f64 / 100.0) == palette::Ink(r, g, b))
                    });
                    assert!(grey || in_palette, "{name}: colour {c} is not of the palette");
                } else {
                    assert!(c == "none" || c == "white" || c == "black", "{name}: colour {c}");
                }
            }
        }
    }
}

fn build(r: &fitaudit::audit::AuditResults) -> Figures {
    let f = figures::build(r).expect("figures");
    for fig in &f.list {
        check_svg(&fig.file, &fig.svg);
        assert!(!fig.caption.is_empty() && !fig.title.is_empty());
    }
    if let Ok(dir) = std::env::var("FITAUDIT_DUMP_FIGURES") {
        for fig in &f.list {
            std::fs::write(format!("{dir}/{}", fig.file), &fig.svg).unwrap();
        }
    }
    f
}

#[test]
fn every_figure_of_a_full_audit_with_its_stable_name() {
    let f = build(&fixture::cooling());
    assert_eq!(
        f.files(),
        vec![
            "fit.svg",
            "residuals_qq.svg",
            "residuals_x.svg",
            "hist_T_env.svg",
            "hist_dT.svg",
            "hist_tau.svg",
            "profile_T_env.svg",
            "profile_dT.svg",
            "profile_tau.svg",
            "contour_T_env_dT.svg",
            "contour_T_env_tau.svg",
            "contour_dT_tau.svg",
            "multistart.svg",
            "coverage.svg",
            "correlation.svg",
        ]
    );
}

#[test]
fn coverage_figure_names_every_parameter_and_the_nominal_level() {
    let f = build(&fixture::cooling());
    let texts = svg_texts(&f.get("coverage.svg").unwrap().svg);
    for name in ["T_env", "dT", "tau"] {
        assert!(texts.iter().any(|t| t == name), "{name}: {texts:?}");
    }
    assert!(
        texts.iter().any(|t| t.contains("nominal level 68.27 %")),
        "{texts:?}"
    );
    // Without the simulation there is no coverage figure.
    let mut r = fixture::cooling();
    r.coverage = None;
    assert!(figures::build(&r).unwrap().get("coverage.svg").is_none());
}

#[test]
fn axes_carry_the_column_and_parameter_names() {
    let f = build(&fixture::cooling());
    let fit = svg_texts(&f.get("fit.svg").unwrap().svg);
    assert!(
        fit.iter().filter(|t| *t == "t_s").count() >= 2,
        "x axis of both panels: {fit:?}"
    );
    assert!(fit.iter().any(|t| t == "temp_C"));
    assert!(fit.iter().any(|t| t.starts_with("normalised residual")));
    // The bands are drawn with their legend entries (wrapped legend lines
    // are joined before matching).
    let legend = fit.join(" ");
    for want in [
        "confidence band",
        "prediction band",
        "bootstrap percentile",
        "Monte Carlo percentile",
    ] {
        assert!(legend.contains(want), "{want} in {fit:?}");
    }
    assert!(f.get("fit.svg").unwrap().caption.contains("prediction band"));
    let hist = svg_texts(&f.get("hist_tau.svg").unwrap().svg);
    for want in [
        "tau",
        "density",
        "bootstrap (400 replicates)",
        "Monte Carlo (300 trials)",
        "bootstrap BCa",
    ] {
        assert!(hist.iter().any(|t| t == want), "{want} in {hist:?}");
    }
    let prof = svg_texts(&f.get("profile_dT.svg").unwrap().svg);
    assert!(prof.iter().any(|t| t == "dT"));
    assert!(prof.iter().any(|t| t.starts_with("threshold")));
    let cont = svg_texts(&f.get("contour_dT_tau.svg").unwrap().svg);
    assert!(cont.iter().any(|t| t == "dT") && cont.iter().any(|t| t == "tau"));
    // Levels 2.30 and 6.18 at 68.3 % and 95.5 % (Numerical Recipes 15.6.5 for 2 parameters).
    assert!(
        cont.iter().any(|t| t.contains("2.30") && t.contains("68.3 %")),
        "{cont:?}"
    );
    let corr = svg_texts(&f.get("correlation.svg").unwrap().svg);
    assert!(corr.iter().any(|t| t == "1.00"));
}

#[test]
fn correlation_numbers_switch_to_white_on_dark_cells() {
    let r = fixture::cooling();
    let f = build(&r);
    let svg = &f.get("correlation.svg").unwrap().svg;
    let doc = roxmltree::Document::parse(svg).unwrap();
    let r02 = format!("{:.2}", r.fit.correlation[0][2]);
    let r01 = format!("{:.2}", r.fit.correlation[0][1]);
    let fill_of = |s: &str| {
        doc.descendants()
            .find(|n| n.has_tag_name("text") && n.text().map(str::trim) == Some(s))
            .and_then(|n| n.attribute("fill"))
            .map(str::to_string)
    };
    // |r| = 1 on the diagonal: dark cell, white number; the weak dT-T_env correlation: black.
    assert_eq!(fill_of("1.00").as_deref(), Some("#FFFFFF"));
    assert!(r.fit.correlation[0][1].abs() < 0.5);
    assert_eq!(fill_of(&r01).as_deref(), Some("#000000"));
    assert!(r.fit.correlation[0][2].abs() > 0.65);
    assert_eq!(fill_of(&r02).as_deref(), Some("#FFFFFF"));
}

#[test]
fn multistart_plane_is_the_two_most_spread_parameters() {
    let r = fixture::cooling();
    // End points: tau at 340 and 120 -> relative spread 220/340 = 0.65; dT at 58 and 40 ->
    // 18/58 = 0.31; T_env at 21.5 and 24 -> 2.5/21.5 = 0.12 (hand computation).
    let order = multistart_plane_order(r.multistart.as_ref().unwrap(), &r.fit);
    assert_eq!(order, vec![2, 1, 0]);
    let f = build(&r);
    let t = svg_texts(&f.get("multistart.svg").unwrap().svg);
    assert!(t.iter().any(|s| s == "tau") && t.iter().any(|s| s == "dT"));
    assert!(
        t.iter().any(|s| s.starts_with("minimum 1: χ² = 34.9293")),
        "{t:?}"
    );
}

#[test]
fn missing_diagnostics_omit_their_figures() {
    let f = build(&fixture::fit_only());
    assert_eq!(
        f.files(),
        vec![
            "fit.svg",
            "residuals_qq.svg",
            "residuals_x.svg",
            "correlation.svg"
        ]
    );
}

#[test]
fn several_independent_variables_plot_against_fitted_values() {
    let f = build(&fixture::two_variables());
    let fit = svg_texts(&f.get("fit.svg").unwrap().svg);
    assert!(fit.iter().any(|t| t == "Observed against fitted"));
    assert!(fit.iter().filter(|t| *t == "fitted temp_C").count() >= 2);
    let rx = svg_texts(&f.get("residuals_x.svg").unwrap().svg);
    assert!(rx.iter().any(|t| t == "t_s") && rx.iter().any(|t| t == "u"));
}

#[test]
fn hostile_names_are_escaped_in_svg_and_sanitised_in_file_names() {
    let r = fixture::hostile();
    let f = build(&r);
    let files = f.files();
    for want in [
        "hist_T_env.svg",
        "hist_d_T.svg",
        "hist_tau_1.svg",
        "contour_d_T_tau_1.svg",
    ] {
        assert!(files.contains(&want), "{want} in {files:?}");
    }
    for file in &files {
        assert!(
            file.chars()
                .all(|c| c.is_ascii_alphanumeric() || "_-.".contains(c)),
            "{file}"
        );
    }
    let t = svg_texts(&f.get("hist_tau_1.svg").unwrap().svg);
    assert!(
        t.iter().any(|s| s == "tau<1"),
        "decoded text keeps the name: {t:?}"
    );
    let raw = &f.get("fit.svg").unwrap().svg;
    assert!(raw.contains("t &lt;s&gt;") && raw.contains("temp|&amp;C"));
}

#[test]
fn non_finite_values_are_skipped_not_drawn() {
    let r = fixture::with_non_finite();
    let f = build(&r);
    let p = f.get("profile_tau.svg").unwrap();
    assert!(!p.svg.contains("NaN") && !p.svg.contains("inf"));
    assert!(p.caption.contains("upper side"), "{}", p.caption);
    assert!(f
        .get("contour_T_env_dT.svg")
        .unwrap()
        .caption
        .contains("1 grid nodes failed"));
    assert!(svg_texts(&f.get("correlation.svg").unwrap().svg)
        .iter()
        .any(|t| t == "n/a"));
}

#[test]
fn residuals_without_sigma_are_standardised_by_s_and_say_so() {
    let mut r = fixture::cooling();
    r.data.sigma = None;
    let s = r.fit.reduced_chi2.sqrt();
    let s_text = fitaudit::report::format::sig(s, 4);
    let f = build(&r);
    for file in ["fit.svg", "residuals_x.svg", "residuals_qq.svg"] {
        let fig = f.get(file).unwrap();
        assert!(
            fig.caption.contains(&format!("s = {s_text}")) && fig.caption.contains("no \u{3c3} given"),
            "{file}: {}",
            fig.caption
        );
        let texts = svg_texts(&fig.svg).join(" ");
        assert!(texts.contains("standardised residual"), "{file}: {texts}");
        assert!(!texts.contains("normalised residual"), "{file}");
    }
    // With sigma the axis says normalised, as before.
    let f = build(&fixture::cooling());
    let texts = svg_texts(&f.get("fit.svg").unwrap().svg).join(" ");
    assert!(texts.contains("normalised residual"));
}

#[test]
fn a_joint_study_has_a_fit_figure_per_data_set_on_its_own_points() {
    let r = fixture::joint();
    let f = build(&r);
    let files = f.files();
    assert!(files.contains(&"fit.svg"));
    for (name, points) in [("early", 20usize), ("late", 16)] {
        let file = format!("fit_{name}.svg");
        let fig = f
            .get(&file)
            .unwrap_or_else(|| panic!("{file} missing: {files:?}"));
        assert!(
            fig.caption.starts_with(&format!("Data set {name} (")),
            "{}",
            fig.caption
        );
        let doc = roxmltree::Document::parse(&fig.svg).unwrap();
        // One open circle per point in the data panel (error bars are
        // lines), one filled circle per point in the residual panel, plus
        // the legend's marker.
        let circles = doc.descendants().filter(|n| n.has_tag_name("circle")).count();
        assert_eq!(circles, 2 * points + 1, "{file}");
        let texts = svg_texts(&fig.svg);
        assert!(texts.iter().filter(|t| *t == "t_s").count() >= 2, "{texts:?}");
    }
    // The data sets' figures come right after the joint residual figures.
    let at = |name: &str| files.iter().position(|f| *f == name).unwrap();
    assert_eq!(at("fit_early.svg"), at("residuals_x.svg") + 1);
}

#[test]
fn report_settings_put_the_data_figure_on_log_axes() {
    use fitaudit::study::AxisScale;
    let mut r = fixture::cooling();
    let linear = build(&r);
    assert!(!linear.get("fit.svg").unwrap().caption.contains("logarithmic"));
    r.report.y_axis = AxisScale::Log;
    r.report.x_axis = AxisScale::Log;
    let f = build(&r);
    let fit = f.get("fit.svg").unwrap();
    assert!(fit.caption.contains("both axes logarithmic"), "{}", fit.caption);
    // Log ticks print the values 10^t (identity: log10 of a tick label is
    // the chart coordinate); a t = 0 reading cannot be drawn and is counted.
    let zeros = r.data.x[0].iter().filter(|t| **t <= 0.0).count();
    if zeros > 0 {
        assert!(
            fit.caption.contains(&format!("{zeros} points at or below zero")),
            "{}",
            fit.caption
        );
    }
    let texts = svg_texts(&fit.svg);
    assert!(texts.iter().any(|t| t == "100" || t == "1000"), "{texts:?}");
}

#[test]
fn single_variable_residual_figure_does_not_repeat_the_fit_panel() {
    let f = build(&fixture::cooling());
    let rx = f.get("residuals_x.svg").unwrap();
    let texts = svg_texts(&rx.svg);
    assert!(texts.iter().any(|t| t == "fitted temp_C"), "{texts:?}");
    assert!(texts.iter().any(|t| t.starts_with("point number")), "{texts:?}");
    assert!(!texts.iter().any(|t| t == "t_s"), "{texts:?}");
}

#[test]
fn histogram_intervals_are_bars_in_a_strip_not_crowded_lines() {
    let f = build(&fixture::cooling());
    let t = svg_texts(&f.get("hist_tau.svg").unwrap().svg);
    // One row label per interval type, each once.
    for want in ["value \u{b1} ku", "percentile", "BCa", "Monte Carlo", "profile"] {
        assert_eq!(t.iter().filter(|s| *s == want).count(), 1, "{want} in {t:?}");
    }
}

#[test]
fn the_curve_grid_is_fine_in_every_decade_of_a_positive_range() {
    use fitaudit::audit::{curve_grid, CURVE_LINEAR_POINTS, CURVE_LOG_POINTS};
    // A dilution series over five decades: a linear grid alone would put
    // one point below 0.25 (a straight chord across four decades on a log
    // axis); every decade must hold a fair share of the log part.
    let xs = curve_grid(0.01, 1000.0);
    assert_eq!(xs.len(), CURVE_LINEAR_POINTS + CURVE_LOG_POINTS - 2);
    assert!(xs.windows(2).all(|w| w[0] < w[1]));
    assert_eq!((xs[0], *xs.last().unwrap()), (0.01, 1000.0));
    for e in -2..3 {
        let (a, b) = (10f64.powi(e), 10f64.powi(e + 1));
        let inside = xs.iter().filter(|x| **x >= a && **x < b).count();
        assert!(
            inside >= CURVE_LOG_POINTS / 5 - 2,
            "{inside} points in [{a}, {b})"
        );
    }
    // A range through zero or within a decade keeps the even grid.
    for (lo, hi) in [(0.0, 1000.0), (-1.0, 1.0), (2.0, 15.0)] {
        let xs = curve_grid(lo, hi);
        assert_eq!(xs.len(), CURVE_LINEAR_POINTS);
        let step = (hi - lo) / (CURVE_LINEAR_POINTS - 1) as f64;
        assert!(xs
            .windows(2)
            .all(|w| ((w[1] - w[0]) - step).abs() < 1e-9 * step.max(1.0)));
    }
}
