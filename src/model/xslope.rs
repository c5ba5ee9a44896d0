//! The x-slope program of a [`Tape`]: the derivative of the model with
//! respect to its one independent variable, `df/dx`, and the mixed second
//! derivatives `d2f / dx da_j`, exact (symbolic, from the same expression
//! graph as the value and the Jacobian). Errors in x (the effective
//! variance `sigma_y^2 + (df/dx)^2 sigma_x^2`) need both: the slope for the
//! variance, its parameter derivatives for the variance's dependence on the
//! parameters.

use super::graph::{Graph, Id};
use super::tape::Program;
use super::{NonFinite, Tape};

/// The two x-slope programs of a model with one independent variable
/// (column 0): `df/dx` alone, and `[df/dx, d2f/dx da_0, ...]`.
#[derive(Debug, Clone)]
pub(crate) struct XSlope {
    slope: Program,
    full: Program,
}

/// Lowers the x-slope programs for the value `roots[0]` and the parameter
/// derivatives `roots[1..]`.
pub(crate) fn lower(g: &mut Graph, roots: &[Id]) -> XSlope {
    let ids: Vec<Id> = roots.iter().map(|&r| g.derivative_var(r, 0)).collect();
    XSlope {
        slope: Program::lower(g, &ids[..1]),
        full: Program::lower(g, &ids),
    }
}

impl Tape {
    /// Whether the tape has an x-slope program (exactly one independent
    /// variable).
    pub fn has_x_slope(&self) -> bool {
        self.x_slope_prog.is_some()
    }

    /// Evaluates `df/dx` into `slope` and, when given, `d2f / dx da_j` into
    /// column `j` of `dslope` (column-major, `n * n_params`). None when the
    /// tape has no x-slope program (not exactly one x column).
    ///
    /// # Panics
    /// On the size contract of [`super::ModelFn::eval`].
    pub fn eval_x_slope_program(
        &self,
        params: &[f64],
        x: &[&[f64]],
        slope: &mut [f64],
        dslope: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        let progs = self.x_slope_prog.as_ref()?;
        let n = slope.len();
        assert_eq!(
            params.len(),
            self.n_params,
            "parameter vector has the wrong length"
        );
        assert!(
            !x.is_empty() && x[0].len() >= n,
            "data column shorter than the value buffer"
        );
        if let Some(d) = &dslope {
            assert_eq!(
                d.len(),
                n * self.n_params,
                "dslope buffer must hold n * n_params values"
            );
        }
        let reserve = progs.full.scratch_len().max(progs.slope.scratch_len());
        Some(match dslope {
            Some(d) => progs.full.run(reserve, params, x, slope, Some(d), scratch),
            None => progs.slope.run(reserve, params, x, slope, None, scratch),
        })
    }
}

#[cfg(test)]
mod tests {
    use crate::model::{compile, ModelFn, Symbols};

    #[test]
    fn slope_and_mixed_derivatives_of_a_decay() {
        // f = a exp(-k t): df/dt = -a k e, d2f/dt da = -k e,
        // d2f/dt dk = -a e + a k t e (calculus, by hand).
        let params = vec!["a".to_string(), "k".to_string()];
        let vars = vec!["t".to_string()];
        let syms = Symbols {
            parameters: &params,
            constants: &[],
            variables: &vars,
        };
        let tape = compile("a*exp(-k*t)", &syms).unwrap();
        assert!(tape.has_x_slope());
        let t = [0.0, 0.7, 2.0];
        let (a, k) = (3.0, 0.4);
        let mut slope = [0.0; 3];
        let mut ds = [0.0; 6];
        let mut scratch = Vec::new();
        tape.eval_x_slope(&[a, k], &[&t], &mut slope, Some(&mut ds), &mut scratch)
            .unwrap()
            .unwrap();
        for (i, &ti) in t.iter().enumerate() {
            let e = (-k * ti).exp();
            assert!((slope[i] + a * k * e).abs() < 1e-14);
            assert!((ds[i] + k * e).abs() < 1e-14);
            assert!((ds[3 + i] - (-a * e + a * k * ti * e)).abs() < 1e-14);
        }
        let two = vec!["t".to_string(), "u".to_string()];
        let syms2 = Symbols {
            parameters: &params,
            constants: &[],
            variables: &two,
        };
        assert!(!compile("a*t + k*u", &syms2).unwrap().has_x_slope());
    }
}
