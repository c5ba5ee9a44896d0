//! The formula language: numbers, precedence, brackets, names, and the
//! errors (with exact columns) for malformed formulas.
//!
//! Expected values are arithmetic identities (common practice for checking
//! an expression parser); expected columns are counted by hand in each
//! formula.

use fitaudit::model::{catalogue, compile, constants, ModelErrorKind, Symbols, Tape, MAX_DEPTH};

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

fn tape(formula: &str, params: &[&str], vars: &[&str], consts: &[(&str, f64)]) -> Tape {
    let p = names(params);
    let v = names(vars);
    let c: Vec<(String, f64)> = consts.iter().map(|(n, x)| (n.to_string(), *x)).collect();
    let syms = Symbols {
        parameters: &p,
        constants: &c,
        variables: &v,
    };
    compile(formula, &syms).unwrap_or_else(|e| panic!("{e}"))
}

/// Value of a formula in `x` alone at the point `x`.
fn at(formula: &str, x: f64) -> f64 {
    tape(formula, &[], &["x"], &[]).eval_point(&[], &[x]).0
}

fn err(formula: &str) -> (ModelErrorKind, usize) {
    let p = names(&["a", "b", "k1", "k2"]);
    let v = names(&["x", "temp"]);
    let c = vec![("c0".to_string(), 1.5)];
    let syms = Symbols {
        parameters: &p,
        constants: &c,
        variables: &v,
    };
    match compile(formula, &syms) {
        Ok(_) => panic!("'{formula}' should not compile"),
        Err(e) => {
            assert_eq!(e.formula, formula);
            (e.kind, e.column.expect("every error has a column"))
        }
    }
}

fn syntax_col(formula: &str) -> usize {
    match err(formula) {
        (ModelErrorKind::Syntax(_), c) => c,
        other => panic!("'{formula}': expected a syntax error, got {other:?}"),
    }
}

#[test]
fn numbers_in_every_usual_form() {
    for (f, want) in [
        ("2", 2.0),
        ("-0.5", -0.5),
        (".5", 0.5),
        ("5.", 5.0),
        ("1e-3", 1e-3),
        ("2.5E+00", 2.5),
        ("1.25e2", 125.0),
        ("3E1", 30.0),
        ("0.000123", 0.000123),
    ] {
        assert_eq!(at(f, 0.0), want, "{f}");
    }
}

#[test]
fn precedence_and_associativity() {
    let x = 3.0;
    for (f, want) in [
        ("-x^2", -9.0),
        ("(-x)^2", 9.0),
        ("-2^2", -4.0),
        ("2^-1", 0.5),
        ("2^3^2", 512.0),
        ("2**3**2", 512.0),
        ("2^-1^2", 0.5),
        ("10/2/5", 1.0),
        ("2-3-4", -5.0),
        ("2*3+4*5", 26.0),
        ("2+3*4^2", 50.0),
        ("x*-2", -6.0),
        ("--x", 3.0),
        ("+x", 3.0),
        ("-x*2", -6.0),
        ("1-x^2/3", -2.0),
        ("[2+3]*2", 10.0),
        ("[2+(x-1)]*[x]", 12.0),
        ("2*(3+[4-(1)])", 12.0),
        ("pow(2, 10)", 1024.0),
        ("x**2", 9.0),
    ] {
        assert_eq!(at(f, x), want, "{f}");
    }
}

#[test]
fn whitespace_anywhere() {
    assert_eq!(at(" \t2 *\n x ^ 2\r\n + 1 ", 3.0), 19.0);
    assert_eq!(at("exp ( 0 ) + max ( x , 1 )", 3.0), 4.0);
}

#[test]
fn square_brackets_as_parentheses_in_a_pasted_formula() {
    // Misra1a as printed in the NIST StRD file: y = b1*(1-exp[-b2*x]).
    let t = tape("b1*(1-exp[-b2*x])", &["b1", "b2"], &["x"], &[]);
    let (v, g) = t.eval_point(&[2.0, 0.5], &[4.0]);
    let e = (-2.0f64).exp();
    assert!((v - 2.0 * (1.0 - e)).abs() < 1e-15);
    assert!((g[0] - (1.0 - e)).abs() < 1e-15);
    assert!((g[1] - 2.0 * 4.0 * e).abs() < 1e-15);
}

