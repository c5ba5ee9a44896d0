//! Is the linear approximation adequate? The relative curvatures of Bates
//! and Watts and Box's bias of the estimates, from the exact second
//! derivatives of the model at the solution.
//!
//! Every analytic `+- u` rests on replacing the model near the optimum by
//! its tangent plane. Two things can spoil that (D. M. Bates and D. G.
//! Watts, "Relative curvature measures of nonlinearity", JRSS B 42, 1980,
//! 1-25; *Nonlinear Regression Analysis and Its Applications*, 1988,
//! chapter 7):
//!
//! - **intrinsic curvature**: the expectation surface (the set of model
//!   vectors `f(a)` as `a` varies) is itself curved, so the confidence
//!   region is not the ellipsoid of the covariance whatever parameters are
//!   used;
//! - **parameter-effects curvature**: the surface may be flat but its
//!   parameter lines are curved and unevenly spaced, so equal steps in `a`
//!   are unequal steps on the surface; a reparametrisation (e.g. `log k`
//!   for `k`) can remove it.
//!
//! # Computation (weighted problem)
//!
//! With `V = J / sigma` the weighted Jacobian of the `p` estimated
//! parameters (free and not on a bound; fixed ones are excluded) and
//! `W_jk = (d^2 f / da_j da_k) / sigma` the weighted second derivatives, let
//! `V^T V = R^T R` (Cholesky, the `R` of the QR decomposition of `V`),
//! `U = R^-1`, and transform to orthonormal tangent coordinates:
//! `W~_ij = sum_jk U_ji U_kl W_jk`. Split each `W~_ij` into its part in the
//! tangent plane, `a^T_ij = U^T V^T W~_ij` (`p` numbers), and its part
//! normal to it, `a^N_ij = W~_ij - V U a^T_ij`. Scaled by `rho = s sqrt(p)`
//! (`s^2 = chi2 / dof` when the covariance is scaled, 1 when sigma is
//! stated) these are the relative acceleration arrays. The curvature in the
//! tangent direction `h` (unit length) is `|sum_ij a_ij h_i h_j|`; this
//! module reports its **root mean square over all directions**,
//!
//! `c^2 = rho^2 / (p (p + 2)) * (2 sum_ij |a_ij|^2 + |sum_i a_ii|^2)`,
//!
//! which follows from the fourth moments of a uniform unit vector,
//! `E[h_i h_j h_k h_l] = (d_ij d_kl + d_ik d_jl + d_il d_jk) / (p (p + 2))`.
//! The largest curvature over directions (Bates and Watts 1980 report it)
//! is given as well, found by a shifted power iteration from several starts
//! ([`max_quartic`]); it is at least the RMS value. The RMS values are
//! compared with the critical value `1 / (2 sqrt(F))`,
//! `F` the upper quantile at the audit level of Fisher's F with `p` and
//! `dof` degrees of freedom (with stated sigma: chi-squared with `p`
//! degrees of freedom over `p`): the radius of curvature `1 / c` is then
//! less than twice the radius `sqrt(F)` of the confidence region, so the
//! region visibly bends (Bates and Watts 1980).
//!
//! Only sums over the points enter (`V^T V`, `V^T W_jk` in a first pass,
//! the Gram matrix of the normal parts `a^N` in a second), so the cost is
//! two evaluations of the second derivatives over the data, in blocks, and
//! memory does not grow with the number of points.
//!
//! **Box's bias** (M. J. Box, "Bias in nonlinear estimation", JRSS B 33,
//! 1971, 171-201): to second order in the noise the estimates are biased by
//! `b = -(s^2 / 2) (V^T V)^-1 V^T d`, `d_i = tr((V^T V)^-1 W_i)` with `W_i`
//! the weighted Hessian of point `i`. The bias-corrected estimate is
//! `a - b`; it is shown beside the estimate, never in its place. A bias
//! above about 1 % of the estimate is often read as a sign of marked
//! nonlinearity (a rule of thumb of the nonlinear-regression literature,
//! recalled from memory: Ratkowsky 1983).
//!
//! Second derivatives come from the model's [`ModelFn::hessian`] (exact and
//! symbolic for a formula); a model without them gets central differences
//! of its exact Jacobian, step `eps^(1/3) max(|a_j|, u_j)`, and the record
//! says so.
//!
//! Nothing here decides a verdict: [`cite`] adds the numbers to the
//! reasons of a parameter that another rule already doubts, as the
//! explanation of that disagreement.

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF, FisherSnedecor};

