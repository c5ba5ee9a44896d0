//! Bootstrap resampling (case, residual, wild) with refits from the base fit.
//!
//! Replicate `k` draws only from `rng::stream(seed, Stream::Bootstrap, k)`
//! and is refitted through [`crate::fit::Refitter`] from the base-fit
//! values with the study's fixed parameters held, so results are the same
//! for any thread count. With `f_i` the fitted values, `r_i = (y_i - f_i) /
//! sigma_i` the weighted residuals and `h_ii` the leverages of the base fit:
//!
//! - **case**: `n` points `(x, y, sigma)` drawn with replacement;
//! - **residual** (Davison & Hinkley 1997, "Bootstrap Methods and their
//!   Application", sec. 6.2.3, eq. 6.9, extended to weights):
//!   `y*_i = f_i + sigma_i * e*_i`, the `e*_i` drawn with replacement from
//!   the leverage-adjusted residuals `r_i / sqrt(1 - h_ii)` re-centred on
//!   their mean;
//! - **wild** (Wu 1986, Ann. Stat. 14:1261): `y*_i = f_i + sigma_i * r_i /
//!   sqrt(1 - h_ii) * v_i`, with `v_i` Rademacher (+-1) or Mammen's two-point
//!   multipliers (`-(sqrt 5 - 1)/2` with probability `(sqrt 5 + 1)/(2 sqrt 5)`,
//!   else `(sqrt 5 + 1)/2`; mean 0, variance 1, third moment 1).
//!
//! - **parametric Poisson** (a Poisson fit's residual scheme): every count
//!   drawn from the Poisson law of mean `f_i`, the fitted value (Davison &
//!   Hinkley 1997, sec. 2.2, the parametric bootstrap). The case scheme is
//!   kept as it is; the wild scheme does not apply to counts and is refused.
//!
//! With errors in x (`data.sigma_x`), the residual and wild schemes move x
//! as well: `x*_i = x_i + sigma_x,i * e'*_i`, with `e'*_i` a second,
//! independent draw from the pool (residual) or the adjusted residual
//! times a second multiplier (wild); the weighted residuals are then those
//! of the effective variance. The case scheme carries each point's x, y
//! and both uncertainties together.
//! With several data sets (a study of `[[datasets]]`, see
//! [`crate::data::Dataset::groups`]) the case and residual schemes are
//! stratified: each data set's points are drawn from that data set only,
//! and each point's residual from its own data set's pool (re-centred on
//! that data set's mean), so a resample keeps every data set's size and
//! never mixes them ([`case_draw`], [`strata`]).
//!
//! A point with leverage 1 (to 1e-10) has no residual information: it is
//! left out of the residual pool and gets a zero wild residual. Without
//! sigma in the data every sigma is 1 (the residuals are then raw).

use rand::Rng;

use super::monte_carlo::poisson_draw;
use super::resample::{self, Assembly, Outcome, ResampleResult};
use super::{Fitted, Progress};
use crate::fit::Likelihood;
use crate::rng::{self, Stream};
use crate::settings::{BootstrapScheme, BootstrapSettings, WildWeights};

/// Leverages this close to 1 count as 1 (no residual information).
pub const LEVERAGE_ONE: f64 = 1e-10;

/// Runs the bootstrap with the study's settings, BCa included.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ResampleResult {
    run_with(ctx, &ctx.settings.bootstrap, true, progress)
}

/// Runs the bootstrap with the given settings; `bca = false` skips the
/// linearised jackknife (no BCa interval).
pub fn run_with(
    ctx: &Fitted,
    settings: &BootstrapSettings,
    bca: bool,
    progress: &dyn Progress,
) -> ResampleResult {
    let b = settings.replicates;
    let name = recorded_scheme(ctx, settings.scheme);
    progress.start(&format!("bootstrap ({name})"), b as u64);
    let outcomes = replicates(ctx, settings, 0..b, progress);
    progress.finish();
    summarise(ctx, settings, bca, outcomes)
}

