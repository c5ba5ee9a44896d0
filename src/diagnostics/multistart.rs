//! Multi-start search for competing minima.
//!
//! The search refits the problem from many starting points spread over a box
//! around the base fit, groups the endpoints into distinct minima and tells
//! whether the base fit is the best of them.
//!
//! # Rules
//!
//! **Sampling box** (per parameter, see [`sampling_box`]). A fixed parameter
//! stays at its value. A parameter with two finite bounds is sampled over its
//! bounds. Otherwise the default box is the hull of the study's start and the
//! base-fit value, widened on each side by
//! `h = max(3 * max(|start|, |value|), 3 * SE, 1)` (scaled by the magnitude of
//! the start; `SE` is the base fit's standard error, left out when missing)
//! and then cut at the one finite bound, if any. When
//! `settings.multistart.log_uniform` is on, a box that is positive
//! (`low >= 0`, `high > 0`) and spans more than a decade is sampled
//! uniformly in the logarithm; a positive box that starts at 0 is sampled over
//! its top three decades (`[high * 1e-3, high]`, lowered to the smallest
//! positive start or value when that is smaller), and `box_bounds` reports
//! the range actually sampled.
//!
//! **Design.** One Latin hypercube over the free parameters
//! ([`super::sampling::latin_hypercube`]), drawn in full from
//! `rng::stream(seed, Stream::Multistart, 0)` before any refit. Start `k` is
//! row `k` of that design, so the starts do not depend on the thread count
//! and the fits (deterministic refits, collected in start order) do not
//! either. A different seed gives a different design.
//!
//! **Refits.** Every start is refitted by [`crate::fit::Refitter::refit`]
//! with the free mask of the study (one workspace per rayon worker). A start
//! whose refit did not converge, or ended on a non-finite chi-squared, is
//! counted in `failed` and not clustered.
//!
//! **Same minimum.** Two endpoints are the same minimum when their
//! chi-squared values agree within
//! `max(1e-6 * max(chi2_a, chi2_b), 1e-3 * u)` ([`CHI2_REL_TOL`],
//! [`CHI2_ABS_TOL`]) and every parameter agrees within `0.1` standard errors
//! of the base fit ([`PARAM_TOL_SE`]); for a parameter without a standard
//! error the tolerance is `1e-3` relative ([`PARAM_REL_TOL`]). `u`, the unit
//! of chi-squared, is 1 when the covariance is absolute (sigma known) and the
//! best reduced chi-squared found when it is scaled by chi2/dof (sigma
//! unknown), so that the same rules hold whatever the units of `y`. The
//! endpoints are taken in order of increasing chi-squared; each joins the
//! first minimum whose representative (its lowest-chi-squared endpoint) it
//! matches, or founds a new one.
//!
//! **Equivalent minima.** Two minima with the same chi-squared (tolerance
//! above) are equivalent when some permutation of the free parameters maps
//! one onto the other within the parameter tolerance (for a pair of
//! parameters the larger of their two tolerances). This covers swapping two
//! parameters, swapping two pairs (the components of a two-exponential
//! model, `(a1, k1) <-> (a2, k2)`) and any other relabelling; the search is a
//! backtracking match that tries to keep each parameter in place first.
//! Equivalent minima are merged into one: counts add up, the representative
//! is the lowest-chi-squared endpoint, and `equivalent_permutations` lists
//! the cycles (for a swap, the two names) of each permutation found, without
//! repeats.
//!
//! **Same fit.** Two minima with the same chi-squared whose weighted model
//! values agree (`sum_i ((f_a,i - f_b,i) / sigma_i)^2` within the chi-squared
//! tolerance) are one minimum too: their parameters differ only along
//! directions the data do not see (for instance the frequency and phase of a
//! sinusoid whose amplitude sits on a bound at 0). They are merged like
//! equivalent minima but list no permutation.
//!
//! **Distinguishable.** A minimum is distinguishable from the best when its
//! delta chi-squared exceeds `u * q`, `q` the chi-squared quantile with one
//! degree of freedom at `settings.level` (for 0.6827, q = 1). One degree of
//! freedom is the choice of the profile-likelihood rule for one parameter:
//! a rival is reported as distinguishable when it would lie outside the
//! one-parameter confidence region of the best minimum along the line that
//! joins them.
//!
//! **Base fit.** `base_is_best` is false when the best minimum has a
//! chi-squared lower than the base fit's by more than the clustering
//! tolerance and by more than `u * q`.
//!
//! **Missed minima.** Boender & Rinnooy Kan (1987), "Bayesian stopping rules
//! for multistart global optimization methods", Math. Programming 37:59-80,
//! see [`boender_rinnooy_kan`].

