//! Pairwise chi-squared contour maps with covariance-ellipse overlays.
//!
//! For each pair `(a_i, a_k)` a `grid x grid` lattice of nodes is profiled:
//! both parameters are held at the node and all others re-optimised. The
//! lattice spans, per axis, the range where the parameter's own profile
//! stays below `chi2_min + (L_max + 3) * s` (found by the profiles'
//! outward exploration; `L_max` the largest contour level, `s` the
//! chi-squared scale), which contains the whole region below the largest
//! level, since the projection of that region onto an axis is exactly
//! where that axis' profile lies below the level. Rows are computed in
//! parallel; each row starts at the node nearest the valley floor (the
//! profile of `a_i` at that row's `a_k`, computed once per pair, walking
//! outward from the estimate) and walks outward along the row, each node
//! warm-started from its neighbour.
//!
//! Where a level passes between nodes (a saddle cell: two diagonal
//! corners below the level, two above), the lattice is refined locally:
//! the cell's centre is profiled too and decides whether the low corners
//! are joined, so a thin curved valley is traced as one closed contour
//! rather than as islands around single nodes.
//!
//! Contour lines at the 2-degree-of-freedom levels of 68.27, 95.45 and
//! 99.73 % (2.30, 6.18, 11.83) are traced by marching squares; the
//! covariance ellipse at the same levels is drawn for comparison.

use std::collections::BTreeSet;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

use super::marching::{contour_paths_with, saddle_cells};
use super::profile_scan::{chi2_scale, explore, step_scale, Scanner, Target, SCAN_LIMIT_SCALES};
use super::{Fitted, Progress};
use crate::fit::ParamSpec;

/// A profiled chi-squared grid: `chi2[r][c]` at `(x[c], y[r])`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourGrid {
    /// Abscissae (first parameter of the pair).
    pub x: Vec<f64>,
    /// Ordinates (second parameter).
    pub y: Vec<f64>,
    /// Profiled chi-squared, one row per ordinate (NaN where the refit failed).
    pub chi2: Vec<Vec<f64>>,
}

/// Contour lines at one level.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourLine {
    /// Delta chi-squared of the level (a 2-degree-of-freedom quantile); the
    /// line lies at `chi2_min + level * chi2_scale` on the grid.
    pub level: f64,
    /// Polylines `[[x, y], ...]`.
    pub paths: Vec<Vec<[f64; 2]>>,
}

/// Contour map of one parameter pair.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ContourResult {
    /// The two parameter names.
    pub pair: [String; 2],
    /// Delta chi-squared levels (2 degrees of freedom).
    pub levels: Vec<f64>,
    /// Confidence level of each level.
    pub level_probabilities: Vec<f64>,
    /// The profiled grid.
    pub grid: ContourGrid,
    /// Contour lines by marching squares.
    pub lines: Vec<ContourLine>,
    /// The covariance ellipse at the same levels.
    pub ellipse: Vec<ContourLine>,
    /// Grid nodes whose refit failed.
    pub failed: usize,
    /// Chi-squared of the base fit.
    pub chi2_min: f64,
    /// Factor applied to the levels on the chi-squared axis (`chi2/dof`
    /// when the base fit's covariance is scaled, else 1).
    pub chi2_scale: f64,
    /// Why the pair was not mapped (grid and lines are then empty).
    pub skipped: Option<ContourError>,
}

/// Why a contour pair cannot be mapped. Indices are 0-based positions in
/// `audit.contours.pairs`.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize, thiserror::Error)]
#[serde(rename_all = "kebab-case", tag = "kind")]
pub enum ContourError {
    /// A name that is no parameter of the model.
    #[error("audit.contours.pairs[{index}]: `{name}` is not a parameter")]
    UnknownParameter {
        /// Position in the list.
        index: usize,
        /// The name as written.
        name: String,
    },
    /// A parameter that is fixed (has no profile).
    #[error("audit.contours.pairs[{index}]: parameter `{name}` is fixed")]
    FixedParameter {
        /// Position in the list.
        index: usize,
        /// The parameter.
        name: String,
    },
    /// Both entries name the same parameter.
    #[error("audit.contours.pairs[{index}]: both entries name `{name}`")]
    SameParameter {
        /// Position in the list.
        index: usize,
        /// The parameter.
        name: String,
    },
    /// No range around the estimate could be scanned (failed refits on
    /// both sides, or a parameter pinned between equal bounds).
    #[error("parameter `{name}`: no range to map around the estimate")]
    EmptyRange {
        /// The parameter.
        name: String,
    },
}