use super::verdict::{Finding, Rule, Source, Status, Verdict};
use super::Fitted;
use crate::data::Dataset;
use crate::fit::FitResult;
use crate::model::{n_pairs, pair_index, ModelFn};

/// Points evaluated at a time (bounds the memory of the second derivatives).
const BLOCK: usize = 4096;

/// A bias above this percentage of the estimate marks marked nonlinearity
/// (rule of thumb, from memory: D. A. Ratkowsky, *Nonlinear Regression
/// Modeling*, 1983).
pub const BIAS_PERCENT_OF_ESTIMATE: f64 = 1.0;

/// A bias above this percentage of the standard error is large enough to
/// shift the interval visibly (chosen here: a tenth of `u`; common
/// practice, no source).
pub const BIAS_PERCENT_OF_STD_ERROR: f64 = 10.0;

/// Why the measures are not available.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum NotAvailable {
    /// Not computed (a record written before the measures existed).
    NotComputed,
    /// The fit did not converge: there is no minimum to linearise at.
    NotConverged,
    /// No parameter is estimated (all fixed or on a bound).
    NothingEstimated,
    /// The weighted Jacobian is rank-deficient at the solution.
    RankDeficient,
    /// The covariance is scaled but there are no degrees of freedom.
    NoDegreesOfFreedom,
    /// The model or its derivatives are not finite at the solution.
    NotFinite,
    /// A Poisson fit (`fit.likelihood = "poisson"`): the curvature
    /// measures and Box's bias are formulas of Gaussian weighted least
    /// squares with fixed weights; they are not computed for counts.
    PoissonLikelihood,
    /// A fit with errors in x (`data.sigma_x`): the effective-variance
    /// weights depend on the parameters, which the formulas do not allow
    /// for; not computed.
    ErrorsInX,
}

/// Where the second derivatives came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SecondDerivatives {
    /// Exact (symbolic, from the formula compiler).
    Exact,
    /// Central differences of the exact Jacobian (a model without them).
    CentralDifferences,
}

/// Box's bias of one estimated parameter.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParameterBias {
    /// Parameter name.
    pub name: String,
    /// The estimate.
    pub estimate: f64,
    /// Box's bias `b` (expected estimate minus true value, to second order).
    pub value: f64,
    /// The bias-corrected estimate `estimate - value`.
    pub corrected: f64,
    /// `100 b / estimate`; `None` for a zero estimate.
    pub percent_of_estimate: Option<f64>,
    /// `100 b / u`, `u` the standard error.
    pub percent_of_std_error: Option<f64>,
}

/// The curvature measures and the biases: `nonlinearity` in results.json.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NonlinearityResult {
    /// Why nothing was computed; `None` when the measures are available.
    pub not_available: Option<NotAvailable>,
    /// Source of the second derivatives (`None` when not available).
    pub second_derivatives: Option<SecondDerivatives>,
    /// The estimated parameters the measures cover, in parameter order.
    pub parameters: Vec<String>,
    /// Root-mean-square relative intrinsic curvature.
    pub intrinsic_curvature: Option<f64>,
    /// Root-mean-square relative parameter-effects curvature.
    pub parameter_effects_curvature: Option<f64>,
    /// The largest relative intrinsic curvature over directions (at least
    /// the RMS value), found by a local search from several starts.
    #[serde(default)]
    pub intrinsic_curvature_max: Option<f64>,
    /// The largest relative parameter-effects curvature over directions.
    #[serde(default)]
    pub parameter_effects_curvature_max: Option<f64>,
    /// The critical value `1 / (2 sqrt(F))`.
    pub critical_curvature: Option<f64>,
    /// `F`: Fisher's F quantile at `level` with `p` and `dof` degrees of
    /// freedom, or with stated sigma the chi-squared quantile over `p`.
    pub f_quantile: Option<f64>,
    /// The level of `F` (the audit level; the default level in a record
    /// without the measures).
    pub level: f64,
    /// The noise scale `s` of the relative curvatures and the bias: 1 with
    /// stated sigma (absolute covariance), `sqrt(chi2 / dof)` when scaled.
    pub scale: Option<f64>,
    /// Box's bias of each estimated parameter, in parameter order.
    pub bias: Vec<ParameterBias>,
}