#[test]
fn every_catalogue_function_compiles_with_its_arity() {
    for f in catalogue() {
        let args = vec!["0.3"; f.arity].join(", ");
        let formula = format!("{}({args})", f.name);
        let v = at(&formula, 0.0);
        assert!(v.is_finite(), "{formula} = {v}");
        let wrong = vec!["0.3"; f.arity + 1].join(", ");
        match err(&format!("{}({wrong})", f.name)) {
            (
                ModelErrorKind::Arity {
                    function,
                    expected,
                    found,
                },
                1,
            ) => {
                assert_eq!(
                    (function.as_str(), expected, found),
                    (f.name, f.arity, f.arity + 1)
                );
            }
            other => panic!("{}: {other:?}", f.name),
        }
        assert!(!f.description.is_empty());
    }
    let names: Vec<&str> = catalogue().iter().map(|f| f.name).collect();
    for want in [
        "exp", "ln", "log", "log10", "sqrt", "abs", "sin", "cos", "tan", "asin", "acos", "atan", "atan2",
        "sinh", "cosh", "tanh", "erf", "erfc", "min", "max", "pow",
    ] {
        assert!(names.contains(&want), "{want} missing from the catalogue");
    }
}

#[test]
fn function_values() {
    // Abramowitz & Stegun table 7.1 (erf(0.5) = 0.5204998778, from memory; the
    // further digits agree with the C library erf).
    assert!((at("erf(0.5)", 0.0) - 0.520_499_877_813_046_5).abs() < 1e-12);
    assert!((at("erfc(0.5)", 0.0) - (1.0 - 0.520_499_877_813_046_5)).abs() < 1e-12);
    assert_eq!(at("log(x)", 3.0), 3f64.ln());
    assert_eq!(at("ln(x)", 3.0), 3f64.ln());
    assert_eq!(at("log10(1000)", 0.0), 3.0);
    assert_eq!(at("atan2(1, -1)", 0.0), 0.75 * std::f64::consts::PI);
    assert_eq!(at("min(x, 2)", 3.0), 2.0);
    assert_eq!(at("max(x, 2)", 3.0), 3.0);
    assert_eq!(at("abs(-x)", 3.0), 3.0);
}

#[test]
fn constants_pi_and_e() {
    let c = constants();
    assert!(c.contains(&("pi", std::f64::consts::PI)));
    assert!(c.contains(&("e", std::f64::consts::E)));
    assert_eq!(at("pi", 0.0), std::f64::consts::PI);
    assert_eq!(at("e", 0.0), std::f64::consts::E);
    assert_eq!(at("ln(e)", 0.0), 1.0);
}

#[test]
fn constant_subexpressions_fold() {
    // `2*pi` and `cos(0)` fold at compile time: the tape is as short as
    // with the literal value.
    let folded = tape("(2*pi)*x + cos(0)", &[], &["x"], &[]);
    let literal = tape("6.283185307179586*x + 1", &[], &["x"], &[]);
    assert_eq!(folded.n_instructions(), literal.n_instructions());
    assert_eq!(
        folded.eval_point(&[], &[2.0]).0,
        literal.eval_point(&[], &[2.0]).0
    );
}

#[test]
fn common_subexpressions_are_shared() {
    // sin(x) written twice is computed once: one instruction fewer than
    // sin(x)*cos(x).
    let twice = tape("sin(x)*sin(x)", &[], &["x"], &[]);
    let two = tape("sin(x)*cos(x)", &[], &["x"], &[]);
    assert_eq!(twice.n_instructions() + 1, two.n_instructions());
}

