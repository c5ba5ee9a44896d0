//! The words and cells of the linear-approximation section (curvature
//! measures and Box's bias, [`crate::diagnostics::nonlinearity`]), shared
//! by the HTML page, the Markdown summary and the verdict sentences.

use crate::diagnostics::nonlinearity::{
    NonlinearityResult, NotAvailable, ParameterBias, SecondDerivatives, BIAS_PERCENT_OF_ESTIMATE,
    BIAS_PERCENT_OF_STD_ERROR,
};
use crate::diagnostics::verdict::Finding;
use crate::fit::FitResult;
use crate::report::format;
use crate::report::tables::Table;

/// Heading of the section.
pub const HEADING: &str = "Linear approximation";

/// What the measures are and where they mislead (printed under the table).
pub const NOTE: &str = "Curvatures are relative (Bates and Watts 1980): the root mean square over all \
directions, and the largest, of the curvature of the model surface (intrinsic) and of its \
parameter lines (parameter effects), in units of the noise, at the solution only. Beyond the critical value \
1/(2 sqrt(F)) the surface bends visibly within the confidence region at the audit level. Box's bias \
(Box 1971) is the expected error of the estimate to second order in the noise. Both come from \
second derivatives at one point: they can miss nonlinearity farther out, where the profiles and the \
resampling diagnostics are the better guide; the judgement uses the RMS value, which can stay below \
the critical value while the largest exceeds it.";

fn n(x: f64) -> String {
    format::sig(x, 3)
}

fn opt(x: Option<f64>) -> String {
    x.map(n).unwrap_or_else(|| format::ABSENT.to_string())
}

/// Why the measures are not available, in words.
pub fn not_available_words(why: NotAvailable) -> &'static str {
    match why {
        NotAvailable::NotComputed => "not computed",
        NotAvailable::NotConverged => "not available: the fit did not converge, so there is no minimum to linearise at",
        NotAvailable::NothingEstimated => "not available: no parameter is estimated",
        NotAvailable::RankDeficient => {
            "not available: the Jacobian is rank-deficient at the solution (some parameters are determined only in combination)"
        }
        NotAvailable::NoDegreesOfFreedom => {
            "not available: without sigma and without degrees of freedom the noise scale is unknown"
        }
        NotAvailable::NotFinite => "not available: the model or its derivatives are not finite at the solution",
        NotAvailable::PoissonLikelihood => {
            "not available for a Poisson fit: the curvature measures and Box's bias assume Gaussian weighted least squares with fixed weights"
        }
        NotAvailable::ErrorsInX => {
            "not available with errors in x: the effective-variance weights depend on the parameters, which the curvature measures and Box's bias do not allow for"
        }
    }
}

/// The curvature numbers as (quantity, value) pairs.
pub fn curvature_rows(nl: &NonlinearityResult) -> Vec<(String, String)> {
    if let Some(why) = nl.not_available {
        return vec![("Curvature measures".into(), not_available_words(why).into())];
    }
    let f = nl
        .f_quantile
        .map(|f| format!("F = {} at the {} level", n(f), format::percent(nl.level, 4)))
        .unwrap_or_else(|| format::ABSENT.to_string());
    vec![
        (
            "Intrinsic curvature (RMS, relative)".into(),
            opt(nl.intrinsic_curvature),
        ),
        (
            "Parameter-effects curvature (RMS, relative)".into(),
            opt(nl.parameter_effects_curvature),
        ),
        (
            "Largest curvature over directions (intrinsic, parameter effects)".into(),
            format!(
                "{}, {}",
                opt(nl.intrinsic_curvature_max),
                opt(nl.parameter_effects_curvature_max)
            ),
        ),
        (
            "Critical value 1/(2 sqrt(F))".into(),
            format!("{} ({f})", opt(nl.critical_curvature)),
        ),
        (
            "Second derivatives".into(),
            match nl.second_derivatives {
                Some(SecondDerivatives::Exact) => "exact (symbolic)".into(),
                Some(SecondDerivatives::CentralDifferences) => {
                    "central differences of the exact Jacobian (the model has no exact second derivatives)"
                        .into()
                }
                None => format::ABSENT.to_string(),
            },
        ),
    ]
}

fn std_error(fit: &FitResult, name: &str) -> Option<f64> {
    fit.parameters
        .iter()
        .find(|p| p.name == name)
        .and_then(|p| p.std_error)
}

fn pct(x: Option<f64>) -> String {
    x.map(|x| format!("{} %", format::sig(x, 2)))
        .unwrap_or_else(|| format::ABSENT.to_string())
}

