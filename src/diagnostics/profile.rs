//! Chi-squared profile scans per parameter.
//!
//! For each free parameter `a_j` the profile `chi2_min(a_j)` holds `a_j` on
//! a grid around the estimate and re-optimises all other parameters there,
//! warm-started from the neighbouring grid point while walking outward from
//! the optimum. The interval ends are where the profile crosses
//! `chi2_min + q * s`, with `q` the chi-squared quantile of one degree of
//! freedom at the study's level and `s` the chi-squared scale (`chi2/dof`
//! when the covariance is scaled, else 1), located by Brent's method
//! between the bracketing grid points. A profile that stays below the
//! threshold up to the scan limit marks the parameter practically
//! non-identifiable (Raue et al. 2009, Bioinformatics 25:1923).
//!
//! The scan of each side first explores outward (steps predicted from the
//! standard error, growing where the profile is flatter than the quadratic
//! prediction) until the profile rises past `1.2 q` (aiming at `1.69 q`,
//! i.e. 1.3 times the crossing distance), a bound or the scan limit; then
//! `points` grid points in total are laid uniformly over the scanned range
//! (half per side) and profiled; then each crossing is refined by Brent's
//! method and added to the points.

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::profile_scan::{
    chi2_scale, explore, step_scale, Node, Scanner, Target, WalkEnd, SCAN_LIMIT_SCALES,
};
use super::roots::brent;
use super::{Fitted, Progress};

/// How the scan of one side of a profile ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum EndStatus {
    /// The profile crossed the threshold; the end is the crossing.
    Found,
    /// The profile stayed below the threshold up to the parameter's bound.
    Bound,
    /// The profile stayed below the threshold up to the scan limit
    /// (practically non-identifiable in this direction).
    ScanLimit,
    /// Refits failed (or disagreed) before the profile crossed.
    #[default]
    Unresolved,
}

/// A profile point whose chi-squared is below the base fit's: the base fit
/// was not the minimum.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LowerPoint {
    /// Held value of the profiled parameter.
    pub value: f64,
    /// Chi-squared there.
    pub chi2: f64,
    /// How far below the base fit's chi-squared.
    pub below_by: f64,
    /// All parameters there.
    pub parameters: Vec<f64>,
}

/// Profile of one parameter. `Default` gives an empty profile (for
/// building results by hand, e.g. in tests of the verdicts).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct ParameterProfile {
    /// Parameter name.
    pub name: String,
    /// Base-fit value.
    pub estimate: f64,
    /// Analytic standard error (None when undetermined).
    pub std_error: Option<f64>,
    /// Lower end of the profile interval (the last value scanned when not found).
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// Whether the profile crossed the threshold below the estimate.
    pub lower_found: bool,
    /// Whether it crossed above.
    pub upper_found: bool,
    /// Scanned points `[a_j, chi2_min(a_j)]`, sorted by `a_j`: the grid,
    /// the estimate and the crossings.
    pub points: Vec<[f64; 2]>,
    /// Re-optimised parameter vectors at each point (all parameters).
    pub others: Vec<Vec<f64>>,
    /// The covariance parabola `[a_j, chi2_min + s * ((a_j - a)/se)^2]` at
    /// the same abscissae (`s` the chi-squared scale; empty without a
    /// standard error).
    pub parabola: Vec<[f64; 2]>,
    /// (upper - estimate) / (estimate - lower) when both ends were found.
    pub asymmetry: Option<f64>,
    /// Refits at grid points that failed.
    pub failed: usize,
    /// How the scan below the estimate ended.
    pub lower_status: EndStatus,
    /// How the scan above the estimate ended.
    pub upper_status: EndStatus,
    /// The profile stayed below the threshold up to the scan limit on at
    /// least one side.
    pub non_identifiable: bool,
    /// Step scale of the scan (the standard error, or a fallback).
    pub scale: f64,
    /// The lowest point found below the base fit's chi-squared by more than
    /// the tolerance, if any.
    pub below_minimum: Option<LowerPoint>,
    /// Refits run for this profile (exploration, grid and root finding).
    pub refits: usize,
}