#[test]
fn names_resolve_parameters_then_constants_then_columns() {
    // `x` is both a parameter and a column: the parameter wins.
    let t = tape("x*2", &["x"], &["x"], &[]);
    assert!(t.uses_parameter(0));
    assert_eq!(t.eval_point(&[5.0], &[100.0]), (10.0, vec![2.0]));
    // `c` is a study constant and a column: the constant wins.
    let t = tape("c*x", &[], &["c", "x"], &[("c", 4.0)]);
    assert_eq!(t.eval_point(&[], &[100.0, 2.0]).0, 8.0);
    // A study constant or parameter named like a built-in shadows it.
    let t = tape("pi", &[], &[], &[("pi", 3.0)]);
    assert_eq!(t.eval_point(&[], &[]).0, 3.0);
    let t = tape("e*x", &["e"], &["x"], &[]);
    assert_eq!(t.eval_point(&[2.0], &[3.0]), (6.0, vec![3.0]));
    // Several data columns in their declared order.
    let t = tape("x2 - x1", &[], &["x1", "x2"], &[]);
    assert_eq!(t.n_vars(), 2);
    assert_eq!(t.eval_point(&[], &[1.0, 5.0]).0, 4.0);
}

#[test]
fn unknown_names_suggest_the_closest_known_name() {
    let p = names(&["amp", "rate", "k1"]);
    let v = names(&["time"]);
    let c = vec![("offset".to_string(), 1.0)];
    let syms = Symbols {
        parameters: &p,
        constants: &c,
        variables: &v,
    };
    let case = |f: &str| match compile(f, &syms) {
        Err(e) => match e.kind {
            ModelErrorKind::UnknownName { name, suggestion } => (name, suggestion, e.column.unwrap()),
            k => panic!("{f}: {k:?}"),
        },
        Ok(_) => panic!("{f} compiled"),
    };
    assert_eq!(
        case("ampl*exp(-rate*time)"),
        ("ampl".into(), Some("amp".into()), 1)
    );
    assert_eq!(
        case("amp*exp(-rat*time)"),
        ("rat".into(), Some("rate".into()), 10)
    );
    assert_eq!(
        case("amp*exp(-rate*tme)"),
        ("tme".into(), Some("time".into()), 15)
    );
    assert_eq!(case("amp + ofset"), ("ofset".into(), Some("offset".into()), 7));
    assert_eq!(case("amp*k2"), ("k2".into(), Some("k1".into()), 5));
    assert_eq!(case("amp*Pi"), ("Pi".into(), Some("pi".into()), 5));
    assert_eq!(case("amp*zzzzzz"), ("zzzzzz".into(), None, 5));
    // Unknown functions suggest a function.
    assert_eq!(case("expp(time)"), ("expp".into(), Some("exp".into()), 1));
    assert_eq!(case("amp*Exp(time)"), ("Exp".into(), Some("exp".into()), 5));
    assert_eq!(case("arctan(time)").1, Some("atan".into()));
}

#[test]
fn error_columns_are_exact() {
    // Column counted by hand (1-based, characters).
    assert_eq!(syntax_col("a*(x+1"), 7); // missing ')' at the end
    assert_eq!(syntax_col("a*x)"), 4); // unmatched ')'
    assert_eq!(syntax_col("a**"), 4); // operand missing at the end
    assert_eq!(syntax_col("2x"), 2); // number followed by a name
    assert_eq!(syntax_col("a + $b"), 5); // stray character
    assert_eq!(syntax_col("1e+"), 4); // exponent without digits
    assert_eq!(syntax_col("(a*x]"), 5); // bracket kinds differ
    assert_eq!(syntax_col("exp[x)"), 6);
    assert_eq!(syntax_col("a*x + "), 7);
    assert_eq!(syntax_col("a x"), 3); // missing operator
    assert_eq!(syntax_col(",a"), 1);
    assert_eq!(syntax_col("a*(,x)"), 4);
    assert_eq!(syntax_col("a*/x"), 3);
    assert_eq!(syntax_col("a*µ+1"), 3); // columns count characters, not bytes
    assert_eq!(syntax_col("µµ*a"), 1);
    assert_eq!(syntax_col("exp*2"), 1); // a function without arguments
    assert_eq!(syntax_col("a.b"), 2);
    assert_eq!(syntax_col("1.2.3"), 4);
    assert_eq!(syntax_col(""), 1);
    assert_eq!(syntax_col("   "), 1);
    assert_eq!(syntax_col("()"), 2);
    assert_eq!(syntax_col("1e999*x"), 1); // out of range
    assert_eq!(err("a + exp(x, b)"), (arity("exp", 1, 2), 5));
    assert_eq!(err("atan2(x)"), (arity("atan2", 2, 1), 1));
    assert_eq!(err("3*pow(x,2,3)"), (arity("pow", 2, 3), 3));
    assert_eq!(err("exp()"), (arity("exp", 1, 0), 1));
}

