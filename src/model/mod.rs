//! Models: the formula language, its compiler to a flat instruction tape with
//! exact first derivatives, and the [`ModelFn`] trait every fit evaluates
//! through.
//!
//! # The formula language
//!
//! ```text
//! a1*exp(-k1*t) + a2*exp(-k2*t)        b1*(1-exp[-b2*x])        b1/((1+exp(b2-b3*x))^(1/b4))
//! ```
//!
//! * numbers: `2`, `-0.5`, `.5`, `1e-3`, `2.5E+00`;
//! * operators `+ - * /`, power `^` (or `**`, right-associative, binding
//!   tighter than unary minus: `-x^2` is `-(x^2)`, and `2^-1` is `0.5`);
//! * parentheses, and square brackets used as parentheses;
//! * the functions of [`catalogue`] and the constants of [`constants`];
//! * names (ASCII letters, digits and `_`, not starting with a digit),
//!   resolved in this order: parameters, named constants of the study, data
//!   columns (independent variables), built-in constants; an unknown name is
//!   an error suggesting the closest known name;
//! * whitespace (including line breaks) anywhere between tokens;
//! * nesting (parentheses, calls, unary signs, powers) up to [`MAX_DEPTH`]
//!   levels.
//!
//! Semantics worth knowing: `min`/`max` return NaN when either argument is
//! NaN; the derivative of `abs` is the sign (0 at 0), that of `min`/`max`
//! the derivative of the active argument (the first one at a tie); a power
//! with an exponent that does not depend on the parameter differentiates as
//! `b a^(b-1) a'` (so negative bases with integer exponents work), otherwise
//! as `a^b (b' ln a + b a'/a)`.
//!
//! [`compile`] turns a formula into a [`Tape`]: a flat instruction list that
//! computes the value and the exact derivative with respect to every
//! parameter (symbolic differentiation, never finite differences), with
//! common subexpressions shared and constants folded. The tape evaluates
//! column-wise over blocks of data points into caller-provided buffers.
//!
//! ```
//! use fitaudit::model::{compile, ModelFn, Symbols};
//!
//! let params = vec!["a".to_string(), "k".to_string()];
//! let vars = vec!["t".to_string()];
//! let syms = Symbols { parameters: &params, constants: &[], variables: &vars };
//! let tape = compile("a*exp(-k*t)", &syms).unwrap();
//!
//! let t = [0.0, 1.0, 2.0];
//! let mut values = [0.0; 3];
//! let mut jac = [0.0; 6]; // column-major: d/da for every point, then d/dk
//! let mut scratch = Vec::new();
//! tape.eval(&[2.0, 0.5], &[&t], &mut values, Some(&mut jac), &mut scratch).unwrap();
//! assert_eq!(values[0], 2.0);
//! assert_eq!(jac[1], (-0.5f64).exp()); // d/da at t = 1
//! assert_eq!(jac[3 + 2], -2.0 * 2.0 * (-1.0f64).exp()); // d/dk at t = 2
//!
//! let err = compile("a*exp(-kk*t)", &syms).unwrap_err();
//! assert_eq!(err.column, Some(8));
//! assert!(err.to_string().contains("did you mean 'k'?"));
//! ```

use std::fmt;

mod catalogue;
mod graph;
pub mod joint;
mod ops;
mod parser;
mod second;
mod tape;
mod xslope;

pub use joint::{JointModel, JointPart};
pub use parser::MAX_DEPTH;
pub use second::{n_pairs, pair_index};

/// The first point at which a model value or derivative was not finite.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct NonFinite {
    /// Index of the data point.
    pub point: usize,
}

impl fmt::Display for NonFinite {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "model is not finite at point {}", self.point + 1)
    }
}

