//! Elementary operations shared by constant folding, the scalar program and
//! the column kernels, so that every path computes the same numbers.

/// One-argument operations.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) enum Un {
    Neg,
    Exp,
    Ln,
    Log10,
    Sqrt,
    Abs,
    /// Sign of the argument (0 at 0): the subgradient of `abs`.
    Sign,
    Sin,
    Cos,
    Tan,
    Asin,
    Acos,
    Atan,
    Sinh,
    Cosh,
    Tanh,
    Erf,
    Erfc,
}

/// Two-argument operations.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub(crate) enum Bin {
    Add,
    Sub,
    Mul,
    Div,
    Pow,
    Atan2,
    Min,
    Max,
    /// `a * b`, but 0 whenever `a` is 0 (even for an infinite or NaN `b`):
    /// the `b' ln a` term of a power's derivative, absent when `b' = 0`.
    MulZ,
}

impl Un {
    /// Applies the operation to one number.
    #[inline(always)]
    pub(crate) fn apply(self, x: f64) -> f64 {
        match self {
            Un::Neg => -x,
            Un::Exp => x.exp(),
            Un::Ln => x.ln(),
            Un::Log10 => x.log10(),
            Un::Sqrt => x.sqrt(),
            Un::Abs => x.abs(),
            Un::Sign => sign(x),
            Un::Sin => x.sin(),
            Un::Cos => x.cos(),
            Un::Tan => x.tan(),
            Un::Asin => x.asin(),
            Un::Acos => x.acos(),
            Un::Atan => x.atan(),
            Un::Sinh => x.sinh(),
            Un::Cosh => x.cosh(),
            Un::Tanh => x.tanh(),
            Un::Erf => erf(x),
            Un::Erfc => erfc(x),
        }
    }
}

impl Bin {
    /// Applies the operation to two numbers.
    #[inline(always)]
    pub(crate) fn apply(self, a: f64, b: f64) -> f64 {
        match self {
            Bin::Add => a + b,
            Bin::Sub => a - b,
            Bin::Mul => a * b,
            Bin::Div => a / b,
            Bin::Pow => pow(a, b),
            Bin::Atan2 => a.atan2(b),
            Bin::Min => min(a, b),
            Bin::Max => max(a, b),
            Bin::MulZ => mul_z(a, b),
        }
    }

    /// Whether `a op b == b op a`.
    pub(crate) fn commutes(self) -> bool {
        matches!(self, Bin::Add | Bin::Mul | Bin::Min | Bin::Max)
    }
}

/// Sign with `sign(0) = 0` and NaN kept.
#[inline(always)]
pub(crate) fn sign(x: f64) -> f64 {
    if x > 0.0 {
        1.0
    } else if x < 0.0 {
        -1.0
    } else {
        // 0 or NaN: 0 * x keeps NaN and gives 0 for both zeros.
        0.0 * x
    }
}

/// `a^b`; integer exponents of moderate size use repeated multiplication.
#[inline(always)]
pub(crate) fn pow(a: f64, b: f64) -> f64 {
    if b == 2.0 {
        a * a
    } else if let Some(k) = small_int(b) {
        a.powi(k)
    } else {
        a.powf(b)
    }
}

/// `b` as an `i32` when it is an integer with `|b| <= 64`.
#[inline(always)]
pub(crate) fn small_int(b: f64) -> Option<i32> {
    if b.abs() <= 64.0 && b.fract() == 0.0 {
        Some(b as i32)
    } else {
        None
    }
}

/// `a * b` with `0 * anything = 0`.
#[inline(always)]
pub(crate) fn mul_z(a: f64, b: f64) -> f64 {
    if a == 0.0 {
        0.0
    } else {
        a * b
    }
}

/// Minimum that propagates NaN.
#[inline(always)]
pub(crate) fn min(a: f64, b: f64) -> f64 {
    if a.is_nan() || b.is_nan() {
        f64::NAN
    } else if a <= b {
        a
    } else {
        b
    }
}

/// Maximum that propagates NaN.
#[inline(always)]
pub(crate) fn max(a: f64, b: f64) -> f64 {
    if a.is_nan() || b.is_nan() {
        f64::NAN
    } else if a >= b {
        a
    } else {
        b
    }
}

/// `t` when `p <= q`, else `f`: the active branch of `min`/`max`.
#[inline(always)]
pub(crate) fn select(p: f64, q: f64, t: f64, f: f64) -> f64 {
    if p <= q {
        t
    } else {
        f
    }
}

/// The error function, to close to full double precision.
///
/// For `|x| < 2.5` the series `erf(x) = 2/sqrt(pi) exp(-x^2) sum 2^n x^(2n+1) / (1*3*...*(2n+1))`
/// (all terms positive, no cancellation); beyond, `1 - erfc(|x|)`.
pub(crate) fn erf(x: f64) -> f64 {
    if x.is_nan() {
        return x;
    }
    let ax = x.abs();
    let v = if ax < 2.5 {
        erf_series(ax)
    } else {
        1.0 - erfc_fraction(ax)
    };
    v.copysign(x)
}

/// The complementary error function `1 - erf(x)`, keeping relative
/// precision in the tail (continued fraction for `x >= 2`).
pub(crate) fn erfc(x: f64) -> f64 {
    if x.is_nan() {
        x
    } else if x < 2.0 {
        1.0 - erf(x)
    } else {
        erfc_fraction(x)
    }
}

fn erf_series(x: f64) -> f64 {
    let x2 = x * x;
    let mut term = x;
    let mut sum = x;
    let mut k = 0.0;
    while term > sum * 1e-17 {
        k += 1.0;
        term *= 2.0 * x2 / (2.0 * k + 1.0);
        sum += term;
    }
    std::f64::consts::FRAC_2_SQRT_PI * (-x2).exp() * sum
}

/// `erfc(x)` for `x >= 2` by the continued fraction
/// `exp(-x^2)/sqrt(pi) / (x + (1/2)/(x + 1/(x + (3/2)/(x + ...))))`,
/// evaluated with the modified Lentz method.
fn erfc_fraction(x: f64) -> f64 {
    if x > 27.3 {
        return 0.0;
    }
    let tiny = 1e-300;
    let mut f = x;
    let mut c = x;
    let mut d = 0.0;
    for k in 1..500 {
        let a = k as f64 * 0.5;
        d = x + a * d;
        if d.abs() < tiny {
            d = tiny;
        }
        d = 1.0 / d;
        c = x + a / c;
        if c.abs() < tiny {
            c = tiny;
        }
        let delta = c * d;
        f *= delta;
        if (delta - 1.0).abs() < 1e-16 {
            break;
        }
    }
    (-x * x).exp() / (f * std::f64::consts::PI.sqrt())
}