use super::sampling::{latin_hypercube, Interval, Scale};
use super::{Fitted, Progress};
use crate::fit::{DataView, ParamSpec, Refitter};
use crate::rng::{self, Stream};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// A parameter value by name.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NamedValue {
    /// Parameter name.
    pub name: String,
    /// Value.
    pub value: f64,
}

/// One distinct minimum.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Minimum {
    /// Chi-squared.
    pub chi2: f64,
    /// Chi-squared minus the best minimum's.
    pub delta_chi2: f64,
    /// Share of the converged starts that ended here.
    pub fraction: f64,
    /// Starts that ended here.
    pub count: usize,
    /// Whether delta chi-squared exceeds the chi-squared quantile.
    pub distinguishable: bool,
    /// Parameter permutations that map this minimum onto others with the
    /// same chi-squared, as lists of swapped parameter names.
    pub equivalent_permutations: Vec<Vec<String>>,
    /// Representative parameters.
    pub parameters: Vec<NamedValue>,
}

/// One start and where it ended.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StartRun {
    /// Starting point.
    pub start: Vec<f64>,
    /// End point.
    pub end: Vec<f64>,
    /// Chi-squared at the end.
    pub chi2: f64,
    /// Whether the fit converged.
    pub converged: bool,
    /// Index into `minima`, None for failed starts.
    pub minimum: Option<usize>,
}

/// Result of the multi-start search.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MultistartResult {
    /// Starts run.
    pub starts: usize,
    /// Starts whose fit failed.
    pub failed: usize,
    /// Chi-squared of the base fit.
    pub base_chi2: f64,
    /// False when a minimum with a clearly lower chi-squared exists.
    pub base_is_best: bool,
    /// Distinct minima, best first.
    pub minima: Vec<Minimum>,
    /// Bayesian estimate (Boender & Rinnooy Kan 1987) of the probability
    /// that a minimum was missed.
    pub missed_minimum_estimate: f64,
    /// Expected total number of minima under the same rule.
    pub expected_minima: f64,
    /// Sampling box per parameter `[low, high]`.
    pub box_bounds: Vec<[f64; 2]>,
    /// Every start, for the figures.
    pub runs: Vec<StartRun>,
}

/// Relative chi-squared tolerance of "same minimum".
pub const CHI2_REL_TOL: f64 = 1e-6;
/// Absolute chi-squared tolerance of "same minimum", in units of the
/// chi-squared unit `u` (see the module documentation).
pub const CHI2_ABS_TOL: f64 = 1e-3;
/// Parameter tolerance of "same minimum", in standard errors of the base fit.
pub const PARAM_TOL_SE: f64 = 0.1;
/// Relative parameter tolerance when the base fit has no standard error.
pub const PARAM_REL_TOL: f64 = 1e-3;
/// Half-width of the default box in units of the start's magnitude and of
/// the standard error.
pub const BOX_FACTOR: f64 = 3.0;
/// Smallest half-width of the default box.
pub const BOX_MIN_HALF_WIDTH: f64 = 1.0;
/// Decades sampled at the top of a positive box that starts at zero.
pub const LOG_ZERO_DECADES: i32 = 3;
/// Backtracking steps allowed when matching two minima by a permutation.
const PERMUTATION_BUDGET: usize = 20_000;

