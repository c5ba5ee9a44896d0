//! Per-parameter verdicts: does the quoted +- hold?
//!
//! [`decide`] gives one [`Verdict`] per free parameter of the base fit
//! (fixed parameters have no quoted uncertainty and get none). Each rule
//! below that applies adds one plain sentence quoting its numbers; the
//! status is the gravest any rule gives (holds < doubtful < fails). When no
//! rule objects the status is *holds* and the sentences summarise the
//! agreement of each diagnostic that ran. With `tol` the audit tolerance
//! (`[audit] tolerance`, default 0.2):
//!
//! 1. **Base fit.** The base fit did not converge -> *fails* (its standard
//!    errors describe no minimum).
//! 2. **Undetermined / bound.** The estimate lies on a bound -> *fails*; the
//!    standard error is undetermined (none, parameter not fixed) -> *fails*.
//! 3. **Multi-start.** A clearly better minimum exists (`base_is_best ==
//!    false`): *fails* when the parameter's value at the best minimum
//!    differs from the base value by more than [`MINIMUM_SHIFT_SE`]
//!    standard errors (or always when there is no standard error),
//!    otherwise *doubtful*; the sentence quotes both chi-squared values.
//! 4. **Profile.** A profile end not found (the profile does not rise by
//!    the threshold on that side before the scan limit, the parameter's
//!    bound, or failed refits: practically non-identifiable, Raue et al.
//!    2009, Bioinformatics 25:1923) -> *fails*. Otherwise each half-width
//!    (`upper - estimate`, `estimate - lower`) is compared with its
//!    covariance counterpart `sqrt(threshold) * SE`: a ratio outside
//!    `[1 - tol, 1 + tol]` on either side -> *doubtful*; outside
//!    [[`PROFILE_FAIL_LOW`], [`PROFILE_FAIL_HIGH`]] -> *fails*. A profile
//!    point below the base fit by more than the threshold (times the
//!    profile's chi-squared scale) is a better minimum and is judged as in
//!    rule 3.
//! 5. **Resampled SD** (bootstrap and Monte Carlo alike). With `r =
//!    sd_ratio` and `u` its standard uncertainty, a difference counts only
//!    when it is statistically clear, `|r - 1| > `[`CLEAR_SIGMAS`]` * u`,
//!    and larger than the tolerance, `|r - 1| > tol` -> *doubtful*; when it
//!    also exceeds [`SD_FAIL_FACTOR`]` * tol` -> *fails*.
//! 6. **Failed refits.** A resampling diagnostic whose failed share
//!    exceeds [`FAILURE_SHARE`] -> *doubtful* for every parameter; the
//!    sentence says how many failed.
//!
//! The profile's crossings lie at `chi2_min + threshold * chi2_scale`, the
//! scale being chi2/dof when the covariance is scaled, so `sqrt(threshold) *
//! SE` is the covariance half-width in both cases (for a linear model the
//! two agree exactly).

use serde::{Deserialize, Serialize};

/// Verdict on one parameter's quoted uncertainty.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Status {
    /// Every diagnostic agrees with the analytic +-.
    Holds,
    /// Some diagnostic disagrees clearly but not gravely, or a warning applies.
    Doubtful,
    /// The +- cannot be trusted.
    Fails,
}

/// The verdict of one parameter with its reasons as plain sentences.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    /// Parameter name.
    pub parameter: String,
    /// Holds, doubtful or fails.
    pub status: Status,
    /// Why, one sentence each.
    pub reasons: Vec<String>,
}

use super::multistart::MultistartResult;
use super::profile::{EndStatus, ProfileResult};
use super::resample::{ResampleResult, ResampledParameter};
use crate::fit::{FitResult, ParamResult};

/// A difference between a resampled and the analytic SD is statistically
/// clear when it exceeds this many standard uncertainties of the ratio.
pub const CLEAR_SIGMAS: f64 = 3.0;

/// A clear SD difference beyond this multiple of the tolerance fails
/// (with the default tolerance 0.2: ratio outside [0.6, 1.4]).
pub const SD_FAIL_FACTOR: f64 = 2.0;

/// Profile half-width ratios below this fail.
pub const PROFILE_FAIL_LOW: f64 = 0.5;

/// Profile half-width ratios above this fail.
pub const PROFILE_FAIL_HIGH: f64 = 2.0;