/// Confidence levels of the contour lines: the probabilities of 1, 2 and 3
/// standard deviations of a normal distribution, `erf(k / sqrt 2)`
/// (0.6827, 0.9545, 0.9973).
pub fn level_probabilities() -> [f64; 3] {
    [1.0, 2.0, 3.0].map(|k: f64| statrs::function::erf::erf(k / std::f64::consts::SQRT_2))
}

/// Chi-squared quantile with two degrees of freedom at probability `p`
/// (2.30, 6.18, 11.83 at 68.27, 95.45, 99.73 %). NaN outside (0, 1).
pub fn delta_chi2_2dof(p: f64) -> f64 {
    if !(p > 0.0 && p < 1.0) {
        return f64::NAN;
    }
    match ChiSquared::new(2.0) {
        Ok(d) => d.inverse_cdf(p),
        Err(_) => f64::NAN,
    }
}

/// The delta chi-squared of a joint 2-parameter region at probability `p`
/// for a fit: the 2-dof chi-squared quantile with stated sigma; with a
/// scaled covariance `2 F(2, dof)` at `p` (the likelihood region with an
/// estimated variance, Bates & Watts 1988, section 6.1), in units of
/// `chi2/dof`.
pub fn level_for(fit: &crate::fit::FitResult, p: f64) -> f64 {
    use statrs::distribution::FisherSnedecor;
    if fit.covariance_scaled && fit.dof > 0 {
        if !(p > 0.0 && p < 1.0) {
            return f64::NAN;
        }
        match FisherSnedecor::new(2.0, fit.dof as f64) {
            Ok(d) => 2.0 * d.inverse_cdf(p),
            Err(_) => f64::NAN,
        }
    } else {
        delta_chi2_2dof(p)
    }
}

/// Margin (in delta chi-squared) by which the grid extends beyond the
/// largest level (common practice: room for the outer line to close).
const RANGE_MARGIN: f64 = 3.0;

/// Vertices of each ellipse (the last repeats the first).
const ELLIPSE_VERTICES: usize = 181;

/// Resolves `audit.contours.pairs` against the parameter specs: each name
/// must be a parameter that is not fixed, and the two must differ. Returns
/// the index pairs.
pub fn validate_pairs(pairs: &[[String; 2]], params: &[ParamSpec]) -> Result<Vec<[usize; 2]>, ContourError> {
    pairs
        .iter()
        .enumerate()
        .map(|(index, pair)| resolve_pair(index, pair, params))
        .collect()
}

fn resolve_pair(index: usize, pair: &[String; 2], params: &[ParamSpec]) -> Result<[usize; 2], ContourError> {
    let mut out = [0usize; 2];
    for (slot, name) in out.iter_mut().zip(pair.iter()) {
        let j =
            params
                .iter()
                .position(|p| &p.name == name)
                .ok_or_else(|| ContourError::UnknownParameter {
                    index,
                    name: name.clone(),
                })?;
        if params[j].fixed {
            return Err(ContourError::FixedParameter {
                index,
                name: name.clone(),
            });
        }
        *slot = j;
    }
    if out[0] == out[1] {
        return Err(ContourError::SameParameter {
            index,
            name: pair[0].clone(),
        });
    }
    Ok(out)
}

/// A pair to map: its names and its parameter indices (or why it cannot be mapped).
pub type PairChoice = ([String; 2], Result<[usize; 2], ContourError>);

