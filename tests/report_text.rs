//! Terminal tables: fit table, verdict lines.

#[path = "common/fixture.rs"]
mod fixture;

use fitaudit::fit::{FitResult, ParamResult, ParamSpec, StopReason};
use fitaudit::report::text;

fn param(name: &str, value: f64, se: Option<f64>, at_bound: bool, fixed: bool) -> ParamResult {
    ParamResult {
        name: name.into(),
        value,
        std_error: se,
        expanded_uncertainty: se.map(|u| 2.228 * u),
        at_bound,
        fixed,
    }
}

#[test]
fn fit_table_rounds_values_at_the_uncertainty_and_flags_bounds() {
    // The first row is the GUM 7.2.2 example: m_s = 100.021 47 g, u_c = 0.35 mg.
    let fit = FitResult {
        likelihood: fitaudit::fit::Likelihood::Gaussian,
        statistic: "chi2".to_string(),
        small_counts: None,
        errors_in_x: false,
        converged: false,
        stop_reason: StopReason::IterationLimit,
        iterations: 1000,
        evaluations: 1200,
        chi2: 12.5,
        dof: 10,
        reduced_chi2: 1.25,
        p_value: Some(0.253),
        sigma_given: true,
        level: 0.95,
        // Student's t, 10 dof, 95 %: 2.228 (NIST/SEMATECH e-Handbook 1.3.6.7.2).
        coverage_factor: 2.228,
        coverage_basis: fitaudit::fit::CoverageBasis::StudentT,
        end: Default::default(),
        end_issues: vec![],
        parameters: vec![
            param("m_s", 100.021_473, Some(0.000_354), false, false),
            param("k", 0.0, None, true, false),
            param("c", 2.5, None, false, true),
        ],
        covariance: vec![],
        correlation: vec![],
        covariance_scaled: true,
        condition_number: 10.0,
        rank: 1,
        undetermined: vec![],
        fitted: vec![],
        residuals: vec![],
        leverage: vec![],
    };
    let specs = vec![
        ParamSpec::free("m_s", 100.0),
        ParamSpec {
            min: 0.0,
            ..ParamSpec::free("k", 1.0)
        },
        ParamSpec {
            fixed: true,
            ..ParamSpec::free("c", 2.5)
        },
    ];
    let t = text::fit_table(Some("Mass"), &specs, &fit);
    // U = 2.228 * 0.000354 = 0.000789, to two significant digits (GUM 7.2.6).
    let want = "Mass\n\n\
                parameter      value  std error  U (k = 2.228)  rel. error  note\n\
                m_s        100.02147    0.00035        0.00079   0.00035 %\n\
                k                  0          \u{2014}              \u{2014}           \u{2014}  at lower bound 0\n\
                c                2.5          \u{2014}              \u{2014}           \u{2014}  fixed\n\
                \n\
                chi2 = 12.5   dof = 10   reduced chi2 = 1.250   p-value = 0.25\n\
                coverage factor k = 2.228 (Student's t, 10 dof, 95.00 % level)\n\
                stopped: iteration limit reached after 1000 iterations; NOT converged\n";
    assert_eq!(t, want);
}

#[test]
fn verdict_lines_lead_with_the_better_minimum() {
    let r = fixture::hostile();
    let lines: Vec<String> = text::verdict_lines(&r).lines().map(str::to_string).collect();
    assert_eq!(lines.len(), 4);
    let ms = r.multistart.as_ref().unwrap();
    assert_eq!(
        lines[0],
        format!(
            "WARNING: the base fit is not the best minimum found: multi-start chi2 = {} < base fit chi2 = {}",
            fitaudit::report::format::chi2(ms.minima[0].chi2),
            fitaudit::report::format::chi2(ms.base_chi2)
        )
    );
    // Name, quote (first), status, every reason in a few words: a verdict
    // that holds counts its agreeing checks, a doubtful one names each
    // rule that objected and the diagnostic it read.
    let agree = r.verdicts[0].findings.len();
    assert_eq!(
        lines[1],
        format!(
            "T&env  21.500 \u{b1} 0.047 [21.453, 21.547] (68.27 %, k = 1.00)  holds     {agree} checks agree"
        )
    );
    assert!(
        lines[3].starts_with("tau<1  profile [")
            && lines[3].contains("doubtful  profile-half-widths (profile); spread-ratio (bootstrap)"),
        "{}",
        lines[3]
    );
    let plain = text::verdict_lines(&fixture::cooling());
    assert!(!plain.contains("WARNING"));
    assert_eq!(plain.lines().count(), 3);
}