impl Default for NonlinearityResult {
    fn default() -> Self {
        Self::unavailable(NotAvailable::NotComputed, crate::fit::DEFAULT_LEVEL)
    }
}

impl NonlinearityResult {
    fn unavailable(why: NotAvailable, level: f64) -> Self {
        NonlinearityResult {
            not_available: Some(why),
            second_derivatives: None,
            parameters: Vec::new(),
            intrinsic_curvature: None,
            parameter_effects_curvature: None,
            intrinsic_curvature_max: None,
            parameter_effects_curvature_max: None,
            critical_curvature: None,
            f_quantile: None,
            level,
            scale: None,
            bias: Vec::new(),
        }
    }

    /// Whether the intrinsic curvature exceeds the critical value.
    pub fn intrinsic_exceeds(&self) -> bool {
        matches!((self.intrinsic_curvature, self.critical_curvature), (Some(c), Some(k)) if c > k)
    }

    /// Whether the parameter-effects curvature exceeds the critical value.
    pub fn parameter_effects_exceeds(&self) -> bool {
        matches!((self.parameter_effects_curvature, self.critical_curvature), (Some(c), Some(k)) if c > k)
    }

    /// The bias entry of a parameter.
    pub fn bias_of(&self, name: &str) -> Option<&ParameterBias> {
        self.bias.iter().find(|b| b.name == name)
    }
}

impl ParameterBias {
    /// Whether the bias is marked: above [`BIAS_PERCENT_OF_ESTIMATE`] of
    /// the estimate or [`BIAS_PERCENT_OF_STD_ERROR`] of the standard error.
    pub fn is_marked(&self) -> bool {
        self.percent_of_estimate
            .is_some_and(|p| p.abs() > BIAS_PERCENT_OF_ESTIMATE)
            || self
                .percent_of_std_error
                .is_some_and(|p| p.abs() > BIAS_PERCENT_OF_STD_ERROR)
    }
}

/// The measures at the audited fit.
pub fn run(ctx: &Fitted) -> NonlinearityResult {
    compute(ctx.problem.model, ctx.data, ctx.fit)
}