/// A parameter's value at a better minimum that differs from the base
/// value by more than this many standard errors fails the parameter.
pub const MINIMUM_SHIFT_SE: f64 = 1.0;

/// A resampling diagnostic with more failed refits than this share of
/// those run makes every parameter doubtful.
pub const FAILURE_SHARE: f64 = 0.01;

/// What the verdicts are decided from: the base fit and whichever
/// diagnostics ran.
#[derive(Debug, Clone, Copy)]
pub struct VerdictInputs<'a> {
    /// The base fit.
    pub fit: &'a FitResult,
    /// Bootstrap, when run.
    pub bootstrap: Option<&'a ResampleResult>,
    /// Monte Carlo, when run.
    pub monte_carlo: Option<&'a ResampleResult>,
    /// Profiles, when run.
    pub profile: Option<&'a ProfileResult>,
    /// Multi-start search, when run.
    pub multistart: Option<&'a MultistartResult>,
    /// Relative tolerance below which a disagreement does not count.
    pub tolerance: f64,
}

/// Collects the sentences of one parameter with their statuses.
struct Findings {
    problems: Vec<(Status, String)>,
    agreements: Vec<String>,
}

impl Findings {
    fn object(&mut self, status: Status, why: String) {
        self.problems.push((status, why));
    }
}

/// Decides the verdict of every free parameter (see the module docs).
pub fn decide(inputs: &VerdictInputs) -> Vec<Verdict> {
    let fit = inputs.fit;
    let tol = if inputs.tolerance.is_finite() && inputs.tolerance >= 0.0 {
        inputs.tolerance
    } else {
        0.0
    };
    fit.parameters
        .iter()
        .enumerate()
        .filter(|(_, p)| !p.fixed)
        .map(|(index, p)| {
            let mut f = Findings {
                problems: Vec::new(),
                agreements: Vec::new(),
            };
            base_rules(fit, p, &mut f);
            if let Some(ms) = inputs.multistart {
                multistart_rule(ms, fit, p, &mut f);
            }
            if let Some(pr) = inputs.profile {
                profile_rule(pr, index, p, tol, &mut f);
            }
            for (label, res) in [
                ("bootstrap", inputs.bootstrap),
                ("Monte Carlo", inputs.monte_carlo),
            ] {
                if let Some(r) = res {
                    resample_rule(label, r, p, tol, &mut f);
                }
            }
            let status = f.problems.iter().map(|x| x.0).max().unwrap_or(Status::Holds);
            let reasons = if status == Status::Holds {
                if f.agreements.is_empty() {
                    vec![format!(
                        "no diagnostic ran, so only the analytic standard error {} is available",
                        num(p.std_error.unwrap_or(f64::NAN))
                    )]
                } else {
                    f.agreements
                }
            } else {
                f.problems.into_iter().map(|x| x.1).collect()
            };
            Verdict {
                parameter: p.name.clone(),
                status,
                reasons,
            }
        })
        .collect()
}

fn base_rules(fit: &FitResult, p: &ParamResult, f: &mut Findings) {
    if !fit.converged {
        f.object(
            Status::Fails,
            format!(
                "the base fit did not converge (it stopped after {} iterations: {}), so its standard \
                 errors describe no minimum",
                fit.iterations,
                stop_words(fit.stop_reason)
            ),
        );
    }
    if p.at_bound {
        f.object(
            Status::Fails,
            format!(
                "the estimate {} lies on a bound, where the covariance standard error does not apply",
                num(p.value)
            ),
        );
    } else if p.std_error.is_none() {
        f.object(
            Status::Fails,
            "the standard error is undetermined: the data do not fix this parameter (the Jacobian is \
             rank-deficient in its direction)"
                .to_string(),
        );
    }
}

fn stop_words(s: crate::fit::StopReason) -> &'static str {
    use crate::fit::StopReason::*;
    match s {
        Gradient => "gradient below tolerance",
        ChiSquaredChange => "chi-squared change below tolerance",
        Step => "step below tolerance",
        IterationLimit => "iteration limit reached",
        NonFinite => "model not finite",
        Stalled => "stalled short of a minimum",
        Plateau => "on a plateau (the model no longer depends on a parameter)",
        Runaway => "a parameter ran away",
    }
}