/// A model `f(x; a)` that evaluates values and its Jacobian over all points.
///
/// `x` has one slice per independent variable, all of length `n`;
/// `values` has length `n`; `jac`, when given, has length `n * n_params()`
/// and is column-major: `jac[j * n + i] = d f(x_i) / d a_j`.
/// `scratch` is the caller's reusable buffer: an implementation may grow it
/// on first use and must not allocate once it is large enough.
pub trait ModelFn: Sync {
    /// Number of parameters `a`.
    fn n_params(&self) -> usize;
    /// Evaluates values (and the Jacobian when `jac` is `Some`).
    /// Returns the first point whose value or derivative is not finite.
    fn eval(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        jac: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite>;

    /// For each parameter, the independent variable (index of its `x`
    /// column) it is a position on, when the model says so: the parameter
    /// is subtracted from or compared with that column (`x - p`). Empty
    /// when the model cannot tell (the default); the multi-start search
    /// then falls back to the start's magnitude.
    fn positions(&self) -> Vec<Option<usize>> {
        Vec::new()
    }

    /// Errors in x: `df/dx` at every point into `slope` and, when given,
    /// the mixed derivatives `d2f / dx da_j` into column `j` of `dslope`
    /// (column-major, `n * n_params`), for a model with one independent
    /// variable. None when the model cannot say (the default: a native
    /// model has no exact x-slope, and a fit with `sigma_x` is refused
    /// with [`crate::fit::FitError::NoXSlope`]); compiled formulas with one
    /// x column always can.
    fn eval_x_slope(
        &self,
        params: &[f64],
        x: &[&[f64]],
        slope: &mut [f64],
        dslope: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        let _ = (params, x, slope, dslope, scratch);
        None
    }

    /// Exact second derivatives with respect to the parameters, when the
    /// model has them: fills `values` and `hess[pair_index(j, k) * n + i]
    /// = d^2 f(x_i) / (d a_j d a_k)` (packed lower triangle, length
    /// `n * n_pairs(n_params())`) and returns `Some` with the outcome.
    /// The default returns `None` (no exact second derivatives); the
    /// curvature measures then take central differences of the exact
    /// Jacobian instead and say so (`second_derivatives` in results.json).
    fn hessian(
        &self,
        _params: &[f64],
        _x: &[&[f64]],
        _values: &mut [f64],
        _hess: &mut [f64],
        _scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        None
    }
}

/// A model written as native Rust code: a closure that computes, for one
/// point, the value and (into the given row) the gradient with respect to
/// the parameters. Used by benchmarks, examples and tests.
pub struct NativeModel<F> {
    n_params: usize,
    f: F,
}

impl<F> NativeModel<F>
where
    F: Fn(&[f64], &[f64], &mut [f64]) -> f64 + Sync,
{
    /// `f(params, x_row, grad) -> value`: `x_row` holds the point's
    /// independent variables, `grad` receives d value / d params.
    pub fn new(n_params: usize, f: F) -> Self {
        NativeModel { n_params, f }
    }
}

impl<F> ModelFn for NativeModel<F>
where
    F: Fn(&[f64], &[f64], &mut [f64]) -> f64 + Sync,
{
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
        let nv = x.len();
        if scratch.len() < m + nv {
            scratch.resize(m + nv, 0.0);
        }
        let mut bad = None;
        for i in 0..n {
            let (grad, row) = scratch.split_at_mut(m);
            for (k, col) in x.iter().enumerate() {
                row[k] = col[i];
            }
            let v = (self.f)(params, &row[..nv], grad);
            values[i] = v;
            let mut finite = v.is_finite();
            if let Some(j) = jac.as_deref_mut() {
                for (p, g) in grad.iter().enumerate() {
                    j[p * n + i] = *g;
                    finite &= g.is_finite();
                }
            }
            if !finite && bad.is_none() {
                bad = Some(i);
            }
        }
        match bad {
            Some(point) => Err(NonFinite { point }),
            None => Ok(()),
        }
    }
}

/// The names a formula may use, resolved in this order: parameters, named
/// constants of the study, data columns (independent variables).
#[derive(Debug, Clone, Copy)]
pub struct Symbols<'a> {
    /// Declared parameters, in the order of the parameter vector.
    pub parameters: &'a [String],
    /// Named constants with their values.
    pub constants: &'a [(String, f64)],
    /// Independent variables, in the order of the `x` columns.
    pub variables: &'a [String],
}

/// What went wrong compiling a formula.
#[derive(Debug, Clone, PartialEq)]
pub enum ModelErrorKind {
    /// Malformed formula.
    Syntax(String),
    /// A name that is no parameter, constant, variable or function.
    UnknownName {
        /// The name as written.
        name: String,
        /// Closest known name, if any is close.
        suggestion: Option<String>,
    },
    /// Nesting deeper than the fixed limit.
    TooDeep {
        /// The limit.
        limit: usize,
    },
    /// A function called with the wrong number of arguments.
    Arity {
        /// The function name.
        function: String,
        /// How many arguments it takes.
        expected: usize,
        /// How many were given.
        found: usize,
    },
}

