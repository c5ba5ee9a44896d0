//! Monte Carlo refits from synthetic noise around the base fit.
//!
//! With errors in x (`data.sigma_x`) every trial also moves each x off
//! its observed value by `s * sigma_x,i * e'_i` (independent draws of the
//! same law), so the refit sees noise in both coordinates.
//!
//! For a Poisson fit (`likelihood = "poisson"`) trial `k` draws each count
//! from the Poisson law of mean `mu_i = f(x_i; a_hat)` instead (scheme
//! `poisson`, noise scale 1). Otherwise trial `k` simulates
//! `y*_i = f(x_i; a_hat) + s * sigma_i * e_i` from
//! `rng::stream(seed, Stream::MonteCarlo, k)` and refits it through
//! [`crate::fit::Refitter`] from `a_hat`. The noise `e_i` is standard
//! normal, or Student-t with `nu = student_t_dof` degrees of freedom scaled
//! to unit variance (`t * sqrt((nu - 2) / nu)`).
//!
//! **Noise scale `s`** (the scaled-covariance convention): the simulation
//! uses the noise the analytic covariance assumes. When the data have no
//! sigma (every sigma is 1), or the fit scaled its covariance by chi2/dof,
//! `s = sqrt(chi2 / dof)` of the base fit, so each point's standard
//! uncertainty is estimated from the scatter about the fit; otherwise the
//! sigma are taken as given and `s = 1`. When chi2/dof is not a positive
//! finite number (no degrees of freedom) `s = 1`. The factor is recorded
//! in [`ResampleResult::noise_scale`].
//!
//! **Adaptive trials** (JCGM 101:2008, clause 7.9): trials run in batches
//! of `h = ceil(100 / (1 - level))` (at least 100; the minimum clause 7.2.2
//! asks of a coverage interval). After each batch (from the second on),
//! for every free parameter the standard deviation `u_r` of each batch's
//! trials and of all trials `u` are formed; the computation is stable when
//! `2 * s_u <= adaptive_tolerance * u` for every free parameter, where
//! `s_u = sd(u_1..u_B) / sqrt(B)` is the standard deviation of the mean of
//! the `B` batch values. It stops there or at `replicates` trials, whichever
//! comes first, and records [`ResampleResult::adaptive_stable`]. Only the
//! standard uncertainties are checked (not the means or interval ends).
//!
//! **Intervals** are those of JCGM 101:2008 (5.3, computed as in 7.7):
//! the probabilistically symmetric interval (`lower`, `upper`) and the
//! shortest coverage interval (`shortest_lower`, `shortest_upper`). BCa
//! belongs to the bootstrap: the Monte Carlo runs no jackknife.

use rand::Rng;
use rand_distr::{Distribution, Poisson, StandardNormal, StudentT};

use super::resample::{self, Assembly, Outcome, ResampleResult};
use super::{Fitted, Progress};
use crate::fit::Likelihood;
use crate::rng::{self, Stream};
use crate::settings::MonteCarloSettings;

/// Smallest adaptive batch (JCGM 101:2008, 7.2.2: at least 100/(1-p) trials).
pub const MIN_BATCH: usize = 100;

/// Runs the Monte Carlo refits with the study's settings.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ResampleResult {
    run_with(ctx, &ctx.settings.monte_carlo, progress)
}

/// The noise factor `s` (see the module documentation).
pub fn noise_scale(ctx: &Fitted) -> f64 {
    if ctx.problem.options.likelihood == Likelihood::Poisson {
        // Counts are drawn from the Poisson law at the fitted mean.
        return 1.0;
    }
    if ctx.data.has_sigma() && !ctx.fit.covariance_scaled {
        return 1.0;
    }
    let r = ctx.fit.reduced_chi2;
    if r.is_finite() && r > 0.0 {
        r.sqrt()
    } else {
        1.0
    }
}

/// The adaptive batch size at confidence level `level`.
pub fn batch_size(level: f64) -> usize {
    let h = (100.0 / (1.0 - level)).ceil();
    if h.is_finite() {
        (h as usize).max(MIN_BATCH)
    } else {
        MIN_BATCH
    }
}

