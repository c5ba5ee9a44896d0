//! Exact second derivatives of a compiled formula with respect to its
//! parameters: the Hessian of the model at every data point, for the
//! curvature measures and the bias of the estimates
//! ([`crate::diagnostics::nonlinearity`]).
//!
//! The second derivatives are symbolic: each first-derivative node of the
//! expression graph is differentiated once more ([`Graph::derivative`]
//! works on any node), so they share their subexpressions with the value
//! and the Jacobian through hash-consing. The program is lowered lazily, on
//! the first request, so that compiling a formula costs nothing extra for
//! the many tapes (derived quantities, inverse models, benchmarks) that
//! never ask for it.

use std::sync::{Arc, OnceLock};

use super::graph::{Graph, Id};
use super::tape::Program;
use super::{NonFinite, Tape};

/// Position of the pair `(j, k)` in the packed lower triangle of an
/// `m x m` symmetric matrix: `j * (j + 1) / 2 + k` for `k <= j` (the
/// order is symmetric in its arguments).
pub fn pair_index(j: usize, k: usize) -> usize {
    let (hi, lo) = if j >= k { (j, k) } else { (k, j) };
    hi * (hi + 1) / 2 + lo
}

/// Number of distinct second derivatives of `m` parameters, `m (m + 1) / 2`.
pub fn n_pairs(m: usize) -> usize {
    m * (m + 1) / 2
}

/// What a tape keeps to build its second-derivative program on demand.
#[derive(Debug)]
struct Inner {
    /// The expression graph of the formula (value and first derivatives).
    graph: Graph,
    /// Node of the value, then of each first derivative (a constant 0 for
    /// an unused parameter).
    roots: Vec<Id>,
    /// Which parameters the formula uses.
    used: Vec<bool>,
    /// The program: value, then the packed lower triangle of the Hessian.
    program: OnceLock<Program>,
}

/// The lazily built second-derivative program of a [`Tape`]; clones share it.
#[derive(Debug, Clone)]
pub(crate) struct Second(Arc<Inner>);

impl Second {
    /// Keeps the graph of a compiled formula: `roots` are the value and the
    /// first-derivative nodes in parameter order.
    pub(crate) fn new(graph: Graph, roots: Vec<Id>, used: Vec<bool>) -> Self {
        Second(Arc::new(Inner {
            graph,
            roots,
            used,
            program: OnceLock::new(),
        }))
    }

    /// The program, lowered on first use.
    fn program(&self) -> &Program {
        let inner = &*self.0;
        inner.program.get_or_init(|| {
            let mut g = inner.graph.clone();
            let m = inner.used.len();
            let zero = g.konst(0.0);
            let mut out = Vec::with_capacity(1 + n_pairs(m));
            out.push(inner.roots[0]);
            for j in 0..m {
                for k in 0..=j {
                    let node = if inner.used[j] && inner.used[k] {
                        g.derivative(inner.roots[1 + j], k)
                    } else {
                        zero
                    };
                    out.push(node);
                }
            }
            Program::lower(&g, &out)
        })
    }
}

impl Tape {
    /// Model values and exact second derivatives with respect to the
    /// parameters at every point: `hess[pair_index(j, k) * n + i] =
    /// d^2 f(x_i) / (d a_j d a_k)`, `n = values.len()`, packed lower
    /// triangle (length `n * m (m + 1) / 2`). Returns the first point whose
    /// value or second derivative is not finite.
    ///
    /// # Panics
    /// On a violated size contract (as [`super::ModelFn::eval`]).
    pub fn eval_hessian(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        hess: &mut [f64],
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        let n = values.len();
        let m = self.n_params;
        assert_eq!(params.len(), m, "parameter vector has the wrong length");
        assert!(x.len() >= self.n_vars, "too few data columns");
        for col in &x[..self.n_vars] {
            assert!(col.len() >= n, "data column shorter than the value buffer");
        }
        assert_eq!(
            hess.len(),
            n * n_pairs(m),
            "Hessian buffer must hold n * m (m + 1) / 2 values"
        );
        let prog = self.second.program();
        prog.run(prog.scratch_len(), params, x, values, Some(hess), scratch)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{compile, Symbols};

    #[test]
    fn packed_pairs_are_symmetric_and_dense() {
        let mut seen = vec![false; n_pairs(4)];
        for j in 0..4 {
            for k in 0..4 {
                assert_eq!(pair_index(j, k), pair_index(k, j));
                seen[pair_index(j, k)] = true;
            }
        }
        assert!(seen.iter().all(|&s| s));
    }

    /// `a * exp(-k t)`: d2/da2 = 0, d2/(da dk) = -t exp(-k t),
    /// d2/dk2 = a t^2 exp(-k t) (calculus).
    #[test]
    fn second_derivatives_of_a_decay_match_the_closed_form() {
        let params = vec!["a".to_string(), "k".to_string(), "unused".to_string()];
        let vars = vec!["t".to_string()];
        let syms = Symbols {
            parameters: &params,
            constants: &[],
            variables: &vars,
        };
        let tape = compile("a*exp(-k*t)", &syms).unwrap();
        let t = [0.0, 0.5, 2.0];
        let (a, k) = (3.0, 0.7);
        let mut v = [0.0; 3];
        let mut h = vec![f64::NAN; 3 * n_pairs(3)];
        let mut scratch = Vec::new();
        tape.eval_hessian(&[a, k, 1.0], &[&t], &mut v, &mut h, &mut scratch)
            .unwrap();
        for (i, &ti) in t.iter().enumerate() {
            let e = (-k * ti).exp();
            assert!((v[i] - a * e).abs() < 1e-14);
            assert_eq!(h[pair_index(0, 0) * 3 + i], 0.0);
            assert!((h[pair_index(1, 0) * 3 + i] + ti * e).abs() < 1e-14);
            assert!((h[pair_index(1, 1) * 3 + i] - a * ti * ti * e).abs() < 1e-13);
            for j in 0..3 {
                assert_eq!(h[pair_index(2, j) * 3 + i], 0.0);
            }
        }
    }
}
