//! Per-parameter verdicts: does the quoted +- hold, and which interval to
//! quote?
//!
//! [`decide`] gives one [`Verdict`] per free parameter of the base fit
//! (fixed parameters have no quoted uncertainty and get none). Each rule
//! that applies adds one [`Finding`]: the rule, the diagnostic it reads,
//! the numbers that decided it and the status it gives (a rule that finds
//! agreement adds a finding with status *holds*). The verdict's status is
//! the gravest of its findings (holds < doubtful < fails). This module
//! produces no text: the sentences are rendered under `src/report/`. With
//! `tol` the audit tolerance (`[audit] tolerance`, default 0.2):
//!
//! 1. **Base fit** (`base-fit`). Not converged -> *fails*.
//! 2. **Bound / undetermined** (`on-bound`, `undetermined`) -> *fails*.
//! 3. **Multi-start** (`better-minimum`). A clearly better minimum exists
//!    (`base_is_best == false`): *fails* when the parameter's value there
//!    differs from the base value by more than [`MINIMUM_SHIFT_SE`]
//!    standard errors (or always when there is no standard error),
//!    otherwise *doubtful*.
//! 4. **Profile.** An end not found (`profile-open-below`,
//!    `profile-open-above`: practically non-identifiable, Raue et al. 2009,
//!    Bioinformatics 25:1923) -> *fails*. Otherwise (`profile-half-widths`)
//!    each half-width is compared with `sqrt(threshold) * u`: a ratio
//!    outside `[1 - tol, 1 + tol]` -> *doubtful*, outside
//!    [[`PROFILE_FAIL_LOW`], [`PROFILE_FAIL_HIGH`]] -> *fails*. When the
//!    quoted +- is right (a model linear in its parameters over the
//!    interval) both half-widths equal the covariance half-width exactly
//!    (identity), whatever the noise: the ratio has no sampling scatter of
//!    its own, so the tolerance alone decides. A profile point below the
//!    base fit by more than the threshold is a better minimum (rule 3).
//! 5. **Spread** (`spread-ratio`, bootstrap and Monte Carlo alike). The
//!    ratio `r = robust_std / u` of the robust spread of the replicates to
//!    the quoted `u` is tested against its distribution when `u` is right:
//!    `r^2 * nu` chi-squared with `nu = null_dof` degrees of freedom
//!    (replicate count, and for the bootstrap with stated sigma the chance
//!    scatter of the residuals; see [`super::resample`]). The difference
//!    counts when it is clear, two-tailed p-value below [`CLEAR_P`], and
//!    larger than the tolerance, `|r - 1| > tol` -> *doubtful*; beyond
//!    [`SD_FAIL_FACTOR`]` * tol` -> *fails*.
//! 6. **Runaways** (`runaway-refits`). More than [`FAILURE_SHARE`] of the
//!    successful replicates farther than `RUNAWAY_SPREADS` robust spreads
//!    from the median -> *doubtful* (fewer: a *holds* finding that counts
//!    them).
//! 7. **Percentile sanity** (`percentile-excludes-estimate`). The base
//!    estimate outside a resampled interval -> *doubtful*: the fit is
//!    unstable under resampling.
//! 8. **Failed refits** (`failed-refits`). A resampling diagnostic whose
//!    failed share exceeds [`FAILURE_SHARE`] -> *doubtful* for every
//!    parameter.
//! 9. **Goodness of fit** (`goodness-of-fit`, with stated sigma and an
//!    absolute covariance only). The Birge ratio `R = sqrt(chi2/dof)` (Birge
//!    1932, Phys. Rev. 40:207) with the two-tailed p-value of chi2 under
//!    the chi-squared law with `dof` degrees of freedom: clear when below
//!    [`CLEAR_P`]; then `|R - 1| > tol` -> *doubtful*, beyond
//!    [`SD_FAIL_FACTOR`]` * tol` -> *fails*. Scaling the covariance by
//!    chi2/dof would multiply every `u` by `R`; a clear departure means the
//!    stated sigma or the model is wrong.
//!
//! 10. **Coverage** (`coverage`, when the coverage simulation ran; see
//!     [`apply_coverage`]). The simulated coverage `c` of `value +- k u`
//!     over `n` replicates against the level `L`: clear when `|c - L|`
//!     exceeds [`CLEAR_SE`] standard errors `sqrt(L (1 - L) / n)` (the
//!     binomial scatter of `c` if the interval were exact); the size of the
//!     departure is the width factor `w = z_L / z_c` (`z_p` the normal
//!     quantile at `(1 + p) / 2`: the factor by which `u` would have to be
//!     multiplied for a normal estimate to cover `L`); `|w - 1| > tol` ->
//!     *doubtful*, beyond [`SD_FAIL_FACTOR`]` * tol` -> *fails*.
//!
//! An eleventh rule, `nonlinearity`, never decides: [`super::nonlinearity::cite`]
//! adds the curvature measures and Box's bias (with status *holds*) to the
//! reasons of a parameter that a profile, spread, runaway or percentile
//! rule already doubts, as the explanation of the disagreement.
//!
//! **The interval to quote** ([`Quote`]): `value +- k u` (`k` the coverage
//! factor of the analytic interval at the level) when the verdict holds;
//! the profile interval when the profile is closed but its half-widths
//! disagree with the parabola (and chi2 agrees with its dof); none
//! otherwise, with the reason in [`Verdict::no_quote`] (not converged, on a
//! bound, undetermined, not identifiable, not the best minimum, sigma or
//! model wrong, or the analytic interval is doubted while the profile
//! agrees with it or did not run).
//!
//! The profile's crossings lie at `chi2_min + threshold * chi2_scale`, the
//! scale being chi2/dof when the covariance is scaled, so `sqrt(threshold) *
//! SE` is the covariance half-width in both cases (for a linear model the
//! two agree exactly).

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::coverage::{width_factor, CoverageKind, CoverageResult, IntervalCoverage};
use super::multistart::MultistartResult;
use super::profile::{EndStatus, ProfileResult};
use super::resample::{ResampleResult, ResampledParameter};
use crate::fit::{FitResult, ParamResult};

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