/// Runs the Monte Carlo refits with the given settings.
pub fn run_with(ctx: &Fitted, settings: &MonteCarloSettings, progress: &dyn Progress) -> ResampleResult {
    let outcomes = outcomes(ctx, settings, 0..settings.replicates, progress);
    summarise(ctx, settings, outcomes)
}

/// The scheme's name as recorded in the result: `poisson` for a fit of
/// counts, else that of the noise law.
pub fn scheme_name(ctx: &Fitted, settings: &MonteCarloSettings) -> &'static str {
    noise_name(ctx, settings.student_t_dof)
}

/// The name of the noise [`Noise::new`] draws for `ctx` with
/// `student_t_dof`: `poisson` for a fit of counts (whatever the Student-t
/// setting), `student-t` when degrees of freedom are given, else `normal`.
/// The Monte Carlo and the coverage simulation record it.
pub fn noise_name(ctx: &Fitted, student_t_dof: Option<f64>) -> &'static str {
    if ctx.problem.options.likelihood == Likelihood::Poisson {
        "poisson"
    } else if student_t_dof.is_some() {
        "student-t"
    } else {
        "normal"
    }
}

/// The outcomes of trials `indices`. For the whole range `0..replicates`
/// of an adaptive run the trials are refitted batch by batch and stop at
/// the first batch after which the uncertainties are stable; for a slice
/// (a shard) every trial of the slice is refitted, and [`summarise`]
/// applies the same stopping rule to the joined outcomes, so that the
/// result does not depend on how the trials were split.
pub fn outcomes(
    ctx: &Fitted,
    settings: &MonteCarloSettings,
    indices: std::ops::Range<usize>,
    progress: &dyn Progress,
) -> Vec<Outcome> {
    let max = settings.replicates;
    progress.start(
        &format!("Monte Carlo ({})", scheme_name(ctx, settings)),
        indices.len() as u64,
    );
    let out = if settings.adaptive && indices == (0..max) {
        adaptive(ctx, settings, progress)
    } else {
        trials(ctx, settings, indices, progress)
    };
    progress.finish();
    out
}

/// The pure summary step: the result from the outcomes of trials `0..M`
/// in trial order. When adaptive, the stopping rule is applied here
/// ([`adaptive_cut`]): only the trials up to the first stable batch are
/// kept, whether the outcomes stop there (one run) or go on to the cap
/// (joined shards).
pub fn summarise(ctx: &Fitted, settings: &MonteCarloSettings, mut outcomes: Vec<Outcome>) -> ResampleResult {
    let max = settings.replicates;
    let adaptive_stable = if settings.adaptive {
        let (keep, stable) = adaptive_cut(
            &outcomes,
            batch_size(ctx.settings.level),
            &ctx.free_mask(),
            settings.adaptive_tolerance,
        );
        outcomes.truncate(keep);
        Some(stable)
    } else {
        None
    };
    resample::assemble(
        ctx,
        Assembly {
            scheme: scheme_name(ctx, settings).to_string(),
            replicates: max,
            outcomes,
            jackknife: None,
            adaptive_stable,
            noise_scale: Some(noise_scale(ctx)),
            scatter_dof: None,
            jcgm: true,
        },
    )
}

/// The adaptive stopping rule on trial outcomes in trial order, batches
/// of `h`: `(trials kept, stable)`, the kept trials ending with the first
/// full batch (from the second on) after which [`is_stable`] holds, or all
/// of them, unstable, when none does.
pub fn adaptive_cut(outcomes: &[Outcome], h: usize, free: &[bool], tolerance: f64) -> (usize, bool) {
    let mut batch_u: Vec<Vec<f64>> = Vec::new();
    let mut end = h;
    while h > 0 && end <= outcomes.len() {
        batch_u.push(batch_std(&outcomes[end - h..end], free.len()));
        if batch_u.len() >= 2 && is_stable(&outcomes[..end], &batch_u, free, tolerance) {
            return (end, true);
        }
        end += h;
    }
    (outcomes.len(), false)
}

