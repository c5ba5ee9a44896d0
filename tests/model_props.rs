//! Property tests of the formula compiler (fixed seeds):
//!
//! * no input string panics (arbitrary unicode strings, and strings built
//!   from formula-like tokens); errors point inside the formula;
//! * formulas built randomly from the grammar, printed in random styles
//!   (minimal or full parentheses, brackets, `^`/`**`/`pow`, spacing,
//!   number forms), evaluate to the same values and derivatives as a
//!   straightforward recursive reference interpreter written here, over its
//!   own tree, with forward-mode dual numbers for the derivatives.

use fitaudit::model::{compile, ModelFn, Symbols};
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};

fn config(cases: u32, seed: u64) -> Config {
    Config {
        cases,
        rng_seed: RngSeed::Fixed(seed),
        failure_persistence: None,
        max_global_rejects: 100_000,
        ..Config::default()
    }
}

fn symbols_owned() -> (Vec<String>, Vec<(String, f64)>, Vec<String>) {
    (
        vec!["a".into(), "b".into(), "c".into()],
        vec![("k0".into(), 0.75)],
        vec!["x".into(), "y".into()],
    )
}

fn check_no_panic(formula: &str) {
    let (p, c, v) = symbols_owned();
    let syms = Symbols {
        parameters: &p,
        constants: &c,
        variables: &v,
    };
    match compile(formula, &syms) {
        Ok(t) => {
            let x = [1.5, -0.5, 0.0];
            let y = [0.25, 2.0, -3.0];
            let mut val = [0.0; 3];
            let mut jac = [0.0; 9];
            let _ = t.eval(
                &[1.0, -2.0, 0.5],
                &[&x, &y],
                &mut val,
                Some(&mut jac),
                &mut Vec::new(),
            );
        }
        Err(e) => {
            let col = e.column.expect("errors carry a column");
            assert!(
                col >= 1 && col <= formula.chars().count() + 1,
                "column {col} outside '{formula}'"
            );
            let _ = e.to_string();
        }
    }
}

const TOKENS: &[&str] = &[
    "a", "b", "c", "x", "y", "k0", "pi", "e", "zz", "(", ")", "[", "]", ",", "+", "-", "*", "/", "^", "**",
    "exp", "ln", "sqrt", "atan2", "min", "pow", "erf", "2", ".5", "1e-3", "2.5E+00", "0", "1e", "1.", " ",
    "\t", "$", "µ", "é", ".", "e5", "1e308", "9e999",
];

proptest! {
    #![proptest_config(config(2000, 11))]

    #[test]
    fn arbitrary_strings_never_panic(s in any::<String>()) {
        check_no_panic(&s);
    }

    #[test]
    fn formula_like_token_strings_never_panic(toks in prop::collection::vec(prop::sample::select(TOKENS), 0..30)) {
        check_no_panic(&toks.concat());
    }
}

