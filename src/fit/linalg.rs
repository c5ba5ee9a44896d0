//! Small dense kernels over caller-owned buffers: a Householder QR of a tall
//! column-major matrix and a one-sided Jacobi SVD of the square triangular
//! factor. Neither allocates; both are used inside the refit loop.

/// In-place Householder QR of the `n x k` column-major matrix `a` (leading
/// dimension `n`). On exit column `j` holds, in rows `j..n`, the Householder
/// vector `v_j`, and rows `0..j` hold the strict upper part of `R`; the
/// diagonal of `R` goes to `rdiag[j]` and the reflector scalars to `beta[j]`
/// (`H_j = I - beta_j v_j v_j^T`).
pub(crate) fn householder_qr(a: &mut [f64], n: usize, k: usize, rdiag: &mut [f64], beta: &mut [f64]) {
    for j in 0..k {
        let (left, right) = a.split_at_mut((j + 1) * n);
        let col = &mut left[j * n..];
        let x = &mut col[j..n];
        let norm = norm2(x);
        if norm == 0.0 {
            rdiag[j] = 0.0;
            beta[j] = 0.0;
            continue;
        }
        let alpha = if x[0] > 0.0 { -norm } else { norm };
        x[0] -= alpha;
        // v^T v = 2 (|x|^2 - alpha x0) = 2 norm (norm + |x0|)
        let vtv = 2.0 * norm * (norm + (x[0] + alpha).abs());
        let b = 2.0 / vtv;
        rdiag[j] = alpha;
        beta[j] = b;
        for c in 0..(k - j - 1) {
            let other = &mut right[c * n + j..c * n + n];
            let s = b * dot(x, other);
            axpy(-s, x, other);
        }
    }
}

/// Applies `Q^T` (from [`householder_qr`]) to the vector `r` of length `n`.
pub(crate) fn apply_qt(a: &[f64], n: usize, k: usize, beta: &[f64], r: &mut [f64]) {
    for j in 0..k {
        if beta[j] == 0.0 {
            continue;
        }
        let v = &a[j * n + j..j * n + n];
        let rr = &mut r[j..n];
        let s = beta[j] * dot(v, rr);
        axpy(-s, v, rr);
    }
}

/// Copies the `k x k` factor `R` out of the QR storage into `w`
/// (column-major, leading dimension `k`, zeros below the diagonal).
pub(crate) fn extract_r(a: &[f64], n: usize, k: usize, rdiag: &[f64], w: &mut [f64]) {
    for j in 0..k {
        for i in 0..k {
            w[j * k + i] = if i < j {
                a[j * n + i]
            } else if i == j {
                rdiag[j]
            } else {
                0.0
            };
        }
    }
}

/// One-sided (Hestenes) Jacobi SVD of the `k x k` column-major `w`.
/// On exit the columns of `w` are `u_i s_i` (mutually orthogonal), `v`
/// holds the right singular vectors as columns and `s` the singular values
/// (column norms of `w`), unsorted.
pub(crate) fn jacobi_svd(w: &mut [f64], k: usize, v: &mut [f64], s: &mut [f64]) {
    for j in 0..k {
        for i in 0..k {
            v[j * k + i] = if i == j { 1.0 } else { 0.0 };
        }
    }
    jacobi_sweeps(w, k, v, s, f64::EPSILON);
}

/// Eigen-decomposition of the symmetric `k x k` matrix `a` (column-major)
/// by one-sided Jacobi rotations started from the orthonormal basis in
/// `v` (for instance the eigenvectors of a nearby matrix, which leaves
/// only a sweep or two): on exit `v` holds the eigenvectors as columns,
/// `s` the absolute eigenvalues and `w` the product `a v`. `a` is read
/// only. Falls back to the identity start when `v` is not orthonormal to
/// 1e-12. The rotations stop once every pair of columns of `w` is
/// orthogonal to `tol` relative to their norms.
pub(crate) fn jacobi_eigen_from(a: &[f64], w: &mut [f64], k: usize, v: &mut [f64], s: &mut [f64], tol: f64) {
    let mut orthonormal = true;
    'check: for p in 0..k {
        for q in p..k {
            let d = dot(&v[p * k..p * k + k], &v[q * k..q * k + k]);
            let want = if p == q { 1.0 } else { 0.0 };
            if (d - want).abs().is_nan() || (d - want).abs() > 1e-12 {
                orthonormal = false;
                break 'check;
            }
        }
    }
    if !orthonormal {
        for j in 0..k {
            for i in 0..k {
                v[j * k + i] = if i == j { 1.0 } else { 0.0 };
            }
        }
    }
    // w = a v
    for j in 0..k {
        for i in 0..k {
            let mut t = 0.0;
            for l in 0..k {
                t += a[l * k + i] * v[j * k + l];
            }
            w[j * k + i] = t;
        }
    }
    jacobi_sweeps(w, k, v, s, tol);
}