/// The measures of `model` fitted to `data` at `fit` (its parameter values,
/// which ones are estimated, the covariance scaling and the level).
pub fn compute(model: &dyn ModelFn, data: &Dataset, fit: &FitResult) -> NonlinearityResult {
    let level = fit.level;
    if fit.likelihood == crate::fit::Likelihood::Poisson {
        return NonlinearityResult::unavailable(NotAvailable::PoissonLikelihood, level);
    }
    if fit.errors_in_x || data.sigma_x.is_some() {
        return NonlinearityResult::unavailable(NotAvailable::ErrorsInX, level);
    }
    if !fit.converged {
        return NonlinearityResult::unavailable(NotAvailable::NotConverged, level);
    }
    let est: Vec<usize> = (0..fit.parameters.len())
        .filter(|&j| !fit.parameters[j].fixed && !fit.parameters[j].at_bound)
        .collect();
    let p = est.len();
    if p == 0 {
        return NonlinearityResult::unavailable(NotAvailable::NothingEstimated, level);
    }
    if fit.rank < p || est.iter().any(|&j| fit.parameters[j].std_error.is_none()) {
        return NonlinearityResult::unavailable(NotAvailable::RankDeficient, level);
    }
    let s2 = if fit.covariance_scaled {
        if fit.dof == 0 {
            return NonlinearityResult::unavailable(NotAvailable::NoDegreesOfFreedom, level);
        }
        fit.reduced_chi2
    } else {
        1.0
    };
    let f_quantile = if fit.covariance_scaled {
        FisherSnedecor::new(p as f64, fit.dof as f64)
            .map(|d| d.inverse_cdf(level))
            .unwrap_or(f64::NAN)
    } else {
        ChiSquared::new(p as f64)
            .map(|d| d.inverse_cdf(level) / p as f64)
            .unwrap_or(f64::NAN)
    };
    let Some(sums) = accumulate(model, data, fit, &est) else {
        return NonlinearityResult::unavailable(NotAvailable::NotFinite, level);
    };
    let Some(m) = measures(&sums, p, s2) else {
        return NonlinearityResult::unavailable(NotAvailable::RankDeficient, level);
    };
    let bias = est
        .iter()
        .zip(&m.bias)
        .map(|(&j, &b)| {
            let pr = &fit.parameters[j];
            ParameterBias {
                name: pr.name.clone(),
                estimate: pr.value,
                value: b,
                corrected: pr.value - b,
                percent_of_estimate: (pr.value != 0.0).then(|| 100.0 * b / pr.value),
                percent_of_std_error: pr.std_error.filter(|&u| u > 0.0).map(|u| 100.0 * b / u),
            }
        })
        .collect();
    let finite = |x: f64| x.is_finite().then_some(x);
    NonlinearityResult {
        not_available: None,
        second_derivatives: Some(sums.source),
        parameters: est.iter().map(|&j| fit.parameters[j].name.clone()).collect(),
        intrinsic_curvature: finite(m.intrinsic),
        parameter_effects_curvature: finite(m.parameter_effects),
        intrinsic_curvature_max: finite(m.intrinsic_max),
        parameter_effects_curvature_max: finite(m.parameter_effects_max),
        critical_curvature: finite(0.5 / f_quantile.sqrt()),
        f_quantile: finite(f_quantile),
        level,
        scale: Some(s2.sqrt()),
        bias,
    }
}

/// The sums over the points the measures need.
struct Sums {
    /// `V^T V`, `p x p`.
    vtv: DMatrix<f64>,
    /// `V^T W_q` for each packed pair `q` of estimated parameters: `p x P2`.
    vtw: DMatrix<f64>,
    /// Gram matrix of the parts of `W_q` normal to the tangent plane, `P2 x P2`.
    normal: DMatrix<f64>,
    source: SecondDerivatives,
}

/// Weighted Jacobian (`nb x p`, column-major) and weighted second
/// derivatives (`nb x P2`, packed pairs of `est`) of one block.
struct BlockEval {
    v: Vec<f64>,
    w: Vec<f64>,
}

/// Evaluates one block `[start, end)` of points; `None` when not finite.
/// What every block evaluation reads.
struct Pass<'a> {
    model: &'a dyn ModelFn,
    /// All parameter values.
    params: &'a [f64],
    /// Central-difference steps of the estimated parameters.
    steps: &'a [f64],
    /// Indices of the estimated parameters.
    est: &'a [usize],
    xs: &'a [&'a [f64]],
    sigma: &'a [f64],
}

