//! Machinery shared by the profile scans and the contour maps: refits with
//! some parameters held, the step scale of each parameter, the
//! chi-squared scale of thresholds, and the outward exploration that finds
//! how far a profile must be scanned.

use super::Fitted;
use crate::fit::{DataView, FitOptions, FitResult, Problem, Refitter};

/// Largest distance scanned from the estimate, in units of the parameter's
/// step scale (its standard error when known). A profile still below its
/// threshold there is reported as not crossing (common practice: a scan
/// limit far beyond the quadratic prediction).
pub(crate) const SCAN_LIMIT_SCALES: f64 = 100.0;

/// An exploration that overshoots its aim by more than this factor is
/// pulled back by bisection (common practice: keep the scanned range close
/// to the region of interest).
const OVERSHOOT: f64 = 3.0;

/// Most bisections of an overshoot.
const MAX_TIGHTEN: usize = 4;

/// Most trial points of one exploration (the step grows by up to 4x per
/// point, so this is never the binding limit for finite scales).
const MAX_EXPLORATION_STEPS: usize = 60;

/// Below this chi-squared quantile (audit levels under about 8 %) the
/// profile threshold comes near the precision at which a warm-started
/// refit stops (its end-point test promises a chi-squared within 1e-6 of a
/// chi-squared unit of the minimum), so the scans' refits iterate down to
/// the optimiser's tolerances instead; above it the early stop costs less
/// than 1e-4 of the threshold.
pub(crate) const TIGHT_REFIT_QUANTILE: f64 = 0.01;

/// A profile point: chi-squared and all parameters after the refit.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Node {
    /// Chi-squared of the refit.
    pub chi2: f64,
    /// All parameters (held ones included).
    pub params: Vec<f64>,
}

/// Refits the fitted problem with parameters held, counting failures.
pub(crate) struct Scanner<'c> {
    ctx: &'c Fitted<'c>,
    /// The fitted problem, with refits that iterate to the tolerances when
    /// the level's threshold is small ([`TIGHT_REFIT_QUANTILE`]).
    problem: Problem<'c>,
    xs: Vec<&'c [f64]>,
    sigma: Vec<f64>,
    free: Vec<bool>,
    start: Vec<f64>,
    refitter: Refitter,
    /// Refits that did not converge or gave non-finite values.
    pub failed: usize,
    /// Refits run.
    pub refits: usize,
}

impl<'c> Scanner<'c> {
    /// A scanner (with its own refit workspace) for `ctx`.
    pub fn new(ctx: &'c Fitted<'c>) -> Self {
        let q = super::profile::threshold_for(ctx.fit, ctx.settings.level);
        let tight = q.is_finite() && q < TIGHT_REFIT_QUANTILE;
        let problem = Problem {
            model: ctx.problem.model,
            params: ctx.problem.params.clone(),
            options: FitOptions {
                stop_at_optimality: ctx.problem.options.stop_at_optimality && !tight,
                ..ctx.problem.options.clone()
            },
        };
        Scanner {
            ctx,
            problem,
            xs: ctx.data.x_slices(),
            sigma: ctx.data.sigma_or_ones(),
            free: ctx.free_mask(),
            start: ctx.values(),
            refitter: Refitter::new(&ctx.problem, ctx.data.len()),
            failed: 0,
            refits: 0,
        }
    }

    /// Minimises chi-squared over the parameters not held, with each
    /// `(j, value)` of `held` fixed at `value`, warm-started from `start`.
    /// `None` when the refit failed.
    pub fn at(&mut self, held: &[(usize, f64)], start: &[f64]) -> Option<Node> {
        let mask = self.ctx.free_mask();
        self.free.copy_from_slice(&mask);
        self.start.copy_from_slice(start);
        for &(j, v) in held {
            self.free[j] = false;
            self.start[j] = v;
        }
        let view = DataView {
            x: &self.xs,
            y: &self.ctx.data.y,
            sigma: &self.sigma,
            sigma_x: self.ctx.data.sigma_x.as_deref().unwrap_or(&[]),
        };
        self.refits += 1;
        let out = self.refitter.refit(&self.problem, &view, &self.start, &self.free);
        let params = self.refitter.params();
        if out.converged && out.chi2.is_finite() && params.iter().all(|p| p.is_finite()) {
            Some(Node {
                chi2: out.chi2,
                params: params.to_vec(),
            })
        } else {
            self.failed += 1;
            None
        }
    }
}

/// Factor by which chi-squared quantiles are multiplied to become
/// thresholds on chi-squared: `chi2 / dof` when the base fit's covariance is
/// scaled (no sigma given), else 1. Keeps profiles, contours and the
/// covariance on the same footing.
pub(crate) fn chi2_scale(fit: &FitResult) -> f64 {
    if fit.covariance_scaled {
        let s = fit.reduced_chi2;
        if s.is_finite() && s >= 0.0 {
            return s;
        }
    }
    1.0
}

/// Step scale of parameter `j`: its standard error when known, else a tenth
/// of its magnitude (0.1 at zero), no more than a tenth of a finite bound
/// range. Never below a few ulps of the estimate.
pub(crate) fn step_scale(ctx: &Fitted, j: usize) -> f64 {
    let p = &ctx.fit.parameters[j];
    let v = p.value;
    let floor = 64.0 * f64::EPSILON * v.abs();
    if let Some(se) = p.std_error {
        if se.is_finite() && se > 0.0 {
            return se.max(floor);
        }
    }
    let mut s = if v.abs() > 0.0 && v.is_finite() {
        0.1 * v.abs()
    } else {
        0.1
    };
    let spec = &ctx.problem.params[j];
    let range = spec.max - spec.min;
    if range.is_finite() && range > 0.0 {
        s = s.min(0.1 * range);
    }
    if !(s.is_finite() && s > 0.0) {
        s = 0.1;
    }
    s.max(floor)
}