/// The rule a finding comes from (module documentation, rules 1-9).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Rule {
    /// The base fit did not converge.
    BaseFit,
    /// The estimate lies on a bound.
    OnBound,
    /// The standard error is undetermined.
    Undetermined,
    /// A better minimum than the base fit exists (or none was found).
    BetterMinimum,
    /// The profile does not close below the estimate.
    ProfileOpenBelow,
    /// The profile does not close above the estimate.
    ProfileOpenAbove,
    /// Profile half-widths against the covariance half-width.
    ProfileHalfWidths,
    /// Robust resampled spread against the quoted u.
    SpreadRatio,
    /// Runaway refits counted.
    RunawayRefits,
    /// The estimate lies outside a resampled interval.
    PercentileExcludesEstimate,
    /// Too many failed refits.
    FailedRefits,
    /// Chi-squared against its degrees of freedom (Birge ratio).
    GoodnessOfFit,
    /// Simulated coverage of `value +- k u` against the level.
    Coverage,
    /// The curvature measures or Box's bias explain a disagreement another
    /// rule found (never decides: status always holds; see
    /// [`super::nonlinearity::cite`]).
    Nonlinearity,
}

/// The part of the audit a finding reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Source {
    /// The base fit.
    Fit,
    /// The bootstrap.
    Bootstrap,
    /// The Monte Carlo.
    MonteCarlo,
    /// The chi-squared profiles.
    Profile,
    /// The multi-start search.
    Multistart,
    /// The coverage simulation.
    Coverage,
}

/// One rule's finding on one parameter, as data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Finding {
    /// Which rule.
    pub rule: Rule,
    /// Which diagnostic it reads.
    pub diagnostic: Source,
    /// The status this finding alone gives (holds for an agreement).
    pub status: Status,
    /// The numbers that decided it, by name (docs/RESULTS.md lists them per rule).
    pub numbers: BTreeMap<String, f64>,
    /// A kebab-case code where a rule needs one: the stop reason
    /// (`base-fit`) or how a profile side ended (`profile-open-*`).
    pub detail: Option<String>,
}

/// Which interval the quote is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum QuoteKind {
    /// `value +- k u`.
    Analytic,
    /// The chi-squared profile interval.
    Profile,
}

/// The interval the report tells the user to quote.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Quote {
    /// Analytic or profile.
    pub kind: QuoteKind,
    /// Lower end.
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// Confidence level.
    pub level: f64,
}

/// Why no interval is quoted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NoQuote {
    /// The base fit did not converge.
    NotConverged,
    /// The estimate lies on a bound.
    OnBound,
    /// The standard error is undetermined.
    Undetermined,
    /// The profile does not close: not identifiable.
    NotIdentifiable,
    /// The base fit is not the best minimum found.
    NotBestMinimum,
    /// chi2 disagrees with its dof: the stated sigma or the model is wrong.
    GoodnessOfFit,
    /// The analytic interval is doubted and the profile, which agrees with
    /// it, offers no alternative.
    ProfileAgrees,
    /// The analytic interval is doubted and no profile ran.
    ProfileNotRun,
    /// The simulated coverage of the analytic interval is off the level
    /// and that of the profile interval is off too (or the profile does
    /// not close).
    CoverageOff,
    /// A derived quantity whose analytic interval is doubted: no profile
    /// interval is computed for derived quantities.
    NoDerivedProfile,
}

/// The verdict of one parameter: status, findings and the interval to quote.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Verdict {
    /// Parameter name.
    pub parameter: String,
    /// Holds, doubtful or fails: the gravest status of the findings.
    pub status: Status,
    /// The interval to quote, when there is one.
    pub quote: Option<Quote>,
    /// Why there is none (None when `quote` is given).
    pub no_quote: Option<NoQuote>,
    /// One finding per rule that applied.
    pub findings: Vec<Finding>,
}

/// A difference is statistically clear when its two-tailed p-value under
/// the null (the quoted +- right) is below this. Up to three such tests
/// vote on one parameter (goodness of fit, bootstrap and Monte Carlo
/// spread), so the chance that any of them fires on a correct +- stays
/// below 0.3 % (Bonferroni), within the 1 % the validation asks of false
/// alarms (common practice, no source for the value itself).
pub const CLEAR_P: f64 = 0.001;

/// A clear difference beyond this multiple of the tolerance fails
/// (with the default tolerance 0.2: ratio outside [0.6, 1.4]).
pub const SD_FAIL_FACTOR: f64 = 2.0;

/// Profile half-width ratios below this fail.
pub const PROFILE_FAIL_LOW: f64 = 0.5;

/// Profile half-width ratios above this fail.
pub const PROFILE_FAIL_HIGH: f64 = 2.0;

/// A parameter's value at a better minimum that differs from the base
/// value by more than this many standard errors fails the parameter.
pub const MINIMUM_SHIFT_SE: f64 = 1.0;

