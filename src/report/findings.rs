//! The sentences of the verdicts: each [`Finding`] of
//! [`crate::diagnostics::verdict`] rendered as one plain sentence quoting
//! its numbers, and the quote (or why there is none) in words. The
//! diagnostics layer produces no text; every renderer reads it from here.

use crate::audit::AuditResults;
use crate::diagnostics::resample::RUNAWAY_SPREADS;
use crate::diagnostics::verdict::{Finding, NoQuote, QuoteKind, Rule, Source, Status, Verdict};
use crate::report::format;

/// A number with 4 significant digits, trailing zeros trimmed.
pub fn num(x: f64) -> String {
    if !x.is_finite() {
        return format!("{x}");
    }
    if x == 0.0 {
        return "0".to_string();
    }
    let mag = x.abs().log10().floor() as i32;
    if !(-4..6).contains(&mag) {
        return format!("{x:.3e}");
    }
    let decimals = (3 - mag).max(0) as usize;
    let s = format!("{x:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn fixed2(x: f64) -> String {
    format!("{x:.2}")
}

/// A share as a percentage: one decimal below 10 %, none above.
pub fn pct(share: f64) -> String {
    let p = 100.0 * share;
    if p != 0.0 && p.abs() < 10.0 {
        format!("{p:.1} %")
    } else {
        format!("{p:.0} %")
    }
}

/// A p-value as a phrase: "p < 1e-16" below double precision, else
/// "p = " with 3 decimals or 2 significant digits below 0.001.
fn p_phrase(p: f64) -> String {
    if p < 1e-16 {
        "p < 1e-16".to_string()
    } else if p < 1e-3 {
        format!("p = {p:.1e}")
    } else {
        format!("p = {p:.3}")
    }
}

/// The name of a diagnostic as it opens a sentence ("bootstrap", "Monte Carlo").
pub fn source_words(s: Source) -> &'static str {
    match s {
        Source::Fit => "base fit",
        Source::Bootstrap => "bootstrap",
        Source::MonteCarlo => "Monte Carlo",
        Source::Profile => "profile",
        Source::Multistart => "multi-start",
        Source::Coverage => "coverage simulation",
    }
}

fn stop_words(code: &str) -> String {
    serde_json::from_value::<crate::fit::StopReason>(serde_json::Value::String(code.to_string()))
        .map(|r| crate::report::tables::stop_words(r).to_string())
        .unwrap_or_else(|_| code.to_string())
}

