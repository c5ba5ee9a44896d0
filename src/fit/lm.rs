//! Levenberg-Marquardt with a trust region and diagonal scaling after
//! More (1978), "The Levenberg-Marquardt algorithm: implementation and
//! theory", with optional geodesic acceleration after Transtrum & Sethna
//! (2012), "Improvements to the Levenberg-Marquardt algorithm for nonlinear
//! least-squares minimization".
//!
//! Each iteration factors the scaled weighted Jacobian `J D^-1 = Q R` by
//! Householder reflections and takes the SVD `R = U S V^T` by one-sided
//! Jacobi rotations; the damped step for any Levenberg parameter `lambda` is
//! then `p = -V diag(s / (s^2 + lambda)) U^T Q^T r`, so `J^T J` is never
//! formed and the trust-region radius equation `|p(lambda)| = Delta` is
//! solved exactly and cheaply. Bounds are handled by projection with an
//! active set: a parameter on a bound whose descent direction points out of
//! the box is left out of the step.

use super::linalg::{apply_qt, dot, extract_r, householder_qr, jacobi_eigen_from, jacobi_svd, norm2};
use super::refitter::Refitter;
use super::{DataView, Problem, Refit, StopReason};

const EPS: f64 = f64::EPSILON;

/// Initial trust-region radius relative to `|D a0|` (More's "factor"; a
/// cautious 1 rather than MINPACK's 100, so that a first step cannot throw
/// a parameter onto a plateau where the model no longer depends on it).
const INITIAL_RADIUS: f64 = 1.0;

/// Steps taken below the rounding noise of chi2 before the run stops (the
/// full fit refines further with [`polish`]).
const NOISE_STEPS: usize = 1;

/// Relative singular-value cut for the Gauss-Newton step (lambda = 0).
const GN_RANK_CUT: f64 = 1e-14;