/// The pairs to map: the settings' list when given (each resolved or
/// rejected), else every pair of free parameters when there are at most
/// five, else the six pairs with the largest |correlation| in the base fit.
pub fn choose_pairs(ctx: &Fitted) -> Vec<PairChoice> {
    let params = &ctx.problem.params;
    if let Some(list) = &ctx.settings.contours.pairs {
        return list
            .iter()
            .enumerate()
            .map(|(index, pair)| (pair.clone(), resolve_pair(index, pair, params)))
            .collect();
    }
    let free: Vec<usize> = (0..params.len()).filter(|&j| !params[j].fixed).collect();
    let mut all: Vec<[usize; 2]> = Vec::new();
    for (a, &i) in free.iter().enumerate() {
        for &k in &free[a + 1..] {
            all.push([i, k]);
        }
    }
    if free.len() > 5 {
        let corr = |i: usize, k: usize| -> f64 {
            let c = ctx
                .fit
                .correlation
                .get(i)
                .and_then(|row| row.get(k))
                .copied()
                .unwrap_or(0.0);
            if c.is_finite() {
                c.abs()
            } else {
                0.0
            }
        };
        // Stable sort: ties keep the parameter order.
        all.sort_by(|p, q| corr(q[0], q[1]).total_cmp(&corr(p[0], p[1])));
        all.truncate(6);
    }
    all.into_iter()
        .map(|[i, k]| ([params[i].name.clone(), params[k].name.clone()], Ok([i, k])))
        .collect()
}

/// Computes the contour maps.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> Vec<ContourResult> {
    maps(ctx, 0..choose_pairs(ctx).len(), progress)
}

/// The maps of pairs `items` (positions in [`choose_pairs`]), in that
/// order. Each map (and each axis range) is computed on its own, so any
/// split of the items gives the same maps, and the maps of all items in
/// order are [`run`]'s result.
pub fn maps(ctx: &Fitted, items: std::ops::Range<usize>, progress: &dyn Progress) -> Vec<ContourResult> {
    let probabilities = level_probabilities();
    let levels: Vec<f64> = probabilities.iter().map(|&p| level_for(ctx.fit, p)).collect();
    let l_max = levels.iter().copied().fold(0.0, f64::max);
    let scale = chi2_scale(ctx.fit);
    let n = ctx.settings.contours.grid.max(2);
    let all = choose_pairs(ctx);
    let (lo, hi) = (items.start.min(all.len()), items.end.min(all.len()));
    let pairs: Vec<PairChoice> = all.into_iter().skip(lo).take(hi.saturating_sub(lo)).collect();

    // Axis ranges, once per parameter involved.
    let needed: BTreeSet<usize> = pairs
        .iter()
        .filter_map(|(_, r)| r.as_ref().ok())
        .flatten()
        .copied()
        .collect();
    let needed: Vec<usize> = needed.into_iter().collect();
    let ranges: Vec<(usize, Option<[f64; 2]>)> = needed
        .par_iter()
        .map(|&j| (j, axis_range(ctx, j, l_max, scale)))
        .collect();
    let range_of = |j: usize| ranges.iter().find(|(p, _)| *p == j).and_then(|(_, r)| *r);

    let valid = pairs.iter().filter(|(_, r)| r.is_ok()).count();
    progress.start("contours", (valid * n * n) as u64);
    let empty = |pair: [String; 2], why: ContourError| ContourResult {
        pair,
        levels: levels.clone(),
        level_probabilities: probabilities.to_vec(),
        grid: ContourGrid {
            x: Vec::new(),
            y: Vec::new(),
            chi2: Vec::new(),
        },
        lines: Vec::new(),
        ellipse: Vec::new(),
        failed: 0,
        chi2_min: ctx.fit.chi2,
        chi2_scale: scale,
        skipped: Some(why),
    };
    let mut out = Vec::with_capacity(pairs.len());
    for (names, resolved) in pairs {
        let [i, k] = match resolved {
            Ok(p) => p,
            Err(e) => {
                out.push(empty(names, e));
                continue;
            }
        };
        let (Some(rx), Some(ry)) = (range_of(i), range_of(k)) else {
            let name = if range_of(i).is_none() {
                &names[0]
            } else {
                &names[1]
            };
            let why = ContourError::EmptyRange { name: name.clone() };
            progress.advance((n * n) as u64);
            out.push(empty(names, why));
            continue;
        };
        let grid = profile_grid(ctx, i, k, linspace(rx, n), linspace(ry, n), progress);
        let failed = grid.chi2.iter().flatten().filter(|v| !v.is_finite()).count();
        let absolute: Vec<f64> = levels.iter().map(|l| ctx.fit.chi2 + l * scale).collect();
        let centres = saddle_centres(ctx, i, k, &grid, &absolute);
        let centre = |r: usize, c: usize| centres.get(&(r, c)).copied();
        let lines = levels
            .iter()
            .map(|&level| ContourLine {
                level,
                paths: contour_paths_with(
                    &grid.x,
                    &grid.y,
                    &grid.chi2,
                    ctx.fit.chi2 + level * scale,
                    &centre,
                ),
            })
            .collect();
        let ellipse = levels
            .iter()
            .map(|&level| ContourLine {
                level,
                paths: covariance_ellipse(ctx, i, k, level).into_iter().collect(),
            })
            .collect();
        out.push(ContourResult {
            pair: names,
            levels: levels.clone(),
            level_probabilities: probabilities.to_vec(),
            grid,
            lines,
            ellipse,
            failed,
            chi2_min: ctx.fit.chi2,
            chi2_scale: scale,
            skipped: None,
        });
    }
    progress.finish();
    out
}