impl fmt::Display for ModelErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ModelErrorKind::Syntax(msg) => write!(f, "{msg}"),
            ModelErrorKind::UnknownName { name, suggestion } => {
                write!(f, "unknown name '{name}'")?;
                if let Some(s) = suggestion {
                    write!(f, " (did you mean '{s}'?)")?;
                }
                Ok(())
            }
            ModelErrorKind::TooDeep { limit } => {
                write!(f, "the formula is nested more than {limit} levels deep")
            }
            ModelErrorKind::Arity {
                function,
                expected,
                found,
            } => {
                let plural = if *expected == 1 { "" } else { "s" };
                write!(
                    f,
                    "function '{function}' takes {expected} argument{plural}, {found} given"
                )
            }
        }
    }
}

/// A formula error with the position the user must fix.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelError {
    /// What went wrong.
    pub kind: ModelErrorKind,
    /// 1-based character column in the formula, when known.
    pub column: Option<usize>,
    /// The formula as given.
    pub formula: String,
}

/// Prints the message with the column, then the formula on one line and a
/// caret under the offending character on the next:
///
/// ```text
/// unknown name 'k3' (did you mean 'k2'?) at column 4
///   a1*k3*t
///      ^
/// ```
impl fmt::Display for ModelError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.kind)?;
        // Line breaks inside the formula are shown as spaces so that the
        // formula stays on one line and columns still line up.
        let line: String = self
            .formula
            .chars()
            .map(|c| if c == '\n' || c == '\r' { ' ' } else { c })
            .collect();
        match self.column {
            Some(col) => {
                writeln!(f, " at column {col}")?;
                writeln!(f, "  {line}")?;
                let pad: String = line
                    .chars()
                    .take(col.saturating_sub(1))
                    .map(|c| if c == '\t' { '\t' } else { ' ' })
                    .collect();
                write!(f, "  {pad}^")
            }
            None => write!(f, "\n  {line}"),
        }
    }
}

impl std::error::Error for ModelError {}

/// A compiled formula: value and exact Jacobian as flat instruction
/// programs. Cheap to clone, `Send + Sync`, evaluated through [`ModelFn`].
#[derive(Debug, Clone)]
pub struct Tape {
    formula: String,
    n_params: usize,
    n_vars: usize,
    used: Vec<bool>,
    positions: Vec<Option<usize>>,
    value_prog: tape::Program,
    full_prog: tape::Program,
    /// `[df/dx, d2f/dx da_j ...]` for one x column (errors in x).
    x_slope_prog: Option<xslope::XSlope>,
    second: second::Second,
}

impl Tape {
    /// The formula this tape was compiled from.
    pub fn formula(&self) -> &str {
        &self.formula
    }

    /// Whether the formula depends on parameter `j` at all. A parameter that
    /// does not appear (or cancels out on simplification, like `0*b`) has
    /// a zero Jacobian column.
    pub fn uses_parameter(&self, j: usize) -> bool {
        self.used.get(j).copied().unwrap_or(false)
    }

    /// Number of independent variables (`x` columns) the tape expects.
    pub fn n_vars(&self) -> usize {
        self.n_vars
    }

    /// Number of column instructions of the value-and-Jacobian program
    /// (a measure of the optimiser's work; see the benchmarks).
    pub fn n_instructions(&self) -> usize {
        self.full_prog.n_instructions()
    }

    /// Convenience: value and gradient at a single point `x_row` (one
    /// number per independent variable). Allocates; use [`ModelFn::eval`]
    /// for many points.
    ///
    /// # Panics
    /// When `params` or `x_row` have the wrong length.
    pub fn eval_point(&self, params: &[f64], x_row: &[f64]) -> (f64, Vec<f64>) {
        let cols: Vec<&[f64]> = x_row.iter().map(std::slice::from_ref).collect();
        let mut v = [0.0];
        let mut g = vec![0.0; self.n_params];
        let mut scratch = Vec::new();
        let _ = self.eval(params, &cols, &mut v, Some(&mut g), &mut scratch);
        (v[0], g)
    }
}

