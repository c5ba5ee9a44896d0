//! Evaluation of compiled tapes: block boundaries, buffers, scratch reuse,
//! non-finite reporting and unused parameters. Expected values come from
//! evaluating the same formula point by point, or are plain arithmetic.

use fitaudit::model::{compile, ModelFn, NativeModel, NonFinite, Symbols, Tape};

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

fn tape(formula: &str, params: &[&str], vars: &[&str]) -> Tape {
    let p = names(params);
    let v = names(vars);
    compile(
        formula,
        &Symbols {
            parameters: &p,
            constants: &[],
            variables: &v,
        },
    )
    .unwrap()
}

const DECAY: &str = "a1*exp(-k1*t) + a2*exp(-k2*t)";

#[test]
fn tape_is_send_sync_clone() {
    fn check<T: Send + Sync + Clone + ModelFn>(_: &T) {}
    let t = tape(DECAY, &["a1", "k1", "a2", "k2"], &["t"]);
    check(&t);
    let c = t.clone();
    assert_eq!(c.formula(), DECAY);
    assert_eq!(
        c.eval_point(&[1.0, 0.5, 2.0, 0.1], &[3.0]),
        t.eval_point(&[1.0, 0.5, 2.0, 0.1], &[3.0])
    );
}

#[test]
fn every_block_size_matches_point_by_point_evaluation() {
    let t = tape(
        "b1*x1 - b2*x1*exp(-b3*x2) + sin(x2)/b1",
        &["b1", "b2", "b3"],
        &["x1", "x2"],
    );
    let p = [2.5, 0.3, 0.05];
    for n in [0usize, 1, 2, 63, 64, 127, 128, 129, 255, 256, 257, 1000] {
        let x1: Vec<f64> = (0..n).map(|i| 1.0 + i as f64 * 0.1).collect();
        let x2: Vec<f64> = (0..n).map(|i| 180.0 - i as f64 * 0.07).collect();
        let mut v = vec![f64::NAN; n];
        let mut j = vec![f64::NAN; 3 * n];
        let mut s = Vec::new();
        t.eval(&p, &[&x1, &x2], &mut v, Some(&mut j), &mut s).unwrap();
        let mut v2 = vec![f64::NAN; n];
        t.eval(&p, &[&x1, &x2], &mut v2, None, &mut s).unwrap();
        for i in 0..n {
            let (pv, pg) = t.eval_point(&p, &[x1[i], x2[i]]);
            assert_eq!(v[i], pv, "n={n} i={i}");
            assert_eq!(v2[i], pv, "value-only path, n={n} i={i}");
            for k in 0..3 {
                assert_eq!(j[k * n + i], pg[k], "n={n} i={i} k={k}");
            }
            // hand-written value (arithmetic)
            let want = p[0] * x1[i] - p[1] * x1[i] * (-p[2] * x2[i]).exp() + x2[i].sin() / p[0];
            assert!((pv - want).abs() <= 1e-13 * want.abs().max(1.0));
        }
    }
}

#[test]
fn scratch_grows_on_first_use_only() {
    let t = tape(DECAY, &["a1", "k1", "a2", "k2"], &["t"]);
    let n = 5000;
    let tt: Vec<f64> = (0..n).map(|i| i as f64 * 1e-3).collect();
    let mut v = vec![0.0; n];
    let mut j = vec![0.0; 4 * n];
    let mut s = Vec::new();
    t.eval(&[1.0, 2.0, 3.0, 0.5], &[&tt], &mut v, Some(&mut j), &mut s)
        .unwrap();
    let (cap, ptr) = (s.capacity(), s.as_ptr());
    assert!(cap > 0);
    for k in 0..20 {
        let p = [1.0 + k as f64, 2.0, 3.0, 0.5];
        t.eval(&p, &[&tt], &mut v, Some(&mut j), &mut s).unwrap();
        t.eval(&p, &[&tt], &mut v, None, &mut s).unwrap();
        assert_eq!(
            (s.capacity(), s.as_ptr()),
            (cap, ptr),
            "scratch reallocated on call {k}"
        );
    }
    // A caller-provided buffer that is already large enough is used as is.
    let mut big = Vec::with_capacity(1 << 16);
    big.resize(1 << 16, 0.0);
    let (cap, ptr) = (big.capacity(), big.as_ptr());
    t.eval(&[1.0, 2.0, 3.0, 0.5], &[&tt], &mut v, Some(&mut j), &mut big)
        .unwrap();
    assert_eq!((big.capacity(), big.as_ptr()), (cap, ptr));
}

