//! Steepest descent on chi-squared: the simple method, slower than
//! Levenberg-Marquardt.
//!
//! `a_next = a + gamma * sum_i (y_i - f_i) / sigma_i^2 * df_i/da`, i.e. a
//! step along minus half the gradient of chi2, with a backtracking Armijo
//! rule (Nocedal & Wright, "Numerical Optimization", 2nd ed., section 3.1,
//! sufficient-decrease constant 1e-4) that guarantees a decrease of chi2,
//! and a doubling of `gamma` after every accepted step. Bounds are handled
//! by projection as in the LM method; the stopping rules and the report are
//! the same.

use super::refitter::Refitter;
use super::{DataView, Problem, Refit, StopReason};

const EPS: f64 = f64::EPSILON;
const ARMIJO: f64 = 1e-4;

pub(crate) fn run(rf: &mut Refitter, problem: &Problem, data: &DataView) -> Refit {
    let opts = &problem.options;
    let model = problem.model;
    let ftol = opts.ftol.max(EPS);
    let xtol = opts.xtol.max(EPS);
    let gtol = opts.gtol.max(0.0);
    let mut chi2 = match rf.eval_current(model, data, true) {
        Ok(c) => c,
        Err(_) => return done(rf, f64::INFINITY, false, StopReason::NonFinite, 0),
    };
    let mut iterations = 0usize;
    let mut gamma = 0.0f64;
    loop {
        rf.gradient_and_active();
        if chi2 == 0.0 || rf.active.is_empty() || rf.scaled_gradient(chi2.sqrt()) <= gtol {
            return done(rf, chi2, true, StopReason::Gradient, iterations);
        }
        // Direction g = -J^T r over the active parameters.
        let mut g2 = 0.0;
        for &j in &rf.active {
            g2 += rf.grad[j] * rf.grad[j];
        }
        let gnorm = g2.sqrt();
        let anorm = {
            let mut s = 0.0;
            for j in 0..rf.m {
                if rf.varies[j] {
                    s += rf.a[j] * rf.a[j];
                }
            }
            s.sqrt()
        };
        if gamma == 0.0 {
            // First step: a relative change of 1e-3 of the parameters.
            gamma = 1e-3 * anorm.max(1.0) / gnorm;
        }
        loop {
            if iterations >= opts.max_iterations {
                return done(rf, chi2, false, StopReason::IterationLimit, iterations);
            }
            iterations += 1;
            rf.d.iter_mut().for_each(|x| *x = 0.0);
            for &j in &rf.active {
                rf.d[j] = -gamma * rf.grad[j];
            }
            rf.project_trial();
            // Decrease promised by the gradient along the projected step:
            // chi2(a + d) ~ chi2 + 2 (J^T r) . d
            let mut slope = 0.0;
            let mut dn = 0.0;
            for &j in &rf.active {
                slope += rf.grad[j] * rf.d[j];
                dn += rf.d[j] * rf.d[j];
            }
            let dn = dn.sqrt();
            if dn <= xtol * (anorm + xtol) || slope >= 0.0 {
                let stop = StopReason::Step;
                return done(rf, chi2, true, stop, iterations);
            }
            match rf.eval_trial(model, data, true) {
                Ok(chi2_t) if chi2_t <= chi2 + 2.0 * ARMIJO * slope => {
                    let rel = (chi2 - chi2_t) / chi2;
                    rf.accept_trial(true);
                    chi2 = chi2_t;
                    gamma *= 2.0;
                    if rel <= ftol {
                        return done(rf, chi2, true, StopReason::ChiSquaredChange, iterations);
                    }
                    break;
                }
                Ok(_) => gamma *= 0.5,
                Err(_) => {
                    gamma *= 0.25;
                    if gamma * gnorm <= EPS * anorm.max(f64::MIN_POSITIVE) {
                        return done(rf, chi2, false, StopReason::NonFinite, iterations);
                    }
                }
            }
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
    }
}