/// How an outward exploration ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum WalkEnd {
    /// The profile rose past the acceptance level.
    Reached,
    /// The parameter's bound was reached first.
    Bound,
    /// The scan limit was reached first.
    Limit,
    /// Refits failed before either.
    Failed,
}

/// The points of an outward exploration, nearest first.
#[derive(Debug, Clone)]
pub(crate) struct Walk {
    /// `(a_j, node)` in outward order.
    pub nodes: Vec<(f64, Node)>,
    /// Why it stopped.
    pub end: WalkEnd,
}

impl Walk {
    /// Distance from `estimate` of the farthest point (0 when none).
    pub fn reach(&self, estimate: f64) -> f64 {
        self.nodes.last().map_or(0.0, |(x, _)| (x - estimate).abs())
    }
}

/// What an exploration looks for, in chi-squared above the minimum.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Target {
    /// The rise aimed at when predicting the next step.
    pub aim: f64,
    /// The rise at which the exploration stops.
    pub accept: f64,
    /// First trial distance from the estimate.
    pub first: f64,
    /// Largest distance from the estimate.
    pub limit: f64,
}

/// Walks from the base fit along parameter `j` in direction `dir` (+1 or
/// -1), refitting the others at each point (warm-started from the previous
/// point), until chi-squared rises `target.accept` above `chi2_min`, or a
/// bound or the scan limit is reached. Each next distance is the quadratic
/// extrapolation to `target.aim` from the last point, growing by 1.1x to 4x;
/// a failed refit halves the step (three times at most).
pub(crate) fn explore(
    sc: &mut Scanner,
    j: usize,
    dir: f64,
    base: &[f64],
    chi2_min: f64,
    target: Target,
) -> Walk {
    let est = base[j];
    let spec = &sc.ctx.problem.params[j];
    let bound = if dir > 0.0 { spec.max } else { spec.min };
    let room = if bound.is_finite() {
        (bound - est).abs()
    } else {
        f64::INFINITY
    };
    let dmax = room.min(target.limit);
    let mut nodes: Vec<(f64, Node)> = Vec::new();
    if dmax.is_nan() || dmax <= 0.0 {
        let end = if room <= target.limit {
            WalkEnd::Bound
        } else {
            WalkEnd::Limit
        };
        return Walk { nodes, end };
    }
    let mut start = base.to_vec();
    let mut d_last = 0.0;
    let mut d = target.first.min(dmax);
    let mut retries = 0;
    for _ in 0..MAX_EXPLORATION_STEPS {
        let x = if d >= room { bound } else { est + dir * d };
        match sc.at(&[(j, x)], &start) {
            Some(node) => {
                retries = 0;
                let rise = node.chi2 - chi2_min;
                let inner = std::mem::replace(&mut start, node.params.clone());
                nodes.push((x, node));
                if rise >= target.accept {
                    tighten(
                        sc,
                        j,
                        est,
                        dir,
                        chi2_min,
                        target,
                        &mut nodes,
                        (d_last, inner),
                        (d, rise),
                    );
                    return Walk {
                        nodes,
                        end: WalkEnd::Reached,
                    };
                }
                if d >= dmax {
                    let end = if d >= room { WalkEnd::Bound } else { WalkEnd::Limit };
                    return Walk { nodes, end };
                }
                let grow = if rise > 0.0 && target.aim > 0.0 {
                    (target.aim / rise).sqrt()
                } else {
                    4.0
                };
                d_last = d;
                d = (d * grow.clamp(1.1, 4.0)).min(dmax);
            }
            None => {
                retries += 1;
                let half = d_last + 0.5 * (d - d_last);
                if retries > 3 || half.is_nan() || half <= d_last {
                    break;
                }
                d = half;
            }
        }
    }
    Walk {
        nodes,
        end: WalkEnd::Failed,
    }
}

/// Pulls the end of an exploration back towards the aim when the last step
/// overshot it by more than [`OVERSHOOT`]: bisects between the last point
/// below the acceptance level (`inner`: distance and parameters) and the
/// end, keeping `nodes` in outward order with the end (still at or above
/// the acceptance level) last.
#[allow(clippy::too_many_arguments)]
fn tighten(
    sc: &mut Scanner,
    j: usize,
    est: f64,
    dir: f64,
    chi2_min: f64,
    target: Target,
    nodes: &mut Vec<(f64, Node)>,
    inner: (f64, Vec<f64>),
    outer: (f64, f64),
) {
    let (mut d_lo, mut lo_params) = inner;
    let (mut d_hi, mut rise_hi) = outer;
    for _ in 0..MAX_TIGHTEN {
        if rise_hi <= OVERSHOOT * target.aim {
            return;
        }
        let dt = 0.5 * (d_lo + d_hi);
        let xt = est + dir * dt;
        let Some(node) = sc.at(&[(j, xt)], &lo_params) else {
            return;
        };
        let rise = node.chi2 - chi2_min;
        let last = nodes.len() - 1;
        if rise >= target.accept {
            nodes[last] = (xt, node);
            d_hi = dt;
            rise_hi = rise;
        } else {
            lo_params.copy_from_slice(&node.params);
            nodes.insert(last, (xt, node));
            d_lo = dt;
        }
    }
}