/// One finding as one sentence.
pub fn sentence(f: &Finding) -> String {
    let n = |k: &str| f.numbers.get(k).copied().unwrap_or(f64::NAN);
    let has = |k: &str| f.numbers.contains_key(k);
    let label = source_words(f.diagnostic);
    match f.rule {
        Rule::BaseFit => format!(
            "the base fit did not converge (it stopped after {} iterations: {}), so its standard errors \
             describe no minimum",
            num(n("iterations")),
            stop_words(f.detail.as_deref().unwrap_or(""))
        ),
        Rule::OnBound => format!(
            "the estimate {} lies on a bound, where the covariance standard error does not apply",
            num(n("value"))
        ),
        Rule::Undetermined => "the standard error is undetermined: the data do not fix this parameter (the \
                               Jacobian is rank-deficient in its direction)"
            .to_string(),
        Rule::BetterMinimum if f.status == Status::Holds => {
            format!(
            "the multi-start search ({} starts) found no better minimum than the audited fit (chi2 = {}){}",
            num(n("starts")),
            format::chi2(if has("chi2_audited") { n("chi2_audited") } else { n("chi2_base") }),
            if n("rebased") == 1.0 {
                format!(
                    " (the audit is re-based there; the study's start reaches chi2 = {})",
                    format::chi2(n("chi2_base"))
                )
            } else {
                String::new()
            }
        )
        }
        Rule::BetterMinimum => {
            let lead = if f.diagnostic == Source::Profile {
                "a profile passes through a better minimum"
            } else {
                "a better minimum exists"
            };
            let chi2s = format!(
                "chi2 = {} against {} at the base fit",
                format::chi2(n("chi2_best")),
                format::chi2(n("chi2_base"))
            );
            match (has("value_at_best"), has("shift_se")) {
                (true, true) if f.status == Status::Fails => format!(
                    "{lead}: {chi2s}; there this parameter is {} instead of {}, {} standard errors away",
                    num(n("value_at_best")),
                    num(n("value")),
                    fixed2(n("shift_se"))
                ),
                (true, true) => format!(
                    "{lead}: {chi2s}; this parameter is {} there, within {} standard error of the base value \
                     {}, but the base fit is not the least-squares solution",
                    num(n("value_at_best")),
                    num(n("shift_limit_se")),
                    num(n("value"))
                ),
                (true, false) => format!(
                    "{lead}: {chi2s}; there this parameter is {} instead of {}",
                    num(n("value_at_best")),
                    num(n("value"))
                ),
                _ => format!("{lead}: {chi2s}"),
            }
        }
        Rule::ProfileOpenBelow | Rule::ProfileOpenAbove => {
            let side = if f.rule == Rule::ProfileOpenBelow {
                "below"
            } else {
                "above"
            };
            match f.detail.as_deref() {
                Some("bound") => format!(
                    "the chi-squared profile does not rise by {} {side} the estimate before the parameter's \
                     bound at {}: within its allowed range the data do not limit it on that side",
                    num(n("rise")),
                    num(n("last"))
                ),
                Some("unresolved") => format!(
                    "the chi-squared profile could not be followed {side} the estimate (refits failed at {} \
                     before it rose by {}), so the interval end is unknown",
                    num(n("last")),
                    num(n("rise"))
                ),
                _ => format!(
                    "the chi-squared profile does not rise by {} {side} the estimate (scanned to {}): the \
                     parameter is practically non-identifiable on that side",
                    num(n("rise")),
                    num(n("last"))
                ),
            }
        }
        Rule::ProfileHalfWidths => {
            let sides = format!(
                "the profile interval's half-widths are {} (below) and {} (above) times the covariance \
                 half-width {}",
                fixed2(n("ratio_below")),
                fixed2(n("ratio_above")),
                num(n("covariance_half_width"))
            );
            match f.status {
                Status::Holds => format!("{sides}, within {}", pct(n("tolerance"))),
                Status::Doubtful => format!("{sides}: they differ by more than {}", pct(n("tolerance"))),
                Status::Fails => format!(
                    "{sides}: outside [{}, {}], so the covariance interval misdescribes the chi-squared surface",
                    num(n("fail_low")),
                    num(n("fail_high"))
                ),
            }
        }
        Rule::SpreadRatio => {
            let r = n("ratio");
            let figures = format!(
                "robust SD {}, ratio {} to u, {} against a correct u",
                num(n("robust_std")),
                fixed2(r),
                p_phrase(n("p_value"))
            );
            let tol = n("tolerance");
            let dev = (r - 1.0).abs();
            match f.status {
                Status::Fails | Status::Doubtful => format!(
                    "the {label} spread differs from the analytic standard error by {} ({figures}), more \
                     than {}: the quoted u is {}",
                    pct(dev),
                    pct(if f.status == Status::Fails { 2.0 * tol } else { tol }),
                    if r > 1.0 { "too small" } else { "too large" }
                ),
                Status::Holds if dev <= tol => format!(
                    "{label} spread agrees with the analytic standard error within {} ({figures})",
                    pct(tol)
                ),
                Status::Holds => format!(
                    "{label} spread differs from the analytic standard error by {} ({figures}), but a correct \
                     u gives such a ratio by chance (p not below {})",
                    pct(dev),
                    num(n("clear_p"))
                ),
            }
        }
        Rule::RunawayRefits => {
            format!(
            "{} of {} successful {label} refits ran away (farther than {} robust SDs from the median, {}){}",
            num(n("runaways")),
            num(n("successful")),
            num(RUNAWAY_SPREADS),
            pct(n("share")),
            if f.status == Status::Holds {
                "; the robust spread ignores them".to_string()
            } else {
                format!(", more than {}: the fit is unstable under {label} refits", pct(n("limit")))
            }
        )
        }
        Rule::PercentileExcludesEstimate => format!(
            "the {label} interval [{}, {}] does not contain the estimate {}: the fit is unstable under \
             resampling",
            num(n("lower")),
            num(n("upper")),
            num(n("estimate"))
        ),
        Rule::FailedRefits => format!(
            "{} of {} {label} refits failed ({}), more than {}; they are excluded from its statistics",
            num(n("failed")),
            num(n("run")),
            pct(n("share")),
            pct(n("limit"))
        ),
        Rule::GoodnessOfFit => {
            let b = n("birge_ratio");
            let stat = if has("deviance") { "deviance" } else { "chi2" };
            let head = format!(
                "{stat} = {} for {} degrees of freedom (two-tailed {}, Birge ratio sqrt({stat}/dof) = {})",
                format::chi2(n("chi2")),
                num(n("dof")),
                p_phrase(n("p_value")),
                fixed2(b)
            );
            if f.status == Status::Holds && has("deviance") {
                format!("{head}: the scatter agrees with Poisson counts")
            } else if f.status == Status::Holds {
                format!("{head}: the scatter agrees with the stated sigma")
            } else {
                if has("deviance") {
                    format!(
                        "{head}: scaling the covariance by deviance/dof would multiply u by {}; either the \
                         counts scatter more than Poisson counts (over-dispersion) or the model is wrong",
                        fixed2(b)
                    )
                } else {
                    format!(
                        "{head}: scaling the covariance by chi2/dof would multiply u by {}; either the stated \
                         sigma or the model is wrong",
                        fixed2(b)
                    )
                }
            }
        }
        Rule::Coverage => {
            let head = format!(
                "simulated at the fit ({} data sets), value +- k u contains the fitted value in {} +- {} of \
                 them against the level {}",
                num(n("counted")),
                fixed3(n("coverage")),
                fixed3(n("std_error")),
                fixed3(n("level"))
            );
            let profile = if has("profile_coverage") {
                format!(
                    "; the profile interval covers {} +- {}",
                    fixed3(n("profile_coverage")),
                    fixed3(n("profile_std_error"))
                )
            } else {
                String::new()
            };
            if f.status == Status::Holds {
                format!("{head}{profile}: no clear departure beyond the tolerance")
            } else {
                format!(
                    "{head}{profile}: u would have to be multiplied by {} to cover the level (more than \
                     {} standard errors off)",
                    fixed2(n("width_factor")),
                    num(n("clear_se"))
                )
            }
        }
        Rule::Nonlinearity => crate::report::nonlinearity::finding_sentence(f),
    }
}

