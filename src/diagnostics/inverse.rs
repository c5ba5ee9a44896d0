//! Inverse prediction (calibration): the abscissa `x0` at which the fitted
//! model gives a measured response, `f(x0; a) = y`, with its uncertainty.
//!
//! - **Root.** `f(x; a) - y` is scanned on [`SCAN_POINTS`] points spanning
//!   the data's x range; exactly one sign change (or zero) must lie in it
//!   (none or several are reported as [`InverseProblem`]s, no value is
//!   given), and Brent's method refines it ([`super::roots::brent`]).
//! - **Uncertainty** through the implicit function `x0(a, y)`:
//!   `dx0/da = -(df/da) / (df/dx)`, `dx0/dy = 1 / (df/dx)`, so
//!   `u(x0)^2 = (g^T C g + s_y^2 / m) / (df/dx)^2` (JCGM 100:2008, 5.1.2
//!   and 5.2, with the full covariance), `m` the readings averaged into `y`
//!   and `s_y` the standard uncertainty of one reading: the study's
//!   `sigma`, else the data's sigma interpolated at `x0` (times
//!   `sqrt(chi2/dof)` when the covariance is scaled), else `s`. `df/dx` is
//!   exact: the formula is compiled a second time with the independent
//!   variable as an extra parameter. The interval is `x0 +- k u(x0)` with
//!   the fit's coverage factor.
//! - **Monte Carlo.** For every Monte Carlo trial's refitted estimate `a*`,
//!   a simulated reading `y* = y + (s_y / sqrt(m)) e`, `e` standard normal
//!   from `rng::stream(seed, Stream::Other(INVERSE_STREAM + request), trial)`,
//!   and the root of `f(x; a*) = y*` in the data range nearest to `x0`; the
//!   standard deviation and the probabilistically symmetric interval of
//!   JCGM 101:2008 of those roots. Trials without a root in range are
//!   counted (`failed`).

use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::resample::{self, ResampleResult};
use super::roots;
use crate::data::Dataset;
use crate::fit::FitResult;
use crate::model::{ModelFn, Tape};
use crate::rng::{self, Stream};

/// Points of the scan for sign changes.
pub const SCAN_POINTS: usize = 400;

/// Base of the random stream tags of the inverse-prediction readings.
pub const INVERSE_STREAM: u32 = 1_000_000;

/// One sample to read off the curve, as declared in `[[inverse]]`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InverseRequest {
    /// Name of the sample.
    pub name: String,
    /// The measured response (a mean of `readings` readings).
    pub y: f64,
    /// Readings averaged into `y`.
    pub readings: usize,
    /// Standard uncertainty of one reading, when stated.
    pub sigma: Option<f64>,
}

/// The model with its independent variable as its last parameter, for
/// exact `df/dx` (built by the study layer).
#[derive(Debug, Clone)]
pub struct InverseModel {
    /// `f(a, x)` compiled over the parameters followed by x.
    pub tape: Tape,
}

/// Where the standard uncertainty of a reading comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ReadingSigma {
    /// Stated in the study (`sigma`).
    Stated,
    /// The data's sigma interpolated at x0.
    InterpolatedSigma,
    /// The data's sigma interpolated at x0, times `sqrt(chi2/dof)`.
    ScaledSigma,
    /// No sigma: the residual standard deviation `s`.
    ResidualStd,
}

/// Why no value is given.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum InverseProblem {
    /// The fitted curve does not reach the response inside the data range.
    NoRoot,
    /// The response is reached more than once inside the data range.
    SeveralRoots,
    /// The model has no single independent variable, or is not finite.
    NotEvaluable,
}

/// The Monte Carlo distribution of x0.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InverseMonteCarlo {
    /// Trials with a root in range.
    pub used: usize,
    /// Trials without one.
    pub failed: usize,
    /// Mean of the roots.
    pub mean: f64,
    /// Standard deviation of the roots.
    pub std: f64,
    /// Probabilistically symmetric coverage interval, lower end.
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
}