pub(crate) fn run(rf: &mut Refitter, problem: &Problem, data: &DataView) -> Refit {
    let opts = &problem.options;
    let model = problem.model;
    let n = rf.n;
    let m = rf.m;
    let ftol = opts.ftol.max(0.0);
    let xtol = opts.xtol.max(0.0);
    let gtol = opts.gtol.max(0.0);

    let mut chi2 = match rf.eval_current(model, data, true) {
        Ok(c) => c,
        Err(_) => return finish(rf, f64::INFINITY, false, StopReason::NonFinite, 0),
    };
    rf.note_start_columns();
    let mut iterations = 0usize;
    let mut delta = 0.0f64;
    let mut lambda = 0.0f64;
    let mut first = true;
    let mut noise_steps = 0usize;
    let mut last_noise_dnorm = f64::INFINITY;

    loop {
        rf.gradient_and_active();
        let rnorm = chi2.sqrt();
        if chi2 == 0.0 || rf.active.is_empty() || rf.scaled_gradient(rnorm) <= gtol {
            return finish(rf, chi2, true, StopReason::Gradient, iterations);
        }
        if iterations >= opts.max_iterations {
            return finish(rf, chi2, false, StopReason::IterationLimit, iterations);
        }
        // More's scaling: D_j = max over iterations of the column norms.
        for j in 0..m {
            if rf.varies[j] {
                let cn = rf.colnorm[j];
                if first {
                    rf.diag[j] = if cn > 0.0 { cn } else { 1.0 };
                } else {
                    rf.diag[j] = rf.diag[j].max(cn);
                }
            }
        }
        if first {
            let xn = rf.scaled_xnorm();
            delta = if xn > 0.0 {
                INITIAL_RADIUS * xn
            } else {
                INITIAL_RADIUS
            };
        }

        let noise = rf.chi2_noise(data.y);
        let mut in_noise;

        let (k, smax) = factor(rf);
        if opts.stop_at_optimality {
            // The end-point test on this factorisation: a warm-started
            // refit stops as soon as the Gauss-Newton step has nothing
            // left to give, without iterating down to the tolerances.
            let tol = rf.tolerance_with_noise(chi2, noise);
            if let Some(end) = rf.assess(data.y, k, smax, Some(tol)) {
                rf.end_ready = true;
                let mut out = finish(rf, chi2, true, StopReason::Gradient, iterations);
                out.end = end;
                return out;
            }
        }

        // Inner loop: trial steps until one is accepted or a stop rule fires.
        loop {
            lambda = solve_lambda(&rf.s[..k], &rf.c[..k], smax, delta, lambda);
            scaled_step(
                &rf.s[..k],
                &rf.c[..k],
                &rf.v[..k * k],
                k,
                lambda,
                smax,
                &mut rf.p[..k],
            );
            rf.d.iter_mut().for_each(|x| *x = 0.0);
            for (c, &j) in rf.active.iter().enumerate() {
                rf.d[j] = -rf.p[c] / rf.diag[j];
            }
            rf.project_trial();
            let mut dnorm = scaled_norm(rf);
            if first {
                delta = delta.min(dnorm.max(f64::MIN_POSITIVE));
            }
            iterations += 1;

            // Geodesic acceleration: second directional derivative along the
            // velocity by a finite difference of the model values only.
            if opts.geodesic && dnorm > 0.0 {
                geodesic(rf, problem, data, k, lambda, smax);
                dnorm = scaled_norm(rf);
            }

            rf.jac_times_d();
            // Predicted reduction of chi2 by the linear model.
            let mut lin = 0.0;
            for i in 0..n {
                let t = rf.resid[i] + rf.jd[i];
                lin += t * t;
            }
            let pred = chi2 - lin;
            let xnorm = rf.scaled_xnorm();

            let trial = rf.eval_trial(model, data, true);
            let (accepted, actred, rho) = match trial {
                Err(_) => {
                    // Non-finite model: reject and shrink the region.
                    delta = 0.25 * delta.min(dnorm);
                    if delta <= EPS * xnorm || dnorm == 0.0 {
                        return finish(rf, chi2, false, StopReason::NonFinite, iterations);
                    }
                    if iterations >= opts.max_iterations {
                        return finish(rf, chi2, false, StopReason::IterationLimit, iterations);
                    }
                    continue;
                }
                Ok(chi2_t) => {
                    let actred = chi2 - chi2_t;
                    let rho = if pred > 0.0 {
                        actred / pred
                    } else if actred > 0.0 {
                        1.0
                    } else {
                        -1.0
                    };
                    // Trust-region update (More 1978, section 4 / MINPACK rules).
                    if rho < 0.25 {
                        let mut mu = 0.5;
                        if actred < 0.0 {
                            // Minimiser of the quadratic through the directional
                            // derivative and the observed increase.
                            // (half the directional derivative of chi2 along d).
                            let dirder = dot(&rf.jd, &rf.resid);
                            let denom = dirder + 0.5 * actred;
                            mu = if denom != 0.0 { 0.5 * dirder / denom } else { 0.1 };
                            if !(0.1..=0.5).contains(&mu) || chi2_t >= 100.0 * chi2 {
                                mu = 0.1;
                            }
                        }
                        delta = mu * delta.min(10.0 * dnorm);
                        lambda /= mu;
                    } else if lambda == 0.0 || rho >= 0.75 {
                        delta = 2.0 * dnorm;
                        lambda *= 0.5;
                    }
                    // In the rounding-noise regime (the linear model promises
                    // less than the rounding noise of chi2) the ratio is noise:
                    // take the step unless chi2 measurably rose, since the
                    // Gauss-Newton step is still the better estimate of the
                    // minimiser than anything chi2 itself can resolve.
                    in_noise = pred.abs() <= noise && actred.abs() <= 2.0 * noise;
                    let accepted = rho >= 1e-4 || in_noise;
                    if accepted {
                        rf.accept_trial(true);
                        chi2 = chi2_t;
                        if in_noise {
                            delta = delta.max(2.0 * dnorm);
                        }
                    }
                    (accepted, actred, rho)
                }
            };
            first = false;
            let chi2_ref = if accepted { chi2 + actred } else { chi2 };
            let rel_act = if chi2_ref > 0.0 { actred / chi2_ref } else { 0.0 };
            let rel_pred = if chi2_ref > 0.0 { pred / chi2_ref } else { 0.0 };
            let xnorm = rf.scaled_xnorm();
            if chi2 == 0.0 {
                return finish(rf, chi2, true, StopReason::Gradient, iterations);
            }
            if rel_act.abs() <= ftol.max(EPS) && rel_pred <= ftol.max(EPS) && rho <= 2.0 {
                return finish(rf, chi2, true, StopReason::ChiSquaredChange, iterations);
            }
            if delta <= xtol.max(EPS) * xnorm || dnorm == 0.0 {
                return finish(rf, chi2, true, StopReason::Step, iterations);
            }
            if accepted && in_noise {
                // Stop once steps below the noise of chi2 no longer contract
                // (or after a few of them): chi2 cannot resolve more.
                noise_steps += 1;
                if noise_steps >= NOISE_STEPS || (noise_steps >= 2 && dnorm > 0.5 * last_noise_dnorm) {
                    return finish(rf, chi2, true, StopReason::ChiSquaredChange, iterations);
                }
                last_noise_dnorm = dnorm;
            }
            if accepted {
                break;
            }
            if iterations >= opts.max_iterations {
                return finish(rf, chi2, false, StopReason::IterationLimit, iterations);
            }
        }
    }
}