fn multistart_rule(ms: &MultistartResult, fit: &FitResult, p: &ParamResult, f: &mut Findings) {
    if ms.audited_is_best {
        let rebased = if ms.base_is_best {
            String::new()
        } else {
            format!(
                " (the audit is re-based there; the study's start reaches chi2 = {})",
                num(ms.base_chi2)
            )
        };
        f.agreements.push(format!(
            "the multi-start search ({} starts) found no better minimum than the audited fit (chi2 = {}){rebased}",
            ms.starts,
            num(fit.chi2)
        ));
        return;
    }
    let Some(best) = ms.minima.first() else {
        return;
    };
    let at_best = best.parameters.iter().find(|v| v.name == p.name).map(|v| v.value);
    better_minimum("a better minimum exists", best.chi2, ms.base_chi2, at_best, p, f);
}

/// Rule 3 (and its profile counterpart): a clearly lower chi-squared at
/// another point; `at_best` is this parameter's value there.
fn better_minimum(
    lead: &str,
    chi2_best: f64,
    chi2_base: f64,
    at_best: Option<f64>,
    p: &ParamResult,
    f: &mut Findings,
) {
    let chi2s = format!(
        "chi2 = {} against {} at the base fit",
        num(chi2_best),
        num(chi2_base)
    );
    match (at_best, p.std_error) {
        (Some(v), Some(se)) if se > 0.0 => {
            let shift = (v - p.value).abs() / se;
            if shift > MINIMUM_SHIFT_SE {
                f.object(
                    Status::Fails,
                    format!(
                        "{lead}: {chi2s}; there this parameter is {} instead of {}, {} standard errors away",
                        num(v),
                        num(p.value),
                        fixed2(shift)
                    ),
                );
            } else {
                f.object(
                    Status::Doubtful,
                    format!(
                        "{lead}: {chi2s}; this parameter is {} there, within {} standard error of the base \
                         value {}, but the base fit is not the least-squares solution",
                        num(v),
                        num(MINIMUM_SHIFT_SE),
                        num(p.value)
                    ),
                );
            }
        }
        (Some(v), _) => f.object(
            Status::Fails,
            format!(
                "{lead}: {chi2s}; there this parameter is {} instead of {}",
                num(v),
                num(p.value)
            ),
        ),
        (None, _) => f.object(Status::Fails, format!("{lead}: {chi2s}")),
    }
}

fn profile_rule(pr: &ProfileResult, index: usize, p: &ParamResult, tol: f64, f: &mut Findings) {
    let scale = if pr.chi2_scale.is_finite() && pr.chi2_scale > 0.0 {
        pr.chi2_scale
    } else {
        1.0
    };
    let rise = pr.threshold * scale;
    // A profile point clearly below the base fit (by more than the
    // threshold): the base fit is not the minimum. The lowest such point
    // over all profiles counts, like the best minimum of the multi-start.
    let lowest = pr
        .parameters
        .iter()
        .filter_map(|q| q.below_minimum.as_ref())
        .filter(|lp| lp.below_by > rise)
        .min_by(|a, b| a.chi2.total_cmp(&b.chi2));
    if let Some(lp) = lowest {
        better_minimum(
            "a profile passes through a better minimum",
            lp.chi2,
            pr.chi2_min,
            lp.parameters.get(index).copied(),
            p,
            f,
        );
    }
    let Some(pp) = pr.parameters.iter().find(|q| q.name == p.name) else {
        return;
    };
    let mut open = false;
    for (side, found, status, last) in [
        ("below", pp.lower_found, pp.lower_status, pp.lower),
        ("above", pp.upper_found, pp.upper_status, pp.upper),
    ] {
        if found {
            continue;
        }
        open = true;
        let why = match status {
            EndStatus::Bound => format!(
                "the chi-squared profile does not rise by {} {side} the estimate before the parameter's \
                 bound at {}: within its allowed range the data do not limit it on that side",
                num(rise),
                num(last)
            ),
            EndStatus::Unresolved => format!(
                "the chi-squared profile could not be followed {side} the estimate (refits failed at {} \
                 before it rose by {}), so the interval end is unknown",
                num(last),
                num(rise)
            ),
            EndStatus::ScanLimit | EndStatus::Found => format!(
                "the chi-squared profile does not rise by {} {side} the estimate (scanned to {}): the \
                 parameter is practically non-identifiable on that side",
                num(rise),
                num(last)
            ),
        };
        f.object(Status::Fails, why);
    }
    if open {
        return;
    }
    let Some(se) = p.std_error.filter(|s| *s > 0.0 && s.is_finite()) else {
        return;
    };
    let expected = pr.threshold.max(0.0).sqrt() * se;
    let lo = (pp.estimate - pp.lower) / expected;
    let hi = (pp.upper - pp.estimate) / expected;
    let worst = [lo, hi]
        .into_iter()
        .map(|r| {
            if !r.is_finite() || !(PROFILE_FAIL_LOW..=PROFILE_FAIL_HIGH).contains(&r) {
                Status::Fails
            } else if (r - 1.0).abs() > tol {
                Status::Doubtful
            } else {
                Status::Holds
            }
        })
        .max()
        .unwrap_or(Status::Holds);
    let sides = format!(
        "the profile interval's half-widths are {} (below) and {} (above) times the covariance half-width {}",
        fixed2(lo),
        fixed2(hi),
        num(expected)
    );
    match worst {
        Status::Holds => f.agreements.push(format!("{sides}, within {}", pct(tol))),
        Status::Doubtful => f.object(
            Status::Doubtful,
            format!("{sides}: they differ by more than {}", pct(tol)),
        ),
        Status::Fails => f.object(
            Status::Fails,
            format!(
                "{sides}: outside [{}, {}], so the covariance interval misdescribes the chi-squared surface",
                num(PROFILE_FAIL_LOW),
                num(PROFILE_FAIL_HIGH)
            ),
        ),
    }
}