/// Box's bias per parameter, with the bias-corrected estimate beside the
/// estimate: parameter, estimate, bias-corrected estimate, bias, bias in
/// percent of the estimate and of the standard error.
pub fn bias_table(nl: &NonlinearityResult, fit: &FitResult) -> Table {
    Table {
        header: vec![
            "Parameter".into(),
            "Estimate".into(),
            "Bias-corrected estimate".into(),
            "Box's bias".into(),
            "Bias / estimate".into(),
            "Bias / u".into(),
        ],
        rows: nl
            .bias
            .iter()
            .map(|b| {
                let u = std_error(fit, &b.name);
                vec![
                    b.name.clone(),
                    format::at_precision_of(b.estimate, u),
                    format::at_precision_of(b.corrected, u),
                    format::sig(b.value, 2),
                    pct(b.percent_of_estimate),
                    pct(b.percent_of_std_error),
                ]
            })
            .collect(),
    }
}

fn bias_phrase(b: &ParameterBias) -> String {
    format!(
        "{} ({} of u, {} of the estimate)",
        format::sig(b.value, 2),
        pct(b.percent_of_std_error),
        pct(b.percent_of_estimate)
    )
}

/// The parameter whose bias is largest relative to its standard error.
fn most_biased(nl: &NonlinearityResult) -> Option<&ParameterBias> {
    nl.bias
        .iter()
        .filter(|b| b.percent_of_std_error.is_some_and(f64::is_finite))
        .max_by(|a, b| {
            let x = a.percent_of_std_error.unwrap_or(0.0).abs();
            let y = b.percent_of_std_error.unwrap_or(0.0).abs();
            x.total_cmp(&y)
        })
}

/// The reading of the numbers in plain words, one paragraph per item.
pub fn paragraphs(nl: &NonlinearityResult) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(why) = nl.not_available {
        out.push(format!(
            "The curvature measures and the bias are {}.",
            not_available_words(why)
        ));
        return out;
    }
    let (Some(ci), Some(cp), Some(k)) = (
        nl.intrinsic_curvature,
        nl.parameter_effects_curvature,
        nl.critical_curvature,
    ) else {
        out.push("The curvature measures could not be computed (a number was not finite).".into());
        return out;
    };
    let level = format::percent(nl.level, 4);
    let hint = most_biased(nl)
        .filter(|b| b.estimate > 0.0)
        .map(|b| format!(", for example log({}) in place of {}", b.name, b.name))
        .unwrap_or_default();
    match (ci > k, cp > k) {
        (false, false) => out.push(format!(
            "The linear approximation behind value \u{b1} u is adequate at the {level} level: the intrinsic \
             curvature {} and the parameter-effects curvature {} are both below the critical value {}.",
            n(ci),
            n(cp),
            n(k)
        )),
        (false, true) => out.push(format!(
            "The parametrisation is curved: the parameter-effects curvature {} exceeds the critical value \
             {} at the {level} level, while the intrinsic curvature {} stays below it. The model surface is \
             nearly flat, but equal steps in the parameters are unequal steps along it, so the interval \
             value \u{b1} u is distorted (typically asymmetric: prefer the profile interval). A \
             reparametrisation may help{hint}.",
            n(cp),
            n(k),
            n(ci)
        )),
        (true, pe) => out.push(format!(
            "The model surface itself is curved: the intrinsic curvature {} exceeds the critical value {} \
             at the {level} level{}. No reparametrisation removes intrinsic curvature: the confidence \
             region is not an ellipse in any parameters, and the profile and resampling intervals describe \
             it better than value \u{b1} u.",
            n(ci),
            n(k),
            if pe {
                format!(", and the parameter-effects curvature {} exceeds it too", n(cp))
            } else {
                format!(" (the parameter-effects curvature {} does not)", n(cp))
            }
        )),
    }
    // The RMS value below the critical value while the worst direction exceeds it.
    let worst = [
        ("intrinsic", ci, nl.intrinsic_curvature_max),
        ("parameter-effects", cp, nl.parameter_effects_curvature_max),
    ];
    for (what, rms, max) in worst {
        if let Some(mx) = max.filter(|&mx| rms <= k && mx > k) {
            out.push(format!(
                "In its worst direction the {what} curvature reaches {}, above the critical value: the \
                 approximation is adequate on average over directions but not along every one.",
                n(mx)
            ));
        }
    }
    let marked: Vec<&ParameterBias> = nl.bias.iter().filter(|b| b.is_marked()).collect();
    if marked.is_empty() {
        out.push(format!(
            "Box's bias of every estimate is below {} % of the estimate and {} % of its standard error: \
             negligible beside u.",
            BIAS_PERCENT_OF_ESTIMATE, BIAS_PERCENT_OF_STD_ERROR
        ));
    } else {
        let items: Vec<String> = marked
            .iter()
            .map(|b| format!("{}: {}", b.name, bias_phrase(b)))
            .collect();
        out.push(format!(
            "Box's bias is marked (above {} % of the estimate or {} % of u, a rule of thumb) for {}: \
             to second order in the noise the estimate is expected to miss the true value by that much \
             on average. The bias-corrected estimates are shown beside the estimates; quote the estimate, \
             and read a large bias as a sign that the distribution of the estimate is not the normal \
             one that value \u{b1} u assumes.",
            BIAS_PERCENT_OF_ESTIMATE,
            BIAS_PERCENT_OF_STD_ERROR,
            items.join("; ")
        ));
    }
    out
}

