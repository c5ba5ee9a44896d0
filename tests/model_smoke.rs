//! First checks of compile + eval: values and Jacobian of simple formulas
//! against hand-written derivatives (calculus identities).

use fitaudit::model::{compile, ModelFn, Symbols};

fn names(v: &[&str]) -> Vec<String> {
    v.iter().map(|s| s.to_string()).collect()
}

#[test]
fn two_component_decay_matches_hand_derivatives() {
    let p = names(&["a1", "k1", "a2", "k2"]);
    let v = names(&["t"]);
    let syms = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    let tape = compile("a1*exp(-k1*t) + a2*exp(-k2*t)", &syms).unwrap();
    let n = 300;
    let t: Vec<f64> = (0..n).map(|i| i as f64 * 0.05).collect();
    let a = [2.0, 0.7, 0.5, 0.1];
    let mut val = vec![0.0; n];
    let mut jac = vec![0.0; 4 * n];
    let mut scratch = Vec::new();
    tape.eval(&a, &[&t], &mut val, Some(&mut jac), &mut scratch)
        .unwrap();
    for i in 0..n {
        let e1 = (-a[1] * t[i]).exp();
        let e2 = (-a[3] * t[i]).exp();
        let want = [
            a[0] * e1 + a[2] * e2,
            e1,
            -a[0] * t[i] * e1,
            e2,
            -a[2] * t[i] * e2,
        ];
        let got = [val[i], jac[i], jac[n + i], jac[2 * n + i], jac[3 * n + i]];
        for (g, w) in got.iter().zip(want) {
            assert!((g - w).abs() <= 1e-14 * w.abs().max(1.0), "point {i}: {g} vs {w}");
        }
    }
}