/// `n` evenly spaced values from `r[0]` to `r[1]`.
fn linspace(r: [f64; 2], n: usize) -> Vec<f64> {
    (0..n)
        .map(|c| {
            if c + 1 == n {
                r[1]
            } else {
                r[0] + (r[1] - r[0]) * c as f64 / (n - 1) as f64
            }
        })
        .collect()
}

/// The range of parameter `j` to map: on each side, up to where its profile
/// rises `(l_max + margin) * scale` (at least `l_max + 1`), its bound, or
/// the scan limit. None when neither side could be scanned.
fn axis_range(ctx: &Fitted, j: usize, l_max: f64, scale: f64) -> Option<[f64; 2]> {
    let mut sc = Scanner::new(ctx);
    let base = ctx.values();
    let est = base[j];
    let s = step_scale(ctx, j);
    let target = Target {
        aim: (l_max + RANGE_MARGIN) * scale,
        accept: (l_max + 1.0) * scale,
        first: s * (l_max + RANGE_MARGIN).sqrt(),
        limit: SCAN_LIMIT_SCALES * s,
    };
    let lo = explore(&mut sc, j, -1.0, &base, ctx.fit.chi2, target);
    let hi = explore(&mut sc, j, 1.0, &base, ctx.fit.chi2, target);
    let r = [
        lo.nodes.last().map_or(est, |(x, _)| *x),
        hi.nodes.last().map_or(est, |(x, _)| *x),
    ];
    (r[1] > r[0] && r[0].is_finite() && r[1].is_finite()).then_some(r)
}

/// Index of the value of `v` nearest to `x`.
fn nearest(v: &[f64], x: f64) -> usize {
    let mut best = 0;
    for (i, &t) in v.iter().enumerate() {
        if (t - x).abs() < (v[best] - x).abs() {
            best = i;
        }
    }
    best
}

/// Profiles chi-squared on the lattice `xs x ys` of parameters `i` and `k`.
fn profile_grid(
    ctx: &Fitted,
    i: usize,
    k: usize,
    xs: Vec<f64>,
    ys: Vec<f64>,
    progress: &dyn Progress,
) -> ContourGrid {
    let base = ctx.values();
    // Valley floor: the profile along a_k (a_i free) at each row's ordinate,
    // walking outward from the row nearest the estimate.
    let mut sc = Scanner::new(ctx);
    let r0 = nearest(&ys, base[k]);
    let mut valley: Vec<Option<Vec<f64>>> = vec![None; ys.len()];
    let up: Vec<usize> = (r0..ys.len()).collect();
    let down: Vec<usize> = (0..r0).rev().collect();
    for order in [up, down] {
        let mut start = base.clone();
        for r in order {
            if let Some(node) = sc.at(&[(k, ys[r])], &start) {
                start.copy_from_slice(&node.params);
                valley[r] = Some(node.params);
            }
        }
    }
    let chi2: Vec<Vec<f64>> = (0..ys.len())
        .into_par_iter()
        .map(|r| {
            let mut sc = Scanner::new(ctx);
            let mut row = vec![f64::NAN; xs.len()];
            let row_start = valley[r].clone().unwrap_or_else(|| {
                let mut p = base.clone();
                p[k] = ys[r];
                p
            });
            let c0 = nearest(&xs, row_start[i]);
            let first = sc.at(&[(i, xs[c0]), (k, ys[r])], &row_start);
            let seed = first.as_ref().map_or(row_start.clone(), |nd| nd.params.clone());
            if let Some(nd) = &first {
                row[c0] = nd.chi2;
            }
            let right: Vec<usize> = (c0 + 1..xs.len()).collect();
            let left: Vec<usize> = (0..c0).rev().collect();
            for order in [right, left] {
                // Warm start: the last node's solution, moved on by the
                // change between the last two nodes (the profiled
                // parameters vary smoothly along a row; a secant step
                // saves about one iteration per node).
                let mut last = seed.clone();
                let mut before: Option<Vec<f64>> = None;
                let mut start = seed.clone();
                for c in order {
                    if let Some(prev) = &before {
                        for ((s, l), p) in start.iter_mut().zip(&last).zip(prev) {
                            *s = 2.0 * l - p;
                        }
                    } else {
                        start.copy_from_slice(&last);
                    }
                    match sc.at(&[(i, xs[c]), (k, ys[r])], &start) {
                        Some(nd) => {
                            row[c] = nd.chi2;
                            before = Some(std::mem::replace(&mut last, nd.params));
                        }
                        None => before = None,
                    }
                }
            }
            progress.advance(xs.len() as u64);
            row
        })
        .collect();
    ContourGrid { x: xs, y: ys, chi2 }
}