fn eval_block(
    pass: &Pass,
    range: (usize, usize),
    source: &mut Option<SecondDerivatives>,
) -> Option<BlockEval> {
    let Pass {
        model,
        params,
        steps,
        est,
        xs,
        sigma,
    } = *pass;
    let (start, end) = range;
    let nb = end - start;
    let m = params.len();
    let p = est.len();
    let xb: Vec<&[f64]> = xs.iter().map(|c| &c[start..end]).collect();
    let mut values = vec![0.0; nb];
    let mut jac = vec![0.0; nb * m];
    let mut scratch = Vec::new();
    model
        .eval(params, &xb, &mut values, Some(&mut jac), &mut scratch)
        .ok()?;
    let sig = &sigma[start..end];
    let mut v = vec![0.0; nb * p];
    for (a, &j) in est.iter().enumerate() {
        for i in 0..nb {
            v[a * nb + i] = jac[j * nb + i] / sig[i];
        }
    }
    let p2 = n_pairs(p);
    let mut w = vec![0.0; nb * p2];
    let mut hess = vec![0.0; nb * n_pairs(m)];
    let exact = match source {
        Some(SecondDerivatives::CentralDifferences) => None,
        _ => model.hessian(params, &xb, &mut values, &mut hess, &mut scratch),
    };
    match exact {
        Some(outcome) => {
            outcome.ok()?;
            *source = Some(SecondDerivatives::Exact);
            for a in 0..p {
                for b in 0..=a {
                    let q = pair_index(a, b);
                    let src = pair_index(est[a], est[b]);
                    for i in 0..nb {
                        w[q * nb + i] = hess[src * nb + i] / sig[i];
                    }
                }
            }
        }
        None => {
            *source = Some(SecondDerivatives::CentralDifferences);
            // d J_j / d a_k by central differences, for every estimated k.
            let mut dj: Vec<Vec<f64>> = Vec::with_capacity(p);
            let mut jp = vec![0.0; nb * m];
            let mut jm = vec![0.0; nb * m];
            for (b, &k) in est.iter().enumerate() {
                let mut plus = params.to_vec();
                let mut minus = params.to_vec();
                plus[k] += steps[b];
                minus[k] -= steps[b];
                model
                    .eval(&plus, &xb, &mut values, Some(&mut jp), &mut scratch)
                    .ok()?;
                model
                    .eval(&minus, &xb, &mut values, Some(&mut jm), &mut scratch)
                    .ok()?;
                let h2 = plus[k] - minus[k];
                let mut d = vec![0.0; nb * p];
                for (a, &j) in est.iter().enumerate() {
                    for i in 0..nb {
                        d[a * nb + i] = (jp[j * nb + i] - jm[j * nb + i]) / h2;
                    }
                }
                dj.push(d);
            }
            for a in 0..p {
                for b in 0..=a {
                    let q = pair_index(a, b);
                    for i in 0..nb {
                        // Symmetrised: (d J_a / d a_b + d J_b / d a_a) / 2.
                        w[q * nb + i] = 0.5 * (dj[b][a * nb + i] + dj[a][b * nb + i]) / sig[i];
                    }
                }
            }
        }
    }
    (v.iter().chain(&w).all(|x| x.is_finite())).then_some(BlockEval { v, w })
}

/// The two passes over the data.
fn accumulate(model: &dyn ModelFn, data: &Dataset, fit: &FitResult, est: &[usize]) -> Option<Sums> {
    let n = data.len();
    let p = est.len();
    let p2 = n_pairs(p);
    let params: Vec<f64> = fit.parameters.iter().map(|q| q.value).collect();
    let steps: Vec<f64> = est
        .iter()
        .map(|&j| {
            let q = &fit.parameters[j];
            let scale = q.value.abs().max(q.std_error.unwrap_or(0.0));
            let scale = if scale > 0.0 { scale } else { 1.0 };
            f64::EPSILON.cbrt() * scale
        })
        .collect();
    let xs = data.x_slices();
    let sigma = data.sigma_or_ones();
    let mut source = None;
    let pass = Pass {
        model,
        params: &params,
        steps: &steps,
        est,
        xs: &xs,
        sigma: &sigma,
    };
    let blocks: Vec<(usize, usize)> = (0..n).step_by(BLOCK).map(|s| (s, (s + BLOCK).min(n))).collect();
    // Pass 1: V^T V and V^T W.
    let mut vtv = DMatrix::<f64>::zeros(p, p);
    let mut vtw = DMatrix::<f64>::zeros(p, p2);
    for &r in &blocks {
        let be = eval_block(&pass, r, &mut source)?;
        let nb = r.1 - r.0;
        for a in 0..p {
            let va = &be.v[a * nb..(a + 1) * nb];
            for b in 0..=a {
                let vb = &be.v[b * nb..(b + 1) * nb];
                let s: f64 = va.iter().zip(vb).map(|(x, y)| x * y).sum();
                vtv[(a, b)] += s;
                if a != b {
                    vtv[(b, a)] += s;
                }
            }
            for q in 0..p2 {
                let wq = &be.w[q * nb..(q + 1) * nb];
                vtv_add(&mut vtw[(a, q)], va, wq);
            }
        }
    }
    let vtv_inv = vtv.clone().cholesky()?.inverse();
    // Coefficients of the tangent-plane part: W_q ~ V c_q, c = (V^T V)^-1 V^T W.
    let coef = &vtv_inv * &vtw;
    // Pass 2: Gram matrix of the normal parts W_q - V c_q.
    let mut normal = DMatrix::<f64>::zeros(p2, p2);
    for &r in &blocks {
        let be = eval_block(&pass, r, &mut source)?;
        let nb = r.1 - r.0;
        let mut resid = be.w.clone();
        for q in 0..p2 {
            for a in 0..p {
                let c = coef[(a, q)];
                if c != 0.0 {
                    let va = &be.v[a * nb..(a + 1) * nb];
                    for (o, &x) in resid[q * nb..(q + 1) * nb].iter_mut().zip(va) {
                        *o -= c * x;
                    }
                }
            }
        }
        for q in 0..p2 {
            let rq = &resid[q * nb..(q + 1) * nb];
            for t in 0..=q {
                let rt = &resid[t * nb..(t + 1) * nb];
                let s: f64 = rq.iter().zip(rt).map(|(x, y)| x * y).sum();
                normal[(q, t)] += s;
                if q != t {
                    normal[(t, q)] += s;
                }
            }
        }
    }
    Some(Sums {
        vtv,
        vtw,
        normal,
        source: source.unwrap_or(SecondDerivatives::Exact),
    })
}

