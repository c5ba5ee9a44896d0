//! One model over several data sets: each data set has its own compiled
//! formula over the parameters it uses; the joint parameter vector lists
//! every parameter once, so a parameter used by several formulas is shared.
//!
//! The joint data hold the data sets one after the other, with the data-set
//! index of every point in an extra last `x` column (see
//! [`crate::data::Dataset::groups`]). [`JointModel::eval`] reads that column,
//! evaluates each run of consecutive points of one data set with that data
//! set's tape on its slice of the points, and writes the joint Jacobian:
//! the data set's local columns go to the joint columns of its parameters,
//! the columns of parameters it does not use are zero. Because the data-set
//! index travels with each point, resampled copies (case bootstrap,
//! leave-one-out) evaluate correctly whatever their length.
//!
//! No allocation once the buffers have grown: the local parameters and the
//! local Jacobian of a run live in a per-thread buffer that only grows, the
//! tapes use the caller's scratch.

use std::cell::RefCell;

use super::{ModelFn, NonFinite, Tape};

/// Most independent variables one data set of a joint model may have (the
/// column views of a run are kept on the stack).
pub const MAX_VARS: usize = 32;

thread_local! {
    /// Local parameters and local Jacobian of the run being evaluated.
    static BUFFER: RefCell<Vec<f64>> = const { RefCell::new(Vec::new()) };
}

/// One data set's part of a joint model.
#[derive(Debug, Clone)]
pub struct JointPart {
    /// Its formula compiled over its own parameters (`map` order) and its
    /// own x names (the first `n_vars` joint x columns).
    pub tape: Tape,
    /// For each of its parameters, the index in the joint parameter vector.
    pub map: Vec<usize>,
}

/// A model over several data sets sharing parameters by name.
#[derive(Debug, Clone)]
pub struct JointModel {
    parts: Vec<JointPart>,
    n_params: usize,
    group_column: usize,
}

impl JointModel {
    /// A joint model of `n_params` parameters; point `i` belongs to part
    /// `x[group_column][i]` (a whole number, the index in `parts`).
    ///
    /// # Panics
    /// When a part maps a parameter outside `0..n_params`, its map length
    /// differs from its tape's parameter count, or it has more than
    /// [`MAX_VARS`] variables.
    pub fn new(parts: Vec<JointPart>, n_params: usize, group_column: usize) -> JointModel {
        for p in &parts {
            assert!(p.map.iter().all(|&j| j < n_params), "parameter map out of range");
            assert_eq!(p.map.len(), p.tape.n_params(), "parameter map length");
            assert!(p.tape.n_vars() <= MAX_VARS, "too many variables in one data set");
        }
        JointModel {
            parts,
            n_params,
            group_column,
        }
    }

    /// The data sets' parts, in data-set order.
    pub fn parts(&self) -> &[JointPart] {
        &self.parts
    }

    /// Index of the `x` column holding each point's data-set index.
    pub fn group_column(&self) -> usize {
        self.group_column
    }
}

/// # Panics
/// On a violated size contract (as for [`Tape`]), or a data-set index that
/// names no part.
impl ModelFn for JointModel {
    fn n_params(&self) -> usize {
        self.n_params
    }

    fn eval(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        mut jac: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        let n = values.len();
        let m = self.n_params;
        assert_eq!(params.len(), m, "parameter vector has the wrong length");
        let groups = x[self.group_column];
        if let Some(j) = jac.as_deref_mut() {
            assert_eq!(j.len(), n * m, "Jacobian buffer must hold n * n_params values");
            j.fill(0.0);
        }
        let mut bad: Option<usize> = None;
        BUFFER.with(|buffer| {
            let mut buf = buffer.borrow_mut();
            let mut i = 0;
            while i < n {
                let g = groups[i];
                let mut e = i + 1;
                while e < n && groups[e] == g {
                    e += 1;
                }
                let part = &self.parts[g as usize];
                let ml = part.map.len();
                let len = e - i;
                let need = ml + if jac.is_some() { len * ml } else { 0 };
                if buf.len() < need {
                    buf.resize(need, 0.0);
                }
                let (lp, lj) = buf.split_at_mut(ml);
                for (k, &j) in part.map.iter().enumerate() {
                    lp[k] = params[j];
                }
                let nv = part.tape.n_vars();
                let mut cols: [&[f64]; MAX_VARS] = [&[]; MAX_VARS];
                for (c, col) in cols.iter_mut().zip(x).take(nv) {
                    *c = &col[i..e];
                }
                let local_jac = jac.is_some().then(|| &mut lj[..len * ml]);
                let r = part
                    .tape
                    .eval(lp, &cols[..nv], &mut values[i..e], local_jac, scratch);
                if let Some(joint) = jac.as_deref_mut() {
                    for (k, &j) in part.map.iter().enumerate() {
                        joint[j * n + i..j * n + e].copy_from_slice(&lj[k * len..(k + 1) * len]);
                    }
                }
                if let Err(nf) = r {
                    bad = Some(bad.map_or(i + nf.point, |b| b.min(i + nf.point)));
                }
                i = e;
            }
        });
        match bad {
            Some(point) => Err(NonFinite { point }),
            None => Ok(()),
        }
    }