/// Result of the profile scans. `Default` gives an empty result.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct ProfileResult {
    /// Confidence level.
    pub level: f64,
    /// Threshold above the minimum: chi-squared quantile, 1 degree of freedom.
    pub threshold: f64,
    /// Chi-squared of the base fit.
    pub chi2_min: f64,
    /// One entry per free parameter.
    pub parameters: Vec<ParameterProfile>,
    /// Failed refits over all profiles.
    pub failed: usize,
    /// Factor applied to `threshold` on the chi-squared axis: `chi2/dof`
    /// when the base fit's covariance is scaled, else 1. Crossings lie at
    /// `chi2_min + threshold * chi2_scale`.
    pub chi2_scale: f64,
    /// True when some profile point lies below the base fit by more than
    /// the tolerance (see [`ParameterProfile::below_minimum`]).
    pub base_not_minimum: bool,
}

/// Relative tolerance (of `max(chi2_min, threshold * chi2_scale)`) below
/// which a profile point under the base fit's chi-squared counts as equal
/// (common practice: well above the optimiser's tolerance).
pub const BELOW_MINIMUM_TOLERANCE: f64 = 1e-6;

/// Chi-squared quantile with one degree of freedom at `level` (e.g. 1.000
/// at 0.6827, 3.841 at 0.95): the rise of a profile at the ends of its
/// interval. NaN when `level` is not in (0, 1).
pub fn threshold_1dof(level: f64) -> f64 {
    if !(level > 0.0 && level < 1.0) {
        return f64::NAN;
    }
    // A chi-squared variable with one degree of freedom is the square of a
    // standard normal one, so its quantile is z_{(1+level)/2}^2. (The gamma
    // inversion of statrs 0.18 returns NaN below a level of about 0.04.)
    crate::fit::coverage_factor(level, None).powi(2)
}

/// The rise of a profile (in units of the chi-squared scale) at the ends
/// of its interval for a fit: the 1-dof chi-squared quantile with stated
/// sigma; with a scaled covariance the square of Student's t quantile with
/// the fit's dof, so that a linear model's profile interval is exactly
/// `value +- k u` with the fit's coverage factor `k`.
pub fn threshold_for(fit: &crate::fit::FitResult, level: f64) -> f64 {
    if fit.covariance_scaled && fit.dof > 0 {
        if !(level > 0.0 && level < 1.0) {
            return f64::NAN;
        }
        crate::fit::coverage_factor(level, Some(fit.dof)).powi(2)
    } else {
        threshold_1dof(level)
    }
}

/// Runs the profile scans, one per free parameter, in parallel.
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> ProfileResult {
    let parameters = profiles(ctx, 0..free_parameters(ctx).len(), progress);
    assemble(ctx, parameters)
}

/// The free parameters in parameter order: the items a profile run is
/// made of (item `i` is the profile of the `i`-th free parameter).
pub fn free_parameters(ctx: &Fitted) -> Vec<usize> {
    ctx.free_mask()
        .iter()
        .enumerate()
        .filter_map(|(j, &f)| f.then_some(j))
        .collect()
}

/// The profiles of free parameters `items` (positions in
/// [`free_parameters`]), in that order. Each profile is computed on its
/// own, so any split of the items gives the same profiles.
pub fn profiles(
    ctx: &Fitted,
    items: std::ops::Range<usize>,
    progress: &dyn Progress,
) -> Vec<ParameterProfile> {
    let level = ctx.settings.level;
    let q = threshold_for(ctx.fit, level);
    let scale = chi2_scale(ctx.fit);
    let chi2_min = ctx.fit.chi2;
    let points = ctx.settings.profile.points.max(3);
    let free = free_parameters(ctx);
    let chosen = &free[items.start.min(free.len())..items.end.min(free.len())];
    progress.start("profile", (chosen.len() * (points - 1)) as u64);
    let parameters: Vec<ParameterProfile> = chosen
        .par_iter()
        .map(|&j| profile_one(ctx, j, q, scale, chi2_min, points, progress))
        .collect();
    progress.finish();
    parameters
}