fn vtv_add(acc: &mut f64, a: &[f64], b: &[f64]) {
    *acc += a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
}

/// The measures computed from the sums.
struct Measures {
    intrinsic: f64,
    parameter_effects: f64,
    intrinsic_max: f64,
    parameter_effects_max: f64,
    bias: Vec<f64>,
}

/// Curvatures and bias from the sums; `None` when `V^T V` is singular.
fn measures(s: &Sums, p: usize, s2: f64) -> Option<Measures> {
    let chol = s.vtv.clone().cholesky()?;
    // V^T V = L L^T, R = L^T, U = R^-1 (upper triangular).
    let r = chol.l().transpose();
    let u = r.try_inverse()?;
    let c = &u * u.transpose();
    // Full (unpacked) index of the ordered pair (j, k).
    let pk = |j: usize, k: usize| pair_index(j, k);
    // Tangent part in orthonormal coordinates: aT_ij = U^T sum_jk U_ji U_kl V^T W_jk.
    let mut at = vec![vec![vec![0.0; p]; p]; p]; // at[i][j][component]
    for i in 0..p {
        for j in 0..p {
            let mut bt = vec![0.0; p];
            for a in 0..p {
                for b in 0..p {
                    let f = u[(a, i)] * u[(b, j)];
                    if f == 0.0 {
                        continue;
                    }
                    for (comp, o) in bt.iter_mut().enumerate() {
                        *o += f * s.vtw[(comp, pk(a, b))];
                    }
                }
            }
            for comp in 0..p {
                let mut x = 0.0;
                for (a, b) in bt.iter().enumerate() {
                    x += u[(a, comp)] * b;
                }
                at[i][j][comp] = x;
            }
        }
    }
    // Gram matrices over ordered pairs (i, j) -> i * p + j of the tangent
    // parts, <aT_ij, aT_kl>, and of the normal parts, <aN_ij, aN_kl> =
    // sum U_ai U_bj U_ck U_dl N_(ab),(cd), i.e. K^T N K with K = U (x) U.
    let pp = p * p;
    let gram_t = DMatrix::from_fn(pp, pp, |r, c| {
        let (a, b) = (&at[r / p][r % p], &at[c / p][c % p]);
        a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>()
    });
    let n_full = DMatrix::from_fn(pp, pp, |r, c| s.normal[(pk(r / p, r % p), pk(c / p, c % p))]);
    let kron = DMatrix::from_fn(pp, pp, |r, c| u[(r / p, c / p)] * u[(r % p, c % p)]);
    let gram_n = kron.transpose() * n_full * &kron;
    let rho2 = s2 * p as f64;
    let denom = (p * (p + 2)) as f64;
    let rms = |g: &DMatrix<f64>| {
        let mut sq = 0.0;
        let mut tr = 0.0;
        for i in 0..p {
            for j in 0..p {
                sq += g[(i * p + j, i * p + j)];
                tr += g[(i * p + i, j * p + j)];
            }
        }
        (rho2 * (2.0 * sq + tr) / denom).max(0.0).sqrt()
    };
    let parameter_effects = rms(&gram_t);
    let intrinsic = rms(&gram_n);
    let parameter_effects_max = (rho2 * max_quartic(&gram_t, p)).max(0.0).sqrt();
    let intrinsic_max = (rho2 * max_quartic(&gram_n, p)).max(0.0).sqrt();
    // Box's bias: b = -(s^2 / 2) C V^T d, V^T d = sum_jk C_jk V^T W_jk.
    let mut vtd = vec![0.0; p];
    for a in 0..p {
        for b in 0..p {
            let f = c[(a, b)];
            for (comp, o) in vtd.iter_mut().enumerate() {
                *o += f * s.vtw[(comp, pk(a, b))];
            }
        }
    }
    let bias = (0..p)
        .map(|j| {
            let x: f64 = (0..p).map(|k| c[(j, k)] * vtd[k]).sum();
            -0.5 * s2 * x
        })
        .collect();
    Some(Measures {
        intrinsic,
        parameter_effects,
        intrinsic_max,
        parameter_effects_max,
        bias,
    })
}