/// The factorisation of the scaled active columns `J_s = J D^-1` that
/// every step needs: singular values `s`, right singular vectors `v` and
/// the coefficients `c = U^T Q^T r` (so that the damped step for any
/// Levenberg parameter follows from them alone). Returns the number of
/// active columns and the largest singular value.
///
/// Two paths give the same quantities. For a well-conditioned `J_s`
/// (`cond(J_s) < 1e4`) the normal equations: `A = J_s^T J_s` and
/// `b = J_s^T r` in one blocked pass over the data (the columns of a block
/// stay in the first-level cache, so a large data set is streamed once,
/// not once per Householder reflection), then the symmetric eigenproblem
/// `A = V S^2 V^T` by Jacobi rotations and `c = S^-1 V^T b`; eigenvalues
/// of `A` resolve singular values of `J_s` down to about `sqrt(eps)` of the
/// largest, hence the condition bound (rounding in `A` then perturbs the
/// step by about 1e-8 of itself, and never the fixed point, which only
/// depends on `b`). Otherwise, and whenever the geodesic term needs
/// `Q` and `U`, Householder QR of `J_s` and the SVD of `R`.
pub(crate) fn factor(rf: &mut Refitter) -> (usize, f64) {
    if !rf.need_qr {
        if let Some(out) = factor_normal(rf) {
            return out;
        }
    }
    factor_qr(rf)
}

/// Points per block of the normal-equations pass.
const BLOCK: usize = 256;

/// Smallest ratio of the extreme eigenvalues of `J_s^T J_s` for which the
/// normal equations are used (`cond(J_s) < 1e4`).
const NORMAL_EIGEN_RATIO: f64 = 1e-8;