fn resample_rule(label: &str, r: &ResampleResult, p: &ParamResult, tol: f64, f: &mut Findings) {
    if r.run > 0 {
        let share = r.failed as f64 / r.run as f64;
        if share > FAILURE_SHARE {
            f.object(
                Status::Doubtful,
                format!(
                    "{} of {} {label} refits failed ({}), more than {}; they are excluded from its statistics",
                    r.failed,
                    r.run,
                    pct(share),
                    pct(FAILURE_SHARE)
                ),
            );
        }
    }
    let Some(rp) = r.parameters.iter().find(|q| q.name == p.name) else {
        return;
    };
    sd_rule(label, rp, tol, f);
}

fn sd_rule(label: &str, rp: &ResampledParameter, tol: f64, f: &mut Findings) {
    let (Some(ratio), Some(u)) = (rp.sd_ratio, rp.sd_ratio_uncertainty) else {
        return;
    };
    let dev = (ratio - 1.0).abs();
    let clear = dev > CLEAR_SIGMAS * u;
    let figures = format!("ratio {} +- {}", fixed2(ratio), fixed2(u));
    if clear && dev > SD_FAIL_FACTOR * tol {
        f.object(
            Status::Fails,
            format!(
                "the {label} SD {} differs from the analytic standard error by {} ({figures}), more than {}",
                num(rp.std),
                pct(dev),
                pct(SD_FAIL_FACTOR * tol)
            ),
        );
    } else if clear && dev > tol {
        f.object(
            Status::Doubtful,
            format!(
                "the {label} SD {} differs from the analytic standard error by {} ({figures}), more than {}",
                num(rp.std),
                pct(dev),
                pct(tol)
            ),
        );
    } else if dev <= tol {
        f.agreements.push(format!(
            "{label} SD agrees with the analytic standard error within {} ({figures})",
            pct(tol)
        ));
    } else {
        f.agreements.push(format!(
            "{label} SD differs from the analytic standard error by {} ({figures}), but by less than {} \
             standard uncertainties of the ratio, so the difference is not clear",
            pct(dev),
            num(CLEAR_SIGMAS)
        ));
    }
}