/// The largest `q(h) = sum G_(ij),(kl) h_i h_j h_k h_l` over unit vectors
/// `h`, `G` a Gram matrix over ordered pairs (so `q(h) = |A(h, h)|^2 >= 0`).
/// Shifted power iteration `h <- (G-gradient / 4 + alpha h) / |.|`, the
/// shift raised whenever a step would lower `q` (so `q` never decreases;
/// T. G. Kolda and J. R. Mayo, SIAM J. Matrix Anal. Appl. 32, 2011, from
/// memory), from the `p + p (p - 1)` starts `e_i` and `(e_i +- e_j) /
/// sqrt 2`; the best end point. A local search: the result is a lower
/// bound of the maximum that in practice reaches it (checked against a
/// dense search of directions in the tests).
fn max_quartic(g: &DMatrix<f64>, p: usize) -> f64 {
    let q_and_grad = |h: &[f64]| -> (f64, Vec<f64>) {
        let z: Vec<f64> = (0..p * p).map(|r| h[r / p] * h[r % p]).collect();
        let mut gz = vec![0.0; p * p];
        for (r, o) in gz.iter_mut().enumerate() {
            *o = (0..p * p).map(|c| g[(r, c)] * z[c]).sum();
        }
        let q: f64 = z.iter().zip(&gz).map(|(a, b)| a * b).sum();
        // grad q = 2 (Y + Y^T) h with Y the p x p reshape of G z; a quarter of it.
        let grad = (0..p)
            .map(|m| {
                0.5 * (0..p)
                    .map(|j| (gz[m * p + j] + gz[j * p + m]) * h[j])
                    .sum::<f64>()
            })
            .collect();
        (q, grad)
    };
    let normalise = |v: &mut Vec<f64>| {
        let len = v.iter().map(|x| x * x).sum::<f64>().sqrt();
        if len > 0.0 && len.is_finite() {
            v.iter_mut().for_each(|x| *x /= len);
            true
        } else {
            false
        }
    };
    let mut starts: Vec<Vec<f64>> = Vec::new();
    for i in 0..p {
        let mut e = vec![0.0; p];
        e[i] = 1.0;
        starts.push(e);
        for j in 0..i {
            for sign in [1.0, -1.0] {
                let mut e = vec![0.0; p];
                e[i] = 1.0;
                e[j] = sign;
                starts.push(e);
            }
        }
    }
    let mut best: f64 = 0.0;
    for mut h in starts {
        if !normalise(&mut h) {
            continue;
        }
        let (mut qh, mut grad) = q_and_grad(&h);
        let mut alpha = 0.0;
        for _ in 0..500 {
            let mut accepted = None;
            for _ in 0..60 {
                let mut cand: Vec<f64> = grad.iter().zip(&h).map(|(g, x)| g + alpha * x).collect();
                if normalise(&mut cand) {
                    let (qc, gc) = q_and_grad(&cand);
                    if qc >= qh {
                        accepted = Some((cand, qc, gc));
                        break;
                    }
                }
                alpha = if alpha == 0.0 {
                    qh.abs().max(f64::MIN_POSITIVE)
                } else {
                    2.0 * alpha
                };
            }
            let Some((cand, qc, gc)) = accepted else { break };
            let moved: f64 = cand
                .iter()
                .zip(&h)
                .map(|(a, b)| (a - b).abs())
                .fold(0.0, f64::max);
            h = cand;
            qh = qc;
            grad = gc;
            if moved < 1e-10 {
                break;
            }
        }
        if qh.is_finite() {
            best = best.max(qh);
        }
    }
    best
}