/// # Panics
/// On a violated size contract: `params.len() != n_params()`, fewer than
/// `n_vars()` columns in `x`, a column shorter than `values`, or a `jac`
/// buffer whose length is not `values.len() * n_params()`.
impl ModelFn for Tape {
    fn n_params(&self) -> usize {
        self.n_params
    }

    fn eval(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        jac: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        let n = values.len();
        assert_eq!(
            params.len(),
            self.n_params,
            "parameter vector has the wrong length"
        );
        assert!(
            x.len() >= self.n_vars,
            "formula needs {} data columns, {} given",
            self.n_vars,
            x.len()
        );
        for col in &x[..self.n_vars] {
            assert!(col.len() >= n, "data column shorter than the value buffer");
        }
        let reserve = self.full_prog.scratch_len().max(self.value_prog.scratch_len());
        match jac {
            Some(j) => {
                assert_eq!(
                    j.len(),
                    n * self.n_params,
                    "Jacobian buffer must hold n * n_params values"
                );
                self.full_prog.run(reserve, params, x, values, Some(j), scratch)
            }
            None => self.value_prog.run(reserve, params, x, values, None, scratch),
        }
    }

    /// Read from the expression graph: parameter `p` is a position on
    /// column `x` when the formula contains `x - p`, `p - x`, `min`/`max`
    /// of the two or compares them (e.g. `wl - mu` in a peak).
    fn positions(&self) -> Vec<Option<usize>> {
        self.positions.clone()
    }

    fn eval_x_slope(
        &self,
        params: &[f64],
        x: &[&[f64]],
        slope: &mut [f64],
        dslope: Option<&mut [f64]>,
        scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        self.eval_x_slope_program(params, x, slope, dslope, scratch)
    }

    /// Symbolic second derivatives ([`Tape::eval_hessian`]).
    fn hessian(
        &self,
        params: &[f64],
        x: &[&[f64]],
        values: &mut [f64],
        hess: &mut [f64],
        scratch: &mut Vec<f64>,
    ) -> Option<Result<(), NonFinite>> {
        Some(self.eval_hessian(params, x, values, hess, scratch))
    }
}

/// Compiles a formula against the given names.
///
/// Errors name the 1-based column: syntax errors, unknown names (with the
/// closest known name as a suggestion), wrong argument counts, and nesting
/// deeper than [`MAX_DEPTH`]. No input makes this function panic.
pub fn compile(formula: &str, symbols: &Symbols) -> Result<Tape, ModelError> {
    let mut g = graph::Graph::new();
    let root = parser::parse(formula, symbols, &mut g).map_err(|(kind, col)| ModelError {
        kind,
        column: Some(col),
        formula: formula.to_string(),
    })?;
    let n_params = symbols.parameters.len();
    let used = g.parameters_used(root, n_params);
    let positions = g.positions(root, n_params);
    let mut roots = vec![root];
    for (j, &u) in used.iter().enumerate() {
        roots.push(if u { g.derivative(root, j) } else { g.konst(0.0) });
    }
    let value_prog = tape::Program::lower(&g, &roots[..1]);
    let full_prog = tape::Program::lower(&g, &roots);
    let x_slope_prog = (symbols.variables.len() == 1).then(|| xslope::lower(&mut g, &roots));
    let second = second::Second::new(g, roots, used.clone());
    Ok(Tape {
        formula: formula.to_string(),
        n_params,
        n_vars: symbols.variables.len(),
        used,
        positions,
        value_prog,
        full_prog,
        x_slope_prog,
        second,
    })
}

/// One entry of the function catalogue shown by `fitaudit models`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FunctionInfo {
    /// Name as written in formulas.
    pub name: &'static str,
    /// Number of arguments.
    pub arity: usize,
    /// One-line description.
    pub description: &'static str,
}

/// The functions the formula language knows, with arity and description.
pub fn catalogue() -> &'static [FunctionInfo] {
    catalogue::FUNCTIONS
}

/// The built-in constants (`pi`, `e`) with their values. Parameters, study
/// constants and data columns of the same name take precedence.
pub fn constants() -> &'static [(&'static str, f64)] {
    catalogue::CONSTANTS
}