/// The sampling range of one parameter (rules in the module documentation).
///
/// `value` is the base-fit value, `std_error` its standard error.
pub fn sampling_box(spec: &ParamSpec, value: f64, std_error: Option<f64>, log_uniform: bool) -> Interval {
    if spec.fixed {
        return Interval::point(value);
    }
    let (lo_bound, hi_bound) = (spec.min, spec.max);
    let start = if spec.start.is_finite() {
        spec.start.clamp(lo_bound.min(hi_bound), hi_bound.max(lo_bound))
    } else {
        value
    };
    let (low, high) = if lo_bound.is_finite() && hi_bound.is_finite() {
        (lo_bound, hi_bound)
    } else {
        let se = std_error.filter(|s| s.is_finite() && *s > 0.0).unwrap_or(0.0);
        let h = (BOX_FACTOR * start.abs().max(value.abs()))
            .max(BOX_FACTOR * se)
            .max(BOX_MIN_HALF_WIDTH);
        let low = (start.min(value) - h).max(lo_bound);
        let high = (start.max(value) + h).min(hi_bound);
        (low, high)
    };
    if !(low.is_finite() && high.is_finite()) || high <= low {
        return Interval::point(value);
    }
    if log_uniform && low >= 0.0 && high > 0.0 {
        if low > 0.0 {
            if high / low > 10.0 {
                return Interval {
                    low,
                    high,
                    scale: Scale::Log,
                };
            }
        } else {
            let mut floor = high * 10f64.powi(-LOG_ZERO_DECADES);
            for v in [start, value] {
                if v > 0.0 && v < floor {
                    floor = v;
                }
            }
            return Interval {
                low: floor,
                high,
                scale: Scale::Log,
            };
        }
    }
    Interval {
        low,
        high,
        scale: Scale::Linear,
    }
}

/// The starting points: row `k` is start `k`. One Latin hypercube over the
/// free parameters (in parameter order), drawn from
/// `rng::stream(seed, Stream::Multistart, 0)`; fixed parameters keep
/// `values[j]`.
pub fn design(boxes: &[Interval], free: &[bool], values: &[f64], n: usize, seed: u64) -> Vec<Vec<f64>> {
    let axes: Vec<usize> = (0..boxes.len()).filter(|&j| free[j]).collect();
    let mut rng = rng::stream(seed, Stream::Multistart, 0);
    let unit = latin_hypercube(n, axes.len(), &mut rng);
    unit.iter()
        .map(|u| {
            let mut start = values.to_vec();
            for (d, &j) in axes.iter().enumerate() {
                start[j] = boxes[j].map(u[d]);
            }
            start
        })
        .collect()
}

/// Boender & Rinnooy Kan (1987), Math. Programming 37:59-80: with `n`
/// converged starts that found `w` distinct minima, returns
/// `(missed, expected)`:
///
/// * `expected` = `w (n - 1) / (n - w - 2)`, the posterior expected number
///   of minima;
/// * `missed` = `1 - (n - w - 1)(n + w) / (n (n - 1))` = `w (w + 1) / (n (n - 1))`,
///   one minus the posterior expected share of the search region covered by
///   the basins found, i.e. the probability that one more start lands in a
///   basin not seen yet.
///
/// Both formulas are quoted from memory. They need `n > w + 2`; otherwise
/// (too few starts to say anything) the result is `(1, n)`: certainly
/// incomplete, and the number of starts as a finite stand-in for an
/// unbounded expectation (results must stay finite for JSON).
pub fn boender_rinnooy_kan(n: usize, w: usize) -> (f64, f64) {
    if n <= w + 2 {
        return (1.0, n as f64);
    }
    let (nf, wf) = (n as f64, w as f64);
    let missed = (wf * (wf + 1.0) / (nf * (nf - 1.0))).clamp(0.0, 1.0);
    let expected = wf * (nf - 1.0) / (nf - wf - 2.0);
    (missed, expected)
}

/// What the endpoints are judged against: the base fit and the rules'
/// inputs.
#[derive(Debug, Clone, PartialEq)]
pub struct Reference {
    /// Parameter names, in parameter order.
    pub names: Vec<String>,
    /// Which parameters were free.
    pub free: Vec<bool>,
    /// Standard errors of the base fit.
    pub std_errors: Vec<Option<f64>>,
    /// Chi-squared of the base fit.
    pub base_chi2: f64,
    /// Degrees of freedom of the base fit.
    pub dof: usize,
    /// Whether the base fit's covariance was scaled by chi2/dof.
    pub scaled: bool,
    /// Confidence level of the distinguishability threshold.
    pub level: f64,
}

impl Reference {
    /// The reference of a fitted problem.
    pub fn from_fitted(ctx: &Fitted) -> Self {
        Reference {
            names: ctx.problem.params.iter().map(|p| p.name.clone()).collect(),
            free: ctx.free_mask(),
            std_errors: ctx.fit.parameters.iter().map(|p| p.std_error).collect(),
            base_chi2: ctx.fit.chi2,
            dof: ctx.fit.dof,
            scaled: ctx.fit.covariance_scaled,
            level: ctx.settings.level,
        }
    }
}