/// The pure summary step: the result from every free parameter's profile
/// in parameter order.
pub fn assemble(ctx: &Fitted, parameters: Vec<ParameterProfile>) -> ProfileResult {
    let level = ctx.settings.level;
    let q = threshold_for(ctx.fit, level);
    let scale = chi2_scale(ctx.fit);
    let chi2_min = ctx.fit.chi2;
    let failed = parameters.iter().map(|p| p.failed).sum();
    let base_not_minimum = parameters.iter().any(|p| p.below_minimum.is_some());
    ProfileResult {
        level,
        threshold: q,
        chi2_min,
        parameters,
        failed,
        chi2_scale: scale,
        base_not_minimum,
    }
}

/// The two ends of one parameter's profile interval from the crossing
/// search alone (no display grid): the outward explorations of
/// [`run`] followed by the same Brent refinement of each crossing. What the
/// coverage simulation computes on every simulated data set.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CrossingEnds {
    /// Lower end (the last value scanned when not found).
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
    /// How the scan below the estimate ended.
    pub lower_status: EndStatus,
    /// How the scan above the estimate ended.
    pub upper_status: EndStatus,
    /// Refits run.
    pub refits: usize,
    /// Refits that failed.
    pub failed: usize,
}

/// The profile interval of parameter `j` of `ctx` at the audit level: the
/// crossings of `chi2_min + q * s` (threshold and scale as in [`run`])
/// below and above the estimate, each explored outward from the fit
/// (warm-started from the previous point) and refined by Brent's method.
pub fn crossing_ends(ctx: &Fitted, j: usize) -> CrossingEnds {
    let ctx: &Fitted = ctx;
    let q = threshold_for(ctx.fit, ctx.settings.level);
    let scale = chi2_scale(ctx.fit);
    let chi2_min = ctx.fit.chi2;
    let mut sc = Scanner::new(ctx);
    let base = ctx.values();
    let est = base[j];
    let s = step_scale(ctx, j);
    let threshold = q * scale;
    let target = walk_target(threshold, q, s);
    let mut ends = [(f64::NAN, EndStatus::Unresolved); 2];
    for (k, dir) in [-1.0, 1.0].into_iter().enumerate() {
        let walk = explore(&mut sc, j, dir, &base, chi2_min, target);
        let end = walk.end;
        let side = locate(&mut sc, j, est, &base, chi2_min, threshold, s, walk.nodes);
        let status = if side.crossing.is_some() {
            EndStatus::Found
        } else {
            match end {
                WalkEnd::Bound => EndStatus::Bound,
                WalkEnd::Limit => EndStatus::ScanLimit,
                WalkEnd::Reached | WalkEnd::Failed => EndStatus::Unresolved,
            }
        };
        ends[k] = (side.end, status);
    }
    CrossingEnds {
        lower: ends[0].0,
        upper: ends[1].0,
        lower_status: ends[0].1,
        upper_status: ends[1].1,
        refits: sc.refits,
        failed: sc.failed,
    }
}

/// The outward walk's aims for the crossing `threshold = q * scale`, with
/// `s` the parameter's step scale: aim past the threshold (1.69 of it,
/// accepting from 1.2), first step `s sqrt(1.69 q)`, at most
/// [`SCAN_LIMIT_SCALES`] step scales out.
fn walk_target(threshold: f64, q: f64, s: f64) -> Target {
    let q_units = if q.is_finite() && q > 0.0 { q } else { 1.0 };
    Target {
        aim: 1.69 * threshold,
        accept: 1.2 * threshold,
        first: s * (1.69 * q_units).sqrt(),
        limit: SCAN_LIMIT_SCALES * s,
    }
}

/// One side of a profile after the grid and the root finding.
struct Side {
    /// Grid points in outward order.
    nodes: Vec<(f64, Node)>,
    /// The refined crossing, when found.
    crossing: Option<f64>,
    /// The refit at the crossing (None when its refit failed).
    crossing_node: Option<Node>,
    status: EndStatus,
    /// The interval end (crossing, or the last value scanned).
    end: f64,
}