fn fixed3(x: f64) -> String {
    format!("{x:.3}")
}

/// The sentences of a verdict: every finding when it holds, else only the
/// objections (status above holds).
pub fn reasons(v: &Verdict) -> Vec<String> {
    if v.status == Status::Holds {
        if v.findings.is_empty() {
            return vec!["no diagnostic ran, so only the analytic standard error is available".to_string()];
        }
        v.findings.iter().map(sentence).collect()
    } else {
        v.findings
            .iter()
            .filter(|f| f.status != Status::Holds || f.rule == Rule::Nonlinearity)
            .map(sentence)
            .collect()
    }
}

/// [`reasons`] for a fit whose statistic is `statistic` (`"chi2"` or
/// `"deviance"`, [`crate::fit::FitResult::statistic`]): for the deviance
/// of a Poisson fit the sentences name the deviance.
pub fn reasons_with(v: &Verdict, statistic: &str) -> Vec<String> {
    let out = reasons(v);
    if statistic != "deviance" {
        return out;
    }
    out.into_iter()
        .map(|t| {
            t.replace("chi-squared profile", "deviance profile")
                .replace("chi-squared surface", "deviance surface")
                .replace("chi2 = ", "deviance = ")
        })
        .collect()
}

/// Why no interval is quoted, in words.
pub fn no_quote_words(n: NoQuote) -> &'static str {
    match n {
        NoQuote::NotConverged => "none: the base fit did not converge",
        NoQuote::OnBound => "none: the estimate lies on a bound",
        NoQuote::Undetermined => "none: the standard error is undetermined",
        NoQuote::NotIdentifiable => "none: the profile does not close (not identifiable)",
        NoQuote::NotBestMinimum => "none: the base fit is not the best minimum found",
        NoQuote::GoodnessOfFit => "none: chi2 disagrees with its degrees of freedom (sigma or model wrong)",
        NoQuote::ProfileAgrees => "none: the analytic interval is doubted and the profile agrees with it",
        NoQuote::ProfileNotRun => "none: the analytic interval is doubted and no profile ran",
        NoQuote::CoverageOff => {
            "none: the simulated coverage of the analytic interval is off the level, and the profile \
             interval's is too (or the profile does not close)"
        }
        NoQuote::NoDerivedProfile => {
            "none: the analytic interval is doubted, and derived quantities have no profile interval"
        }
    }
}

/// The interval to quote as one cell: `value +- k u [lo, hi]` or the
/// profile interval, at the precision of the standard error; or why none.
pub fn quote_cell(results: &AuditResults, v: &Verdict) -> String {
    let p = results.fit.parameters.iter().find(|p| p.name == v.parameter);
    quote_text(v, p.map(|p| p.value), p.and_then(|p| p.std_error))
}

/// The quote cell of a verdict on a quantity of this value and standard
/// uncertainty (a parameter or a derived quantity).
pub fn quote_text(v: &Verdict, value: Option<f64>, se: Option<f64>) -> String {
    let p = value.map(|value| (value, se));
    match (&v.quote, v.no_quote) {
        (Some(q), _) => {
            // The ends at the precision of the standard uncertainty, or of
            // the half-width when that is smaller (a low level), so that
            // they never round to one number.
            let half = 0.5 * (q.upper - q.lower);
            let place_of = match se {
                Some(u) if half.is_finite() && half > 0.0 => Some(u.min(half)),
                _ => se,
            };
            let ends = format!(
                "[{}, {}]",
                format::at_precision_of(q.lower, place_of),
                format::at_precision_of(q.upper, place_of)
            );
            let level = format::percent(q.level, 4);
            match (q.kind, p) {
                (QuoteKind::Analytic, Some((value, _))) => {
                    let k = 0.5 * (q.upper - q.lower) / se.unwrap_or(f64::NAN);
                    let (val, u) = format::value_and_uncertainty(value, se.map(|u| k * u));
                    format!("{val} \u{b1} {u} {ends} ({level}, k = {})", format::sig(k, 3))
                }
                (QuoteKind::Analytic, None) => format!("{ends} ({level})"),
                (QuoteKind::Profile, _) => format!("profile {ends} ({level})"),
            }
        }
        (None, Some(n)) => no_quote_words(n).to_string(),
        (None, None) => format::ABSENT.to_string(),
    }
}