fn factor_normal(rf: &mut Refitter) -> Option<(usize, f64)> {
    let n = rf.n;
    let k = rf.active.len();
    if k == 0 {
        return None;
    }
    // The gradient `J^T r` and the column norms are current (every caller
    // runs `gradient_and_active` at this point first): they give `b` and
    // the diagonal of `A`; one blocked pass adds the off-diagonal terms.
    let (w, b) = (&mut rf.w[..k * k], &mut rf.c2[..k]);
    w.iter_mut().for_each(|x| *x = 0.0);
    let mut start = 0;
    while start < n && k > 1 {
        let end = (start + BLOCK).min(n);
        for (a, &ja) in rf.active.iter().enumerate() {
            let ca = &rf.jac[ja * n + start..ja * n + end];
            for (bb, &jb) in rf.active.iter().enumerate().skip(a + 1) {
                let cb = &rf.jac[jb * n + start..jb * n + end];
                w[bb * k + a] += dot(ca, cb);
            }
        }
        start = end;
    }
    for (a, &ja) in rf.active.iter().enumerate() {
        let da = rf.diag[ja];
        b[a] = rf.grad[ja] / da;
        w[a * k + a] = (rf.colnorm[ja] / da).powi(2);
        for (bb, &jb) in rf.active.iter().enumerate().skip(a + 1) {
            let v = w[bb * k + a] / (da * rf.diag[jb]);
            w[bb * k + a] = v;
            w[a * k + bb] = v;
        }
    }
    if !w.iter().chain(b.iter()).all(|v| v.is_finite()) {
        return None;
    }
    // Eigenvectors of A, started from the last factorisation's of the same
    // refit when it had the same active columns (consecutive iterations
    // move A little, so a sweep or two suffices).
    let warm = rf.warm_active.as_slice() == rf.active.as_slice();
    if !warm {
        rf.v[..k * k].iter_mut().for_each(|x| *x = 0.0);
        for i in 0..k {
            rf.v[i * k + i] = 1.0;
        }
    }
    rf.normal[..k * k].copy_from_slice(&w[..k * k]);
    // The eigenvectors need only the accuracy of the normal equations
    // themselves (about 1e-8 of the step).
    jacobi_eigen_from(
        &rf.normal[..k * k],
        w,
        k,
        &mut rf.v[..k * k],
        &mut rf.s[..k],
        1e-10,
    );
    rf.warm_active.clear();
    rf.warm_active.extend_from_slice(&rf.active);
    let lmax = rf.s[..k].iter().fold(0.0f64, |a, &x| a.max(x));
    let lmin = rf.s[..k].iter().fold(f64::INFINITY, |a, &x| a.min(x));
    if !(lmax > 0.0 && lmin > NORMAL_EIGEN_RATIO * lmax) {
        return None;
    }
    for i in 0..k {
        let si = rf.s[i].sqrt();
        rf.s[i] = si;
        rf.c[i] = dot(&rf.v[i * k..(i + 1) * k], &rf.c2[..k]) / si;
    }
    Some((k, lmax.sqrt()))
}

/// The Householder path of [`factor`]: QR of the scaled active columns,
/// SVD of `R` and `c = U^T Q^T r`.
fn factor_qr(rf: &mut Refitter) -> (usize, f64) {
    let n = rf.n;
    let k = rf.active.len();
    for (c, &j) in rf.active.iter().enumerate() {
        let inv = 1.0 / rf.diag[j];
        let (src, dst) = (&rf.jac[j * n..(j + 1) * n], &mut rf.qr[c * n..(c + 1) * n]);
        for (o, v) in dst.iter_mut().zip(src.iter()) {
            *o = v * inv;
        }
    }
    householder_qr(&mut rf.qr, n, k, &mut rf.rdiag, &mut rf.beta);
    rf.qtr.copy_from_slice(&rf.resid);
    apply_qt(&rf.qr, n, k, &rf.beta, &mut rf.qtr);
    extract_r(&rf.qr, n, k, &rf.rdiag, &mut rf.w[..k * k]);
    jacobi_svd(&mut rf.w[..k * k], k, &mut rf.v[..k * k], &mut rf.s[..k]);
    let smax = rf.s[..k].iter().fold(0.0f64, |a, &b| a.max(b));
    for i in 0..k {
        let si = rf.s[i];
        rf.c[i] = if si > 0.0 {
            dot(&rf.w[i * k..(i + 1) * k], &rf.qtr[..k]) / si
        } else {
            0.0
        };
    }
    (k, smax)
}