#[test]
fn non_finite_points_are_reported_and_buffers_still_filled() {
    let t = tape("a/(x-2)", &["a"], &["x"]);
    let x = [0.0, 1.0, 2.0, 3.0, 2.0];
    let mut v = [0.0; 5];
    let mut j = [0.0; 5];
    let mut s = Vec::new();
    let r = t.eval(&[4.0], &[&x], &mut v, Some(&mut j), &mut s);
    assert_eq!(r, Err(NonFinite { point: 2 }));
    assert_eq!(r.unwrap_err().to_string(), "model is not finite at point 3");
    assert_eq!([v[0], v[1], v[3]], [-2.0, -4.0, 4.0]);
    assert_eq!([j[0], j[1], j[3]], [-0.5, -1.0, 1.0]);
    assert!(v[2].is_infinite());

    // The first bad point in a later block, with an earlier one in no output.
    let t = tape("ln(x) * a", &["a"], &["x"]);
    let x: Vec<f64> = (0..600)
        .map(|i| {
            if i == 300 || i == 500 {
                -1.0
            } else {
                1.0 + i as f64
            }
        })
        .collect();
    let mut v = vec![0.0; 600];
    let mut j = vec![0.0; 600];
    assert_eq!(
        t.eval(&[2.0], &[&x], &mut v, Some(&mut j), &mut s),
        Err(NonFinite { point: 300 })
    );
    assert_eq!(v[599], 2.0 * 600f64.ln());
    assert_eq!(j[599], 600f64.ln());

    // Finite value, non-finite derivative: reported only when the Jacobian is asked for.
    let t = tape("sqrt(a*x)", &["a"], &["x"]);
    let x = [1.0, 0.0, 4.0];
    let mut v = [0.0; 3];
    let mut j = [0.0; 3];
    assert_eq!(t.eval(&[1.0], &[&x], &mut v, None, &mut s), Ok(()));
    assert_eq!(
        t.eval(&[1.0], &[&x], &mut v, Some(&mut j), &mut s),
        Err(NonFinite { point: 1 })
    );
    assert_eq!(v, [1.0, 0.0, 2.0]);
    assert_eq!([j[0], j[2]], [0.5, 1.0]);

    // A non-finite part that does not depend on the data: every point is bad.
    let t = tape("ln(a) + x", &["a"], &["x"]);
    let x = [1.0, 2.0];
    let mut v = [0.0; 2];
    assert_eq!(
        t.eval(&[-1.0], &[&x], &mut v, None, &mut s),
        Err(NonFinite { point: 0 })
    );
}

#[test]
fn parameters_that_do_not_appear_have_zero_columns() {
    let t = tape("a*x + 0*b + c - c", &["a", "b", "c", "d"], &["x"]);
    assert!(t.uses_parameter(0));
    assert!(!t.uses_parameter(1)); // 0*b simplifies away
    assert!(t.uses_parameter(2)); // appears (its derivative cancels to 0)
    assert!(!t.uses_parameter(3));
    assert!(!t.uses_parameter(99));
    let x = [1.0, 2.0, 3.0];
    let mut v = [0.0; 3];
    let mut j = [7.0; 12];
    t.eval(
        &[2.0, 5.0, 1.0, 9.0],
        &[&x],
        &mut v,
        Some(&mut j),
        &mut Vec::new(),
    )
    .unwrap();
    assert_eq!(v, [2.0, 4.0, 6.0]);
    assert_eq!(j, [1.0, 2.0, 3.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]);
}

#[test]
fn formulas_without_data_or_parameters() {
    // Constant model: value is the same at every point, Jacobian columns of ones.
    let t = tape("a + 2*b", &["a", "b"], &["x"]);
    let x = [0.0; 300];
    let mut v = [0.0; 300];
    let mut j = [0.0; 600];
    t.eval(&[1.0, 3.0], &[&x], &mut v, Some(&mut j), &mut Vec::new())
        .unwrap();
    assert!(v.iter().all(|&y| y == 7.0));
    assert!(j[..300].iter().all(|&d| d == 1.0) && j[300..].iter().all(|&d| d == 2.0));
    // No parameters at all.
    let t = tape("x^2", &[], &["x"]);
    let mut v = [0.0; 2];
    t.eval(&[], &[&[3.0, -2.0]], &mut v, Some(&mut []), &mut Vec::new())
        .unwrap();
    assert_eq!(v, [9.0, 4.0]);
}

