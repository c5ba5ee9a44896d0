//! The display reduction of a large data set: which points the record
//! (`results.json`) and the figures keep when a study has more points than
//! a figure has pixels.
//!
//! Every diagnostic runs on all the data; only what is written and drawn
//! is reduced. A reduction must never hide an outlier, so it is built from
//! per-column extremes rather than from a sample: the points are split
//! into [`BINS`] consecutive slices along the first independent variable
//! (in point order when there are several), and each slice keeps the
//! points of smallest and largest response and of smallest and largest
//! normalised residual (at most four per slice, fewer when they coincide).
//! Every point that is an extreme of its slice in y or in the residual is
//! therefore drawn, the envelope of the data and of the residuals is exact
//! at the resolution of a figure, and the record stays below
//! `4 * BINS` points whatever `n` is.
//!
//! The Q-Q plot needs the distribution of all residuals, which a subset
//! of extremes does not have: the reduction also keeps
//! [`QUANTILE_POINTS`] order statistics of all residuals at evenly spaced
//! ranks with their Hazen plotting positions, plus the [`TAIL_POINTS`]
//! smallest and largest.

use serde::{Deserialize, Serialize};

use crate::data::Dataset;
use crate::fit::FitResult;

/// Studies up to this many points are recorded and drawn whole.
pub const RECORD_POINTS: usize = 4000;

/// Slices of the reduction (each keeps at most four points).
pub const BINS: usize = 1000;

/// Evenly spaced order statistics of the residuals kept for the Q-Q plot.
pub const QUANTILE_POINTS: usize = 1000;

/// Smallest and largest residuals kept whole for the Q-Q plot (each end).
pub const TAIL_POINTS: usize = 50;

/// What the record keeps of a large data set.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DataReduction {
    /// Points of the study.
    pub points: usize,
    /// Points kept in `data` and in the fit's per-point arrays.
    pub kept: usize,
    /// The 0-based indices of the kept points in the study's data, in
    /// point order.
    pub indices: Vec<usize>,
    /// Order statistics of all normalised residuals for the Q-Q plot:
    /// `[plotting position (i - 0.5) / n, residual]`, ascending.
    pub residual_quantiles: Vec<[f64; 2]>,
}

/// The indices a reduction keeps, in point order (all of them for
/// `n <= RECORD_POINTS`).
pub fn select(data: &Dataset, residuals: &[f64]) -> Vec<usize> {
    let n = data.len();
    if n <= RECORD_POINTS {
        return (0..n).collect();
    }
    // Order along the first x column (point order for several columns).
    let order: Vec<usize> = if data.x.len() == 1 {
        let x = &data.x[0];
        let mut o: Vec<usize> = (0..n).collect();
        o.sort_by(|&a, &b| x[a].total_cmp(&x[b]).then(a.cmp(&b)));
        o
    } else {
        (0..n).collect()
    };
    let mut keep = vec![false; n];
    let resid = |i: usize| residuals.get(i).copied().unwrap_or(f64::NAN);
    for b in 0..BINS {
        let lo = b * n / BINS;
        let hi = (b + 1) * n / BINS;
        if lo >= hi {
            continue;
        }
        let slice = &order[lo..hi];
        let pick = |key: &dyn Fn(usize) -> f64, largest: bool| -> usize {
            let mut best = slice[0];
            let mut best_v = key(best);
            for &i in &slice[1..] {
                let v = key(i);
                // NaN counts as most extreme so that it is never hidden.
                let better = if best_v.is_nan() {
                    false
                } else if v.is_nan() {
                    true
                } else if largest {
                    v > best_v
                } else {
                    v < best_v
                };
                if better {
                    best = i;
                    best_v = v;
                }
            }
            best
        };
        let y = |i: usize| data.y[i];
        for i in [
            pick(&y, false),
            pick(&y, true),
            pick(&resid, false),
            pick(&resid, true),
        ] {
            keep[i] = true;
        }
    }
    (0..n).filter(|&i| keep[i]).collect()
}

/// Order statistics of the finite residuals for the Q-Q plot (all of
/// them for up to `QUANTILE_POINTS + 2 TAIL_POINTS` residuals).
pub fn residual_quantiles(residuals: &[f64]) -> Vec<[f64; 2]> {
    let mut r: Vec<f64> = residuals.iter().copied().filter(|v| v.is_finite()).collect();
    r.sort_by(f64::total_cmp);
    let n = r.len();
    let pos = |i: usize| [(i as f64 + 0.5) / n as f64, r[i]];
    if n <= QUANTILE_POINTS + 2 * TAIL_POINTS {
        return (0..n).map(pos).collect();
    }
    let mut ranks: Vec<usize> = (0..TAIL_POINTS).collect();
    ranks.extend((0..QUANTILE_POINTS).map(|k| k * (n - 1) / (QUANTILE_POINTS - 1)));
    ranks.extend(n - TAIL_POINTS..n);
    ranks.sort_unstable();
    ranks.dedup();
    ranks.into_iter().map(pos).collect()
}

/// Keeps only `indices` of the data.
pub fn reduce_data(data: &Dataset, indices: &[usize]) -> Dataset {
    let pick = |v: &[f64]| indices.iter().map(|&i| v[i]).collect::<Vec<f64>>();
    Dataset {
        x_names: data.x_names.clone(),
        x: data.x.iter().map(|c| pick(c)).collect(),
        y_name: data.y_name.clone(),
        y: pick(&data.y),
        sigma: data.sigma.as_ref().map(|s| pick(s)),
        sigma_x: data.sigma_x.as_ref().map(|s| pick(s)),
        groups: data
            .groups
            .iter()
            .map(|g| {
                let r = g.range();
                let start = indices.iter().filter(|&&i| i < r.start).count();
                let len = indices.iter().filter(|&&i| r.contains(&i)).count();
                crate::data::DataGroup {
                    start,
                    len,
                    ..g.clone()
                }
            })
            .collect(),
    }
}

/// Keeps only `indices` of a fit's per-point arrays (values, residuals,
/// leverage); everything else is a summary and stays.
pub fn reduce_fit(fit: &mut FitResult, indices: &[usize]) {
    let pick = |v: &[f64]| {
        indices
            .iter()
            .map(|&i| v.get(i).copied().unwrap_or(f64::NAN))
            .collect::<Vec<f64>>()
    };
    fit.fitted = pick(&fit.fitted);
    fit.residuals = pick(&fit.residuals);
    fit.leverage = pick(&fit.leverage);
}