/// Gauss-Newton refinement at the end of a converged run: undamped,
/// rank-truncated steps while they contract (each at most half the last)
/// and chi2 does not rise beyond its rounding noise. Near the minimum the
/// Gauss-Newton step resolves the solution more finely than chi2 itself
/// can. Returns the number of steps taken; the workspace holds the result.
pub(crate) fn polish(
    rf: &mut Refitter,
    problem: &Problem,
    data: &DataView,
    max_steps: usize,
) -> (usize, f64) {
    let model = problem.model;
    let mut chi2 = dot(&rf.resid, &rf.resid);
    let mut last = f64::INFINITY;
    let mut steps = 0;
    for _ in 0..max_steps.min(6) {
        rf.gradient_and_active();
        if rf.active.is_empty() || chi2 == 0.0 {
            break;
        }
        for j in 0..rf.m {
            rf.diag[j] = if rf.colnorm[j] > 0.0 { rf.colnorm[j] } else { 1.0 };
        }
        let (k, smax) = factor(rf);
        scaled_step(
            &rf.s[..k],
            &rf.c[..k],
            &rf.v[..k * k],
            k,
            0.0,
            smax,
            &mut rf.p[..k],
        );
        rf.d.iter_mut().for_each(|x| *x = 0.0);
        for (c, &j) in rf.active.iter().enumerate() {
            rf.d[j] = -rf.p[c] / rf.diag[j];
        }
        rf.project_trial();
        let dnorm = scaled_norm(rf);
        if dnorm == 0.0 || dnorm > 0.5 * last {
            break;
        }
        let noise = rf.chi2_noise(data.y);
        match rf.eval_trial(model, data, true) {
            Ok(chi2_t) if chi2_t <= chi2 + 2.0 * noise => {
                rf.accept_trial(true);
                chi2 = chi2_t;
                steps += 1;
                last = dnorm;
            }
            _ => break,
        }
    }
    (steps, chi2)
}

fn finish(rf: &mut Refitter, chi2: f64, converged: bool, stop: StopReason, iterations: usize) -> Refit {
    Refit {
        chi2,
        converged,
        stop,
        iterations,
        evaluations: rf.evaluations,
        end: super::EndCheck::default(),
    }
}

/// `|D d|` over the varying parameters.
fn scaled_norm(rf: &Refitter) -> f64 {
    let mut s = 0.0;
    for j in 0..rf.m {
        if rf.varies[j] {
            let t = rf.diag[j] * rf.d[j];
            s += t * t;
        }
    }
    s.sqrt()
}

/// `|p(lambda)|^2` and `d |p|^2 / d lambda` (negated, halved): sums over
/// the singular triplets.
fn step_norm(s: &[f64], c: &[f64], lambda: f64, smax: f64) -> (f64, f64) {
    let mut n2 = 0.0;
    let mut d3 = 0.0;
    for (si, ci) in s.iter().zip(c.iter()) {
        if lambda == 0.0 && *si <= GN_RANK_CUT * smax {
            continue;
        }
        let den = si * si + lambda;
        if den == 0.0 {
            continue;
        }
        let t = si * ci / den;
        n2 += t * t;
        d3 += t * t / den;
    }
    (n2, d3)
}