/// The result of one inverse prediction.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InverseResult {
    /// Name of the sample.
    pub name: String,
    /// The response.
    pub y: f64,
    /// Readings averaged into it.
    pub readings: usize,
    /// Standard uncertainty of one reading used.
    pub reading_sigma: f64,
    /// Where it comes from.
    pub reading_sigma_source: ReadingSigma,
    /// The abscissa read off the curve (None with a problem).
    pub x: Option<f64>,
    /// Slope `df/dx` at x0.
    pub slope: Option<f64>,
    /// Standard uncertainty of x0 from the fit alone, `sqrt(g^T C g) / |df/dx|`.
    pub u_fit: Option<f64>,
    /// From the reading alone, `s_y / (sqrt(m) |df/dx|)`.
    pub u_reading: Option<f64>,
    /// Combined standard uncertainty.
    pub std_error: Option<f64>,
    /// Coverage factor of the interval.
    pub coverage_factor: f64,
    /// `x0 - k u`.
    pub lower: Option<f64>,
    /// `x0 + k u`.
    pub upper: Option<f64>,
    /// Monte Carlo distribution, when the Monte Carlo ran.
    pub monte_carlo: Option<InverseMonteCarlo>,
    /// Why no value is given.
    pub problem: Option<InverseProblem>,
}

/// Roots of `f(x; params) = y` on the scan of `[lo, hi]`: the refined
/// roots of every sign change (None when the model cannot be evaluated).
fn roots_in(model: &dyn ModelFn, params: &[f64], y: f64, lo: f64, hi: f64) -> Option<Vec<f64>> {
    let xs: Vec<f64> = (0..SCAN_POINTS)
        .map(|i| lo + (hi - lo) * i as f64 / (SCAN_POINTS - 1) as f64)
        .collect();
    let mut vals = vec![0.0; SCAN_POINTS];
    let mut scratch = Vec::new();
    model
        .eval(params, &[xs.as_slice()], &mut vals, None, &mut scratch)
        .ok()?;
    let g: Vec<f64> = vals.iter().map(|v| v - y).collect();
    let mut out = Vec::new();
    let mut one = [0.0];
    for i in 0..SCAN_POINTS - 1 {
        let (a, b) = (g[i], g[i + 1]);
        if a == 0.0 {
            out.push(xs[i]);
            continue;
        }
        if a * b < 0.0 || (b == 0.0 && i + 1 == SCAN_POINTS - 1) {
            let f = |x: f64| {
                let col = [x];
                model
                    .eval(params, &[&col[..]], &mut one, None, &mut scratch)
                    .ok()
                    .map(|_| one[0] - y)
            };
            let tol = 1e-14 * (hi - lo).abs().max(xs[i].abs());
            if let Ok(r) = roots::brent(f, xs[i], xs[i + 1], a, b, tol, 200) {
                out.push(r.x);
            }
        }
    }
    Some(out)
}

/// Everything the inverse predictions read.
pub struct InverseInputs<'a> {
    /// The model.
    pub model: &'a dyn ModelFn,
    /// The model with x as its last parameter.
    pub inverse_model: &'a InverseModel,
    /// The data (all points).
    pub data: &'a Dataset,
    /// The audited fit.
    pub fit: &'a FitResult,
    /// Monte Carlo, when run.
    pub monte_carlo: Option<&'a ResampleResult>,
    /// Seed of the random streams.
    pub seed: u64,
}

/// Evaluates every request.
pub fn evaluate(requests: &[InverseRequest], inputs: &InverseInputs) -> Vec<InverseResult> {
    requests
        .iter()
        .enumerate()
        .map(|(i, r)| one(i, r, inputs))
        .collect()
}

