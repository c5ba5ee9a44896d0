//! Models: the formula language, its compiler to a flat instruction tape with
//! exact first derivatives, and the [`ModelFn`] trait every fit evaluates
//! through.
//!
//! OWNER NOTE (scaffold): the items below are the pinned public API. The
//! parser/compiler replaces the `compile` stub; keep the signatures.

use std::fmt;

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

impl fmt::Display for ModelError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{:?} at column {:?} in {}",
            self.kind, self.column, self.formula
        )
    }
}

impl std::error::Error for ModelError {}

/// A compiled formula (STUB: replaced by the compiler).
#[derive(Debug, Clone)]
pub struct Tape {
    formula: String,
    n_params: usize,
}

impl Tape {
    /// The formula this tape was compiled from.
    pub fn formula(&self) -> &str {
        &self.formula
    }
    /// Whether the formula depends on parameter `j` at all.
    pub fn uses_parameter(&self, j: usize) -> bool {
        j < self.n_params
    }
}

impl ModelFn for Tape {
    fn n_params(&self) -> usize {
        self.n_params
    }
    fn eval(
        &self,
        _params: &[f64],
        _x: &[&[f64]],
        _values: &mut [f64],
        _jac: Option<&mut [f64]>,
        _scratch: &mut Vec<f64>,
    ) -> Result<(), NonFinite> {
        unimplemented!("stub")
    }
}

/// Compiles a formula against the given names (STUB).
pub fn compile(formula: &str, symbols: &Symbols) -> Result<Tape, ModelError> {
    Err(ModelError {
        kind: ModelErrorKind::Syntax(format!(
            "compiler not built yet ({} parameters)",
            symbols.parameters.len()
        )),
        column: None,
        formula: formula.to_string(),
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

/// The functions and constants the formula language knows (STUB).
pub fn catalogue() -> &'static [FunctionInfo] {
    &[]
}