    /// Exact second derivatives: each data set's tape on its run of points,
    /// its local pairs scattered to the joint pairs of its parameters
    /// (pairs of parameters it does not use are zero).
    fn hessian(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        hess: &mut [f64],
        scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        use super::{n_pairs, pair_index};
        let n = values.len();
        let m = self.n_params;
        assert_eq!(params.len(), m, "parameter vector has the wrong length");
        assert_eq!(hess.len(), n * n_pairs(m), "Hessian buffer length");
        hess.fill(0.0);
        let groups = x[self.group_column];
        let mut bad: Option<usize> = None;
        let mut i = 0;
        while i < n {
            let g = groups[i];
            let mut e = i + 1;
            while e < n && groups[e] == g {
                e += 1;
            }
            let part = &self.parts[g as usize];
            let ml = part.map.len();
            let len = e - i;
            let lp: Vec<f64> = part.map.iter().map(|&j| params[j]).collect();
            let mut lh = vec![0.0; len * n_pairs(ml)];
            let nv = part.tape.n_vars();
            let cols: Vec<&[f64]> = x.iter().take(nv).map(|c| &c[i..e]).collect();
            let r = part
                .tape
                .eval_hessian(&lp, &cols, &mut values[i..e], &mut lh, scratch);
            for a in 0..ml {
                for b in 0..=a {
                    let (ja, jb) = (part.map[a], part.map[b]);
                    let q = pair_index(ja, jb);
                    let src = &lh[pair_index(a, b) * len..(pair_index(a, b) + 1) * len];
                    hess[q * n + i..q * n + e].copy_from_slice(src);
                }
            }
            if let Err(nf) = r {
                bad = Some(bad.map_or(i + nf.point, |b| b.min(i + nf.point)));
            }
            i = e;
        }
        Some(match bad {
            Some(point) => Err(NonFinite { point }),
            None => Ok(()),
        })
    }