/// Per parameter, the standard deviation of one batch's successful trials.
fn batch_std(batch: &[Outcome], n_params: usize) -> Vec<f64> {
    let rows: Vec<&Vec<f64>> = batch
        .iter()
        .filter_map(|o| match o {
            Outcome::Ok(p) => Some(p),
            Outcome::Failed(_) => None,
        })
        .collect();
    (0..n_params)
        .map(|j| resample::mean_std(&rows.iter().map(|r| r[j]).collect::<Vec<_>>()).1)
        .collect()
}

/// Batches until stable or at the cap.
fn adaptive(ctx: &Fitted, settings: &MonteCarloSettings, progress: &dyn Progress) -> Vec<Outcome> {
    let max = settings.replicates;
    let h = batch_size(ctx.settings.level);
    let free = ctx.free_mask();
    let mut outcomes: Vec<Outcome> = Vec::with_capacity(max);
    // Per full batch, per parameter: the batch's standard deviation.
    let mut batch_u: Vec<Vec<f64>> = Vec::new();
    while outcomes.len() < max {
        let start = outcomes.len();
        let end = (start + h).min(max);
        let batch = trials(ctx, settings, start..end, progress);
        let full = end - start == h;
        if full {
            batch_u.push(batch_std(&batch, free.len()));
        }
        outcomes.extend(batch);
        if full && batch_u.len() >= 2 && is_stable(&outcomes, &batch_u, &free, settings.adaptive_tolerance) {
            break;
        }
    }
    if outcomes.len() < max {
        // Stopped early: the bar still owes the trials not run.
        progress.advance((max - outcomes.len()) as u64);
    }
    outcomes
}

/// JCGM 101:2008, 7.9.4 applied to the standard uncertainties only.
pub fn is_stable(outcomes: &[Outcome], batch_u: &[Vec<f64>], free: &[bool], tolerance: f64) -> bool {
    let b = batch_u.len() as f64;
    (0..free.len()).filter(|&j| free[j]).all(|j| {
        let all: Vec<f64> = outcomes
            .iter()
            .filter_map(|o| match o {
                Outcome::Ok(p) => Some(p[j]),
                Outcome::Failed(_) => None,
            })
            .collect();
        let u = resample::mean_std(&all).1;
        let (_, sd_batches) = resample::mean_std(&batch_u.iter().map(|r| r[j]).collect::<Vec<_>>());
        if u == 0.0 {
            return true;
        }
        let s_u = sd_batches / b.sqrt();
        s_u.is_finite() && u.is_finite() && 2.0 * s_u <= tolerance * u
    })
}

/// Refits Monte Carlo trials `indices` (outcomes in trial order). The
/// building block of [`run_with`], public for benchmarks.
pub fn trials(
    ctx: &Fitted,
    settings: &MonteCarloSettings,
    indices: std::ops::Range<usize>,
    progress: &dyn Progress,
) -> Vec<Outcome> {
    let n = ctx.data.len();
    let seed = ctx.settings.seed;
    let noise = Noise::new(ctx, settings.student_t_dof);
    let given_sigma = ctx.data.sigma_or_ones();
    resample::refit_replicates(ctx, indices, n, noise.moves_x(), progress, |k, smp| {
        let mut rng = rng::stream(seed, Stream::MonteCarlo, k as u64);
        noise.draw(&mut rng, &mut smp.y);
        smp.sigma.copy_from_slice(&given_sigma);
        if noise.moves_x() {
            noise.draw_x(&mut rng, &mut smp.x[0]);
        }
    })
}

/// The simulated error model: `y*_i = f(x_i; a_hat) + s * sigma_i * e_i`
/// with `e_i` standard normal or unit-variance Student-t (module
/// documentation). Shared by the Monte Carlo and the coverage simulation.
pub struct Noise {
    fitted: Vec<f64>,
    sigma: Vec<f64>,
    t: Option<(StudentT<f64>, f64)>,
    /// Poisson counts at the fitted means instead of additive noise.
    poisson: bool,
    /// Errors in x: the scaled sigma_x and the observed x (one column).
    sigma_x: Option<Vec<f64>>,
    x0: Vec<f64>,
}