/// Profile of parameter `j`.
fn profile_one(
    ctx: &Fitted,
    j: usize,
    q: f64,
    scale: f64,
    chi2_min: f64,
    points: usize,
    progress: &dyn Progress,
) -> ParameterProfile {
    // The scanner borrows `ctx` for its own lifetime.
    let ctx: &Fitted = ctx;
    let mut sc = Scanner::new(ctx);
    let base = ctx.values();
    let est = base[j];
    let s = step_scale(ctx, j);
    let threshold = q * scale;
    let target = walk_target(threshold, q, s);
    let tol = BELOW_MINIMUM_TOLERANCE * chi2_min.max(threshold).max(f64::MIN_POSITIVE);

    let walks = [-1.0, 1.0].map(|dir| explore(&mut sc, j, dir, &base, chi2_min, target));
    let reach = [walks[0].reach(est), walks[1].reach(est)];
    let n_grid = points - 1;
    let n_side = match (reach[0] > 0.0, reach[1] > 0.0) {
        (true, true) => [n_grid / 2, n_grid - n_grid / 2],
        (true, false) => [n_grid, 0],
        (false, true) => [0, n_grid],
        (false, false) => [0, 0],
    };
    let mut grid_failed = 0;
    let sides: Vec<Side> = (0..2)
        .map(|k| {
            let dir = if k == 0 { -1.0 } else { 1.0 };
            let n = n_side[k];
            let far = walks[k].nodes.last().map_or(est, |(x, _)| *x);
            let mut nodes = Vec::with_capacity(n);
            let mut start = base.clone();
            let before = sc.failed;
            for i in 1..=n {
                let x = if i == n {
                    far
                } else {
                    est + dir * reach[k] * i as f64 / n as f64
                };
                if let Some(node) = sc.at(&[(j, x)], &start) {
                    start.copy_from_slice(&node.params);
                    nodes.push((x, node));
                }
                progress.advance(1);
            }
            grid_failed += sc.failed - before;
            let mut side = locate(&mut sc, j, est, &base, chi2_min, threshold, s, nodes);
            if side.crossing.is_none() {
                side.status = match walks[k].end {
                    WalkEnd::Bound => EndStatus::Bound,
                    WalkEnd::Limit => EndStatus::ScanLimit,
                    WalkEnd::Reached | WalkEnd::Failed => EndStatus::Unresolved,
                };
            }
            side
        })
        .collect();

    // Points sorted by a_j: lower side reversed, estimate, upper side, crossings.
    let mut all: Vec<(f64, f64, Vec<f64>)> = Vec::with_capacity(points + 2);
    all.push((est, chi2_min, base.clone()));
    for side in &sides {
        for (x, node) in side.nodes.iter() {
            all.push((*x, node.chi2, node.params.clone()));
        }
        if let (Some(x), Some(node)) = (side.crossing, &side.crossing_node) {
            all.push((x, node.chi2, node.params.clone()));
        }
    }
    all.sort_by(|a, b| a.0.total_cmp(&b.0));
    all.dedup_by(|a, b| a.0 == b.0);

    // Lowest point below the base fit, over everything evaluated on the grid
    // and in the explorations.
    let mut below: Option<LowerPoint> = None;
    let explored = walks.iter().flat_map(|w| w.nodes.iter().map(|(x, n)| (*x, n)));
    let gridded = sides.iter().flat_map(|s| s.nodes.iter().map(|(x, n)| (*x, n)));
    for (x, node) in explored.chain(gridded) {
        let by = chi2_min - node.chi2;
        if by > tol && below.as_ref().map_or(true, |b| node.chi2 < b.chi2) {
            below = Some(LowerPoint {
                value: x,
                chi2: node.chi2,
                below_by: by,
                parameters: node.params.clone(),
            });
        }
    }

    let se = ctx.fit.parameters[j]
        .std_error
        .filter(|v| v.is_finite() && *v > 0.0);
    let parabola = match se {
        Some(se) => all
            .iter()
            .map(|(x, _, _)| [*x, chi2_min + scale * ((x - est) / se).powi(2)])
            .collect(),
        None => Vec::new(),
    };
    let (lo, hi) = (&sides[0], &sides[1]);
    let lower_found = lo.status == EndStatus::Found;
    let upper_found = hi.status == EndStatus::Found;
    let asymmetry = (lower_found && upper_found && est - lo.end > 0.0)
        .then(|| (hi.end - est) / (est - lo.end))
        .filter(|a| a.is_finite());
    ParameterProfile {
        name: ctx.problem.params[j].name.clone(),
        estimate: est,
        std_error: ctx.fit.parameters[j].std_error,
        lower: lo.end,
        upper: hi.end,
        lower_found,
        upper_found,
        points: all.iter().map(|(x, c, _)| [*x, *c]).collect(),
        others: all.into_iter().map(|(_, _, p)| p).collect(),
        parabola,
        asymmetry,
        failed: grid_failed,
        lower_status: lo.status,
        upper_status: hi.status,
        non_identifiable: lo.status == EndStatus::ScanLimit || hi.status == EndStatus::ScanLimit,
        scale: s,
        below_minimum: below,
        refits: sc.refits,
    }
}