/// The pure summary step: the result from the outcomes of every replicate
/// `0..settings.replicates` in replicate order (from one run, or joined
/// from the slices of several shards: the same outcomes give the same
/// result bit for bit). `bca` adds the linearised jackknife (no refits).
pub fn summarise(
    ctx: &Fitted,
    settings: &BootstrapSettings,
    bca: bool,
    outcomes: Vec<Outcome>,
) -> ResampleResult {
    let b = settings.replicates;
    let name = recorded_scheme(ctx, settings.scheme);
    let jackknife = bca.then(|| super::influence::linearised_jackknife(ctx));
    resample::assemble(
        ctx,
        Assembly {
            scheme: name.to_string(),
            replicates: b,
            outcomes,
            jackknife,
            adaptive_stable: None,
            noise_scale: None,
            scatter_dof: (!ctx.fit.covariance_scaled && name != PARAMETRIC_POISSON).then_some(ctx.fit.dof),
            jcgm: false,
        },
    )
}

/// The scheme's name as recorded in the result.
pub fn scheme_name(scheme: BootstrapScheme) -> &'static str {
    match scheme {
        BootstrapScheme::Case => "case",
        BootstrapScheme::Residual => "residual",
        BootstrapScheme::Wild => "wild",
    }
}

/// Name of the parametric Poisson scheme that the residual scheme becomes
/// in a Poisson fit.
pub const PARAMETRIC_POISSON: &str = "parametric-poisson";

/// The scheme as recorded in the result: for a Poisson fit the residual
/// scheme is the parametric Poisson bootstrap (counts drawn at the fitted
/// means; residuals of counts are neither exchangeable nor symmetric), the
/// case scheme stays case resampling, and the wild scheme is refused
/// (`wild-not-for-counts`; the study loader rejects it up front).
pub fn recorded_scheme(ctx: &Fitted, scheme: BootstrapScheme) -> &'static str {
    match (ctx.problem.options.likelihood, scheme) {
        (Likelihood::Poisson, BootstrapScheme::Residual) => PARAMETRIC_POISSON,
        _ => scheme_name(scheme),
    }
}

/// Leverage-adjusted weighted residuals `r_i / sqrt(1 - h_ii)` of the base
/// fit (`None` for points of leverage 1).
pub fn adjusted_residuals(ctx: &Fitted) -> Vec<Option<f64>> {
    let fit = ctx.fit;
    (0..ctx.data.len())
        .map(|i| {
            let r = fit.residuals.get(i).copied().unwrap_or(0.0);
            let h = fit.leverage.get(i).copied().unwrap_or(0.0);
            let one_minus = 1.0 - h;
            (one_minus > LEVERAGE_ONE).then(|| r / one_minus.sqrt())
        })
        .collect()
}

/// The residual bootstrap's pool: adjusted residuals re-centred on their mean.
pub fn residual_pool(ctx: &Fitted) -> Vec<f64> {
    let adj: Vec<f64> = adjusted_residuals(ctx).into_iter().flatten().collect();
    let mean = if adj.is_empty() {
        0.0
    } else {
        adj.iter().sum::<f64>() / adj.len() as f64
    };
    adj.iter().map(|r| r - mean).collect()
}

/// The strata of the case and residual bootstrap: the points of each data
/// set of a joint study (`0..n` for one data set).
pub fn strata(data: &crate::data::Dataset) -> Vec<std::ops::Range<usize>> {
    if data.groups.is_empty() {
        std::iter::once(0..data.len()).collect()
    } else {
        data.groups.iter().map(|g| g.range()).collect()
    }
}

/// The point that case-bootstrap position `o` draws: uniformly from the
/// stratum (data set) holding `o`, so a resample never mixes data sets and
/// keeps each data set's number of points.
pub fn case_draw<R: Rng>(strata: &[std::ops::Range<usize>], o: usize, rng: &mut R) -> usize {
    let r = strata
        .iter()
        .find(|r| r.contains(&o))
        .cloned()
        .unwrap_or(0..strata.last().map_or(0, |r| r.end));
    rng.gen_range(r)
}

