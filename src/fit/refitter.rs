//! The reusable refit workspace and the evaluation helpers shared by the
//! two methods.

use super::{DataView, Method, Problem, Refit, StopReason};
use crate::model::{ModelFn, NonFinite};

/// Reusable workspace (Send). Allocation-free refits after construction for
/// the same number of points and parameters.
///
/// Every buffer the optimiser touches lives here; [`Refitter::refit`] only
/// resizes them when called with a different number of points or
/// parameters than it was built for.
#[derive(Debug, Clone)]
pub struct Refitter {
    pub(crate) n: usize,
    pub(crate) m: usize,
    /// Current (and, after a refit, final) parameters.
    pub(crate) a: Vec<f64>,
    /// Trial parameters.
    pub(crate) trial: Vec<f64>,
    /// Effective bounds (held parameters get `start..start`).
    pub(crate) lo: Vec<f64>,
    pub(crate) hi: Vec<f64>,
    /// Varies in this refit (free mask and not fixed in the spec).
    pub(crate) varies: Vec<bool>,
    /// Indices of the parameters in the current step.
    pub(crate) active: Vec<usize>,
    /// Model values at `a` and at the trial point.
    pub(crate) values: Vec<f64>,
    pub(crate) trial_values: Vec<f64>,
    /// Weighted residuals `(f - y) / sigma` at `a` and at the trial point.
    pub(crate) resid: Vec<f64>,
    pub(crate) trial_resid: Vec<f64>,
    /// Weighted Jacobian `d f / d a / sigma` (n x m, column-major) at `a`
    /// and at the trial point.
    pub(crate) jac: Vec<f64>,
    pub(crate) trial_jac: Vec<f64>,
    /// QR storage (n x k).
    pub(crate) qr: Vec<f64>,
    pub(crate) rdiag: Vec<f64>,
    pub(crate) beta: Vec<f64>,
    /// `Q^T r` (n).
    pub(crate) qtr: Vec<f64>,
    /// Second directional derivative of the residuals and its `Q^T` (n).
    pub(crate) rpp: Vec<f64>,
    /// Jacobi SVD storage (k x k) and values (k).
    pub(crate) w: Vec<f64>,
    pub(crate) v: Vec<f64>,
    pub(crate) s: Vec<f64>,
    /// `u_i^T Q^T r` and the same for the acceleration (k).
    pub(crate) c: Vec<f64>,
    pub(crate) c2: Vec<f64>,
    /// Scaled step and acceleration (k).
    pub(crate) p: Vec<f64>,
    pub(crate) acc: Vec<f64>,
    /// Step in parameter space (m).
    pub(crate) d: Vec<f64>,
    /// More's diagonal scaling (m).
    pub(crate) diag: Vec<f64>,
    /// Gradient `J^T r` (m) and column norms (m).
    pub(crate) grad: Vec<f64>,
    pub(crate) colnorm: Vec<f64>,
    /// `J d` (n).
    pub(crate) jd: Vec<f64>,
    /// `1 / sigma` of the current data (n).
    pub(crate) inv_sigma: Vec<f64>,
    /// The model's scratch buffer.
    pub(crate) scratch: Vec<f64>,
    /// Evaluations in the current refit.
    pub(crate) evaluations: usize,
}

impl Refitter {
    /// A workspace for `problem` on data of `n_points` points.
    pub fn new(problem: &Problem, n_points: usize) -> Refitter {
        let m = problem.params.len().max(problem.model.n_params());
        let mut r = Refitter {
            n: 0,
            m: 0,
            a: Vec::new(),
            trial: Vec::new(),
            lo: Vec::new(),
            hi: Vec::new(),
            varies: Vec::new(),
            active: Vec::new(),
            values: Vec::new(),
            trial_values: Vec::new(),
            resid: Vec::new(),
            trial_resid: Vec::new(),
            jac: Vec::new(),
            trial_jac: Vec::new(),
            qr: Vec::new(),
            rdiag: Vec::new(),
            beta: Vec::new(),
            qtr: Vec::new(),
            rpp: Vec::new(),
            w: Vec::new(),
            v: Vec::new(),
            s: Vec::new(),
            c: Vec::new(),
            c2: Vec::new(),
            p: Vec::new(),
            acc: Vec::new(),
            d: Vec::new(),
            diag: Vec::new(),
            grad: Vec::new(),
            colnorm: Vec::new(),
            jd: Vec::new(),
            inv_sigma: Vec::new(),
            scratch: Vec::new(),
            evaluations: 0,
        };
        r.resize(n_points, m);
        r
    }