fn arity(f: &str, expected: usize, found: usize) -> ModelErrorKind {
    ModelErrorKind::Arity {
        function: f.into(),
        expected,
        found,
    }
}

#[test]
fn display_shows_message_column_formula_and_caret() {
    let p = names(&["a1", "k1", "a2", "k2"]);
    let v = names(&["t"]);
    let syms = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    let e = compile("a1*k3*t", &syms).unwrap_err();
    assert_eq!(
        e.to_string(),
        "unknown name 'k3' (did you mean 'k1'?) at column 4\n  a1*k3*t\n     ^"
    );
    let e = compile("a1*(t+1", &syms).unwrap_err();
    let text = e.to_string();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines.len(), 3);
    assert!(lines[0].contains("column 8"), "{text}");
    assert!(lines[0].contains("')'"), "{text}");
    assert_eq!(lines[1], "  a1*(t+1");
    assert_eq!(lines[2], "         ^");
    // A formula with a line break stays on one line; the caret lines up.
    let e = compile("a1*t +\n  k9", &syms).unwrap_err();
    let text = e.to_string();
    let lines: Vec<&str> = text.lines().collect();
    assert_eq!(lines[1], "  a1*t +   k9");
    assert_eq!(lines[2].find('^'), lines[1].find("k9"));
    let e = compile("exp(t, t)", &syms).unwrap_err();
    assert!(e
        .to_string()
        .starts_with("function 'exp' takes 1 argument, 2 given at column 1"));
}

#[test]
fn nesting_deeper_than_the_limit_is_an_error_not_an_overflow() {
    assert_eq!(MAX_DEPTH, 200);
    let deep = format!("{}x{}", "(".repeat(10_000), ")".repeat(10_000));
    assert_eq!(err(&deep), (ModelErrorKind::TooDeep { limit: 200 }, 202));
    let ok = format!("{}x{}", "(".repeat(200), ")".repeat(200));
    assert_eq!(at(&ok, 2.0), 2.0);
    let too = format!("{}x{}", "(".repeat(201), ")".repeat(201));
    assert!(matches!(err(&too).0, ModelErrorKind::TooDeep { .. }));
    let brackets = format!("{}x{}", "[".repeat(10_000), "]".repeat(10_000));
    assert!(matches!(err(&brackets).0, ModelErrorKind::TooDeep { .. }));
    let minus = format!("{}x", "-".repeat(10_000));
    assert!(matches!(err(&minus).0, ModelErrorKind::TooDeep { .. }));
    let powers = format!("x{}", "^x".repeat(10_000));
    assert!(matches!(err(&powers).0, ModelErrorKind::TooDeep { .. }));
    let calls = format!("{}x{}", "exp(".repeat(10_000), ")".repeat(10_000));
    assert!(matches!(err(&calls).0, ModelErrorKind::TooDeep { .. }));
    // Unclosed: still the depth error, not an overflow.
    assert!(matches!(
        err(&"(".repeat(100_000)).0,
        ModelErrorKind::TooDeep { .. }
    ));
}

#[test]
fn long_flat_formulas_are_fine() {
    // 20 000 terms: long, but not nested; every pass is iterative.
    let f = vec!["x"; 20_000].join("+");
    assert_eq!(at(&f, 0.5), 10_000.0);
    let t = tape(&vec!["a*x"; 5_000].join(" - "), &["a"], &["x"], &[]);
    let (v, g) = t.eval_point(&[2.0], &[1.0]);
    assert_eq!((v, g), (2.0 * (2.0 - 5000.0), vec![2.0 - 5000.0]));
}