fn one(index: usize, r: &InverseRequest, inp: &InverseInputs) -> InverseResult {
    let fit = inp.fit;
    let k = fit.coverage_factor;
    let m = r.readings.max(1) as f64;
    let mut out = InverseResult {
        name: r.name.clone(),
        y: r.y,
        readings: r.readings,
        reading_sigma: f64::NAN,
        reading_sigma_source: ReadingSigma::Stated,
        x: None,
        slope: None,
        u_fit: None,
        u_reading: None,
        std_error: None,
        coverage_factor: k,
        lower: None,
        upper: None,
        monte_carlo: None,
        problem: None,
    };
    let Some(col) = inp.data.x.first().filter(|_| inp.data.x.len() == 1) else {
        out.problem = Some(InverseProblem::NotEvaluable);
        return out;
    };
    let lo = col.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = col.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let params: Vec<f64> = fit.parameters.iter().map(|p| p.value).collect();
    let roots = match roots_in(inp.model, &params, r.y, lo, hi) {
        Some(v) => v,
        None => {
            out.problem = Some(InverseProblem::NotEvaluable);
            return out;
        }
    };
    let x0 = match roots.as_slice() {
        [] => {
            out.problem = Some(InverseProblem::NoRoot);
            return out;
        }
        [x] => *x,
        _ => {
            out.problem = Some(InverseProblem::SeveralRoots);
            return out;
        }
    };
    out.x = Some(x0);
    let (s_y, source) = match r.sigma {
        Some(s) => (s, ReadingSigma::Stated),
        None => match crate::diagnostics::bands::interpolated_sigma(inp.data, &[x0]) {
            Some(s) if fit.covariance_scaled => (s[0] * fit.reduced_chi2.sqrt(), ReadingSigma::ScaledSigma),
            Some(s) => (s[0], ReadingSigma::InterpolatedSigma),
            None => (fit.reduced_chi2.sqrt(), ReadingSigma::ResidualStd),
        },
    };
    out.reading_sigma = s_y;
    out.reading_sigma_source = source;
    let mut point = params.clone();
    point.push(x0);
    let (_, grad) = inp.inverse_model.tape.eval_point(&point, &[]);
    let np = params.len();
    let slope = grad.get(np).copied().unwrap_or(f64::NAN);
    out.slope = Some(slope);
    let c = &fit.covariance;
    let mut var_f = 0.0;
    for a in 0..np {
        for b in 0..np {
            let cab = c.get(a).and_then(|row| row.get(b)).copied().unwrap_or(f64::NAN);
            var_f += grad[a] * cab * grad[b];
        }
    }
    if slope.is_finite() && slope != 0.0 && var_f.is_finite() {
        let u_fit = var_f.max(0.0).sqrt() / slope.abs();
        let u_reading = s_y / (m.sqrt() * slope.abs());
        let u = u_fit.hypot(u_reading);
        out.u_fit = Some(u_fit);
        out.u_reading = Some(u_reading);
        out.std_error = Some(u);
        out.lower = Some(x0 - k * u);
        out.upper = Some(x0 + k * u);
    }
    out.monte_carlo = inp.monte_carlo.and_then(|rs| {
        let rows = &rs.estimates;
        if rows.len() < 2 || rows.iter().any(|a| a.len() != np) {
            return None;
        }
        let tag = INVERSE_STREAM.saturating_add(index as u32);
        let sd_mean = s_y / m.sqrt();
        let found: Vec<Option<f64>> = rows
            .par_iter()
            .enumerate()
            .map(|(t, a)| {
                let mut g = rng::stream(inp.seed, Stream::Other(tag), t as u64);
                let e: f64 = StandardNormal.sample(&mut g);
                let ystar = r.y + sd_mean * e;
                let roots = roots_in(inp.model, a, ystar, lo, hi)?;
                roots
                    .into_iter()
                    .min_by(|p, q| (p - x0).abs().total_cmp(&(q - x0).abs()))
            })
            .collect();
        let mut ok: Vec<f64> = found.iter().flatten().copied().collect();
        let failed = found.len() - ok.len();
        let (mean, std) = resample::mean_std(&ok);
        ok.sort_by(f64::total_cmp);
        let (lower, upper) = resample::symmetric_interval(&ok, rs.level);
        Some(InverseMonteCarlo {
            used: ok.len(),
            failed,
            mean,
            std,
            lower,
            upper,
        })
    });
    out
}