/// The chi-squared quantile with one degree of freedom at `level`.
pub fn threshold(level: f64) -> f64 {
    match ChiSquared::new(1.0) {
        Ok(d) if level > 0.0 && level < 1.0 => d.inverse_cdf(level),
        _ => f64::INFINITY,
    }
}

/// Tolerances of the clustering.
struct Rules<'a> {
    reference: &'a Reference,
    unit: f64,
}

impl Rules<'_> {
    fn chi2_tol(&self, a: f64, b: f64) -> f64 {
        (CHI2_REL_TOL * a.abs().max(b.abs())).max(CHI2_ABS_TOL * self.unit)
    }

    fn chi2_close(&self, a: f64, b: f64) -> bool {
        (a - b).abs() <= self.chi2_tol(a, b)
    }

    fn se(&self, j: usize) -> Option<f64> {
        self.reference
            .std_errors
            .get(j)
            .copied()
            .flatten()
            .filter(|s| s.is_finite() && *s > 0.0)
    }

    /// Whether value `x` of parameter `k` and value `y` of parameter `l`
    /// agree (k == l for the plain comparison).
    fn param_close(&self, k: usize, l: usize, x: f64, y: f64) -> bool {
        let tol = match (self.se(k), self.se(l)) {
            (Some(a), Some(b)) => PARAM_TOL_SE * a.max(b),
            (Some(a), None) | (None, Some(a)) => PARAM_TOL_SE * a,
            (None, None) => PARAM_REL_TOL * x.abs().max(y.abs()),
        };
        (x - y).abs() <= tol
    }

    fn same_point(&self, a: &[f64], b: &[f64]) -> bool {
        a.iter()
            .zip(b)
            .enumerate()
            .all(|(j, (&x, &y))| self.param_close(j, j, x, y))
    }

    /// A permutation `p` of the free parameters with `a[p[k]] ~ b[k]` for
    /// every k, trying the identity first at each position.
    fn permutation(&self, a: &[f64], b: &[f64]) -> Option<Vec<usize>> {
        let m = a.len();
        let free = &self.reference.free;
        let mut perm = vec![usize::MAX; m];
        let mut used = vec![false; m];
        for k in 0..m {
            if !free.get(k).copied().unwrap_or(true) {
                if !self.param_close(k, k, a[k], b[k]) {
                    return None;
                }
                perm[k] = k;
                used[k] = true;
            }
        }
        let order: Vec<usize> = (0..m).filter(|&k| perm[k] == usize::MAX).collect();
        let mut budget = PERMUTATION_BUDGET;
        if self.extend(a, b, &order, 0, &mut perm, &mut used, &mut budget) {
            Some(perm)
        } else {
            None
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn extend(
        &self,
        a: &[f64],
        b: &[f64],
        order: &[usize],
        depth: usize,
        perm: &mut [usize],
        used: &mut [bool],
        budget: &mut usize,
    ) -> bool {
        if depth == order.len() {
            return true;
        }
        let k = order[depth];
        let candidates = std::iter::once(k).chain(order.iter().copied().filter(|&l| l != k));
        for l in candidates {
            if used[l] || !self.param_close(l, k, a[l], b[k]) {
                continue;
            }
            if *budget == 0 {
                return false;
            }
            *budget -= 1;
            perm[k] = l;
            used[l] = true;
            if self.extend(a, b, order, depth + 1, perm, used, budget) {
                return true;
            }
            used[l] = false;
            perm[k] = usize::MAX;
        }
        false
    }
}

/// The cycles (length >= 2) of a permutation, each as parameter names
/// starting from its lowest index.
fn cycles(perm: &[usize], names: &[String]) -> Vec<Vec<String>> {
    let mut seen = vec![false; perm.len()];
    let mut out = Vec::new();
    for s in 0..perm.len() {
        if seen[s] || perm[s] == s {
            seen[s] = true;
            continue;
        }
        let mut cycle = Vec::new();
        let mut k = s;
        while !seen[k] {
            seen[k] = true;
            cycle.push(names.get(k).cloned().unwrap_or_else(|| format!("#{k}")));
            k = perm[k];
        }
        out.push(cycle);
    }
    out
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

/// Weighted model values `f(x_i; a) / sigma_i` at a parameter vector, None
/// when the model is not finite there.
pub type Predict<'a> = dyn Fn(&[f64]) -> Option<Vec<f64>> + 'a;

/// Clusters the endpoints of `runs` into minima, merges equivalent ones and
/// fills in every summary field (rules in the module documentation). Sets
/// `runs[k].minimum`. `predict` gives the weighted model values of an
/// endpoint, for the same-fit rule.
pub fn summarise(
    reference: &Reference,
    mut runs: Vec<StartRun>,
    box_bounds: Vec<[f64; 2]>,
    predict: &Predict,
) -> MultistartResult {
    let usable = |r: &StartRun| r.converged && r.chi2.is_finite() && r.end.iter().all(|v| v.is_finite());
    let mut ok: Vec<usize> = (0..runs.len()).filter(|&k| usable(&runs[k])).collect();
    ok.sort_by(|&a, &b| runs[a].chi2.total_cmp(&runs[b].chi2).then(a.cmp(&b)));
    for r in runs.iter_mut() {
        r.minimum = None;
    }

    let best_seen = ok
        .first()
        .map(|&k| runs[k].chi2)
        .unwrap_or(f64::INFINITY)
        .min(reference.base_chi2);
    let unit = if reference.scaled && reference.dof > 0 {
        let u = best_seen / reference.dof as f64;
        if u.is_finite() && u > 0.0 {
            u
        } else {
            1.0
        }
    } else {
        1.0
    };
    let rules = Rules { reference, unit };
    let q = unit * threshold(reference.level);

    // Clusters of endpoints, each a list of run indices, lowest chi2 first.
    let mut clusters: Vec<Vec<usize>> = Vec::new();
    for &k in &ok {
        let r = &runs[k];
        let home = clusters.iter().position(|c| {
            let rep = &runs[c[0]];
            rules.chi2_close(rep.chi2, r.chi2) && rules.same_point(&rep.end, &r.end)
        });
        match home {
            Some(c) => clusters[c].push(k),
            None => clusters.push(vec![k]),
        }
    }

    // Merge clusters that are images of each other under a permutation.
    let nc = clusters.len();
    let mut parent: Vec<usize> = (0..nc).collect();
    for i in 0..nc {
        for j in i + 1..nc {
            let (a, b) = (&runs[clusters[i][0]], &runs[clusters[j][0]]);
            if find(&mut parent, i) == find(&mut parent, j) || !rules.chi2_close(a.chi2, b.chi2) {
                continue;
            }
            if rules.permutation(&a.end, &b.end).is_some() {
                let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                parent[rj.max(ri)] = ri.min(rj);
            }
        }
    }
    // Merge clusters that are the same fit: equal chi2 and equal weighted
    // model values, parameters apart along a direction the data do not see.
    let mut fitted: Vec<Option<Option<Vec<f64>>>> = vec![None; nc];
    for i in 0..nc {
        for j in i + 1..nc {
            let (a, b) = (&runs[clusters[i][0]], &runs[clusters[j][0]]);
            if find(&mut parent, i) == find(&mut parent, j) || !rules.chi2_close(a.chi2, b.chi2) {
                continue;
            }
            for (c, r) in [(i, a), (j, b)] {
                if fitted[c].is_none() {
                    fitted[c] = Some(predict(&r.end));
                }
            }
            if let (Some(Some(fa)), Some(Some(fb))) = (&fitted[i], &fitted[j]) {
                let d2: f64 = fa.iter().zip(fb).map(|(x, y)| (x - y) * (x - y)).sum();
                if fa.len() == fb.len() && d2 <= rules.chi2_tol(a.chi2, b.chi2) {
                    let (ri, rj) = (find(&mut parent, i), find(&mut parent, j));
                    parent[rj.max(ri)] = ri.min(rj);
                }
            }
        }
    }
    // Clusters are in order of increasing chi2, so the lowest index of a
    // group holds the group's best endpoint.
    let mut groups: Vec<Vec<usize>> = Vec::new();
    let mut group_of = vec![usize::MAX; nc];
    for c in 0..nc {
        let root = find(&mut parent, c);
        if group_of[root] == usize::MAX {
            group_of[root] = groups.len();
            groups.push(Vec::new());
        }
        group_of[c] = group_of[root];
        groups[group_of[c]].push(c);
    }

    let n_ok = ok.len();
    let mut minima: Vec<(Minimum, Vec<usize>)> = groups
        .iter()
        .map(|g| {
            let rep = &runs[clusters[g[0]][0]];
            let mut perms: Vec<Vec<String>> = Vec::new();
            for &c in &g[1..] {
                if let Some(p) = rules.permutation(&rep.end, &runs[clusters[c][0]].end) {
                    for cy in cycles(&p, &reference.names) {
                        if !perms.contains(&cy) {
                            perms.push(cy);
                        }
                    }
                }
            }
            let count: usize = g.iter().map(|&c| clusters[c].len()).sum();
            let members: Vec<usize> = g.iter().flat_map(|&c| clusters[c].iter().copied()).collect();
            let m = Minimum {
                chi2: rep.chi2,
                delta_chi2: 0.0,
                fraction: count as f64 / n_ok as f64,
                count,
                distinguishable: false,
                equivalent_permutations: perms,
                parameters: reference
                    .names
                    .iter()
                    .zip(&rep.end)
                    .map(|(n, &v)| NamedValue {
                        name: n.clone(),
                        value: v,
                    })
                    .collect(),
            };
            (m, members)
        })
        .collect();
    minima.sort_by(|a, b| a.0.chi2.total_cmp(&b.0.chi2));
    let best = minima.first().map(|m| m.0.chi2);
    for (i, (m, members)) in minima.iter_mut().enumerate() {
        m.delta_chi2 = m.chi2 - best.unwrap_or(m.chi2);
        m.distinguishable = m.delta_chi2 > q;
        for &k in members.iter() {
            runs[k].minimum = Some(i);
        }
    }
    let minima: Vec<Minimum> = minima.into_iter().map(|(m, _)| m).collect();

    let base_is_best = match best {
        Some(b) => {
            let gain = reference.base_chi2 - b;
            !(gain > rules.chi2_tol(reference.base_chi2, b) && gain > q)
        }
        None => true,
    };
    let (missed, expected) = boender_rinnooy_kan(n_ok, minima.len());
    MultistartResult {
        starts: runs.len(),
        failed: runs.len() - n_ok,
        base_chi2: reference.base_chi2,
        base_is_best,
        minima,
        missed_minimum_estimate: missed,
        expected_minima: expected,
        box_bounds,
        runs,
    }
}

/// Runs the multi-start search: `settings.multistart.starts` refits from a
/// Latin hypercube design, clustered into minima (rules in the module
/// documentation).
pub fn run(ctx: &Fitted, progress: &dyn Progress) -> MultistartResult {
    let n = ctx.settings.multistart.starts;
    let free = ctx.free_mask();
    let values = ctx.values();
    let boxes: Vec<Interval> = ctx
        .problem
        .params
        .iter()
        .zip(&ctx.fit.parameters)
        .map(|(spec, p)| sampling_box(spec, p.value, p.std_error, ctx.settings.multistart.log_uniform))
        .collect();
    let starts = design(&boxes, &free, &values, n, ctx.settings.seed);

    let x = ctx.data.x_slices();
    let sigma = ctx.data.sigma_or_ones();
    let view = DataView {
        x: &x,
        y: &ctx.data.y,
        sigma: &sigma,
    };
    let n_points = ctx.data.len();
    progress.start("multi-start", n as u64);
    let runs: Vec<StartRun> = starts
        .into_par_iter()
        .map_init(
            || Refitter::new(&ctx.problem, n_points),
            |refitter, start| {
                let out = refitter.refit(&ctx.problem, &view, &start, &free);
                progress.advance(1);
                StartRun {
                    start,
                    end: refitter.params().to_vec(),
                    chi2: out.chi2,
                    converged: out.converged,
                    minimum: None,
                }
            },
        )
        .collect();
    progress.finish();

    let box_bounds = boxes.iter().map(|b| [b.low, b.high]).collect();
    let predict = |a: &[f64]| -> Option<Vec<f64>> {
        let mut values = vec![0.0; n_points];
        let mut scratch = Vec::new();
        ctx.problem
            .model
            .eval(a, &x, &mut values, None, &mut scratch)
            .ok()?;
        Some(values.iter().zip(&sigma).map(|(f, s)| f / s).collect())
    };
    summarise(&Reference::from_fitted(ctx), runs, box_bounds, &predict)
}
