//! Steepest descent on chi-squared: the simple method, slower than
//! Levenberg-Marquardt, done as well as it can be while staying steepest
//! descent.
//!
//! - **Scaled coordinates.** The descent runs in the coordinates
//!   `z_j = D_j a_j`, with `D_j` the largest norm seen so far of the
//!   weighted Jacobian's column `j` (the diagonal scaling LM uses, More
//!   1978), so the step is `d = -gamma D^-2 g` with `g = J^T r`, half the
//!   gradient of chi2. Without it a problem whose parameters differ by
//!   orders of magnitude (NIST Misra1a: 240 and 5e-4) moves only the large
//!   one.
//! - **Line search.** Each iteration starts from the minimiser of the
//!   linearised chi2 along `d` (the Cauchy step,
//!   `gamma* = g^T D^-2 g / |J D^-2 g|^2`) times a multiplier that doubles
//!   after a step accepted at once (step growth) and follows the accepted
//!   length after backtracking. Backtracking halves `gamma` until the
//!   Armijo condition `chi2(a + d) <= chi2(a) + 2 c g^T d` holds
//!   (sufficient-decrease constant `c = 1e-4`; Nocedal & Wright,
//!   "Numerical Optimization", 2nd ed., section 3.1).
//! - **Stopping.** The three classic rules: the gradient is zero to the
//!   first-order optimality test of the end-point check (tested every few
//!   iterations: see `Refitter::end_check`), chi2 no longer changes (relative
//!   decrease at most `ftol`), or the iteration cap. A stop by a small
//!   change or a negligible step is judged by the same end-point test: if
//!   the gradient is not zero there, the run stalled (`converged = false`).
//!
//! Bounds are handled by projection as in the LM method.

use super::refitter::Refitter;
use super::{DataView, Problem, Refit, StopReason};

const EPS: f64 = f64::EPSILON;
const ARMIJO: f64 = 1e-4;

/// Iterations between two optimality tests (each costs one QR of the
/// weighted Jacobian).
const CHECK_EVERY: usize = 16;

/// Largest multiple of the Cauchy step tried.
const MAX_GROWTH: f64 = 64.0;

pub(crate) fn run(rf: &mut Refitter, problem: &Problem, data: &DataView) -> Refit {
    let opts = &problem.options;
    let model = problem.model;
    let m = rf.m;
    let ftol = opts.ftol.max(EPS);
    let xtol = opts.xtol.max(EPS);
    let mut chi2 = match rf.eval_current(model, data, true) {
        Ok(c) => c,
        Err(_) => return done(rf, f64::INFINITY, false, StopReason::NonFinite, 0),
    };
    rf.note_start_columns();
    let mut iterations = 0usize;
    let mut growth = 1.0f64;
    let mut first = true;
    loop {
        rf.gradient_and_active();
        if chi2 == 0.0 || rf.active.is_empty() {
            return done(rf, chi2, true, StopReason::Gradient, iterations);
        }
        // Diagonal scaling: the largest column norms seen so far.
        for j in 0..m {
            if rf.varies[j] {
                let cn = rf.colnorm[j];
                rf.sd_scale[j] = if first {
                    if cn > 0.0 {
                        cn
                    } else {
                        1.0
                    }
                } else {
                    rf.sd_scale[j].max(cn)
                };
            }
        }
        first = false;
        if iterations % CHECK_EVERY == 0 && iterations > 0 {
            let end = rf.end_check(data.y);
            if end.optimal {
                // The end check overwrote the active set and gradient with
                // the same values; nothing else to restore.
                rf.end_ready = true;
                let mut out = done(rf, chi2, true, StopReason::Gradient, iterations);
                out.end = end;
                return out;
            }
        }
        if iterations >= opts.max_iterations {
            return done(rf, chi2, false, StopReason::IterationLimit, iterations);
        }
        // Direction -D^-2 g; its Cauchy step on the linearised chi2.
        let mut gdg = 0.0;
        rf.d.iter_mut().for_each(|x| *x = 0.0);
        for &j in &rf.active {
            let s2 = rf.sd_scale[j] * rf.sd_scale[j];
            gdg += rf.grad[j] * rf.grad[j] / s2;
            rf.d[j] = -rf.grad[j] / s2;
        }
        rf.jac_times_d();
        let jd2: f64 = rf.jd.iter().map(|v| v * v).sum();
        let cauchy = if jd2 > 0.0 { gdg / jd2 } else { 0.0 };
        if !(cauchy > 0.0 && cauchy.is_finite()) {
            return done(rf, chi2, true, StopReason::Step, iterations);
        }
        let mut gamma = growth * cauchy;
        let mut tries = 0usize;
        loop {
            if iterations >= opts.max_iterations {
                return done(rf, chi2, false, StopReason::IterationLimit, iterations);
            }
            iterations += 1;
            rf.d.iter_mut().for_each(|x| *x = 0.0);
            for &j in &rf.active {
                rf.d[j] = -gamma * rf.grad[j] / (rf.sd_scale[j] * rf.sd_scale[j]);
            }
            rf.project_trial();
            // Slope of chi2 along the projected step (2 g . d) and the
            // step's scaled length against the scaled parameters.
            let mut slope = 0.0;
            let mut dn = 0.0;
            let mut an = 0.0;
            for j in 0..m {
                if rf.varies[j] {
                    slope += rf.grad[j] * rf.d[j];
                    dn += (rf.sd_scale[j] * rf.d[j]).powi(2);
                    an += (rf.sd_scale[j] * rf.a[j]).powi(2);
                }
            }
            let (dn, an) = (dn.sqrt(), an.sqrt());
            if dn <= xtol * (an + xtol) || slope >= 0.0 {
                return done(rf, chi2, true, StopReason::Step, iterations);
            }
            match rf.eval_trial(model, data, true) {
                Ok(chi2_t) if chi2_t <= chi2 + 2.0 * ARMIJO * slope => {
                    let rel = (chi2 - chi2_t) / chi2;
                    rf.accept_trial(true);
                    chi2 = chi2_t;
                    growth = if tries == 0 {
                        (2.0 * growth).min(MAX_GROWTH)
                    } else {
                        (gamma / cauchy).max(1e-12)
                    };
                    if rel <= ftol {
                        return done(rf, chi2, true, StopReason::ChiSquaredChange, iterations);
                    }
                    break;
                }
                Ok(_) => gamma *= 0.5,
                Err(_) => {
                    gamma *= 0.25;
                    if dn <= EPS * an.max(f64::MIN_POSITIVE) {
                        return done(rf, chi2, false, StopReason::NonFinite, iterations);
                    }
                }
            }
            tries += 1;
        }
    }
}

fn done(rf: &mut Refitter, chi2: f64, converged: bool, stop: StopReason, iterations: usize) -> Refit {
    Refit {
        chi2,
        converged,
        stop,
        iterations,
        evaluations: rf.evaluations,
        end: super::EndCheck::default(),
    }
}