/// Rules whose disagreement the nonlinearity measures can explain.
const EXPLAINED: [Rule; 6] = [
    Rule::ProfileHalfWidths,
    Rule::ProfileOpenBelow,
    Rule::ProfileOpenAbove,
    Rule::SpreadRatio,
    Rule::RunawayRefits,
    Rule::PercentileExcludesEstimate,
];

/// Adds a [`Rule::Nonlinearity`] finding to each verdict that another rule
/// already doubts (a profile, spread, runaway or percentile finding that is
/// not *holds*) when a curvature exceeds its critical value or the
/// parameter's bias is marked ([`ParameterBias::is_marked`]). The finding's
/// status is always *holds*: it explains a disagreement, it never decides
/// a verdict, so no verdict's status changes.
///
/// Numbers: `intrinsic_curvature`, `parameter_effects_curvature`,
/// `critical_curvature`, and when the parameter has a bias entry `bias`,
/// `bias_percent_of_estimate`, `bias_percent_of_std_error` (each only when
/// defined). Detail: `"parameter-effects"` when the parametrisation is
/// curved beyond the critical value, else `"intrinsic"` when the surface
/// is, else `"bias"`.
pub fn cite(verdicts: &mut [Verdict], nl: &NonlinearityResult) {
    if nl.not_available.is_some() {
        return;
    }
    let (Some(intr), Some(pe), Some(crit)) = (
        nl.intrinsic_curvature,
        nl.parameter_effects_curvature,
        nl.critical_curvature,
    ) else {
        return;
    };
    for v in verdicts.iter_mut() {
        let doubted = v
            .findings
            .iter()
            .any(|f| f.status != Status::Holds && EXPLAINED.contains(&f.rule));
        if !doubted {
            continue;
        }
        let bias = nl.bias_of(&v.parameter);
        let marked_bias = bias.is_some_and(|b| b.is_marked());
        let detail = if nl.parameter_effects_exceeds() {
            "parameter-effects"
        } else if nl.intrinsic_exceeds() {
            "intrinsic"
        } else if marked_bias {
            "bias"
        } else {
            continue;
        };
        let mut numbers = std::collections::BTreeMap::new();
        numbers.insert("intrinsic_curvature".to_string(), intr);
        numbers.insert("parameter_effects_curvature".to_string(), pe);
        numbers.insert("critical_curvature".to_string(), crit);
        if let Some(b) = bias {
            numbers.insert("bias".to_string(), b.value);
            if let Some(x) = b.percent_of_estimate {
                numbers.insert("bias_percent_of_estimate".to_string(), x);
            }
            if let Some(x) = b.percent_of_std_error {
                numbers.insert("bias_percent_of_std_error".to_string(), x);
            }
        }
        v.findings.push(Finding {
            rule: Rule::Nonlinearity,
            diagnostic: Source::Fit,
            status: Status::Holds,
            numbers,
            detail: Some(detail.to_string()),
        });
    }
}