/// Local refinement of the lattice where a level passes between nodes:
/// the profiled chi-squared at the centre of every saddle cell (two
/// diagonal corners below a contour level, the other two above), which
/// decides whether the low corners are joined through the cell. A thin
/// valley running diagonally through the lattice (the enzyme demo) is then
/// traced as one closed contour instead of islands around single nodes.
/// Each centre is refitted from the base values with the pair held there,
/// in parallel; failures leave the mean-of-corners rule in force.
fn saddle_centres(
    ctx: &Fitted,
    i: usize,
    k: usize,
    grid: &ContourGrid,
    levels: &[f64],
) -> std::collections::HashMap<(usize, usize), f64> {
    let base = ctx.values();
    saddle_cells(&grid.chi2, levels)
        .into_par_iter()
        .filter_map(|(r, c)| {
            let (x, y) = (
                0.5 * (grid.x[c] + grid.x[c + 1]),
                0.5 * (grid.y[r] + grid.y[r + 1]),
            );
            let mut start = base.clone();
            start[i] = x;
            start[k] = y;
            let mut sc = Scanner::new(ctx);
            sc.at(&[(i, x), (k, y)], &start).map(|nd| ((r, c), nd.chi2))
        })
        .collect()
}

/// The covariance ellipse of parameters `i`, `k` at delta chi-squared
/// `level`: `a + sqrt(level) * L (cos t, sin t)` with `L` the Cholesky
/// factor of the 2x2 covariance block. None when the block is missing or
/// not positive definite.
pub fn covariance_ellipse(ctx: &Fitted, i: usize, k: usize, level: f64) -> Option<Vec<[f64; 2]>> {
    let cov = &ctx.fit.covariance;
    let get = |r: usize, c: usize| cov.get(r).and_then(|row| row.get(c)).copied();
    let (cii, cik, ckk) = (get(i, i)?, get(i, k)?, get(k, k)?);
    if !(cii > 0.0 && ckk > 0.0 && cik.is_finite() && cii.is_finite() && ckk.is_finite() && level >= 0.0) {
        return None;
    }
    let l11 = cii.sqrt();
    let l21 = cik / l11;
    let d = ckk - l21 * l21;
    if d.is_nan() || d <= 0.0 {
        return None;
    }
    let l22 = d.sqrt();
    let (ai, ak) = (ctx.fit.parameters[i].value, ctx.fit.parameters[k].value);
    let r = level.sqrt();
    Some(
        (0..ELLIPSE_VERTICES)
            .map(|v| {
                let t = if v + 1 == ELLIPSE_VERTICES {
                    0.0
                } else {
                    std::f64::consts::TAU * v as f64 / (ELLIPSE_VERTICES - 1) as f64
                };
                let (c, s) = (t.cos(), t.sin());
                [ai + r * l11 * c, ak + r * (l21 * c + l22 * s)]
            })
            .collect(),
    )
}
