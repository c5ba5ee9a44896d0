//! Derived quantities: functions `q = h(a, constants)` of the fitted
//! parameters declared in the study's `[derived]` table, compiled by the
//! formula compiler with exact derivatives.
//!
//! For each quantity, at the solution `a`:
//!
//! - **value** `h(a)` and **sensitivity coefficients** `c_j = dh/da_j`;
//! - **standard uncertainty** by the law of propagation of uncertainty
//!   with the full covariance, `u(q)^2 = c^T C c` (JCGM 100:2008, 5.2,
//!   eq. 13 in matrix form); the expanded uncertainty `k u(q)` with the
//!   fit's coverage factor. It is undetermined (`None`) when a free
//!   parameter the quantity depends on has no standard error (on a bound,
//!   undetermined);
//! - **resampled distribution**: `h(a*)` over the replicate estimates
//!   already kept by the bootstrap and the Monte Carlo, summarised exactly
//!   like a parameter ([`resample::summarise`]: mean, SD, percentile or
//!   JCGM 101 intervals, robust spread and its null law), without BCa (the
//!   leave-one-out values are not kept). Replicates where `h` is not finite
//!   are left out and counted (`non_finite`), and count as failed refits
//!   for the verdict;
//! - **verdict and quote** by the same rules as a parameter
//!   ([`verdict::decide`] on the quantity in place of the parameters), with
//!   the quantity's value at the best multi-start minimum for the
//!   better-minimum rule. No profile-likelihood interval is computed for a
//!   derived quantity (it would need refits constrained to `h(a) = q`), so
//!   a doubted analytic interval gets no quote
//!   ([`NoQuote::NoDerivedProfile`]).

use serde::{Deserialize, Serialize};

use super::multistart::{MultistartResult, NamedValue};
use super::resample::{self, ParameterInfo, ResampleResult, ResampledParameter};
use super::verdict::{self, NoQuote, Verdict, VerdictInputs};
use crate::fit::{FitResult, ParamResult};
use crate::model::{ModelFn, Tape};

/// A derived quantity as declared and compiled (not serialised).
#[derive(Debug, Clone)]
pub struct DerivedQuantity {
    /// Name (the key in `[derived]`).
    pub name: String,
    /// The formula as written.
    pub formula: String,
    /// The formula compiled over the parameters (no independent variable).
    pub tape: Tape,
}

/// The resampled distribution of a derived quantity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DerivedResampled {
    /// Statistics of `h(a*)` over the replicates where it is finite, in the
    /// layout of a resampled parameter.
    pub summary: ResampledParameter,
    /// Replicates used.
    pub used: usize,
    /// Successful replicates where the quantity is not finite (left out).
    pub non_finite: usize,
}

/// Everything computed for one derived quantity.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DerivedResult {
    /// Name.
    pub name: String,
    /// Formula as written.
    pub formula: String,
    /// Value at the fitted parameters.
    pub value: f64,
    /// Sensitivity coefficients `dh/da_j`, in parameter order.
    pub sensitivities: Vec<f64>,
    /// Standard uncertainty `sqrt(c^T C c)`; `None` when undetermined.
    pub std_error: Option<f64>,
    /// `k * std_error` with the fit's coverage factor.
    pub expanded_uncertainty: Option<f64>,
    /// Bootstrap distribution, when the bootstrap ran.
    pub bootstrap: Option<DerivedResampled>,
    /// Monte Carlo distribution, when the Monte Carlo ran.
    pub monte_carlo: Option<DerivedResampled>,
    /// Verdict and the interval to quote, by the parameters' rules.
    pub verdict: Verdict,
}

/// Value and gradient of `q` at `params`.
pub fn value_and_gradient(q: &DerivedQuantity, params: &[f64]) -> (f64, Vec<f64>) {
    q.tape.eval_point(params, &[])
}

/// Value of `q` at `params` (no derivatives); NaN when not finite.
fn value_at(q: &DerivedQuantity, params: &[f64], scratch: &mut Vec<f64>) -> f64 {
    let mut v = [0.0];
    let no_x: [&[f64]; 0] = [];
    match q.tape.eval(params, &no_x, &mut v, None, scratch) {
        Ok(()) => v[0],
        Err(_) => f64::NAN,
    }
}

/// The distribution of `q` over the replicate estimates of `rs`.
fn resampled(
    q: &DerivedQuantity,
    rs: &ResampleResult,
    value: f64,
    se: Option<f64>,
    scatter_dof: Option<usize>,
    jcgm: bool,
) -> Option<DerivedResampled> {
    let m = q.tape.n_params();
    let mut scratch = Vec::new();
    let mut rows = Vec::with_capacity(rs.estimates.len());
    let mut non_finite = 0;
    for r in rs.estimates.iter().filter(|r| r.len() == m) {
        let v = value_at(q, r, &mut scratch);
        if v.is_finite() {
            rows.push(vec![v]);
        } else {
            non_finite += 1;
        }
    }
    if rows.is_empty() && non_finite == 0 {
        return None;
    }
    let names = [q.name.clone()];
    let info = ParameterInfo {
        names: &names,
        estimates: &[value],
        std_errors: &[se],
        free: &[true],
        scatter_dof,
        jcgm,
    };
    let (mut params, _) = resample::summarise(&info, &rows, None, rs.level);
    Some(DerivedResampled {
        summary: params.remove(0),
        used: rows.len(),
        non_finite,
    })
}