/// A resampling diagnostic with more failed (or runaway) refits than this
/// share of those run makes every parameter (the parameter) doubtful.
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
    /// Whether the data carry stated standard uncertainties.
    pub sigma_given: bool,
    /// Confidence level of the quoted interval.
    pub level: f64,
}

/// Standard errors (at the nominal level) beyond which a simulated
/// coverage is clearly off the level (common practice: 3 sigma, a
/// two-sided chance of about 0.27 % for an exact interval).
pub const CLEAR_SE: f64 = 3.0;

/// The coverage factor `k` of the analytic interval `value +- k u` at
/// `level`: the fit's own ([`FitResult::coverage_factor`]: normal with
/// stated sigma, Student's t with the fit's dof when the covariance is
/// scaled) when the fit was made at that level, else the same rule at
/// `level`.
pub fn coverage_factor(fit: &FitResult, level: f64) -> f64 {
    if (fit.level - level).abs() <= 1e-12 {
        return fit.coverage_factor;
    }
    let dof = (fit.covariance_scaled && fit.dof > 0).then_some(fit.dof);
    crate::fit::coverage_factor(level, dof)
}

/// Two-tailed p-value of `x` under the chi-squared law with `dof` degrees
/// of freedom: `2 min(F(x), 1 - F(x))`. NaN when undefined.
pub fn two_tailed_p(x: f64, dof: f64) -> f64 {
    match ChiSquared::new(dof) {
        Ok(d) if x.is_finite() && x >= 0.0 => {
            let f = d.cdf(x);
            (2.0 * f.min(1.0 - f)).clamp(0.0, 1.0)
        }
        _ => f64::NAN,
    }
}

fn numbers<const N: usize>(pairs: [(&str, f64); N]) -> BTreeMap<String, f64> {
    pairs.into_iter().map(|(k, v)| (k.to_string(), v)).collect()
}

/// Collects the findings of one parameter.
struct Findings(Vec<Finding>);

impl Findings {
    fn add(&mut self, rule: Rule, diagnostic: Source, status: Status, numbers: BTreeMap<String, f64>) {
        self.0.push(Finding {
            rule,
            diagnostic,
            status,
            numbers,
            detail: None,
        });
    }

    fn add_detail(
        &mut self,
        rule: Rule,
        diagnostic: Source,
        status: Status,
        numbers: BTreeMap<String, f64>,
        detail: &str,
    ) {
        self.0.push(Finding {
            rule,
            diagnostic,
            status,
            numbers,
            detail: Some(detail.to_string()),
        });
    }

    fn objects(&self, rule: Rule) -> bool {
        self.0.iter().any(|f| f.rule == rule && f.status != Status::Holds)
    }
}

/// Status of a clear departure `dev` from 1 against the tolerance.
fn departure_status(clear: bool, dev: f64, tol: f64) -> Status {
    if clear && dev > SD_FAIL_FACTOR * tol {
        Status::Fails
    } else if clear && dev > tol {
        Status::Doubtful
    } else {
        Status::Holds
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
            let mut f = Findings(Vec::new());
            base_rules(fit, p, &mut f);
            // With many small counts the deviance's chi-squared p-value is
            // unreliable: the goodness-of-fit rule does not vote.
            let small_counts = fit.small_counts.is_some_and(|s| s.warning);
            if inputs.sigma_given && !fit.covariance_scaled && !small_counts {
                goodness_rule(fit, tol, &mut f);
            }
            if let Some(ms) = inputs.multistart {
                multistart_rule(ms, fit, p, &mut f);
            }
            if let Some(pr) = inputs.profile {
                profile_rule(pr, index, p, tol, &mut f);
            }
            for (source, res) in [
                (Source::Bootstrap, inputs.bootstrap),
                (Source::MonteCarlo, inputs.monte_carlo),
            ] {
                if let Some(r) = res {
                    resample_rule(source, r, p, tol, &mut f);
                }
            }
            let status = f.0.iter().map(|x| x.status).max().unwrap_or(Status::Holds);
            let (quote, no_quote) = choose_quote(inputs, p, status, &f);
            Verdict {
                parameter: p.name.clone(),
                status,
                quote,
                no_quote,
                findings: f.0,
            }
        })
        .collect()
}

fn choose_quote(
    inputs: &VerdictInputs,
    p: &ParamResult,
    status: Status,
    f: &Findings,
) -> (Option<Quote>, Option<NoQuote>) {
    let blocking = [
        (Rule::BaseFit, NoQuote::NotConverged),
        (Rule::OnBound, NoQuote::OnBound),
        (Rule::Undetermined, NoQuote::Undetermined),
        (Rule::BetterMinimum, NoQuote::NotBestMinimum),
        (Rule::ProfileOpenBelow, NoQuote::NotIdentifiable),
        (Rule::ProfileOpenAbove, NoQuote::NotIdentifiable),
    ];
    if let Some((_, why)) = blocking.iter().find(|(rule, _)| f.objects(*rule)) {
        return (None, Some(*why));
    }
    let level = inputs.level;
    if status == Status::Holds {
        let k = coverage_factor(inputs.fit, level);
        return match p.std_error {
            Some(u) if (k * u).is_finite() => (
                Some(Quote {
                    kind: QuoteKind::Analytic,
                    lower: p.value - k * u,
                    upper: p.value + k * u,
                    level,
                }),
                None,
            ),
            _ => (None, Some(NoQuote::Undetermined)),
        };
    }
    if f.objects(Rule::GoodnessOfFit) {
        return (None, Some(NoQuote::GoodnessOfFit));
    }
    let Some(pr) = inputs.profile else {
        return (None, Some(NoQuote::ProfileNotRun));
    };
    let closed = pr
        .parameters
        .iter()
        .find(|q| q.name == p.name)
        .filter(|q| q.lower_found && q.upper_found && q.lower.is_finite() && q.upper.is_finite());
    match closed {
        Some(q) if f.objects(Rule::ProfileHalfWidths) => (
            Some(Quote {
                kind: QuoteKind::Profile,
                lower: q.lower,
                upper: q.upper,
                level: pr.level,
            }),
            None,
        ),
        _ => (None, Some(NoQuote::ProfileAgrees)),
    }
}