/// Finds the first crossing of `chi2_min + threshold` walking outward over
/// `nodes` (from the estimate) and refines it by Brent's method, every
/// evaluation a refit with `a_j` held, warm-started from the nearer bracket
/// point. Falls back to linear interpolation when the root finding fails.
#[allow(clippy::too_many_arguments)]
fn locate(
    sc: &mut Scanner,
    j: usize,
    est: f64,
    base: &[f64],
    chi2_min: f64,
    threshold: f64,
    scale: f64,
    nodes: Vec<(f64, Node)>,
) -> Side {
    let far = nodes.last().map_or(est, |(x, _)| *x);
    let rise = |n: &Node| n.chi2 - chi2_min - threshold;
    let mut inner: (f64, Node) = (
        est,
        Node {
            chi2: chi2_min,
            params: base.to_vec(),
        },
    );
    let mut bracket = None;
    for (x, node) in &nodes {
        if rise(node) >= 0.0 && rise(&inner.1) < 0.0 {
            bracket = Some((inner.clone(), (*x, node.clone())));
            break;
        }
        inner = (*x, node.clone());
    }
    let Some(((x0, n0), (x1, n1))) = bracket else {
        return Side {
            nodes,
            crossing: None,
            crossing_node: None,
            status: EndStatus::Unresolved,
            end: far,
        };
    };
    let (f0, f1) = (rise(&n0), rise(&n1));
    let mut evaluated: Vec<(f64, Node)> = Vec::new();
    let xtol = 1e-10 * scale.max(f64::EPSILON * est.abs());
    let root = brent(
        |x| {
            let start = if (x - x0).abs() <= (x - x1).abs() {
                &n0.params
            } else {
                &n1.params
            };
            let node = sc.at(&[(j, x)], start)?;
            let f = rise(&node);
            evaluated.push((x, node));
            Some(f)
        },
        x0,
        x1,
        f0,
        f1,
        xtol,
        100,
    );
    let (crossing, crossing_node) = match root {
        Ok(r) => {
            let node = if r.x == x0 {
                Some(n0.clone())
            } else if r.x == x1 {
                Some(n1.clone())
            } else {
                evaluated
                    .into_iter()
                    .rev()
                    .find(|(x, _)| *x == r.x)
                    .map(|(_, n)| n)
            };
            (r.x, node)
        }
        Err(_) => {
            // Linear interpolation between the bracket points.
            let t = if f1 != f0 {
                (-f0 / (f1 - f0)).clamp(0.0, 1.0)
            } else {
                0.5
            };
            let x = x0 + t * (x1 - x0);
            let start = if t <= 0.5 { &n0.params } else { &n1.params };
            (x, sc.at(&[(j, x)], start))
        }
    };
    Side {
        nodes,
        crossing: Some(crossing),
        crossing_node,
        status: EndStatus::Found,
        end: crossing,
    }
}