impl Noise {
    /// The error model of `ctx` (noise scale [`noise_scale`]), with
    /// Student-t noise of `student_t_dof` degrees of freedom when given.
    pub fn new(ctx: &Fitted, student_t_dof: Option<f64>) -> Noise {
        let s = noise_scale(ctx);
        Noise {
            fitted: ctx.fitted_values(),
            sigma: ctx.data.sigma_or_ones().iter().map(|v| v * s).collect(),
            t: student_t_dof.and_then(|nu| StudentT::new(nu).ok().map(|d| (d, ((nu - 2.0) / nu).sqrt()))),
            poisson: ctx.problem.options.likelihood == Likelihood::Poisson,
            sigma_x: ctx
                .data
                .sigma_x
                .as_ref()
                .map(|sx| sx.iter().map(|v| v * s).collect()),
            x0: match ctx.data.sigma_x {
                Some(_) => ctx.data.x.first().cloned().unwrap_or_default(),
                None => Vec::new(),
            },
        }
    }

    /// Writes one simulated response per point into `y`, drawing from `rng`.
    pub fn draw<R: Rng>(&self, rng: &mut R, y: &mut [f64]) {
        if self.poisson {
            for (y, f) in y.iter_mut().zip(&self.fitted) {
                *y = poisson_draw(rng, *f);
            }
            return;
        }
        for (y, (f, sg)) in y.iter_mut().zip(self.fitted.iter().zip(&self.sigma)) {
            let e: f64 = match &self.t {
                Some((d, scale)) => d.sample(rng) * scale,
                None => rng.sample(StandardNormal),
            };
            *y = f + sg * e;
        }
    }

    /// Whether the error model moves x too (errors in x).
    pub fn moves_x(&self) -> bool {
        self.sigma_x.is_some()
    }

    /// Errors in x: moves the observed x off the true x_i (the curve value
    /// stays that at the true x), drawing from `rng` after the responses.
    /// Does nothing without `sigma_x`.
    pub fn draw_x<R: Rng>(&self, rng: &mut R, x: &mut [f64]) {
        if let Some(sx) = &self.sigma_x {
            for ((xo, x0), sxi) in x.iter_mut().zip(&self.x0).zip(sx) {
                let e: f64 = match &self.t {
                    Some((d, scale)) => d.sample(rng) * scale,
                    None => rng.sample(StandardNormal),
                };
                *xo = x0 + sxi * e;
            }
        }
    }
}

/// One Poisson count of mean `mu` (NaN when `mu` is not a positive finite
/// number, so that the replicate fails visibly).
pub fn poisson_draw<R: Rng>(rng: &mut R, mu: f64) -> f64 {
    match Poisson::new(mu) {
        Ok(d) => d.sample(rng),
        Err(_) => f64::NAN,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn batch_size_follows_jcgm_minimum() {
        // JCGM 101:2008, 7.2.2: M >= 100 / (1 - p); p = 0.95 -> 2000 (clause text).
        assert_eq!(batch_size(0.95), 2000);
        assert_eq!(batch_size(0.6827), 316);
        assert_eq!(batch_size(0.1), 112);
    }

    #[test]
    fn stability_rule() {
        // Batch SDs 1.0, 1.02, 0.98 -> s_u = 0.02/sqrt(3) = 0.01155; with u = 1,
        // 2 s_u = 0.0231: stable at tolerance 0.03, not at 0.02.
        let outcomes: Vec<Outcome> = [-1.0, 1.0, -1.0, 1.0]
            .iter()
            .map(|v| Outcome::Ok(vec![*v * (3.0f64 / 4.0).sqrt(), 0.0]))
            .collect();
        let u_all = resample::mean_std(&[-1.0, 1.0, -1.0, 1.0].map(|v: f64| v * 0.75f64.sqrt())).1;
        assert!((u_all - 1.0).abs() < 1e-12);
        let batch_u = vec![vec![1.0, 0.0], vec![1.02, 0.0], vec![0.98, 0.0]];
        let free = [true, false];
        assert!(is_stable(&outcomes, &batch_u, &free, 0.03));
        assert!(!is_stable(&outcomes, &batch_u, &free, 0.02));
    }
}