/// A number with 4 significant digits, trailing zeros trimmed.
fn num(x: f64) -> String {
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

fn pct(share: f64) -> String {
    let p = 100.0 * share;
    if p != 0.0 && p.abs() < 10.0 {
        format!("{p:.1} %")
    } else {
        format!("{p:.0} %")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnostics::multistart::{Minimum, NamedValue};
    use crate::diagnostics::profile::{LowerPoint, ParameterProfile};
    use crate::fit::StopReason;

    fn param(name: &str, value: f64, se: Option<f64>) -> ParamResult {
        ParamResult {
            name: name.to_string(),
            value,
            std_error: se,
            expanded_uncertainty: se,
            at_bound: false,
            fixed: false,
        }
    }

    fn fit_of(parameters: Vec<ParamResult>) -> FitResult {
        let m = parameters.len();
        FitResult {
            converged: true,
            stop_reason: StopReason::ChiSquaredChange,
            iterations: 7,
            evaluations: 9,
            chi2: 412.7,
            dof: 20,
            reduced_chi2: 412.7 / 20.0,
            p_value: Some(0.0),
            sigma_given: true,
            level: crate::fit::DEFAULT_LEVEL,
            coverage_factor: 1.0,
            coverage_basis: crate::fit::CoverageBasis::Normal,
            end: Default::default(),
            end_issues: Vec::new(),
            parameters,
            covariance: vec![vec![0.0; m]; m],
            correlation: vec![vec![0.0; m]; m],
            covariance_scaled: false,
            condition_number: 1.0,
            rank: m,
            undetermined: Vec::new(),
            fitted: Vec::new(),
            residuals: Vec::new(),
            leverage: Vec::new(),
        }
    }

    fn inputs(fit: &FitResult) -> VerdictInputs<'_> {
        VerdictInputs {
            fit,
            bootstrap: None,
            monte_carlo: None,
            profile: None,
            multistart: None,
            tolerance: 0.2,
        }
    }

    fn resampled(name: &str, std: f64, se: f64, b: usize) -> ResampledParameter {
        let ratio = std / se;
        ResampledParameter {
            name: name.to_string(),
            estimate: 1.0,
            mean: 1.0,
            bias: 0.0,
            std,
            lower: 1.0 - std,
            upper: 1.0 + std,
            bca_lower: None,
            bca_upper: None,
            analytic_std_error: Some(se),
            sd_ratio: Some(ratio),
            sd_ratio_uncertainty: Some(ratio / (2.0 * (b - 1) as f64).sqrt()),
            asymmetry: Some(1.0),
            fixed: false,
            acceleration: None,
            bias_correction: None,
        }
    }

    fn resample_result(params: Vec<ResampledParameter>, run: usize, failed: usize) -> ResampleResult {
        ResampleResult {
            scheme: "residual".to_string(),
            replicates: run,
            run,
            failed,
            failures: Vec::new(),
            level: 0.6827,
            parameters: params,
            correlation: Vec::new(),
            estimates: Vec::new(),
            adaptive_stable: None,
            jackknife_refits: 0,
            jackknife_failures: Vec::new(),
            noise_scale: None,
        }
    }

    fn profile_of(name: &str, est: f64, lower: f64, upper: f64, found: (bool, bool)) -> ProfileResult {
        let status = |f: bool| if f { EndStatus::Found } else { EndStatus::ScanLimit };
        ProfileResult {
            level: 0.6827,
            threshold: 1.0,
            chi2_min: 10.0,
            parameters: vec![ParameterProfile {
                name: name.to_string(),
                estimate: est,
                std_error: Some(0.1),
                lower,
                upper,
                lower_found: found.0,
                upper_found: found.1,
                points: Vec::new(),
                others: Vec::new(),
                parabola: Vec::new(),
                asymmetry: None,
                failed: 0,
                lower_status: status(found.0),
                upper_status: status(found.1),
                non_identifiable: !(found.0 && found.1),
                scale: 0.1,
                below_minimum: None,
                refits: 0,
            }],
            failed: 0,
            chi2_scale: 1.0,
            base_not_minimum: false,
        }
    }

    fn multistart_of(base_is_best: bool, best: Vec<(&str, f64)>) -> MultistartResult {
        MultistartResult {
            starts: 64,
            batches: 1,
            stopped: crate::diagnostics::multistart::StopRule::EstimateSmall,
            failed: 0,
            degenerate: Default::default(),
            merged_early: 0,
            base_chi2: 412.7,
            base_is_best,
            audited_is_best: base_is_best,
            minima: vec![Minimum {
                chi2: if base_is_best { 412.7 } else { 80.1 },
                delta_chi2: 0.0,
                fraction: 0.5,
                count: 32,
                distinguishable: true,
                equivalent_permutations: Vec::new(),
                parameters: best
                    .into_iter()
                    .map(|(n, v)| NamedValue {
                        name: n.to_string(),
                        value: v,
                    })
                    .collect(),
            }],
            missed_minimum_estimate: 0.01,
            unseen_share: 0.001,
            expected_minima: 2.0,
            box_bounds: Vec::new(),
            runs: Vec::new(),
        }
    }

    #[test]
    fn one_verdict_per_free_parameter_and_holds_without_objection() {
        let mut fixed = param("c", 3.0, None);
        fixed.fixed = true;
        let fit = fit_of(vec![param("a", 1.0, Some(0.1)), fixed]);
        let v = decide(&inputs(&fit));
        assert_eq!(v.len(), 1);
        assert_eq!(v[0].parameter, "a");
        assert_eq!(v[0].status, Status::Holds);
        assert!(
            v[0].reasons[0].contains("no diagnostic ran"),
            "{:?}",
            v[0].reasons
        );
    }

    #[test]
    fn undetermined_or_at_bound_fails() {
        let mut b = param("b", 0.0, None);
        b.at_bound = true;
        let fit = fit_of(vec![param("a", 1.0, None), b]);
        let v = decide(&inputs(&fit));
        assert_eq!(v[0].status, Status::Fails);
        assert!(v[0].reasons[0].contains("undetermined"));
        assert_eq!(v[1].status, Status::Fails);
        assert!(v[1].reasons[0].contains("bound"), "{:?}", v[1].reasons);
    }

    #[test]
    fn unconverged_base_fit_fails() {
        let mut fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        fit.converged = false;
        fit.stop_reason = StopReason::IterationLimit;
        let v = decide(&inputs(&fit));
        assert_eq!(v[0].status, Status::Fails);
        assert!(v[0].reasons[0].contains("did not converge"));
    }

    #[test]
    fn better_minimum_fails_shifted_parameters_and_quotes_chi2() {
        let fit = fit_of(vec![
            param("a", 1.0, Some(0.1)),
            param("b", 5.0, Some(0.5)),
            param("c", 2.0, None),
        ]);
        let ms = multistart_of(false, vec![("a", 1.35), ("b", 5.2), ("c", 2.0)]);
        let mut inp = inputs(&fit);
        inp.multistart = Some(&ms);
        let v = decide(&inp);
        // a moved 3.5 SE: fails; b moved 0.4 SE: doubtful; c has no SE: fails.
        assert_eq!(v[0].status, Status::Fails);
        assert!(
            v[0].reasons
                .iter()
                .any(|r| r.contains("a better minimum exists: chi2 = 80.1 against 412.7")),
            "{:?}",
            v[0].reasons
        );
        assert!(v[0].reasons.iter().any(|r| r.contains("3.50 standard errors")));
        assert_eq!(v[1].status, Status::Doubtful);
        assert_eq!(v[2].status, Status::Fails);
        // base_is_best == true: an agreement.
        let ms = multistart_of(true, vec![("a", 1.0)]);
        let mut inp = inputs(&fit);
        inp.multistart = Some(&ms);
        assert_eq!(decide(&inp)[0].status, Status::Holds);
    }

    #[test]
    fn profile_end_not_found_fails() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let pr = profile_of("a", 1.0, 0.9, 5.0, (true, false));
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Fails);
        assert!(v[0].reasons[0].contains("non-identifiable") && v[0].reasons[0].contains("above"));
    }

    #[test]
    fn profile_end_at_bound_fails_and_lower_point_is_a_better_minimum() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1)), param("b", 2.0, Some(0.2))]);
        let mut pr = profile_of("a", 1.0, 0.0, 1.1, (false, true));
        pr.parameters[0].lower_status = EndStatus::Bound;
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Fails);
        assert!(v[0].reasons[0].contains("bound at 0"), "{:?}", v[0].reasons);
        assert_eq!(v[1].status, Status::Holds, "b has no profile here");

        // A point 5 below the minimum of 10 (threshold 1): a better minimum
        // where a = 1.02 (0.2 SE away: doubtful) and b = 2.5 (2.5 SE: fails).
        let mut pr = profile_of("a", 1.0, 0.9, 1.1, (true, true));
        pr.parameters[0].below_minimum = Some(LowerPoint {
            value: 1.02,
            chi2: 5.0,
            below_by: 5.0,
            parameters: vec![1.02, 2.5],
        });
        pr.base_not_minimum = true;
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Doubtful, "{:?}", v[0].reasons);
        assert_eq!(v[1].status, Status::Fails, "{:?}", v[1].reasons);
        assert!(v[1].reasons[0].contains("chi2 = 5 against 10 at the base fit"));
        // Below by less than the threshold: not counted.
        pr.parameters[0].below_minimum.as_mut().unwrap().below_by = 0.5;
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        assert_eq!(decide(&inp)[1].status, Status::Holds);
    }

    #[test]
    fn profile_half_widths_against_covariance() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let cases = [
            // (lower, upper, status): threshold 1, SE 0.1 -> expected half-width 0.1.
            (0.9, 1.1, Status::Holds),
            (0.85, 1.1, Status::Doubtful),  // 1.5 below
            (0.91, 1.13, Status::Doubtful), // 0.9 and 1.3
            (0.9, 1.25, Status::Fails),     // 2.5 above
            (0.96, 1.1, Status::Fails),     // 0.4 below
        ];
        for (i, (lo, hi, want)) in cases.into_iter().enumerate() {
            let pr = profile_of("a", 1.0, lo, hi, (true, true));
            let mut inp = inputs(&fit);
            inp.profile = Some(&pr);
            let v = decide(&inp);
            assert_eq!(v[0].status, want, "case {i}: {:?}", v[0].reasons);
        }
    }

    #[test]
    fn sd_ratio_counts_only_when_clear_and_beyond_tolerance() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let cases = [
            // (std, B, status)
            (0.104, 2000, Status::Holds),   // ratio 1.04, within 20 %
            (0.13, 2000, Status::Doubtful), // 1.30 +- 0.02: clear, beyond 20 %
            (0.15, 2000, Status::Fails),    // 1.50: beyond 40 %
            (0.05, 2000, Status::Fails),    // 0.50: beyond 40 % below
            (0.13, 10, Status::Holds),      // 1.30 +- 0.31: not clear
        ];
        for (std, b, want) in cases {
            for which in 0..2 {
                let rr = resample_result(vec![resampled("a", std, 0.1, b)], b, 0);
                let mut inp = inputs(&fit);
                if which == 0 {
                    inp.bootstrap = Some(&rr);
                } else {
                    inp.monte_carlo = Some(&rr);
                }
                let v = decide(&inp);
                assert_eq!(v[0].status, want, "std {std} B {b}: {:?}", v[0].reasons);
            }
        }
        let rr = resample_result(vec![resampled("a", 0.104, 0.1, 2000)], 2000, 0);
        let mut inp = inputs(&fit);
        inp.bootstrap = Some(&rr);
        assert_eq!(
            decide(&inp)[0].reasons,
            vec!["bootstrap SD agrees with the analytic standard error within 20 % (ratio 1.04 +- 0.02)"]
        );
    }

    #[test]
    fn failure_share_above_one_percent_is_doubtful() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1)), param("b", 2.0, Some(0.2))]);
        let ok = vec![resampled("a", 0.1, 0.1, 2000), resampled("b", 0.2, 0.2, 2000)];
        // 20 of 2000 = 1.0 %: not above; 21 = 1.05 %: above.
        for (failed, want) in [(20, Status::Holds), (21, Status::Doubtful)] {
            let rr = resample_result(ok.clone(), 2000, failed);
            let mut inp = inputs(&fit);
            inp.monte_carlo = Some(&rr);
            let v = decide(&inp);
            for vi in &v {
                assert_eq!(vi.status, want);
            }
            if failed == 21 {
                assert!(v[0].reasons[0].starts_with("21 of 2000 Monte Carlo refits failed (1.1 %)"));
            }
        }
    }

    #[test]
    fn gravest_status_wins_and_lists_problems() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let rr = resample_result(vec![resampled("a", 0.13, 0.1, 2000)], 2000, 100);
        let pr = profile_of("a", 1.0, 0.7, 1.1, (true, true));
        let mut inp = inputs(&fit);
        inp.bootstrap = Some(&rr);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Fails);
        assert_eq!(v[0].reasons.len(), 3, "{:?}", v[0].reasons);
    }

    #[test]
    fn number_formatting() {
        assert_eq!(num(80.1), "80.1");
        assert_eq!(num(412.7), "412.7");
        assert_eq!(num(0.000123456), "0.0001235");
        assert_eq!(num(1.5e9), "1.500e9");
        assert_eq!(pct(0.2), "20 %");
        assert_eq!(pct(0.0105), "1.1 %");
    }
}