/// The rotations of [`jacobi_svd`] on `w` (accumulated into `v`) until
/// every pair of columns is orthogonal to `tol` relative to their norms.
fn jacobi_sweeps(w: &mut [f64], k: usize, v: &mut [f64], s: &mut [f64], tol: f64) {
    for (i, si) in s.iter_mut().enumerate().take(k) {
        let c = &w[i * k..i * k + k];
        *si = dot(c, c);
    }
    // s holds the squared column norms during the sweeps, updated by the
    // exact formulas of the rotation and refreshed after every sweep.
    for _sweep in 0..80 {
        let mut rotated = false;
        for p in 0..k {
            for q in (p + 1)..k {
                let (alpha, beta) = (s[p], s[q]);
                let gamma = dot(&w[p * k..p * k + k], &w[q * k..q * k + k]);
                if gamma == 0.0 || gamma.abs() <= tol * (alpha * beta).sqrt() {
                    continue;
                }
                rotated = true;
                let zeta = (beta - alpha) / (2.0 * gamma);
                let t = zeta.signum() / (zeta.abs() + (1.0 + zeta * zeta).sqrt());
                let c = 1.0 / (1.0 + t * t).sqrt();
                let sn = c * t;
                rotate(w, k, p, q, c, sn);
                rotate(v, k, p, q, c, sn);
                s[p] = alpha - t * gamma;
                s[q] = beta + t * gamma;
            }
        }
        for (i, si) in s.iter_mut().enumerate().take(k) {
            let c = &w[i * k..i * k + k];
            *si = dot(c, c);
        }
        if !rotated {
            break;
        }
    }
    for si in s.iter_mut().take(k) {
        *si = si.sqrt();
    }
}

fn rotate(m: &mut [f64], k: usize, p: usize, q: usize, c: f64, s: f64) {
    for i in 0..k {
        let a = m[p * k + i];
        let b = m[q * k + i];
        m[p * k + i] = c * a - s * b;
        m[q * k + i] = s * a + c * b;
    }
}

/// Dot product (four partial sums, so that the loop is not bound by the
/// latency of one chain of additions).
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let mut acc = [0.0f64; 4];
    let ca = a.chunks_exact(4);
    let cb = b.chunks_exact(4);
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        acc[0] += x[0] * y[0];
        acc[1] += x[1] * y[1];
        acc[2] += x[2] * y[2];
        acc[3] += x[3] * y[3];
    }
    let mut tail = 0.0;
    for (x, y) in ra.iter().zip(rb.iter()) {
        tail += x * y;
    }
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// `y += alpha * x`.
pub(crate) fn axpy(alpha: f64, x: &[f64], y: &mut [f64]) {
    for (o, v) in y.iter_mut().zip(x.iter()) {
        *o += alpha * v;
    }
}

/// Euclidean norm: the plain sum of squares when it is safely inside the
/// floating-point range, else a rescaled sum (no overflow or underflow).
pub(crate) fn norm2(x: &[f64]) -> f64 {
    let s = dot(x, x);
    if s > 1e-280 && s < 1e280 {
        return s.sqrt();
    }
    let amax = x.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    if amax == 0.0 || !amax.is_finite() {
        return amax;
    }
    let inv = 1.0 / amax;
    let s: f64 = x.iter().map(|v| (v * inv) * (v * inv)).sum();
    amax * s.sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn qr_then_svd_reproduces_singular_values() {
        // A = [[3, 0], [4, 5], [0, 0]] (column-major); A^T A = [[25, 20], [20, 25]]
        // has eigenvalues 45 and 5 (mathematical identity), so s = sqrt(45), sqrt(5).
        let n = 3;
        let k = 2;
        let mut a = vec![3.0, 4.0, 0.0, 0.0, 5.0, 0.0];
        let mut rdiag = vec![0.0; k];
        let mut beta = vec![0.0; k];
        householder_qr(&mut a, n, k, &mut rdiag, &mut beta);
        let mut w = vec![0.0; k * k];
        extract_r(&a, n, k, &rdiag, &mut w);
        let mut v = vec![0.0; k * k];
        let mut s = vec![0.0; k];
        jacobi_svd(&mut w, k, &mut v, &mut s);
        s.sort_by(|x, y| y.partial_cmp(x).unwrap());
        assert!((s[0] - 45f64.sqrt()).abs() < 1e-14);
        assert!((s[1] - 5f64.sqrt()).abs() < 1e-14);
        // Q^T b keeps the norm (orthogonality).
        let mut b = vec![1.0, 2.0, 2.0];
        apply_qt(&a, n, k, &beta, &mut b);
        assert!((norm2(&b) - 3.0).abs() < 1e-14);
    }
}