/// Whether a simulated coverage is clearly off the level and by more than
/// the tolerance (rule 10): `(clear, width factor, status)`; `None` when
/// no replicate had the interval.
pub fn coverage_departure(ic: &IntervalCoverage, level: f64, tol: f64) -> Option<(bool, f64, Status)> {
    if ic.counted == 0 || !ic.coverage.is_finite() {
        return None;
    }
    let clear = (ic.coverage - level).abs() > CLEAR_SE * ic.null_std_error;
    let w = width_factor(ic.coverage, level);
    let dev = if w.is_nan() {
        f64::INFINITY
    } else {
        (w - 1.0).abs()
    };
    Some((clear, w, departure_status(clear, dev, tol)))
}

/// Rule 10 and the quote with it in mind: adds the `coverage` finding to
/// each verdict with a simulated analytic coverage, raises its status, and
/// re-chooses its quote. A coverage objection replaces an analytic quote
/// (and a none for lack of an alternative, [`NoQuote::ProfileAgrees`]) by
/// the base fit's profile interval when that is closed and its own
/// simulated coverage is not off the level, else by none
/// ([`NoQuote::CoverageOff`], or [`NoQuote::ProfileNotRun`]); a profile
/// quote whose simulated coverage is off the level is withdrawn
/// ([`NoQuote::CoverageOff`]).
pub fn apply_coverage(
    verdicts: &mut [Verdict],
    coverage: &CoverageResult,
    profile: Option<&ProfileResult>,
    tol: f64,
) {
    let tol = if tol.is_finite() && tol >= 0.0 { tol } else { 0.0 };
    let level = coverage.level;
    for v in verdicts.iter_mut() {
        let Some(pc) = coverage.parameters.iter().find(|p| p.name == v.parameter) else {
            continue;
        };
        let Some(an) = pc.kind(CoverageKind::Analytic) else {
            continue;
        };
        let Some((clear, w, status)) = coverage_departure(an, level, tol) else {
            continue;
        };
        let prof = pc.kind(CoverageKind::Profile);
        let prof_dep = prof.and_then(|p| coverage_departure(p, level, tol));
        let mut nums = numbers([
            ("coverage", an.coverage),
            ("std_error", an.std_error),
            ("null_std_error", an.null_std_error),
            ("counted", an.counted as f64),
            ("level", level),
            ("width_factor", w),
            ("clear", if clear { 1.0 } else { 0.0 }),
            ("clear_se", CLEAR_SE),
            ("tolerance", tol),
        ]);
        if let (Some(p), Some((_, pw, ps))) = (prof, prof_dep) {
            nums.insert("profile_coverage".into(), p.coverage);
            nums.insert("profile_std_error".into(), p.std_error);
            nums.insert("profile_width_factor".into(), pw);
            nums.insert("profile_off".into(), if ps > Status::Holds { 1.0 } else { 0.0 });
        }
        v.findings.push(Finding {
            rule: Rule::Coverage,
            diagnostic: Source::Coverage,
            status,
            numbers: nums,
            detail: None,
        });
        v.status = v.status.max(status);
        let profile_ok = matches!(prof_dep, Some((_, _, Status::Holds)));
        let closed = profile.and_then(|pr| {
            pr.parameters
                .iter()
                .find(|q| q.name == v.parameter)
                .filter(|q| q.lower_found && q.upper_found && q.lower.is_finite() && q.upper.is_finite())
                .map(|q| (q.lower, q.upper, pr.level))
        });
        let objects = status > Status::Holds;
        let kind = v.quote.as_ref().map(|q| q.kind);
        let switch = match (kind, v.no_quote) {
            (Some(QuoteKind::Profile), _) => !profile_ok,
            (Some(QuoteKind::Analytic), _) | (None, Some(NoQuote::ProfileAgrees)) => objects,
            _ => false,
        };
        if !switch {
            continue;
        }
        match closed {
            Some((lower, upper, level)) if profile_ok => {
                v.quote = Some(Quote {
                    kind: QuoteKind::Profile,
                    lower,
                    upper,
                    level,
                });
                v.no_quote = None;
            }
            _ => {
                v.quote = None;
                v.no_quote = Some(if profile.is_none() {
                    NoQuote::ProfileNotRun
                } else {
                    NoQuote::CoverageOff
                });
            }
        }
    }
}

