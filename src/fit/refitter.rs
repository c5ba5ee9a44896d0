//! The reusable refit workspace and the evaluation helpers shared by the
//! two methods.

use super::{DataView, EndCheck, Likelihood, Method, Problem, Refit, StopReason, OPTIMALITY_TOLERANCE};
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
    /// The error model of the current refit.
    pub(crate) likelihood: Likelihood,
    /// Buffers of the non-Gaussian error models (empty until one is used).
    pub(crate) aux: ErrorBuffers,
    /// The model's scratch buffer.
    pub(crate) scratch: Vec<f64>,
    /// Start of the current refit (after projection into the bounds) and
    /// the weighted Jacobian's column norms there relative to the norm of
    /// the weighted residuals (m each).
    pub(crate) a0: Vec<f64>,
    pub(crate) colnorm0: Vec<f64>,
    /// Per parameter after the end-point test: 0 fine, 1 plateau (column
    /// vanished), 2 runaway (m).
    pub(crate) end_flags: Vec<u8>,
    /// Diagonal scaling of steepest descent (m).
    pub(crate) sd_scale: Vec<f64>,
    /// The factorisation must keep `Q` and `U` (geodesic acceleration).
    pub(crate) need_qr: bool,
    /// Copy of the scaled normal matrix of the last normal-equations
    /// factorisation (m x m).
    pub(crate) normal: Vec<f64>,
    /// Active columns of the last normal-equations factorisation, whose
    /// eigenvectors in `v` start the next one.
    pub(crate) warm_active: Vec<usize>,
    /// The method already ran the end-point test at its end point (the
    /// result is in the returned [`Refit`]).
    pub(crate) end_ready: bool,
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
            likelihood: Likelihood::Gaussian,
            aux: ErrorBuffers::default(),
            scratch: Vec::new(),
            a0: Vec::new(),
            colnorm0: Vec::new(),
            end_flags: Vec::new(),
            sd_scale: Vec::new(),
            end_ready: false,
            need_qr: false,
            normal: Vec::new(),
            warm_active: Vec::new(),
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
        for b in [&mut self.w, &mut self.v, &mut self.normal] {
            b.resize(m * m, 0.0);
        }
        self.warm_active.clear();
        self.warm_active.reserve(m);
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
            &mut self.a0,
            &mut self.colnorm0,
            &mut self.sd_scale,
        ] {
            b.resize(m, 0.0);
        }
        self.end_flags.resize(m, 0);
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
            && (data.sigma_x.is_empty() || (data.sigma_x.len() == n && data.x.len() == 1))
            && data.x.iter().all(|c| c.len() == n);
        if !consistent {
            return Refit {
                chi2: f64::INFINITY,
                converged: false,
                stop: StopReason::NonFinite,
                iterations: 0,
                evaluations: 0,
                end: EndCheck::default(),
            };
        }
        self.resize(n, m);
        self.likelihood = problem.options.likelihood;
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
        self.a0.copy_from_slice(&self.a);
        self.colnorm0.iter_mut().for_each(|c| *c = 0.0);
        self.end_flags.iter_mut().for_each(|f| *f = 0);
        self.end_ready = false;
        // Warm starts of the eigen-decomposition stay within one refit, so
        // that a refit's result does not depend on what the workspace did
        // before (thread-count independence).
        self.warm_active.clear();
        self.need_qr = problem.options.geodesic && problem.options.method == Method::Lm;
        let mut out = match problem.options.method {
            Method::Lm => super::lm::run(self, problem, data),
            Method::Steepest => super::steepest::run(self, problem, data),
        };
        if out.chi2.is_finite() {
            if !self.end_ready {
                out.end = self.end_check(data.y);
            }
            judge(&mut out);
        }
        out
    }

    /// Records the column norms of the weighted Jacobian at the start (the
    /// methods call it after their first evaluation).
    pub(crate) fn note_start_columns(&mut self) {
        let n = self.n;
        let rnorm = super::linalg::norm2(&self.resid);
        for j in 0..self.m {
            let cn = super::linalg::norm2(&self.jac[j * n..(j + 1) * n]);
            self.colnorm0[j] = if rnorm > 0.0 && rnorm.is_finite() {
                cn / rnorm
            } else {
                0.0
            };
        }
    }

    /// Start of the last refit (projected into the bounds).
    pub(crate) fn start_point(&self) -> &[f64] {
        &self.a0
    }

    /// The end-point test at `params` against the start `start` with
    /// column norms `start_columns` (one evaluation with the Jacobian).
    pub(crate) fn check_at(
        &mut self,
        problem: &Problem,
        data: &DataView,
        params: &[f64],
        start: &[f64],
        start_columns: &[f64],
    ) -> Result<EndCheck, NonFinite> {
        let m = self.m;
        if params.len() != m || start.len() != m || start_columns.len() != m {
            return Ok(EndCheck::default());
        }
        self.a.copy_from_slice(params);
        self.eval_current(problem.model, data, true)?;
        self.a0.copy_from_slice(start);
        self.colnorm0.copy_from_slice(start_columns);
        Ok(self.end_check(data.y))
    }

    /// Column norms of the weighted Jacobian at the start of the last
    /// refit, relative to the norm of the weighted residuals there (0 when
    /// that norm is 0).
    pub(crate) fn start_columns(&self) -> &[f64] {
        &self.colnorm0
    }

    /// The end-point test at the current point, whose weighted Jacobian
    /// must be in `jac` (it is after every method's run): first-order
    /// optimality, vanished columns and runaway parameters against the
    /// start in `a0` / `colnorm0`, and the rank. Fills `end_flags`.
    ///
    /// Optimality: with the active columns scaled to unit norm,
    /// `J_s = Q R`, `R = U S V^T`, the Gauss-Newton step predicts the chi2
    /// reduction `sum c_i^2`, `c = U^T Q^T r`, over the singular values
    /// above the rank cut. It must not exceed [`OPTIMALITY_TOLERANCE`]^2
    /// times the chi2 unit (`min(1, chi2 / dof)`: one unit of chi2 moves a
    /// parameter by one standard error), nor, near a perfect fit, sixteen
    /// times the rounding noise of chi2.
    pub(crate) fn end_check(&mut self, y: &[f64]) -> EndCheck {
        self.gradient_and_active();
        // Unit-column scaling of the active columns, then QR and SVD.
        for j in 0..self.m {
            self.diag[j] = if self.colnorm[j] > 0.0 {
                self.colnorm[j]
            } else {
                1.0
            };
        }
        let (k, smax) = super::lm::factor(self);
        self.assess(y, k, smax, None).unwrap_or_default()
    }

    /// The optimality tolerance of the end-point test at the current
    /// point: [`OPTIMALITY_TOLERANCE`]^2 times the chi2 unit
    /// `min(1, chi2 / dof)`, or sixteen times the rounding noise of chi2.
    pub(crate) fn optimality_tolerance(&self, y: &[f64], chi2: f64) -> f64 {
        self.tolerance_with_noise(chi2, self.chi2_noise(y))
    }

    /// [`Refitter::optimality_tolerance`] with the rounding noise of chi2
    /// already computed.
    pub(crate) fn tolerance_with_noise(&self, chi2: f64, noise: f64) -> f64 {
        let varying = self.varies.iter().filter(|v| **v).count();
        let dof = self.n.saturating_sub(varying);
        let unit = if dof > 0 {
            (chi2 / dof as f64).min(1.0)
        } else {
            1.0
        };
        (OPTIMALITY_TOLERANCE * OPTIMALITY_TOLERANCE * unit).max(16.0 * noise)
    }

    /// The end-point test from the factorisation of the active columns
    /// now in the workspace (`factor` with any diagonal scaling in `diag`;
    /// `active`, `grad`, `colnorm` current). With `only_if_optimal`, the
    /// tolerance already known, returns None at once when the point fails
    /// the optimality test (the cheap check of a running search).
    pub(crate) fn assess(
        &mut self,
        y: &[f64],
        k: usize,
        smax: f64,
        only_if_optimal: Option<f64>,
    ) -> Option<EndCheck> {
        let n = self.n;
        let m = self.m;
        let chi2: f64 = super::linalg::dot(&self.resid, &self.resid);
        let cut = crate::fit::RANK_TOLERANCE * smax;
        let mut rank = 0;
        let mut gn_decrease = 0.0;
        for i in 0..k {
            if self.s[i] > cut && smax > 0.0 {
                rank += 1;
                gn_decrease += self.c[i] * self.c[i];
            }
        }
        if chi2 == 0.0 {
            gn_decrease = 0.0;
        }
        if let Some(tol) = only_if_optimal {
            if gn_decrease > tol {
                return None;
            }
        }
        let tolerance = match only_if_optimal {
            Some(t) => t,
            None => self.optimality_tolerance(y, chi2),
        };
        let varying = self.varies.iter().filter(|v| **v).count();
        let dof = n.saturating_sub(varying);
        // Size of the data, for the absolute plateau test.
        let mut ynorm = 0.0;
        for (v, w) in y.iter().zip(&self.inv_sigma) {
            ynorm += (v * w) * (v * w);
        }
        let ynorm = ynorm.sqrt();
        let s2 = if dof > 0 {
            (chi2 / dof as f64).max(1.0)
        } else {
            1.0
        };
        let rnorm = chi2.sqrt();
        let mut plateau = None;
        let mut runaway = None;
        for j in 0..m {
            self.end_flags[j] = 0;
            if !self.varies[j] {
                continue;
            }
            let cn = self.colnorm[j];
            let scale = self.a[j].abs().max(self.a0[j].abs());
            let vanished = cn == 0.0
                || (self.colnorm0[j] > 0.0 && rnorm > 0.0 && cn / rnorm <= VANISHED_RATIO * self.colnorm0[j])
                || (scale > 0.0 && cn * scale <= NEGLIGIBLE_EFFECT * ynorm);
            if vanished {
                self.end_flags[j] = 1;
                plateau.get_or_insert(j);
                continue;
            }
            let far = if self.a0[j] != 0.0 {
                self.a[j].abs() > RUNAWAY_FACTOR * self.a0[j].abs()
            } else {
                false
            } || self.a[j].abs() > RUNAWAY_MAGNITUDE;
            if !far {
                continue;
            }
            // Determined at the end point? Relative standard error from the
            // SVD (held-on-bound parameters count as determined).
            let undetermined = match self.active.iter().position(|&a| a == j) {
                None => false,
                Some(c) => {
                    let mut v2 = 0.0;
                    let mut lost = false;
                    for i in 0..k {
                        let vc = self.v[i * k + c];
                        if self.s[i] > cut && smax > 0.0 {
                            v2 += (vc / self.s[i]).powi(2);
                        } else if vc.abs() > 1e-6 {
                            lost = true;
                        }
                    }
                    let se = (s2 * v2).sqrt() / self.diag[j];
                    lost || se.is_nan() || se >= self.a[j].abs()
                }
            };
            if undetermined || self.a[j].abs() > RUNAWAY_MAGNITUDE {
                self.end_flags[j] = 2;
                runaway.get_or_insert(j);
            }
        }
        Some(EndCheck {
            gn_decrease,
            tolerance,
            optimal: gn_decrease <= tolerance,
            plateau,
            runaway,
            rank,
            active: k,
        })
    }

    /// Per-parameter flags of the last end-point test: 0 fine, 1 the
    /// column vanished, 2 ran away.
    pub(crate) fn end_flags(&self) -> &[u8] {
        &self.end_flags
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
            self.likelihood,
            &self.inv_sigma,
            &self.a,
            &mut self.values,
            &mut self.resid,
            if with_jac { Some(&mut self.jac) } else { None },
            &mut self.aux,
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
            self.likelihood,
            &self.inv_sigma,
            &self.trial,
            &mut self.trial_values,
            &mut self.trial_resid,
            if with_jac { Some(&mut self.trial_jac) } else { None },
            &mut self.aux,
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

/// A column counts as vanished when its norm, relative to the norm of the
/// weighted residuals, fell below this fraction of the same ratio at the
/// start (relative, so that a start where the model is huge, and with it
/// every column and residual, does not count).
pub(crate) const VANISHED_RATIO: f64 = 1e-8;

/// ... or when changing the parameter by its own magnitude moves the
/// weighted model by less than this fraction of the weighted data's norm.
pub(crate) const NEGLIGIBLE_EFFECT: f64 = 1e-30;

/// A parameter ran away when its magnitude grew by more than this factor
/// over the start and it is not determined at the end point ...
pub(crate) const RUNAWAY_FACTOR: f64 = 1e6;

/// ... or when its magnitude exceeds this, whatever the start.
pub(crate) const RUNAWAY_MAGNITUDE: f64 = 1e100;

/// Turns the method's stop into the honest outcome: a convergence stop
/// stands only when the end point passed the optimality test and no
/// parameter is on a plateau or ran away.
pub(crate) fn judge(out: &mut Refit) {
    let claimed = out.converged || out.stop.is_convergence();
    if !claimed {
        out.converged = false;
        return;
    }
    match out.end.failure() {
        Some(stop) => {
            out.converged = false;
            out.stop = stop;
        }
        None => out.converged = true,
    }
}

/// Per-point buffers of the error models other than plain Gaussian: the
/// residuals' derivative with respect to the model value (Poisson) or the
/// effective weights `1 / sqrt(V)` (errors in x), the x-slope `df/dx` and
/// its parameter derivatives. Sized on first use, then reused.
#[derive(Debug, Clone, Default)]
pub(crate) struct ErrorBuffers {
    /// `d r_i / d f_i` (n).
    pub(crate) dres: Vec<f64>,
    /// `df/dx` (n).
    pub(crate) slope: Vec<f64>,
    /// `d2f / dx da_j` (n x m, column-major).
    pub(crate) dslope: Vec<f64>,
}

/// Evaluates values, weighted residuals and (optionally) the weighted
/// Jacobian (the Jacobian of the residuals) at `params`; returns
/// `sum r_i^2` (chi2, or the deviance for Poisson counts). `inv_sigma` is
/// `1 / data.sigma`; `aux` holds the buffers of the non-Gaussian error
/// models (`aux.dres` receives `d r_i / d f_i`, for errors in x the
/// effective weights `1 / sqrt(V_i)`). A residual that is not finite (for counts: a
/// model value `<= 0`) is reported as [`NonFinite`], which the methods
/// treat as a rejected step.
#[allow(clippy::too_many_arguments)] // buffers passed apart so the caller can split borrows
pub(crate) fn eval_into(
    model: &dyn ModelFn,
    data: &DataView,
    likelihood: Likelihood,
    inv_sigma: &[f64],
    params: &[f64],
    values: &mut [f64],
    resid: &mut [f64],
    jac: Option<&mut Vec<f64>>,
    aux: &mut ErrorBuffers,
    scratch: &mut Vec<f64>,
) -> Result<f64, NonFinite> {
    let n = values.len();
    if aux.dres.len() != n && (likelihood != Likelihood::Gaussian || !data.sigma_x.is_empty()) {
        aux.dres.resize(n, 0.0);
    }
    match likelihood {
        Likelihood::Gaussian if data.sigma_x.is_empty() => {
            eval_gaussian(model, data, inv_sigma, params, values, resid, jac, scratch)
        }
        Likelihood::Gaussian => {
            eval_effective(model, data, inv_sigma, params, values, resid, jac, aux, scratch)
        }
        Likelihood::Poisson => eval_poisson(model, data, params, values, resid, jac, &mut aux.dres, scratch),
    }
}

/// Errors in x: the effective-variance residuals `r = (f - y) / sqrt(V)`,
/// `V = sigma_y^2 + (df/dx)^2 sigma_x^2` (Orear, Am. J. Phys. 50 (1982)
/// 912), with their exact Jacobian including the parameter dependence of
/// `V`: `dr/da_j = (df/da_j) / sqrt(V) - r (df/dx) sigma_x^2
/// (d2f/dx da_j) / V`.
#[allow(clippy::too_many_arguments)]
fn eval_effective(
    model: &dyn ModelFn,
    data: &DataView,
    inv_sigma: &[f64],
    params: &[f64],
    values: &mut [f64],
    resid: &mut [f64],
    mut jac: Option<&mut Vec<f64>>,
    aux: &mut ErrorBuffers,
    scratch: &mut Vec<f64>,
) -> Result<f64, NonFinite> {
    let n = values.len();
    let m = model.n_params();
    if aux.slope.len() != n {
        aux.slope.resize(n, 0.0);
    }
    match jac.as_mut() {
        Some(j) => {
            if aux.dslope.len() != n * m {
                aux.dslope.resize(n * m, 0.0);
            }
            model.eval(params, data.x, values, Some(j.as_mut_slice()), scratch)?
        }
        None => model.eval(params, data.x, values, None, scratch)?,
    }
    let dslope = if jac.is_some() {
        Some(aux.dslope.as_mut_slice())
    } else {
        None
    };
    match model.eval_x_slope(params, data.x, &mut aux.slope, dslope, scratch) {
        Some(r) => r?,
        // No x-slope: the checked entry points refuse this before.
        None => return Err(NonFinite { point: 0 }),
    }
    let mut chi2 = 0.0;
    for i in 0..n {
        let sy = 1.0 / inv_sigma[i];
        let sx = data.sigma_x[i];
        let s = aux.slope[i];
        let w = 1.0 / (sy * sy + s * s * sx * sx).sqrt();
        let r = (values[i] - data.y[i]) * w;
        resid[i] = r;
        aux.dres[i] = w;
        chi2 += r * r;
    }
    if let Some(j) = jac {
        for (col, dcol) in j
            .chunks_exact_mut(n.max(1))
            .take(m)
            .zip(aux.dslope.chunks_exact(n.max(1)))
        {
            for i in 0..n {
                let w = aux.dres[i];
                let sx = data.sigma_x[i];
                col[i] = col[i] * w - resid[i] * aux.slope[i] * sx * sx * dcol[i] * w * w;
            }
        }
    }
    finish_sum(chi2, resid)
}

/// The Gaussian residuals `(f - y) / sigma` (the ordinary weighted least
/// squares, unchanged hot path).
#[allow(clippy::too_many_arguments)]
fn eval_gaussian(
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
    finish_sum(chi2, resid)
}

/// The Poisson deviance residuals of the counts `y` at the model values
/// `mu = f`, and the Jacobian `d r / d a = (d r / d mu) (d f / d a)`.
#[allow(clippy::too_many_arguments)]
fn eval_poisson(
    model: &dyn ModelFn,
    data: &DataView,
    params: &[f64],
    values: &mut [f64],
    resid: &mut [f64],
    mut jac: Option<&mut Vec<f64>>,
    dres: &mut [f64],
    scratch: &mut Vec<f64>,
) -> Result<f64, NonFinite> {
    let n = values.len();
    match jac.as_mut() {
        Some(j) => model.eval(params, data.x, values, Some(j.as_mut_slice()), scratch)?,
        None => model.eval(params, data.x, values, None, scratch)?,
    }
    let mut dev = 0.0;
    for i in 0..n {
        let (r, dr) = poisson_residual(values[i], data.y[i]);
        resid[i] = r;
        dres[i] = dr;
        dev += r * r;
    }
    if let Some(j) = jac {
        let m = j.len() / n.max(1);
        for col in j.chunks_exact_mut(n.max(1)).take(m) {
            for (v, w) in col.iter_mut().zip(dres.iter()) {
                *v *= w;
            }
        }
    }
    finish_sum(dev, resid)
}

/// `Ok(sum)` when the sum of squared residuals is finite, else the point
/// to blame.
fn finish_sum(chi2: f64, resid: &[f64]) -> Result<f64, NonFinite> {
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

/// The signed deviance residual of a count `n >= 0` at the Poisson mean
/// `mu` and its derivative with respect to `mu` (Baker and Cousins, NIM
/// 221 (1984) 437, eq. for the Poisson likelihood ratio):
/// `r = sign(mu - n) sqrt(2 (mu - n + n ln(n / mu)))`, `r = sqrt(2 mu)` for
/// `n = 0`, so that `r^2` is the point's deviance.
///
/// Written with `t = (mu - n) / n` as `r = t sqrt(n h(t))`,
/// `dr/dmu = 1 / ((1 + t) sqrt(n h(t)))`, `h(t) = 2 (t - ln(1 + t)) / t^2`
/// (its Taylor series for `|t| < 0.01`), which has no cancellation and the
/// right limit `dr/dmu -> 1 / sqrt(mu)` at `mu = n`. `mu <= 0` (or not a
/// number) gives NaN: a rejected step.
pub fn poisson_residual(mu: f64, n: f64) -> (f64, f64) {
    if !(mu.is_finite() && mu > 0.0) {
        return (f64::NAN, f64::NAN);
    }
    if n == 0.0 {
        let r = (2.0 * mu).sqrt();
        return (r, 1.0 / r);
    }
    let t = (mu - n) / n;
    let h = if t.abs() < 0.01 {
        // 2 sum_{k >= 2} (-1)^k t^(k-2) / k, through t^8 (error below 1e-19).
        let c = [
            1.0 / 2.0,
            -1.0 / 3.0,
            1.0 / 4.0,
            -1.0 / 5.0,
            1.0 / 6.0,
            -1.0 / 7.0,
            1.0 / 8.0,
            -1.0 / 9.0,
            1.0 / 10.0,
        ];
        2.0 * c.iter().rev().fold(0.0, |acc, ck| acc * t + ck)
    } else {
        2.0 * (t - t.ln_1p()) / (t * t)
    };
    let s = (n * h).sqrt();
    (t * s, 1.0 / ((1.0 + t) * s))
}

#[cfg(test)]
mod tests {
    use super::poisson_residual;

    #[test]
    fn deviance_residual_identities() {
        // Definition (Baker and Cousins 1984): r^2 = 2 (mu - n + n ln(n/mu)),
        // sign of mu - n; n = 0 gives 2 mu.
        for &(mu, n) in &[(3.0, 7.0), (12.5, 4.0), (0.2, 1.0), (40.0, 39.0), (5.0, 5.05)] {
            let (r, dr) = poisson_residual(mu, n);
            let d: f64 = 2.0 * (mu - n + n * (n / mu).ln());
            assert!((r * r - d).abs() <= 1e-12 * d.max(1e-3), "{mu} {n}");
            assert_eq!(r.signum(), (mu - n).signum());
            // dr/dmu = (1 - n/mu) / r (differentiating r^2 = D).
            assert!((dr - (1.0 - n / mu) / r).abs() <= 1e-10 * dr.abs());
        }
        let (r, dr) = poisson_residual(2.0, 0.0);
        assert_eq!((r, dr), (2.0, 0.5));
        // At mu = n: r = 0 and dr/dmu = 1/sqrt(mu) (the limit of (1 - n/mu)/r).
        let (r, dr) = poisson_residual(9.0, 9.0);
        assert_eq!(r, 0.0);
        assert!((dr - 1.0 / 3.0).abs() < 1e-15);
        // Continuity across the series/direct switch at |t| = 0.01, and
        // against a central difference of r in mu.
        for &mu in &[
            9.0 * 1.0099,
            9.0 * 1.0101,
            9.0 * 0.9901,
            9.0 * 0.9899,
            9.0 * 1.0000001,
        ] {
            let (_, dr) = poisson_residual(mu, 9.0);
            let h = 1e-6;
            let num = (poisson_residual(mu + h, 9.0).0 - poisson_residual(mu - h, 9.0).0) / (2.0 * h);
            assert!((dr - num).abs() < 1e-8, "{mu}: {dr} vs {num}");
        }
        // mu <= 0 where a count exists: not finite (a rejected step).
        assert!(poisson_residual(0.0, 3.0).0.is_nan());
        assert!(poisson_residual(-1.0, 0.0).0.is_nan());
    }
}