/// The sentence of a [`crate::diagnostics::verdict::Rule::Nonlinearity`]
/// finding.
pub fn finding_sentence(f: &Finding) -> String {
    let g = |k: &str| f.numbers.get(k).copied();
    let ci = g("intrinsic_curvature").unwrap_or(f64::NAN);
    let cp = g("parameter_effects_curvature").unwrap_or(f64::NAN);
    let k = g("critical_curvature").unwrap_or(f64::NAN);
    let bias = match (g("bias_percent_of_std_error"), g("bias_percent_of_estimate")) {
        (Some(u), Some(e)) => format!(
            "; Box's bias is {} of u ({} of the estimate)",
            pct(Some(u)),
            pct(Some(e))
        ),
        (Some(u), None) => format!("; Box's bias is {} of u", pct(Some(u))),
        _ => String::new(),
    };
    match f.detail.as_deref() {
        Some("parameter-effects") => format!(
            "this explains the disagreement: the parametrisation is curved (parameter-effects curvature \
             {} above the critical value {}; intrinsic {}), so value \u{b1} u misrepresents the interval and \
             a reparametrisation may help{bias}",
            n(cp),
            n(k),
            n(ci)
        ),
        Some("intrinsic") => format!(
            "this explains the disagreement: the model surface is curved (intrinsic curvature {} above the \
             critical value {}), which no reparametrisation removes{bias}",
            n(ci),
            n(k)
        ),
        _ => format!(
            "the curvatures stay below the critical value {} (intrinsic {}, parameter effects {}){bias}: \
             the estimate's bias alone may explain part of the disagreement",
            n(k),
            n(ci),
            n(cp)
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn result(ci: f64, cp: f64) -> NonlinearityResult {
        NonlinearityResult {
            not_available: None,
            second_derivatives: Some(SecondDerivatives::Exact),
            parameters: vec!["k".into()],
            intrinsic_curvature: Some(ci),
            parameter_effects_curvature: Some(cp),
            intrinsic_curvature_max: Some(1.2 * ci),
            parameter_effects_curvature_max: Some(1.2 * cp),
            critical_curvature: Some(0.46),
            f_quantile: Some(1.18),
            level: 0.6827,
            scale: Some(1.0),
            bias: vec![ParameterBias {
                name: "k".into(),
                estimate: 2.0,
                value: 0.05,
                corrected: 1.95,
                percent_of_estimate: Some(2.5),
                percent_of_std_error: Some(25.0),
            }],
        }
    }

    /// Each reading names the curvature that exceeds the critical value,
    /// and the marked bias with its percentages.
    #[test]
    fn paragraphs_name_what_exceeds_the_critical_value() {
        let flat = paragraphs(&result(0.01, 0.1));
        assert!(
            flat[0].starts_with("The linear approximation behind value"),
            "{}",
            flat[0]
        );
        let curved = paragraphs(&result(0.01, 0.9));
        assert!(
            curved[0].starts_with("The parametrisation is curved"),
            "{}",
            curved[0]
        );
        assert!(curved[0].contains("log(k)"), "{}", curved[0]);
        let intrinsic = paragraphs(&result(0.7, 0.9));
        assert!(intrinsic[0].starts_with("The model surface itself is curved"));
        assert!(intrinsic[0].contains("exceeds it too"));
        // RMS 0.4 below 0.46, worst direction 0.48 above it.
        let edge = paragraphs(&result(0.01, 0.4));
        assert!(
            edge[1].contains("parameter-effects curvature reaches 0.480"),
            "{}",
            edge[1]
        );
        assert!(
            flat[1].contains("k: 0.050 (25 % of u, 2.5 % of the estimate)"),
            "{}",
            flat[1]
        );
    }

    #[test]
    fn not_available_says_so_instead_of_numbers() {
        let mut r = result(0.01, 0.1);
        r.not_available = Some(NotAvailable::RankDeficient);
        let p = paragraphs(&r);
        assert_eq!(p.len(), 1);
        assert!(p[0].contains("rank-deficient"), "{}", p[0]);
        assert_eq!(curvature_rows(&r).len(), 1);
    }
}