    /// A parameter is a position on joint column `k` when some data set's
    /// formula makes it a position on its `k`-th variable (the first such
    /// data set decides).
    fn positions(&self) -> Vec<Option<usize>> {
        let mut out = vec![None; self.n_params];
        for p in &self.parts {
            let local = p.tape.positions();
            for (k, &j) in p.map.iter().enumerate() {
                if out[j].is_none() {
                    out[j] = local.get(k).copied().flatten();
                }
            }
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{compile, Symbols};

    fn part(formula: &str, params: &[&str], vars: &[&str], map: Vec<usize>) -> JointPart {
        let params: Vec<String> = params.iter().map(|s| s.to_string()).collect();
        let vars: Vec<String> = vars.iter().map(|s| s.to_string()).collect();
        let syms = Symbols {
            parameters: &params,
            constants: &[],
            variables: &vars,
        };
        JointPart {
            tape: compile(formula, &syms).unwrap(),
            map,
        }
    }

    /// The joint second derivatives are each data set's own, at the joint
    /// pairs of its parameters: set 0 is `a*exp(-b t)` (d2/(da db) =
    /// -t exp(-b t), d2/db2 = a t^2 exp(-b t)), set 1 is `c*b^2*u`
    /// (d2/db2 = 2 c u, d2/(db dc) = 2 b u); every other pair is 0 (calculus).
    #[test]
    fn second_derivatives_are_scattered_to_the_joint_pairs() {
        use crate::model::{n_pairs, pair_index};
        let m = JointModel::new(
            vec![
                part("a*exp(-b*t)", &["a", "b"], &["t"], vec![0, 1]),
                part("c*b^2*u", &["b", "c"], &["u"], vec![1, 2]),
            ],
            3,
            1,
        );
        let t = [0.5, 2.0, 1.5];
        let grp = [0.0, 1.0, 1.0];
        let (a, b, c) = (2.0, 0.3, -1.5);
        let mut v = [0.0; 3];
        let mut h = vec![f64::NAN; 3 * n_pairs(3)];
        let r = m.hessian(&[a, b, c], &[&t, &grp], &mut v, &mut h, &mut Vec::new());
        r.unwrap().unwrap();
        let at = |j: usize, k: usize, i: usize| h[pair_index(j, k) * 3 + i];
        let e = (-b * t[0]).exp();
        assert!((at(0, 1, 0) + t[0] * e).abs() < 1e-14);
        assert!((at(1, 1, 0) - a * t[0] * t[0] * e).abs() < 1e-14);
        assert_eq!(at(2, 2, 0), 0.0);
        assert_eq!(at(0, 2, 0), 0.0);
        for (i, &ti) in t.iter().enumerate().skip(1) {
            assert!((at(1, 1, i) - 2.0 * c * ti).abs() < 1e-14);
            assert!((at(1, 2, i) - 2.0 * b * ti).abs() < 1e-14);
            assert_eq!(at(0, 0, i), 0.0);
            assert_eq!(at(0, 1, i), 0.0);
            assert_eq!(at(2, 2, i), 0.0);
        }
    }

    #[test]
    fn each_point_uses_its_own_formula_and_the_jacobian_is_scattered() {
        // Joint parameters (a, b, c): set 0 is a + b*t, set 1 is c*t^2 + b.
        let m = JointModel::new(
            vec![
                part("a + b*t", &["a", "b"], &["t"], vec![0, 1]),
                part("c*u^2 + b", &["b", "c"], &["u"], vec![1, 2]),
            ],
            3,
            1,
        );
        // Points interleaved on purpose: the data-set column decides.
        let t = [1.0, 2.0, 3.0, 4.0];
        let g = [0.0, 1.0, 1.0, 0.0];
        let p = [0.5, 2.0, 3.0];
        let mut v = [0.0; 4];
        let mut j = [9.0; 12];
        let mut s = Vec::new();
        m.eval(&p, &[&t, &g], &mut v, Some(&mut j), &mut s).unwrap();
        // Values written out by hand from the two formulas.
        assert_eq!(v, [0.5 + 2.0, 3.0 * 4.0 + 2.0, 3.0 * 9.0 + 2.0, 0.5 + 8.0]);
        assert_eq!(&j[0..4], &[1.0, 0.0, 0.0, 1.0]); // d/da
        assert_eq!(&j[4..8], &[1.0, 1.0, 1.0, 4.0]); // d/db
        assert_eq!(&j[8..12], &[0.0, 4.0, 9.0, 0.0]); // d/dc
                                                      // Value-only evaluation agrees.
        let mut v2 = [0.0; 4];
        m.eval(&p, &[&t, &g], &mut v2, None, &mut s).unwrap();
        assert_eq!(v, v2);
        assert_eq!(m.n_params(), 3);
    }

    #[test]
    fn a_non_finite_point_is_reported_at_its_joint_index() {
        let m = JointModel::new(
            vec![
                part("a*t", &["a"], &["t"], vec![0]),
                part("a/t", &["a"], &["t"], vec![0]),
            ],
            1,
            1,
        );
        let t = [1.0, 2.0, 0.0];
        let g = [0.0, 1.0, 1.0];
        let mut v = [0.0; 3];
        let mut s = Vec::new();
        let e = m.eval(&[1.0], &[&t, &g], &mut v, None, &mut s).unwrap_err();
        assert_eq!(e.point, 2);
    }

    #[test]
    fn positions_map_to_joint_parameters() {
        let m = JointModel::new(
            vec![
                part("h*exp(-(w-mu)^2)", &["h", "mu"], &["w"], vec![0, 2]),
                part("h + k*w", &["h", "k"], &["w"], vec![0, 1]),
            ],
            3,
            1,
        );
        assert_eq!(m.positions(), vec![None, None, Some(0)]);
    }
}