    pub(crate) fn resize(&mut self, n: usize, m: usize) {
        if n == self.n && m == self.m {
            return;
        }
        self.n = n;
        self.m = m;
        for b in [&mut self.a, &mut self.trial, &mut self.lo, &mut self.hi] {
            b.resize(m, 0.0);
        }
        self.varies.resize(m, false);
        self.active.clear();
        self.active.reserve(m);
        for b in [
            &mut self.values,
            &mut self.trial_values,
            &mut self.resid,
            &mut self.trial_resid,
            &mut self.qtr,
            &mut self.rpp,
            &mut self.jd,
            &mut self.inv_sigma,
        ] {
            b.resize(n, 0.0);
        }
        for b in [&mut self.jac, &mut self.trial_jac, &mut self.qr] {
            b.resize(n * m, 0.0);
        }
        for b in [&mut self.w, &mut self.v] {
            b.resize(m * m, 0.0);
        }
        for b in [
            &mut self.rdiag,
            &mut self.beta,
            &mut self.s,
            &mut self.c,
            &mut self.c2,
            &mut self.p,
            &mut self.acc,
            &mut self.d,
            &mut self.diag,
            &mut self.grad,
            &mut self.colnorm,
        ] {
            b.resize(m, 0.0);
        }
    }

    /// Solution of the last refit (all parameters, held ones included).
    pub fn params(&self) -> &[f64] {
        &self.a
    }

    /// Weighted residuals `(f - y) / sigma` at the last refit's solution.
    pub fn weighted_residuals(&self) -> &[f64] {
        &self.resid
    }

    /// Minimise chi2 on `data` from `start`. Parameters with
    /// `free[j] == false`, or `spec.fixed`, are held at `start[j]`.
    /// Bounds of the specs are respected (a start outside its bounds is
    /// moved onto the nearest bound). Warm-startable: costs only its
    /// iterations.
    ///
    /// Inconsistent lengths (start, free, data columns against the problem)
    /// are reported as a non-converged [`StopReason::NonFinite`] result with
    /// `chi2 = +inf`; the checked entry points are [`super::fit`] and
    /// [`super::fit_from`].
    pub fn refit(&mut self, problem: &Problem, data: &DataView, start: &[f64], free: &[bool]) -> Refit {
        let n = data.y.len();
        let m = problem.params.len();
        self.evaluations = 0;
        let consistent = m == problem.model.n_params()
            && start.len() == m
            && free.len() == m
            && data.sigma.len() == n
            && data.x.iter().all(|c| c.len() == n);
        if !consistent {
            return Refit {
                chi2: f64::INFINITY,
                converged: false,
                stop: StopReason::NonFinite,
                iterations: 0,
                evaluations: 0,
            };
        }
        self.resize(n, m);
        for (o, s) in self.inv_sigma.iter_mut().zip(data.sigma.iter()) {
            *o = 1.0 / s;
        }
        for (j, spec) in problem.params.iter().enumerate() {
            let held = spec.fixed || !free[j];
            self.varies[j] = !held;
            if held {
                self.lo[j] = start[j];
                self.hi[j] = start[j];
                self.a[j] = start[j];
            } else {
                self.lo[j] = spec.min;
                self.hi[j] = spec.max;
                self.a[j] = start[j].max(spec.min).min(spec.max);
            }
        }
        match problem.options.method {
            Method::Lm => super::lm::run(self, problem, data),
            Method::Steepest => super::steepest::run(self, problem, data),
        }
    }

    /// Evaluates the model at `self.a` into `values`, `resid` and (when
    /// asked) `jac`. Returns chi2.
    pub(crate) fn eval_current(
        &mut self,
        model: &dyn ModelFn,
        data: &DataView,
        with_jac: bool,
    ) -> Result<f64, NonFinite> {
        self.evaluations += 1;
        eval_into(
            model,
            data,
            &self.inv_sigma,
            &self.a,
            &mut self.values,
            &mut self.resid,
            if with_jac { Some(&mut self.jac) } else { None },
            &mut self.scratch,
        )
    }

    /// Evaluates the model at `self.trial` into the trial buffers.
    pub(crate) fn eval_trial(
        &mut self,
        model: &dyn ModelFn,
        data: &DataView,
        with_jac: bool,
    ) -> Result<f64, NonFinite> {
        self.evaluations += 1;
        eval_into(
            model,
            data,
            &self.inv_sigma,
            &self.trial,
            &mut self.trial_values,
            &mut self.trial_resid,
            if with_jac { Some(&mut self.trial_jac) } else { None },
            &mut self.scratch,
        )
    }

    /// Makes the trial point the current one (buffer swap, no copy).
    pub(crate) fn accept_trial(&mut self, with_jac: bool) {
        std::mem::swap(&mut self.a, &mut self.trial);
        std::mem::swap(&mut self.values, &mut self.trial_values);
        std::mem::swap(&mut self.resid, &mut self.trial_resid);
        if with_jac {
            std::mem::swap(&mut self.jac, &mut self.trial_jac);
        }
    }