/// The resampling result the verdict rules read for a derived quantity:
/// the counts of `rs` (non-finite values counted as failures) and the
/// quantity's summary as its only parameter.
fn as_resample(rs: &ResampleResult, d: &DerivedResampled) -> ResampleResult {
    ResampleResult {
        scheme: rs.scheme.clone(),
        replicates: rs.replicates,
        run: rs.run,
        failed: rs.failed + d.non_finite,
        failures: Vec::new(),
        level: rs.level,
        parameters: vec![d.summary.clone()],
        correlation: vec![vec![1.0]],
        estimates: Vec::new(),
        adaptive_stable: rs.adaptive_stable,
        jackknife_refits: 0,
        jackknife_failures: Vec::new(),
        noise_scale: rs.noise_scale,
    }
}

/// The multi-start result with the quantity's value at each minimum in
/// place of the parameters.
fn as_multistart(q: &DerivedQuantity, ms: &MultistartResult, fit: &FitResult) -> MultistartResult {
    let mut out = ms.clone();
    let mut scratch = Vec::new();
    for m in &mut out.minima {
        let params: Vec<f64> = fit
            .parameters
            .iter()
            .map(|p| {
                m.parameters
                    .iter()
                    .find(|v| v.name == p.name)
                    .map_or(p.value, |v| v.value)
            })
            .collect();
        m.parameters = vec![NamedValue {
            name: q.name.clone(),
            value: value_at(q, &params, &mut scratch),
        }];
    }
    out
}

/// The derived quantities of a base fit alone (`fitaudit fit`): value,
/// propagated uncertainty and the verdict rules of the base fit.
pub fn for_fit(
    quantities: &[DerivedQuantity],
    fit: &FitResult,
    settings: &crate::settings::AuditSettings,
    sigma_given: bool,
) -> Vec<DerivedResult> {
    evaluate(
        quantities,
        &VerdictInputs {
            fit,
            bootstrap: None,
            monte_carlo: None,
            profile: None,
            multistart: None,
            tolerance: settings.tolerance,
            sigma_given,
            level: settings.level,
        },
    )
}

/// Evaluates every derived quantity on the audited fit and whichever
/// resampling diagnostics ran (`inputs.profile` is not read).
pub fn evaluate(quantities: &[DerivedQuantity], inputs: &VerdictInputs) -> Vec<DerivedResult> {
    let fit = inputs.fit;
    let params: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    quantities
        .iter()
        .filter(|q| q.tape.n_params() == params.len())
        .map(|q| {
            let (value, grad) = value_and_gradient(q, &params);
            let depends = |p: &(usize, &ParamResult)| grad[p.0] != 0.0 && !p.1.fixed;
            let used: Vec<(usize, &ParamResult)> =
                fit.parameters.iter().enumerate().filter(depends).collect();
            let at_bound = used.iter().any(|(_, p)| p.at_bound);
            let determined = used.iter().all(|(_, p)| p.std_error.is_some());
            let var: f64 = (0..params.len())
                .map(|a| {
                    (0..params.len())
                        .map(|b| {
                            let c = fit.covariance.get(a).and_then(|r| r.get(b)).copied();
                            grad[a] * c.unwrap_or(f64::NAN) * grad[b]
                        })
                        .sum::<f64>()
                })
                .sum();
            let std_error =
                (determined && value.is_finite() && var.is_finite() && var >= 0.0).then(|| var.sqrt());
            let k = verdict::coverage_factor(fit, inputs.level);
            let expanded_uncertainty = std_error.map(|u| k * u);
            let bootstrap = inputs.bootstrap.and_then(|rs| {
                let scatter = (!fit.covariance_scaled).then_some(fit.dof);
                resampled(q, rs, value, std_error, scatter, false)
            });
            let monte_carlo = inputs
                .monte_carlo
                .and_then(|rs| resampled(q, rs, value, std_error, None, true));
            // The verdict rules on a fit whose only parameter is the quantity.
            let mut qfit = fit.clone();
            qfit.parameters = vec![ParamResult {
                name: q.name.clone(),
                value,
                std_error,
                expanded_uncertainty,
                at_bound,
                fixed: false,
            }];
            let boot_rs = inputs
                .bootstrap
                .zip(bootstrap.as_ref())
                .map(|(rs, d)| as_resample(rs, d));
            let mc_rs = inputs
                .monte_carlo
                .zip(monte_carlo.as_ref())
                .map(|(rs, d)| as_resample(rs, d));
            let ms = inputs.multistart.map(|ms| as_multistart(q, ms, fit));
            let mut verdict = verdict::decide(&VerdictInputs {
                fit: &qfit,
                bootstrap: boot_rs.as_ref(),
                monte_carlo: mc_rs.as_ref(),
                profile: None,
                multistart: ms.as_ref(),
                ..*inputs
            })
            .remove(0);
            if verdict.no_quote == Some(NoQuote::ProfileNotRun) {
                verdict.no_quote = Some(NoQuote::NoDerivedProfile);
            }
            DerivedResult {
                name: q.name.clone(),
                formula: q.formula.clone(),
                value,
                sensitivities: grad,
                std_error,
                expanded_uncertainty,
                bootstrap,
                monte_carlo,
                verdict,
            }
        })
        .collect()
}