/// The Levenberg parameter whose step has length about `delta` (within
/// 10 %, More's sigma = 0.1), or 0 when the Gauss-Newton step fits.
fn solve_lambda(s: &[f64], c: &[f64], smax: f64, delta: f64, lambda_prev: f64) -> f64 {
    let (gn2, _) = step_norm(s, c, 0.0, smax);
    if gn2.sqrt() <= 1.1 * delta {
        return 0.0;
    }
    // Upper bound: |p(l)| <= |g| / l with g = S c the scaled gradient.
    let gnorm = s
        .iter()
        .zip(c.iter())
        .map(|(a, b)| (a * b) * (a * b))
        .sum::<f64>()
        .sqrt();
    let mut hi = gnorm / delta;
    let mut lo = 0.0f64;
    if hi <= 0.0 {
        return 0.0;
    }
    let mut lam = if lambda_prev > 0.0 && lambda_prev < hi {
        lambda_prev
    } else {
        1e-3 * hi
    };
    for _ in 0..60 {
        let (n2, d3) = step_norm(s, c, lam, smax);
        let pn = n2.sqrt();
        let phi = pn - delta;
        if phi.abs() <= 0.1 * delta {
            return lam;
        }
        if phi > 0.0 {
            lo = lo.max(lam);
        } else {
            hi = hi.min(lam);
        }
        // Newton on 1/|p| = 1/delta (Hebden; More 1978 eq. 5.5).
        let mut next = if d3 > 0.0 {
            lam + (n2 / delta) * phi / d3
        } else {
            0.5 * (lo + hi)
        };
        if !(next > lo && next < hi) {
            next = (lo * hi).sqrt().max(1e-3 * hi);
            if !(next > lo && next < hi) {
                next = 0.5 * (lo + hi);
            }
        }
        lam = next;
    }
    lam
}

/// `p = -(-V diag(s/(s^2+lambda)) c)`, returned without the sign: the
/// parameter step is `-p / D`.
fn scaled_step(s: &[f64], c: &[f64], v: &[f64], k: usize, lambda: f64, smax: f64, p: &mut [f64]) {
    p.iter_mut().for_each(|x| *x = 0.0);
    for i in 0..k {
        let si = s[i];
        if lambda == 0.0 && si <= GN_RANK_CUT * smax {
            continue;
        }
        let den = si * si + lambda;
        if den == 0.0 {
            continue;
        }
        let f = si * c[i] / den;
        for (pj, vj) in p.iter_mut().zip(v[i * k..(i + 1) * k].iter()) {
            *pj += f * vj;
        }
    }
}

/// Adds half the geodesic acceleration to the step `rf.d` when the
/// acceleration is small next to the velocity (Transtrum & Sethna 2012,
/// ratio 2|a|/|v| <= 0.75).
fn geodesic(rf: &mut Refitter, problem: &Problem, data: &DataView, k: usize, lambda: f64, smax: f64) {
    let n = rf.n;
    let h = 0.1;
    // trial = a + h v (within bounds; a projected velocity is already in d)
    for j in 0..rf.m {
        rf.trial[j] = rf.a[j] + h * rf.d[j];
    }
    if rf.eval_trial(problem.model, data, false).is_err() {
        return;
    }
    rf.jac_times_d();
    for i in 0..n {
        // r'' ~ (2/h) ((r(a + h v) - r(a)) / h - J v)
        rf.rpp[i] = (2.0 / h) * ((rf.trial_resid[i] - rf.resid[i]) / h - rf.jd[i]);
    }
    apply_qt(&rf.qr, n, k, &rf.beta, &mut rf.rpp);
    for i in 0..k {
        let si = rf.s[i];
        rf.c2[i] = if si > 0.0 {
            dot(&rf.w[i * k..(i + 1) * k], &rf.rpp[..k]) / si
        } else {
            0.0
        };
    }
    scaled_step(
        &rf.s[..k],
        &rf.c2[..k],
        &rf.v[..k * k],
        k,
        lambda,
        smax,
        &mut rf.acc[..k],
    );
    let an = norm2(&rf.acc[..k]);
    let mut vn = 0.0;
    for &j in &rf.active {
        let t = rf.diag[j] * rf.d[j];
        vn += t * t;
    }
    let vn = vn.sqrt();
    if !(an.is_finite()) || vn == 0.0 || 2.0 * an > 0.75 * vn {
        rf.project_trial();
        return;
    }
    for (c, &j) in rf.active.iter().enumerate() {
        rf.d[j] += -0.5 * rf.acc[c] / rf.diag[j];
    }
    rf.project_trial();
}