/// The points case-bootstrap replicate `k` draws, in position order (the
/// draws [`replicates`] makes, listed for tests and records).
pub fn case_indices(data: &crate::data::Dataset, seed: u64, k: usize) -> Vec<usize> {
    let strata = strata(data);
    let mut rng = rng::stream(seed, Stream::Bootstrap, k as u64);
    (0..data.len()).map(|o| case_draw(&strata, o, &mut rng)).collect()
}

/// The residual pool of each stratum: its own adjusted residuals re-centred
/// on their mean; a data set without residual information (every point of
/// leverage 1) draws from `all`, the pool of all data sets.
fn stratum_pools(ctx: &Fitted, strata: &[std::ops::Range<usize>], all: &[f64]) -> Vec<Vec<f64>> {
    if strata.len() <= 1 {
        return vec![all.to_vec()];
    }
    let adjusted = adjusted_residuals(ctx);
    strata
        .iter()
        .map(|r| {
            let own: Vec<f64> = adjusted[r.clone()].iter().flatten().copied().collect();
            if own.is_empty() {
                return all.to_vec();
            }
            let mean = own.iter().sum::<f64>() / own.len() as f64;
            own.iter().map(|v| v - mean).collect()
        })
        .collect()
}

/// Mammen's two-point multiplier: `-(sqrt5 - 1)/2` with probability
/// `(sqrt5 + 1)/(2 sqrt5)`, otherwise `(sqrt5 + 1)/2`.
pub fn mammen<R: Rng>(rng: &mut R) -> f64 {
    let s5 = 5f64.sqrt();
    if rng.gen::<f64>() < (s5 + 1.0) / (2.0 * s5) {
        -(s5 - 1.0) / 2.0
    } else {
        (s5 + 1.0) / 2.0
    }
}

