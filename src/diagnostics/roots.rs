//! Bracketed root finding by Brent's method (R. P. Brent, *Algorithms for
//! Minimization without Derivatives*, Prentice-Hall 1973, chapter 4):
//! inverse quadratic interpolation or the secant step when they stay well
//! inside the bracket, bisection otherwise, so the bracket always shrinks
//! and convergence is guaranteed.
//!
//! The function may fail (return `None`): in the diagnostics every
//! evaluation is a refit, which can fail to converge.

use serde::{Deserialize, Serialize};

/// A root found by [`brent`].
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Root {
    /// Abscissa of the root (within the tolerance).
    pub x: f64,
    /// Function value there.
    pub fx: f64,
    /// Function evaluations spent (the two bracket values not counted).
    pub evaluations: usize,
}

/// Why [`brent`] gave no root.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RootFailure {
    /// `f(a)` and `f(b)` have the same sign (or one is not finite).
    NotBracketed,
    /// An evaluation returned `None` or a non-finite value.
    EvaluationFailed,
    /// The evaluation cap was reached before the tolerance.
    EvaluationLimit,
}

/// Finds a root of `f` in the bracket `[a, b]` given `fa = f(a)` and
/// `fb = f(b)` of opposite signs (or one of them zero). Stops when the
/// bracket is narrower than `xtol` (plus a few ulps of the root) or after
/// `max_evaluations` evaluations.
pub fn brent<F>(
    mut f: F,
    a: f64,
    b: f64,
    fa: f64,
    fb: f64,
    xtol: f64,
    max_evaluations: usize,
) -> Result<Root, RootFailure>
where
    F: FnMut(f64) -> Option<f64>,
{
    if !(fa.is_finite() && fb.is_finite() && a.is_finite() && b.is_finite()) {
        return Err(RootFailure::NotBracketed);
    }
    if fa == 0.0 {
        return Ok(Root {
            x: a,
            fx: fa,
            evaluations: 0,
        });
    }
    if fb == 0.0 {
        return Ok(Root {
            x: b,
            fx: fb,
            evaluations: 0,
        });
    }
    if (fa > 0.0) == (fb > 0.0) {
        return Err(RootFailure::NotBracketed);
    }
    let xtol = xtol.abs();
    // b: best estimate; a: previous b; c: the point that brackets the root with b.
    let (mut a, mut b, mut fa, mut fb) = (a, b, fa, fb);
    let (mut c, mut fc) = (a, fa);
    let mut d = b - a;
    let mut e = d;
    let mut evaluations = 0;
    loop {
        if (fb > 0.0) == (fc > 0.0) {
            // Root lies between a and b: restore the bracket.
            c = a;
            fc = fa;
            d = b - a;
            e = d;
        }
        if fc.abs() < fb.abs() {
            // Keep b as the point with the smallest |f|.
            a = b;
            b = c;
            c = a;
            fa = fb;
            fb = fc;
            fc = fa;
        }
        let tol = 2.0 * f64::EPSILON * b.abs() + 0.5 * xtol;
        let half = 0.5 * (c - b);
        if half.abs() <= tol || fb == 0.0 {
            return Ok(Root {
                x: b,
                fx: fb,
                evaluations,
            });
        }
        if evaluations >= max_evaluations {
            return Err(RootFailure::EvaluationLimit);
        }
        if e.abs() >= tol && fa.abs() > fb.abs() {
            // Try interpolation: secant when only two distinct points are
            // known, inverse quadratic through a, b, c otherwise.
            let s = fb / fa;
            let (mut p, mut q);
            if a == c {
                p = 2.0 * half * s;
                q = 1.0 - s;
            } else {
                let qa = fa / fc;
                let r = fb / fc;
                p = s * (2.0 * half * qa * (qa - r) - (b - a) * (r - 1.0));
                q = (qa - 1.0) * (r - 1.0) * (s - 1.0);
            }
            if p > 0.0 {
                q = -q;
            } else {
                p = -p;
            }
            // Accept the interpolated step only if it lands well inside the
            // bracket and shrinks faster than the step before last.
            if 2.0 * p < (3.0 * half * q - (tol * q).abs()).min((e * q).abs()) {
                e = d;
                d = p / q;
            } else {
                d = half;
                e = d;
            }
        } else {
            d = half;
            e = d;
        }
        a = b;
        fa = fb;
        b += if d.abs() > tol { d } else { tol.copysign(half) };
        evaluations += 1;
        fb = match f(b) {
            Some(v) if v.is_finite() => v,
            _ => return Err(RootFailure::EvaluationFailed),
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cubic_of_wallis() {
        // x^3 - 2x - 5 = 0, the classic test equation of root finders
        // (Wallis; used by Newton); root 2.0945514815423265 (from memory).
        let f = |x: f64| x * x * x - 2.0 * x - 5.0;
        let r = brent(|x| Some(f(x)), 2.0, 3.0, f(2.0), f(3.0), 1e-14, 100).unwrap();
        assert!((r.x - 2.094_551_481_542_326_5).abs() < 1e-13, "{}", r.x);
        assert!(r.evaluations < 15, "{} evaluations", r.evaluations);
    }

    #[test]
    fn fixed_point_of_cosine() {
        // cos x = x at 0.7390851332151607 (the Dottie number, from memory).
        let f = |x: f64| x.cos() - x;
        let r = brent(|x| Some(f(x)), 0.0, 1.0, f(0.0), f(1.0), 1e-14, 100).unwrap();
        assert!((r.x - 0.739_085_133_215_160_7).abs() < 1e-13, "{}", r.x);
    }

    #[test]
    fn flat_function_falls_back_to_bisection() {
        // x^9 is very flat near its root at 0: interpolation is poor, the
        // guaranteed bisection steps must still converge (identity).
        let f = |x: f64| x.powi(9);
        let r = brent(|x| Some(f(x)), -1.0, 1.5, f(-1.0), f(1.5), 1e-10, 200).unwrap();
        assert!(r.x.abs() < 1e-9, "{}", r.x);
    }

    #[test]
    fn refuses_unbracketed_and_reports_failed_evaluations() {
        let f = |x: f64| x * x + 1.0;
        assert_eq!(
            brent(|x| Some(f(x)), -1.0, 2.0, f(-1.0), f(2.0), 1e-12, 50),
            Err(RootFailure::NotBracketed)
        );
        assert_eq!(
            brent(|_| None, -1.0, 2.0, -1.0, 2.0, 1e-12, 50),
            Err(RootFailure::EvaluationFailed)
        );
        assert_eq!(
            brent(|x| Some(x.powi(9)), -1.0, 2.0, -1.0, 512.0, 1e-300, 2),
            Err(RootFailure::EvaluationLimit)
        );
    }
}