/// The test's own expression tree.
#[derive(Debug, Clone)]
enum E {
    Num(f64),
    P(usize),
    X(usize),
    Pi,
    Euler,
    Neg(Box<E>),
    Bin(char, Box<E>, Box<E>),
    F1(&'static str, Box<E>),
    F2(&'static str, Box<E>, Box<E>),
}

const F1: &[&str] = &[
    "exp", "ln", "log", "log10", "sqrt", "abs", "sin", "cos", "tan", "asin", "acos", "atan", "sinh", "cosh",
    "tanh", "erf", "erfc",
];
const F2: &[&str] = &["atan2", "min", "max", "pow"];
const M: usize = 3;

fn tree() -> impl Strategy<Value = E> {
    let leaf = prop_oneof![
        // numbers with few digits, so every printed form is exact
        2 => (1u32..5000).prop_map(|k| E::Num(k as f64 / 1000.0)),
        4 => (0..M).prop_map(E::P),
        2 => (0..2usize).prop_map(E::X),
        1 => Just(E::Pi),
        1 => Just(E::Euler),
    ];
    leaf.prop_recursive(8, 64, 4, |inner| {
        prop_oneof![
            1 => inner.clone().prop_map(|a| E::Neg(Box::new(a))),
            6 => (prop::sample::select(vec!['+', '-', '*', '/', '^']), inner.clone(), inner.clone())
                .prop_map(|(o, a, b)| E::Bin(o, Box::new(a), Box::new(b))),
            2 => (prop::sample::select(F1), inner.clone()).prop_map(|(f, a)| E::F1(f, Box::new(a))),
            1 => (prop::sample::select(F2), inner.clone(), inner)
                .prop_map(|(f, a, b)| E::F2(f, Box::new(a), Box::new(b))),
        ]
    })
}

/// Larger formulas: four random trees joined by three random operators.
fn big_tree() -> impl Strategy<Value = E> {
    let op = || prop::sample::select(vec!['+', '-', '*', '/', '^']);
    (op(), op(), op(), tree(), tree(), tree(), tree()).prop_map(|(o1, o2, o3, a, b, c, d)| {
        E::Bin(
            o1,
            Box::new(E::Bin(o2, Box::new(a), Box::new(b))),
            Box::new(E::Bin(o3, Box::new(c), Box::new(d))),
        )
    })
}

#[derive(Debug, Clone, Copy)]
struct Style {
    spaces: bool,
    brackets: bool,
    full_parens: bool,
    star_pow: bool,
    fn_pow: bool,
    sci: bool,
}

fn style() -> impl Strategy<Value = Style> {
    (
        any::<bool>(),
        any::<bool>(),
        any::<bool>(),
        any::<bool>(),
        any::<bool>(),
        any::<bool>(),
    )
        .prop_map(|(spaces, brackets, full_parens, star_pow, fn_pow, sci)| Style {
            spaces,
            brackets,
            full_parens,
            star_pow,
            fn_pow,
            sci,
        })
}

/// Prints `e`, returning the text and its precedence level:
/// 1 sum, 2 product, 3 unary, 4 power, 5 atom.
fn print(e: &E, s: Style) -> (String, u8) {
    let sp = if s.spaces { " " } else { "" };
    let wrap = |e: &E, need: u8| {
        let (t, l) = print(e, s);
        if l < need || (s.full_parens && l < 5) {
            if s.brackets {
                format!("[{t}]")
            } else {
                format!("({sp}{t}{sp})")
            }
        } else {
            t
        }
    };
    match e {
        E::Num(v) => {
            let t = if s.sci {
                format!("{v:e}")
            } else if *v < 1.0 {
                format!("{v}").trim_start_matches('0').to_string()
            } else {
                format!("{v}")
            };
            (t, 5)
        }
        E::P(j) => (["a", "b", "c"][*j].to_string(), 5),
        E::X(k) => (["x", "y"][*k].to_string(), 5),
        E::Pi => ("pi".into(), 5),
        E::Euler => ("e".into(), 5),
        E::Neg(a) => (format!("-{}", wrap(a, 3)), 3),
        E::Bin('^', a, b) if s.fn_pow => (format!("pow({},{sp}{})", print(a, s).0, print(b, s).0), 5),
        E::Bin('^', a, b) => {
            let op = if s.star_pow { "**" } else { "^" };
            (format!("{}{sp}{op}{sp}{}", wrap(a, 5), wrap(b, 3)), 4)
        }
        E::Bin(o, a, b) if *o == '+' || *o == '-' => (format!("{}{sp}{o}{sp}{}", wrap(a, 1), wrap(b, 2)), 1),
        E::Bin(o, a, b) => (format!("{}{sp}{o}{sp}{}", wrap(a, 2), wrap(b, 3)), 2),
        E::F1(f, a) => (format!("{f}({})", print(a, s).0), 5),
        E::F2(f, a, b) => (format!("{f}({},{sp}{})", print(a, s).0, print(b, s).0), 5),
    }
}

/// A dual number: value and gradient with respect to the `M` parameters.
#[derive(Debug, Clone, Copy)]
struct D {
    v: f64,
    g: [f64; M],
}

impl D {
    fn map(self, v: f64, dv: f64) -> D {
        D {
            v,
            g: self.g.map(|d| d * dv),
        }
    }
}

/// What the reference run saw: the largest magnitude of any intermediate
/// value or derivative, and whether a kink (abs at 0, min/max tie) was close.
struct Seen {
    scale: f64,
    near_kink: bool,
}

fn reference(e: &E, p: &[f64; M], x: &[f64; 2], seen: &mut Seen) -> D {
    let r = node(e, p, x, seen);
    seen.scale = seen.scale.max(r.v.abs());
    for d in r.g {
        seen.scale = seen.scale.max(d.abs());
    }
    r
}

fn node(e: &E, p: &[f64; M], x: &[f64; 2], seen: &mut Seen) -> D {
    let zero = [0.0; M];
    let r = match e {
        E::Num(v) => D { v: *v, g: zero },
        E::P(j) => {
            let mut g = zero;
            g[*j] = 1.0;
            D { v: p[*j], g }
        }
        E::X(k) => D { v: x[*k], g: zero },
        E::Pi => D {
            v: std::f64::consts::PI,
            g: zero,
        },
        E::Euler => D {
            v: std::f64::consts::E,
            g: zero,
        },
        E::Neg(a) => {
            let a = reference(a, p, x, seen);
            a.map(-a.v, -1.0)
        }
        E::Bin(o, a, b) => {
            let (a, b) = (reference(a, p, x, seen), reference(b, p, x, seen));
            let mut g = zero;
            let v = match o {
                '+' => {
                    (0..M).for_each(|j| g[j] = a.g[j] + b.g[j]);
                    a.v + b.v
                }
                '-' => {
                    (0..M).for_each(|j| g[j] = a.g[j] - b.g[j]);
                    a.v - b.v
                }
                '*' => {
                    (0..M).for_each(|j| g[j] = a.g[j] * b.v + a.v * b.g[j]);
                    a.v * b.v
                }
                '/' => {
                    (0..M).for_each(|j| g[j] = (a.g[j] * b.v - a.v * b.g[j]) / (b.v * b.v));
                    a.v / b.v
                }
                _ => return pow(a, b, seen),
            };
            D { v, g }
        }
        E::F1(f, a) => {
            let a = reference(a, p, x, seen);
            let u = a.v;
            let (v, dv) = match *f {
                "exp" => (u.exp(), u.exp()),
                "ln" | "log" => (u.ln(), 1.0 / u),
                "log10" => (u.log10(), 1.0 / (u * std::f64::consts::LN_10)),
                "sqrt" => (u.sqrt(), 0.5 / u.sqrt()),
                "abs" => {
                    seen.near_kink |= u.abs() < 1e-6;
                    (u.abs(), if u > 0.0 { 1.0 } else { -1.0 })
                }
                "sin" => (u.sin(), u.cos()),
                "cos" => (u.cos(), -u.sin()),
                "tan" => (u.tan(), 1.0 / (u.cos() * u.cos())),
                "asin" => (u.asin(), 1.0 / (1.0 - u * u).sqrt()),
                "acos" => (u.acos(), -1.0 / (1.0 - u * u).sqrt()),
                "atan" => (u.atan(), 1.0 / (1.0 + u * u)),
                "sinh" => (u.sinh(), u.cosh()),
                "cosh" => (u.cosh(), u.sinh()),
                "tanh" => (u.tanh(), 1.0 / (u.cosh() * u.cosh())),
                "erf" => (erf(u), 2.0 / std::f64::consts::PI.sqrt() * (-u * u).exp()),
                "erfc" => (erfc(u), -2.0 / std::f64::consts::PI.sqrt() * (-u * u).exp()),
                other => unreachable!("{other}"),
            };
            a.map(v, dv)
        }
        E::F2(f, a, b) => {
            let (a, b) = (reference(a, p, x, seen), reference(b, p, x, seen));
            match *f {
                "pow" => pow(a, b, seen),
                "atan2" => {
                    let den = a.v * a.v + b.v * b.v;
                    let mut g = zero;
                    (0..M).for_each(|j| g[j] = (b.v * a.g[j] - a.v * b.g[j]) / den);
                    D { v: a.v.atan2(b.v), g }
                }
                "min" | "max" => {
                    seen.near_kink |= (a.v - b.v).abs() <= 1e-6 * (a.v.abs() + b.v.abs());
                    // NaN in either argument gives NaN (documented semantics)
                    let first = if *f == "min" { a.v <= b.v } else { a.v >= b.v };
                    if a.v.is_nan() || b.v.is_nan() {
                        D { v: f64::NAN, g: zero }
                    } else if first {
                        a
                    } else {
                        b
                    }
                }
                other => unreachable!("{other}"),
            }
        }
    };
    r
}

fn pow(a: D, b: D, _seen: &mut Seen) -> D {
    let v = a.v.powf(b.v);
    let mut g = [0.0; M];
    for (j, gj) in g.iter_mut().enumerate() {
        *gj = if b.g[j] == 0.0 {
            b.v * a.v.powf(b.v - 1.0) * a.g[j]
        } else {
            v * (b.g[j] * a.v.ln() + b.v * a.g[j] / a.v)
        };
    }
    D { v, g }
}

/// erfc as 1 - erf, or in the tail as the integral
/// 2/sqrt(pi) * int_u^(u+6) exp(-t^2) dt (Simpson), keeping relative precision.
fn erfc(u: f64) -> f64 {
    if u < 1.0 {
        return 1.0 - erf(u);
    }
    simpson(u, u + 6.0, 20_000)
}

/// 2/sqrt(pi) * int_lo^hi exp(-t^2) dt by composite Simpson's rule.
fn simpson(lo: f64, hi: f64, n: usize) -> f64 {
    let h = (hi - lo) / n as f64;
    let f = |t: f64| (-t * t).exp();
    let mut sum = f(lo) + f(hi);
    for k in 1..n {
        sum += f(lo + k as f64 * h) * if k % 2 == 1 { 4.0 } else { 2.0 };
    }
    2.0 / std::f64::consts::PI.sqrt() * sum * h / 3.0
}

/// erf as the integral 2/sqrt(pi) * int_0^u exp(-t^2) dt by composite
/// Simpson's rule (error far below the 1e-9 tolerance here).
fn erf(u: f64) -> f64 {
    if u.abs() > 6.0 {
        return u.signum();
    }
    simpson(0.0, u, 2000)
}

proptest! {
    #![proptest_config(config(1000, 2024))]

    #[test]
    fn random_formulas_match_the_reference_interpreter(
        e in prop_oneof![tree(), big_tree()],
        s in style(),
        params in prop::array::uniform3(0.5f64..2.0),
        xs in prop::collection::vec((0.5f64..2.0, 0.5f64..2.0), 1..4),
    ) {
        let (formula, _) = print(&e, s);
        let (pn, _, vn) = symbols_owned();
        let syms = Symbols { parameters: &pn, constants: &[], variables: &vn };
        let t = compile(&formula, &syms).map_err(|e| TestCaseError::fail(format!("{e}")))?;

        let mut refs = Vec::new();
        let mut scale = 1.0f64;
        for &(x, y) in &xs {
            let mut seen = Seen { scale: 0.0, near_kink: false };
            let r = reference(&e, &params, &[x, y], &mut seen);
            prop_assume!(!seen.near_kink);
            prop_assume!(seen.scale.is_finite() && seen.scale < 1e6);
            prop_assume!(r.v.is_finite() && r.g.iter().all(|d| d.is_finite()));
            scale = scale.max(seen.scale);
            refs.push(r);
        }
        let n = xs.len();
        let xc: Vec<f64> = xs.iter().map(|p| p.0).collect();
        let yc: Vec<f64> = xs.iter().map(|p| p.1).collect();
        let mut v = vec![0.0; n];
        let mut jac = vec![0.0; n * M];
        let res = t.eval(&params, &[&xc, &yc], &mut v, Some(&mut jac), &mut Vec::new());
        prop_assert!(res.is_ok(), "{formula}: tape not finite ({res:?}) where the reference is: {refs:?}");
        let tol = 1e-9 * scale;
        for i in 0..n {
            prop_assert!((v[i] - refs[i].v).abs() <= tol,
                "{formula} at {:?}: value {} vs reference {}", xs[i], v[i], refs[i].v);
            for j in 0..M {
                prop_assert!((jac[j * n + i] - refs[i].g[j]).abs() <= tol,
                    "{formula} at {:?} p={params:?}: d/d{} {} vs reference {}",
                    xs[i], ["a", "b", "c"][j], jac[j * n + i], refs[i].g[j]);
            }
            prop_assert_eq!(t.uses_parameter(0) || refs[i].g[0] == 0.0, true);
        }
    }
}