/// Refits bootstrap replicates `indices` (outcomes in replicate order).
/// The building block of [`run_with`], public for benchmarks.
pub fn replicates(
    ctx: &Fitted,
    settings: &BootstrapSettings,
    indices: std::ops::Range<usize>,
    progress: &dyn Progress,
) -> Vec<Outcome> {
    let data = ctx.data;
    let n = data.len();
    let seed = ctx.settings.seed;
    let sigma = data.sigma_or_ones();
    let fitted = ctx.fitted_values();
    let strata = strata(data);
    match settings.scheme {
        BootstrapScheme::Case => resample::refit_replicates(ctx, indices, n, true, progress, |k, s| {
            let mut rng = rng::stream(seed, Stream::Bootstrap, k as u64);
            for o in 0..n {
                let i = case_draw(&strata, o, &mut rng);
                for (c, col) in data.x.iter().enumerate() {
                    s.x[c][o] = col[i];
                }
                s.y[o] = data.y[i];
                s.sigma[o] = sigma[i];
                if let Some(sx) = &data.sigma_x {
                    s.sigma_x[o] = sx[i];
                }
            }
        }),
        BootstrapScheme::Wild if ctx.problem.options.likelihood == Likelihood::Poisson => {
            indices.map(|_| Outcome::Failed("wild-not-for-counts")).collect()
        }
        BootstrapScheme::Residual if ctx.problem.options.likelihood == Likelihood::Poisson => {
            resample::refit_replicates(ctx, indices, n, false, progress, |k, s| {
                let mut rng = rng::stream(seed, Stream::Bootstrap, k as u64);
                for (y, f) in s.y.iter_mut().zip(&fitted) {
                    *y = poisson_draw(&mut rng, *f);
                }
                s.sigma.copy_from_slice(&sigma);
            })
        }
        BootstrapScheme::Residual => {
            let pool = residual_pool(ctx);
            if pool.is_empty() {
                // Every point has leverage 1 (as many parameters as points):
                // there is nothing to resample, and every replicate says so.
                return indices.map(|_| Outcome::Failed("no-residuals")).collect();
            }
            // Several data sets: each resamples its own residuals.
            let pools = stratum_pools(ctx, &strata, &pool);
            resample::refit_replicates(ctx, indices, n, data.sigma_x.is_some(), progress, |k, s| {
                let mut rng = rng::stream(seed, Stream::Bootstrap, k as u64);
                let mut stratum = 0;
                for (o, (y, (f, sg))) in s.y.iter_mut().zip(fitted.iter().zip(&sigma)).enumerate() {
                    while o >= strata[stratum].end {
                        stratum += 1;
                    }
                    let p = &pools[stratum];
                    let e = p[rng.gen_range(0..p.len())];
                    *y = f + sg * e;
                    s.sigma[o] = *sg;
                }
                if let Some(sx) = &data.sigma_x {
                    // Errors in x: x moves by sigma_x times a second,
                    // independent draw from the same pool.
                    for ((xo, x0), sxi) in s.x[0].iter_mut().zip(&data.x[0]).zip(sx) {
                        *xo = x0 + sxi * pool[rng.gen_range(0..pool.len())];
                    }
                }
            })
        }
        BootstrapScheme::Wild => {
            // sigma_i r_i / sqrt(1 - h_ii), zero for points of leverage 1.
            let amp: Vec<f64> = adjusted_residuals(ctx)
                .into_iter()
                .zip(&sigma)
                .map(|(r, sg)| sg * r.unwrap_or(0.0))
                .collect();
            let weights = settings.weights;
            let adjusted: Vec<f64> = adjusted_residuals(ctx)
                .into_iter()
                .map(|r| r.unwrap_or(0.0))
                .collect();
            resample::refit_replicates(ctx, indices, n, data.sigma_x.is_some(), progress, |k, s| {
                let mut rng = rng::stream(seed, Stream::Bootstrap, k as u64);
                let draw = |rng: &mut rand_chacha::ChaCha12Rng| match weights {
                    WildWeights::Rademacher => {
                        if rng.gen::<bool>() {
                            1.0
                        } else {
                            -1.0
                        }
                    }
                    WildWeights::Mammen => mammen(rng),
                };
                for (y, (f, a)) in s.y.iter_mut().zip(fitted.iter().zip(&amp)) {
                    *y = f + a * draw(&mut rng);
                }
                s.sigma.copy_from_slice(&sigma);
                if let Some(sx) = &data.sigma_x {
                    // Errors in x: x moves by sigma_x times the adjusted
                    // residual and a second, independent multiplier.
                    for (((xo, x0), sxi), r) in s.x[0].iter_mut().zip(&data.x[0]).zip(sx).zip(&adjusted) {
                        *xo = x0 + sxi * r * draw(&mut rng);
                    }
                }
            })
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mammen_moments() {
        // Mammen (1993, Ann. Stat. 21:255): E v = 0, E v^2 = 1, E v^3 = 1.
        // Checked exactly on the two-point law (identity), then by sampling.
        let s5 = 5f64.sqrt();
        let (p, lo, hi) = ((s5 + 1.0) / (2.0 * s5), -(s5 - 1.0) / 2.0, (s5 + 1.0) / 2.0);
        let m = |k: i32| p * lo.powi(k) + (1.0 - p) * hi.powi(k);
        assert!(m(1).abs() < 1e-15 && (m(2) - 1.0).abs() < 1e-15 && (m(3) - 1.0).abs() < 1e-14);
        let mut rng = rng::stream(3, Stream::Other(77), 0);
        let n = 200_000;
        let mean = (0..n).map(|_| mammen(&mut rng)).sum::<f64>() / n as f64;
        // SD of the mean is 1/sqrt(n) = 0.0022; allow 4 of them.
        assert!(mean.abs() < 4.0 / (n as f64).sqrt(), "{mean}");
    }
}