    /// Gradient `g = J^T r` and column norms of the weighted Jacobian for
    /// the varying parameters; fills `active` with those not pinned on a
    /// bound by the descent direction.
    pub(crate) fn gradient_and_active(&mut self) {
        let n = self.n;
        self.active.clear();
        for j in 0..self.m {
            if !self.varies[j] {
                self.grad[j] = 0.0;
                self.colnorm[j] = 0.0;
                continue;
            }
            let col = &self.jac[j * n..(j + 1) * n];
            let g = super::linalg::dot(col, &self.resid);
            self.grad[j] = g;
            self.colnorm[j] = super::linalg::norm2(col);
            // Descent direction is -g: pinned when it points out of the box.
            let pinned_low = self.a[j] <= self.lo[j] && g > 0.0;
            let pinned_high = self.a[j] >= self.hi[j] && g < 0.0;
            if !(pinned_low || pinned_high) {
                self.active.push(j);
            }
        }
    }

    /// Largest cosine between the residual vector and a Jacobian column of
    /// the active parameters (the scaled gradient of the stopping rule).
    pub(crate) fn scaled_gradient(&self, rnorm: f64) -> f64 {
        let mut gmax = 0.0f64;
        for &j in &self.active {
            if self.colnorm[j] > 0.0 && rnorm > 0.0 {
                gmax = gmax.max(self.grad[j].abs() / (self.colnorm[j] * rnorm));
            }
        }
        gmax
    }

    /// Rounding noise of chi2 at the current point: each residual
    /// `(f - y) / sigma` carries an error of about `eps (|f| + |y|) / sigma`,
    /// so chi2 is uncertain by about `2 eps sum |r| (|f| + |y|) / sigma`.
    pub(crate) fn chi2_noise(&self, y: &[f64]) -> f64 {
        let mut s = 0.0;
        for (((r, f), y), w) in self.resid.iter().zip(&self.values).zip(y).zip(&self.inv_sigma) {
            s += r.abs() * (f.abs() + y.abs()) * w;
        }
        let chi2: f64 = super::linalg::dot(&self.resid, &self.resid);
        2.0 * f64::EPSILON * s + f64::EPSILON * chi2
    }

    /// Norm of the scaled current parameters over the varying ones.
    pub(crate) fn scaled_xnorm(&self) -> f64 {
        let mut s = 0.0;
        for j in 0..self.m {
            if self.varies[j] {
                let t = self.diag[j] * self.a[j];
                s += t * t;
            }
        }
        s.sqrt()
    }

    /// `trial = clamp(a + d)` over the varying parameters; `d` is replaced
    /// by the projected step.
    pub(crate) fn project_trial(&mut self) {
        for j in 0..self.m {
            if self.varies[j] {
                let t = (self.a[j] + self.d[j]).max(self.lo[j]).min(self.hi[j]);
                self.trial[j] = t;
                self.d[j] = t - self.a[j];
            } else {
                self.trial[j] = self.a[j];
                self.d[j] = 0.0;
            }
        }
    }

    /// `jd = J d` over the varying parameters.
    pub(crate) fn jac_times_d(&mut self) {
        let n = self.n;
        self.jd.iter_mut().for_each(|v| *v = 0.0);
        for j in 0..self.m {
            let dj = self.d[j];
            if dj != 0.0 {
                let col = &self.jac[j * n..(j + 1) * n];
                for (o, c) in self.jd.iter_mut().zip(col.iter()) {
                    *o += c * dj;
                }
            }
        }
    }
}

/// Evaluates values, weighted residuals and (optionally) the weighted
/// Jacobian at `params`; returns chi2. `inv_sigma` is `1 / data.sigma`.
#[allow(clippy::too_many_arguments)] // buffers passed apart so the caller can split borrows
pub(crate) fn eval_into(
    model: &dyn ModelFn,
    data: &DataView,
    inv_sigma: &[f64],
    params: &[f64],
    values: &mut [f64],
    resid: &mut [f64],
    jac: Option<&mut Vec<f64>>,
    scratch: &mut Vec<f64>,
) -> Result<f64, NonFinite> {
    let n = values.len();
    match jac {
        Some(j) => {
            model.eval(params, data.x, values, Some(j.as_mut_slice()), scratch)?;
            let m = j.len() / n.max(1);
            for col in j.chunks_exact_mut(n.max(1)).take(m) {
                for (v, w) in col.iter_mut().zip(inv_sigma.iter()) {
                    *v *= w;
                }
            }
        }
        None => model.eval(params, data.x, values, None, scratch)?,
    }
    let mut chi2 = 0.0;
    for i in 0..n {
        let r = (values[i] - data.y[i]) * inv_sigma[i];
        resid[i] = r;
        chi2 += r * r;
    }
    if chi2.is_finite() {
        Ok(chi2)
    } else {
        // A non-finite residual, or else the first point whose square
        // overflows (finite residuals whose squares sum past f64::MAX).
        let point = resid
            .iter()
            .position(|r| !(r * r).is_finite())
            .unwrap_or_else(|| {
                let mut sum = 0.0;
                resid
                    .iter()
                    .position(|r| {
                        sum += r * r;
                        !sum.is_finite()
                    })
                    .unwrap_or(0)
            });
        Err(NonFinite { point })
    }
}