#[test]
fn tape_agrees_with_the_native_model() {
    let t = tape(DECAY, &["a1", "k1", "a2", "k2"], &["t"]);
    let native = NativeModel::new(4, |p: &[f64], x: &[f64], g: &mut [f64]| {
        let e1 = (-p[1] * x[0]).exp();
        let e2 = (-p[3] * x[0]).exp();
        g[0] = e1;
        g[1] = -p[0] * x[0] * e1;
        g[2] = e2;
        g[3] = -p[2] * x[0] * e2;
        p[0] * e1 + p[2] * e2
    });
    let n = 777;
    let tt: Vec<f64> = (0..n).map(|i| i as f64 * 0.01).collect();
    let p = [3.0, 1.5, 1.0, 0.2];
    let (mut v1, mut v2) = (vec![0.0; n], vec![0.0; n]);
    let (mut j1, mut j2) = (vec![0.0; 4 * n], vec![0.0; 4 * n]);
    t.eval(&p, &[&tt], &mut v1, Some(&mut j1), &mut Vec::new())
        .unwrap();
    native
        .eval(&p, &[&tt], &mut v2, Some(&mut j2), &mut Vec::new())
        .unwrap();
    for (a, b) in v1.iter().zip(&v2).chain(j1.iter().zip(&j2)) {
        assert!((a - b).abs() <= 1e-15 * b.abs().max(1e-300), "{a} vs {b}");
    }
}

#[test]
fn threads_share_one_tape() {
    let t = tape(DECAY, &["a1", "k1", "a2", "k2"], &["t"]);
    let tt: Vec<f64> = (0..1000).map(|i| i as f64 * 0.01).collect();
    let results: Vec<Vec<f64>> = std::thread::scope(|sc| {
        let hs: Vec<_> = (0..2)
            .map(|_| {
                sc.spawn(|| {
                    let mut v = vec![0.0; 1000];
                    t.eval(&[1.0, 0.5, 2.0, 0.1], &[&tt], &mut v, None, &mut Vec::new())
                        .unwrap();
                    v
                })
            })
            .collect();
        hs.into_iter().map(|h| h.join().unwrap()).collect()
    });
    assert_eq!(results[0], results[1]);
}

#[test]
fn shared_and_pass_through_columns() {
    // d/da = d/db = x: one node feeding two Jacobian columns; the value
    // `x` itself is a data column passed through.
    let t = tape("a*x + b*x", &["a", "b"], &["x"]);
    let x: Vec<f64> = (0..300).map(|i| i as f64 - 100.0).collect();
    let mut v = vec![0.0; 300];
    let mut j = vec![0.0; 600];
    t.eval(&[2.0, 3.0], &[&x], &mut v, Some(&mut j), &mut Vec::new())
        .unwrap();
    for i in 0..300 {
        assert_eq!((v[i], j[i], j[300 + i]), (5.0 * x[i], x[i], x[i]));
    }
    let t = tape("y", &["a"], &["x", "y"]);
    let mut v = vec![0.0; 300];
    let mut j = vec![1.0; 300];
    t.eval(&[2.0], &[&x, &x[..]], &mut v, Some(&mut j), &mut Vec::new())
        .unwrap();
    assert_eq!(v, x);
    assert!(j.iter().all(|&d| d == 0.0));
    // The value is itself a derivative column: d/da of a*exp(x) is exp(x).
    let t = tape("exp(x) + a*exp(x)", &["a"], &["x"]);
    let mut v = vec![0.0; 300];
    let mut j = vec![0.0; 300];
    t.eval(&[0.5], &[&x], &mut v, Some(&mut j), &mut Vec::new())
        .unwrap();
    for i in 0..300 {
        assert_eq!(j[i], x[i].exp());
        assert!((v[i] - 1.5 * x[i].exp()).abs() <= 1e-15 * v[i].abs());
    }
}

#[test]
fn decay_compiles_to_six_fused_instructions() {
    // exp(s*t) twice, a2*E2, a1*E1 + that, (-a1)*(t*E1), (-a2)*(t*E2): the
    // shared exponentials serve value and Jacobian (see BENCHMARKS.md).
    let t = tape(DECAY, &["a1", "k1", "a2", "k2"], &["t"]);
    assert_eq!(t.n_instructions(), 6);
    // Fused forms with subtraction and negated products give the same
    // numbers as the formula computed by hand (arithmetic).
    let t = tape(
        "a*x - b*y*x - x*y + -(x*y*a) - (y - b*x)",
        &["a", "b"],
        &["x", "y"],
    );
    let (x, y) = ([0.5, 1.5, -2.0], [3.0, -1.0, 0.25]);
    let mut v = [0.0; 3];
    let mut j = [0.0; 6];
    t.eval(&[2.0, 3.0], &[&x, &y], &mut v, Some(&mut j), &mut Vec::new())
        .unwrap();
    for i in 0..3 {
        let (a, b, x, y) = (2.0, 3.0, x[i], y[i]);
        let want = a * x - b * y * x - x * y + -(x * y * a) - (y - b * x);
        assert!((v[i] - want).abs() < 1e-14, "{} vs {want}", v[i]);
        assert!((j[i] - (x - x * y)).abs() < 1e-14);
        assert!((j[3 + i] - (-y * x + x)).abs() < 1e-14);
    }
}