fn stop_code(s: crate::fit::StopReason) -> String {
    serde_json::to_value(s)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

fn base_rules(fit: &FitResult, p: &ParamResult, f: &mut Findings) {
    if !fit.converged {
        f.add_detail(
            Rule::BaseFit,
            Source::Fit,
            Status::Fails,
            numbers([("iterations", fit.iterations as f64)]),
            &stop_code(fit.stop_reason),
        );
    }
    if p.at_bound {
        f.add(
            Rule::OnBound,
            Source::Fit,
            Status::Fails,
            numbers([("value", p.value)]),
        );
    } else if p.std_error.is_none() {
        f.add(Rule::Undetermined, Source::Fit, Status::Fails, BTreeMap::new());
    }
}

fn goodness_rule(fit: &FitResult, tol: f64, f: &mut Findings) {
    if fit.dof == 0 || !fit.chi2.is_finite() {
        return;
    }
    let dof = fit.dof as f64;
    let birge = (fit.chi2 / dof).sqrt();
    let p = two_tailed_p(fit.chi2, dof);
    let clear = p < CLEAR_P;
    let status = departure_status(clear, (birge - 1.0).abs(), tol);
    let mut nums = numbers([
        ("chi2", fit.chi2),
        ("dof", dof),
        ("birge_ratio", birge),
        ("p_value", p),
        ("clear_p", CLEAR_P),
        ("tolerance", tol),
    ]);
    if fit.likelihood == crate::fit::Likelihood::Poisson {
        // The statistic is the Poisson deviance (same value as `chi2`).
        nums.insert("deviance".to_string(), fit.chi2);
    }
    f.add(Rule::GoodnessOfFit, Source::Fit, status, nums);
}

fn multistart_rule(ms: &MultistartResult, fit: &FitResult, p: &ParamResult, f: &mut Findings) {
    if ms.audited_is_best {
        f.add(
            Rule::BetterMinimum,
            Source::Multistart,
            Status::Holds,
            numbers([
                ("starts", ms.starts as f64),
                ("chi2_audited", fit.chi2),
                ("chi2_base", ms.base_chi2),
                ("rebased", if ms.base_is_best { 0.0 } else { 1.0 }),
            ]),
        );
        return;
    }
    let Some(best) = ms.minima.first() else {
        return;
    };
    let at_best = best.parameters.iter().find(|v| v.name == p.name).map(|v| v.value);
    better_minimum(Source::Multistart, best.chi2, ms.base_chi2, at_best, p, f);
}

/// Rule 3 (and its profile counterpart): a clearly lower chi-squared at
/// another point; `at_best` is this parameter's value there.
fn better_minimum(
    source: Source,
    chi2_best: f64,
    chi2_base: f64,
    at_best: Option<f64>,
    p: &ParamResult,
    f: &mut Findings,
) {
    let mut nums = numbers([
        ("chi2_best", chi2_best),
        ("chi2_base", chi2_base),
        ("value", p.value),
    ]);
    let status = match (at_best, p.std_error) {
        (Some(v), Some(se)) if se > 0.0 => {
            let shift = (v - p.value).abs() / se;
            nums.insert("value_at_best".into(), v);
            nums.insert("shift_se".into(), shift);
            nums.insert("shift_limit_se".into(), MINIMUM_SHIFT_SE);
            if shift > MINIMUM_SHIFT_SE {
                Status::Fails
            } else {
                Status::Doubtful
            }
        }
        (Some(v), _) => {
            nums.insert("value_at_best".into(), v);
            Status::Fails
        }
        (None, _) => Status::Fails,
    };
    f.add(Rule::BetterMinimum, source, status, nums);
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
            Source::Profile,
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
    for (rule, found, status, last) in [
        (Rule::ProfileOpenBelow, pp.lower_found, pp.lower_status, pp.lower),
        (Rule::ProfileOpenAbove, pp.upper_found, pp.upper_status, pp.upper),
    ] {
        if found {
            continue;
        }
        open = true;
        let code = match status {
            EndStatus::Bound => "bound",
            EndStatus::Unresolved => "unresolved",
            EndStatus::ScanLimit | EndStatus::Found => "scan-limit",
        };
        f.add_detail(
            rule,
            Source::Profile,
            Status::Fails,
            numbers([("rise", rise), ("last", last)]),
            code,
        );
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
    f.add(
        Rule::ProfileHalfWidths,
        Source::Profile,
        worst,
        numbers([
            ("ratio_below", lo),
            ("ratio_above", hi),
            ("covariance_half_width", expected),
            ("tolerance", tol),
            ("fail_low", PROFILE_FAIL_LOW),
            ("fail_high", PROFILE_FAIL_HIGH),
        ]),
    );
}

fn resample_rule(source: Source, r: &ResampleResult, p: &ParamResult, tol: f64, f: &mut Findings) {
    if r.run > 0 {
        let share = r.failed as f64 / r.run as f64;
        if share > FAILURE_SHARE {
            f.add(
                Rule::FailedRefits,
                source,
                Status::Doubtful,
                numbers([
                    ("failed", r.failed as f64),
                    ("run", r.run as f64),
                    ("share", share),
                    ("limit", FAILURE_SHARE),
                ]),
            );
        }
    }
    let Some(rp) = r.parameters.iter().find(|q| q.name == p.name) else {
        return;
    };
    let ok = r.run.saturating_sub(r.failed);
    if rp.runaways > 0 && ok > 0 {
        let share = rp.runaways as f64 / ok as f64;
        f.add(
            Rule::RunawayRefits,
            source,
            if share > FAILURE_SHARE {
                Status::Doubtful
            } else {
                Status::Holds
            },
            numbers([
                ("runaways", rp.runaways as f64),
                ("successful", ok as f64),
                ("share", share),
                ("limit", FAILURE_SHARE),
            ]),
        );
    }
    if rp.percentile_excludes_estimate {
        f.add(
            Rule::PercentileExcludesEstimate,
            source,
            Status::Doubtful,
            numbers([
                ("estimate", rp.estimate),
                ("lower", rp.lower),
                ("upper", rp.upper),
            ]),
        );
    }
    spread_rule(source, rp, tol, f);
}

fn spread_rule(source: Source, rp: &ResampledParameter, tol: f64, f: &mut Findings) {
    let (Some(ratio), Some(nu)) = (rp.robust_ratio, rp.null_dof) else {
        return;
    };
    let p = two_tailed_p(ratio * ratio * nu, nu);
    let dev = (ratio - 1.0).abs();
    let status = departure_status(p < CLEAR_P, dev, tol);
    f.add(
        Rule::SpreadRatio,
        source,
        status,
        numbers([
            ("ratio", ratio),
            ("robust_std", rp.robust_std),
            ("std", rp.std),
            ("null_dof", nu),
            ("p_value", p),
            ("clear_p", CLEAR_P),
            ("tolerance", tol),
        ]),
    );
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
            likelihood: crate::fit::Likelihood::Gaussian,
            statistic: "chi2".to_string(),
            small_counts: None,
            errors_in_x: false,
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
            sigma_given: false,
            level: 0.6827,
        }
    }

    fn texts(v: &Verdict) -> Vec<String> {
        crate::report::findings::reasons(v)
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
            bca_withheld: None,
            robust_std: std,
            robust_ratio: Some(ratio),
            null_dof: crate::diagnostics::resample::null_dof(b, None),
            runaways: 0,
            percentile_excludes_estimate: false,
            shortest_lower: None,
            shortest_upper: None,
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
            texts(&v[0])[0].contains("no diagnostic ran"),
            "{:?}",
            texts(&v[0])
        );
    }

    #[test]
    fn undetermined_or_at_bound_fails() {
        let mut b = param("b", 0.0, None);
        b.at_bound = true;
        let fit = fit_of(vec![param("a", 1.0, None), b]);
        let v = decide(&inputs(&fit));
        assert_eq!(v[0].status, Status::Fails);
        assert!(texts(&v[0])[0].contains("undetermined"));
        assert_eq!(v[1].status, Status::Fails);
        assert!(texts(&v[1])[0].contains("bound"), "{:?}", texts(&v[1]));
    }

    #[test]
    fn unconverged_base_fit_fails() {
        let mut fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        fit.converged = false;
        fit.stop_reason = StopReason::IterationLimit;
        let v = decide(&inputs(&fit));
        assert_eq!(v[0].status, Status::Fails);
        assert!(texts(&v[0])[0].contains("did not converge"));
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
            texts(&v[0])
                .iter()
                .any(|r| r.contains("a better minimum exists: chi2 = 80.1 against 412.7")),
            "{:?}",
            texts(&v[0])
        );
        assert!(texts(&v[0]).iter().any(|r| r.contains("3.50 standard errors")));
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
        assert!(texts(&v[0])[0].contains("non-identifiable") && texts(&v[0])[0].contains("above"));
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
        assert!(texts(&v[0])[0].contains("bound at 0"), "{:?}", texts(&v[0]));
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
        assert_eq!(v[0].status, Status::Doubtful, "{:?}", texts(&v[0]));
        assert_eq!(v[1].status, Status::Fails, "{:?}", texts(&v[1]));
        assert!(texts(&v[1])[0].contains("chi2 = 5 against 10 at the base fit"));
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
            assert_eq!(v[0].status, want, "case {i}: {:?}", texts(&v[0]));
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
                assert_eq!(v[0].status, want, "std {std} B {b}: {:?}", texts(&v[0]));
            }
        }
        let rr = resample_result(vec![resampled("a", 0.104, 0.1, 2000)], 2000, 0);
        let mut inp = inputs(&fit);
        inp.bootstrap = Some(&rr);
        assert_eq!(
            texts(&decide(&inp)[0]),
            vec![
                "bootstrap spread agrees with the analytic standard error within 20 % (robust SD 0.104, ratio \
                 1.04 to u, p = 0.063 against a correct u)"
            ]
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
                assert!(texts(&v[0])[0].starts_with("21 of 2000 Monte Carlo refits failed (1.1 %)"));
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
        assert_eq!(texts(&v[0]).len(), 3, "{:?}", texts(&v[0]));
    }

    #[test]
    fn two_tailed_p_of_the_chi_squared_law() {
        // Chi-squared table (NIST/SEMATECH e-Handbook 1.3.6.7.4, from memory):
        // 1 dof upper 5 % point 3.841; 10 dof lower 5 % point 3.940.
        assert!((two_tailed_p(3.841, 1.0) - 0.10).abs() < 1e-3);
        assert!((two_tailed_p(3.940, 10.0) - 0.10).abs() < 1e-3);
        // The median gives p = 1 (identity).
        let med = ChiSquared::new(7.0).unwrap().inverse_cdf(0.5);
        assert!((two_tailed_p(med, 7.0) - 1.0).abs() < 1e-9);
        assert!(two_tailed_p(f64::NAN, 3.0).is_nan());
    }

    #[test]
    fn goodness_of_fit_votes_with_stated_sigma_only() {
        // Straight line, 20 points, scatter twice the stated sigma: chi2/dof
        // about 3.5 (the case that "held" without this rule).
        let mut fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        fit.dof = 18;
        fit.chi2 = 3.5 * 18.0;
        fit.reduced_chi2 = 3.5;
        let mut inp = inputs(&fit);
        inp.sigma_given = true;
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Fails, "{:?}", v[0].findings);
        let g = &v[0].findings[0];
        assert_eq!((g.rule, g.diagnostic), (Rule::GoodnessOfFit, Source::Fit));
        assert!((g.numbers["birge_ratio"] - 3.5f64.sqrt()).abs() < 1e-12);
        assert!(g.numbers["p_value"] < 1e-3);
        assert!(
            texts(&v[0])[0].contains("multiply u by 1.87"),
            "{:?}",
            texts(&v[0])
        );
        assert!(texts(&v[0])[0].contains("either the stated sigma or the model is wrong"));
        assert_eq!(v[0].no_quote, Some(NoQuote::GoodnessOfFit));
        // Too little scatter is flagged as well (both tails): chi2/dof = 0.2.
        fit.chi2 = 0.2 * 18.0;
        let mut inp = inputs(&fit);
        inp.sigma_given = true;
        assert_eq!(decide(&inp)[0].status, Status::Fails);
        // chi2 = dof: holds; without sigma (or scaled covariance) no vote.
        fit.chi2 = 18.0;
        let mut inp = inputs(&fit);
        inp.sigma_given = true;
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Holds);
        assert_eq!(v[0].findings[0].rule, Rule::GoodnessOfFit);
        fit.chi2 = 3.5 * 18.0;
        assert!(decide(&inputs(&fit))[0].findings.is_empty());
        // With 10000 dof chi2/dof = 1.1 is clear (p < 1e-10) but within the
        // 20 % tolerance: u would change by 5 % only.
        fit.dof = 10_000;
        fit.chi2 = 1.1 * 10_000.0;
        let mut inp = inputs(&fit);
        inp.sigma_given = true;
        assert_eq!(decide(&inp)[0].status, Status::Holds);
    }

    #[test]
    fn spread_rule_reads_the_null_distribution_not_the_observed_ratio() {
        // Ratio 12.5 from 2000 replicates: under a correct u the ratio
        // scatters by about 0.02, so the difference is clear and fails
        // (the observed-ratio rule called 12.5 +- 4.4 "not clear").
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let mut rp = resampled("a", 1.25, 0.1, 2000);
        rp.null_dof = crate::diagnostics::resample::null_dof(2000, Some(4));
        let rr = resample_result(vec![rp], 2000, 0);
        let mut inp = inputs(&fit);
        inp.bootstrap = Some(&rr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Fails);
        // Below 1: ratio 0.7 from a bootstrap of 200 with 18 dof of scatter
        // is what a correct u gives by chance (p about 0.09): holds.
        let mut rp = resampled("a", 0.07, 0.1, 200);
        rp.null_dof = crate::diagnostics::resample::null_dof(200, Some(18));
        let rr = resample_result(vec![rp], 200, 0);
        let mut inp = inputs(&fit);
        inp.bootstrap = Some(&rr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Holds, "{:?}", v[0].findings);
        let p = v[0].findings[0].numbers["p_value"];
        assert!(p > 0.01 && p < 0.2, "{p}");
    }

    #[test]
    fn runaways_and_an_excluded_estimate_are_doubtful() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let mut rp = resampled("a", 0.1, 0.1, 1000);
        rp.runaways = 5;
        let rr = resample_result(vec![rp.clone()], 1000, 0);
        let mut inp = inputs(&fit);
        inp.monte_carlo = Some(&rr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Holds, "5 of 1000 is within 1 %");
        assert!(v[0].findings.iter().any(|f| f.rule == Rule::RunawayRefits));
        rp.runaways = 11;
        rp.percentile_excludes_estimate = true;
        let rr = resample_result(vec![rp], 1000, 0);
        let mut inp = inputs(&fit);
        inp.monte_carlo = Some(&rr);
        let v = decide(&inp);
        assert_eq!(v[0].status, Status::Doubtful);
        let rules: Vec<Rule> = v[0]
            .findings
            .iter()
            .filter(|f| f.status != Status::Holds)
            .map(|f| f.rule)
            .collect();
        assert_eq!(rules, vec![Rule::RunawayRefits, Rule::PercentileExcludesEstimate]);
    }

    #[test]
    fn the_quote_follows_the_verdict() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        // Holds: value +- k u with k = 1 at 68.27 % (normal table).
        let pr = profile_of("a", 1.0, 0.9, 1.1, (true, true));
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        let q = v[0].quote.as_ref().unwrap();
        assert_eq!(q.kind, QuoteKind::Analytic);
        assert!((q.lower - 0.9).abs() < 1e-3 && (q.upper - 1.1).abs() < 1e-3 && q.level == 0.6827);
        // Closed but lopsided profile: quote the profile interval.
        let pr = profile_of("a", 1.0, 0.85, 1.3, (true, true));
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        let q = v[0].quote.as_ref().unwrap();
        assert_eq!((q.kind, q.lower, q.upper), (QuoteKind::Profile, 0.85, 1.3));
        // Open profile: none, not identifiable.
        let pr = profile_of("a", 1.0, 0.9, 5.0, (true, false));
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        let v = decide(&inp);
        assert_eq!(
            (v[0].quote.is_none(), v[0].no_quote),
            (true, Some(NoQuote::NotIdentifiable))
        );
        // Better minimum: none, even when the parameter barely moved.
        let ms = multistart_of(false, vec![("a", 1.01)]);
        let mut inp = inputs(&fit);
        inp.multistart = Some(&ms);
        assert_eq!(decide(&inp)[0].no_quote, Some(NoQuote::NotBestMinimum));
        // On a bound: none.
        let mut b = param("a", 0.0, None);
        b.at_bound = true;
        let fit2 = fit_of(vec![b]);
        assert_eq!(decide(&inputs(&fit2))[0].no_quote, Some(NoQuote::OnBound));
        // Doubted by the Monte Carlo while the profile agrees: none.
        let rr = resample_result(vec![resampled("a", 0.13, 0.1, 2000)], 2000, 0);
        let pr = profile_of("a", 1.0, 0.9, 1.1, (true, true));
        let mut inp = inputs(&fit);
        inp.profile = Some(&pr);
        inp.monte_carlo = Some(&rr);
        assert_eq!(decide(&inp)[0].no_quote, Some(NoQuote::ProfileAgrees));
    }

    fn coverage_of(name: &str, analytic: (usize, usize), profile: (usize, usize)) -> CoverageResult {
        use crate::diagnostics::coverage::ParameterCoverage;
        let ic = |kind, (covered, n): (usize, usize)| {
            let c = covered as f64 / n as f64;
            IntervalCoverage {
                kind,
                coverage: c,
                std_error: (c * (1.0 - c) / n as f64).sqrt(),
                null_std_error: (0.6827f64 * 0.3173 / n as f64).sqrt(),
                counted: n,
                covered,
                missed_below: 0,
                missed_above: n - covered,
                unavailable: 0,
                open_below: 0,
                open_above: 0,
                quotes: BTreeMap::new(),
            }
        };
        CoverageResult {
            replicates: analytic.1,
            run: analytic.1,
            failed: 0,
            failures: BTreeMap::new(),
            level: 0.6827,
            noise: "normal".into(),
            student_t_dof: None,
            noise_scale: 1.0,
            moves_x: false,
            refits: 0,
            parameters: vec![ParameterCoverage {
                name: name.into(),
                truth: 1.0,
                intervals: vec![
                    ic(CoverageKind::Analytic, analytic),
                    ic(CoverageKind::Profile, profile),
                ],
            }],
        }
    }

    #[test]
    fn coverage_rule_statuses_and_quotes() {
        let fit = fit_of(vec![param("a", 1.0, Some(0.1))]);
        let pr = profile_of("a", 1.0, 0.9, 1.1, (true, true));
        let run = |cov: &CoverageResult, profile: Option<&ProfileResult>| {
            let mut inp = inputs(&fit);
            inp.profile = profile;
            let mut v = decide(&inp);
            apply_coverage(&mut v, cov, profile, 0.2);
            v.remove(0)
        };
        // 1000 data sets, null SE sqrt(0.6827 * 0.3173 / 1000) = 0.0147.
        // 700 covered: 1.2 SE off, holds; the analytic quote stays.
        let v = run(&coverage_of("a", (700, 1000), (690, 1000)), Some(&pr));
        assert_eq!(v.status, Status::Holds);
        assert_eq!(v.quote.as_ref().unwrap().kind, QuoteKind::Analytic);
        // 800 covered: 8 SE off; w = z_0.6827 / z_0.8 = 1.0000 / 1.2816 = 0.780
        // (normal quantiles at 0.84135 and 0.90, e.g. NIST/SEMATECH
        // e-Handbook 1.3.6.7.1, from memory): |w - 1| = 0.22 in (0.2, 0.4]:
        // doubtful. The profile covers 0.69, on the level: the quote moves to
        // the profile interval.
        let v = run(&coverage_of("a", (800, 1000), (690, 1000)), Some(&pr));
        let f = v.findings.iter().find(|f| f.rule == Rule::Coverage).unwrap();
        assert!(
            (f.numbers["width_factor"] - 1.0 / 1.2816).abs() < 2e-4,
            "{:?}",
            f.numbers
        );
        assert_eq!(f.status, Status::Doubtful);
        assert_eq!(v.status, Status::Doubtful);
        let q = v.quote.as_ref().unwrap();
        assert_eq!((q.kind, q.lower, q.upper), (QuoteKind::Profile, 0.9, 1.1));
        // The profile off too: no quote.
        let v = run(&coverage_of("a", (800, 1000), (800, 1000)), Some(&pr));
        assert_eq!(
            (v.quote.is_none(), v.no_quote),
            (true, Some(NoQuote::CoverageOff))
        );
        // No profile ran: none, saying so.
        let v = run(&coverage_of("a", (800, 1000), (690, 1000)), None);
        assert_eq!(v.no_quote, Some(NoQuote::ProfileNotRun));
        // 500 covered (under-covering): w = 1 / z(0.75) = 1 / 0.6745 = 1.48: fails.
        let v = run(&coverage_of("a", (500, 1000), (690, 1000)), Some(&pr));
        assert_eq!(v.status, Status::Fails);
        // Too few data sets to be clear: 0.8 of 20 is 1.1 SE off: holds.
        let v = run(&coverage_of("a", (16, 20), (14, 20)), Some(&pr));
        assert_eq!(v.status, Status::Holds);
        // A profile quote whose simulated coverage is off is withdrawn,
        // even when the analytic coverage holds.
        let skewed = profile_of("a", 1.0, 0.95, 1.3, (true, true));
        let v = run(&coverage_of("a", (700, 1000), (800, 1000)), Some(&skewed));
        assert_eq!(v.no_quote, Some(NoQuote::CoverageOff));
        assert!(crate::report::findings::sentence(v.findings.last().unwrap()).contains("0.700"));
    }
}
