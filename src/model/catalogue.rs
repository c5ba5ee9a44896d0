//! The functions and constants of the formula language.

use super::FunctionInfo;

/// Every function a formula may call, in the order `fitaudit models` lists them.
pub(crate) static FUNCTIONS: &[FunctionInfo] = &[
    FunctionInfo {
        name: "exp",
        arity: 1,
        description: "exponential e^x",
    },
    FunctionInfo {
        name: "ln",
        arity: 1,
        description: "natural logarithm",
    },
    FunctionInfo {
        name: "log",
        arity: 1,
        description: "natural logarithm (same as ln)",
    },
    FunctionInfo {
        name: "log10",
        arity: 1,
        description: "base-10 logarithm",
    },
    FunctionInfo {
        name: "sqrt",
        arity: 1,
        description: "square root",
    },
    FunctionInfo {
        name: "abs",
        arity: 1,
        description: "absolute value (derivative: sign, 0 at 0)",
    },
    FunctionInfo {
        name: "sin",
        arity: 1,
        description: "sine (radians)",
    },
    FunctionInfo {
        name: "cos",
        arity: 1,
        description: "cosine (radians)",
    },
    FunctionInfo {
        name: "tan",
        arity: 1,
        description: "tangent (radians)",
    },
    FunctionInfo {
        name: "asin",
        arity: 1,
        description: "inverse sine",
    },
    FunctionInfo {
        name: "acos",
        arity: 1,
        description: "inverse cosine",
    },
    FunctionInfo {
        name: "atan",
        arity: 1,
        description: "inverse tangent",
    },
    FunctionInfo {
        name: "atan2",
        arity: 2,
        description: "angle of the point (x, y) in radians, in (-pi, pi]; note the order: y first",
    },
    FunctionInfo {
        name: "sinh",
        arity: 1,
        description: "hyperbolic sine",
    },
    FunctionInfo {
        name: "cosh",
        arity: 1,
        description: "hyperbolic cosine",
    },
    FunctionInfo {
        name: "tanh",
        arity: 1,
        description: "hyperbolic tangent",
    },
    FunctionInfo {
        name: "erf",
        arity: 1,
        description: "error function",
    },
    FunctionInfo {
        name: "erfc",
        arity: 1,
        description: "complementary error function 1 - erf(x)",
    },
    FunctionInfo {
        name: "min",
        arity: 2,
        description: "smaller of two values (derivative of the active branch)",
    },
    FunctionInfo {
        name: "max",
        arity: 2,
        description: "larger of two values (derivative of the active branch)",
    },
    FunctionInfo {
        name: "pow",
        arity: 2,
        description: "pow(a, b) = a^b",
    },
];

/// Built-in constants, looked up after parameters, study constants and
/// data columns.
pub(crate) static CONSTANTS: &[(&str, f64)] = &[("pi", std::f64::consts::PI), ("e", std::f64::consts::E)];

/// The catalogue entry of a function name.
pub(crate) fn function(name: &str) -> Option<&'static FunctionInfo> {
    FUNCTIONS.iter().find(|f| f.name == name)
}
