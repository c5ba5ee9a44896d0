//! Covariance from the SVD of the weighted Jacobian with rank detection.
//!
//! The columns of the weighted Jacobian of the estimated parameters are
//! first scaled to unit norm (so that the rank test and the condition
//! number do not depend on the parameters' units), then
//! `J_s = U S V^T`. Singular values below [`RANK_TOLERANCE`] times the
//! largest are treated as zero: the covariance is the pseudo-inverse
//! `D^-1 V_r S_r^-2 V_r^T D^-1`, and each dropped right singular vector is a
//! direction in which the data do not determine the parameters.

use nalgebra::DMatrix;

/// Relative singular-value threshold of the rank test (on the Jacobian
/// with unit-norm columns).
pub const RANK_TOLERANCE: f64 = 1e-10;

/// A parameter counts as undetermined when its squared components over the
/// null-space directions sum to more than this.
pub const UNDETERMINED_WEIGHT: f64 = 1e-4;

/// Null-space components smaller than this are left out of the diagnosis.
const COMPONENT_CUT: f64 = 1e-6;

/// What the SVD tells about the estimated parameters.
pub(crate) struct Analysis {
    /// Unscaled covariance `(J^T J)^+` over the estimated parameters.
    pub cov: Vec<Vec<f64>>,
    /// Numerical rank.
    pub rank: usize,
    /// `s_max / s_min` of the column-scaled Jacobian.
    pub condition: f64,
    /// Null-space directions (components over the estimated parameters, in
    /// the column-scaled coordinates).
    pub null: Vec<Vec<f64>>,
    /// Parameters that the null space touches.
    pub undetermined: Vec<bool>,
    /// Diagonal of the hat matrix.
    pub leverage: Vec<f64>,
}

/// `jac` is n x k column-major (weighted Jacobian of the estimated
/// parameters).
pub(crate) fn analyse_jacobian(jac: &[f64], n: usize, k: usize) -> Analysis {
    if k == 0 || n == 0 {
        return Analysis {
            cov: Vec::new(),
            rank: 0,
            condition: 1.0,
            null: Vec::new(),
            undetermined: vec![false; k],
            leverage: vec![0.0; n],
        };
    }
    let norms: Vec<f64> = (0..k)
        .map(|j| super::linalg::norm2(&jac[j * n..(j + 1) * n]))
        .collect();
    let js = DMatrix::from_fn(n, k, |i, j| {
        if norms[j] > 0.0 {
            jac[j * n + i] / norms[j]
        } else {
            0.0
        }
    });
    // With n < k pad with zero rows so that V is k x k.
    let rows = n.max(k);
    let js = if rows > n { js.resize(rows, k, 0.0) } else { js };
    let svd = js.svd(true, true);
    let u = svd.u.expect("u requested");
    let vt = svd.v_t.expect("v requested");
    let s = svd.singular_values;
    let smax = s.iter().fold(0.0f64, |a, &b| a.max(b));
    let smin = s.iter().fold(f64::INFINITY, |a, &b| a.min(b));
    let condition = if smax == 0.0 {
        f64::MAX
    } else if smin > 0.0 {
        smax / smin
    } else {
        f64::MAX
    };
    let keep: Vec<bool> = s
        .iter()
        .map(|&v| smax > 0.0 && v > RANK_TOLERANCE * smax)
        .collect();
    let rank = keep.iter().filter(|&&b| b).count();
    let mut cov = vec![vec![0.0; k]; k];
    for (idx, &kept) in keep.iter().enumerate() {
        if !kept {
            continue;
        }
        let inv = 1.0 / (s[idx] * s[idx]);
        for a in 0..k {
            for b in 0..k {
                cov[a][b] += vt[(idx, a)] * vt[(idx, b)] * inv;
            }
        }
    }
    for (a, row) in cov.iter_mut().enumerate() {
        for (b, v) in row.iter_mut().enumerate() {
            if norms[a] > 0.0 && norms[b] > 0.0 {
                *v /= norms[a] * norms[b];
            } else {
                *v = 0.0;
            }
        }
    }
    let mut null = Vec::new();
    let mut weight = vec![0.0; k];
    for (idx, &kept) in keep.iter().enumerate() {
        if kept {
            continue;
        }
        let dir: Vec<f64> = (0..k).map(|a| vt[(idx, a)]).collect();
        for (w, c) in weight.iter_mut().zip(dir.iter()) {
            *w += c * c;
        }
        null.push(dir);
    }
    let undetermined: Vec<bool> = weight.iter().map(|&w| w > UNDETERMINED_WEIGHT).collect();
    let mut leverage = vec![0.0; n];
    for (idx, &kept) in keep.iter().enumerate() {
        if !kept {
            continue;
        }
        for (i, h) in leverage.iter_mut().enumerate() {
            let t = u[(i, idx)];
            *h += t * t;
        }
    }
    Analysis {
        cov,
        rank,
        condition,
        null,
        undetermined,
        leverage,
    }
}

/// Keeps the components of a null direction worth naming.
pub(crate) fn significant(dir: &[f64]) -> impl Iterator<Item = (usize, f64)> + '_ {
    dir.iter()
        .copied()
        .enumerate()
        .filter(|(_, c)| c.abs() > COMPONENT_CUT)
}
