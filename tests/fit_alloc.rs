//! The refit loop allocates nothing once the workspace exists and the
//! model's scratch buffer has grown (a counting global allocator checks it).

use fitaudit::fit::{DataView, FitOptions, Method, ParamSpec, Problem, Refitter};
use fitaudit::model::{compile, ModelFn, NativeModel, Symbols};
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;

struct Counting;

thread_local! {
    /// Allocations made by this thread (the test harness's own threads
    /// allocate at times of their own; only the refitting thread counts).
    static ALLOCATIONS: Cell<usize> = const { Cell::new(0) };
}

fn bump() {
    let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
}

fn allocations() -> usize {
    ALLOCATIONS.with(|c| c.get())
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        bump();
        System.alloc(layout)
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        System.dealloc(ptr, layout)
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        bump();
        System.realloc(ptr, layout, new_size)
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn decay(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let t = x[0];
    let e1 = (-p[1] * t).exp();
    let e2 = (-p[3] * t).exp();
    g[0] = e1;
    g[1] = -p[0] * t * e1;
    g[2] = e2;
    g[3] = -p[2] * t * e2;
    p[0] * e1 + p[2] * e2
}

fn count_refit_allocations(model: &dyn ModelFn, options: FitOptions) -> (usize, bool) {
    // Exact data of the model at (2, 1.3, 0.8, 0.2): the solution is known
    // (identity), the start is 8 % off.
    let t: Vec<f64> = (0..200).map(|i| i as f64 * 0.05).collect();
    let y: Vec<f64> = t
        .iter()
        .map(|&t| 2.0 * (-1.3 * t).exp() + 0.8 * (-0.2 * t).exp())
        .collect();
    let sigma = vec![0.01; t.len()];
    let xs: Vec<&[f64]> = vec![&t];
    let view = DataView {
        x: &xs,
        y: &y,
        sigma: &sigma,
        sigma_x: &[],
    };
    let mut bounded = ParamSpec::free("a2", 0.8);
    bounded.min = 0.0;
    let problem = Problem {
        model,
        params: vec![
            ParamSpec::free("a1", 2.0),
            ParamSpec::free("k1", 1.3),
            bounded,
            ParamSpec::free("k2", 0.2),
        ],
        options,
    };
    let start = [2.16, 1.2, 0.86, 0.184];
    let free = [true, true, true, true];
    let mut rf = Refitter::new(&problem, t.len());
    // First refit may grow the model's scratch.
    rf.refit(&problem, &view, &start, &free);
    let before = allocations();
    let mut ok = true;
    for _ in 0..5 {
        let r = rf.refit(&problem, &view, &start, &free);
        ok &= r.converged && (rf.params()[1] - 1.3).abs() < 1e-6;
        let r = rf.refit(&problem, &view, &start, &[true, false, true, true]);
        ok &= r.converged;
    }
    (allocations() - before, ok)
}

#[test]
fn refits_allocate_nothing() {
    // The counter sees this thread's allocations.
    let a0 = allocations();
    drop(std::hint::black_box(Vec::<u64>::with_capacity(16)));
    assert!(allocations() > a0, "the counting allocator is not in use");
    let native = NativeModel::new(4, decay);
    let p: Vec<String> = ["a1", "k1", "a2", "k2"].iter().map(|s| s.to_string()).collect();
    let v = vec!["t".to_string()];
    let syms = Symbols {
        parameters: &p,
        constants: &[],
        variables: &v,
    };
    let tape = compile("a1*exp(-k1*t) + a2*exp(-k2*t)", &syms).unwrap();
    let lm = FitOptions::default();
    let geo = FitOptions {
        geodesic: true,
        ..FitOptions::default()
    };
    let sd = FitOptions {
        method: Method::Steepest,
        max_iterations: 2000,
        ..FitOptions::default()
    };
    for (label, model) in [("native", &native as &dyn ModelFn), ("compiled", &tape)] {
        let (n, ok) = count_refit_allocations(model, lm.clone());
        assert_eq!(n, 0, "{label} LM");
        assert!(ok, "{label} LM");
        let (n, ok) = count_refit_allocations(model, geo.clone());
        assert_eq!(n, 0, "{label} LM geodesic");
        assert!(ok, "{label} LM geodesic");
        let (n, _) = count_refit_allocations(model, sd.clone());
        assert_eq!(n, 0, "{label} steepest");
    }
}

#[test]
fn joint_model_refits_allocate_nothing() {
    use fitaudit::model::{JointModel, JointPart};
    // Two decays sharing the rate k: set 0 is a1*exp(-k*t), set 1 is
    // a2*exp(-k*t) + c; joint parameters (a1, k, a2, c).
    let compile_part = |formula: &str, names: &[&str], map: Vec<usize>| {
        let p: Vec<String> = names.iter().map(|s| s.to_string()).collect();
        let v = vec!["t".to_string()];
        let syms = Symbols {
            parameters: &p,
            constants: &[],
            variables: &v,
        };
        JointPart {
            tape: compile(formula, &syms).unwrap(),
            map,
        }
    };
    let model = JointModel::new(
        vec![
            compile_part("a1*exp(-k*t)", &["a1", "k"], vec![0, 1]),
            compile_part("a2*exp(-k*t) + c", &["k", "a2", "c"], vec![1, 2, 3]),
        ],
        4,
        1,
    );
    let t: Vec<f64> = (0..120).map(|i| (i % 60) as f64 * 0.1).collect();
    let g: Vec<f64> = (0..120).map(|i| if i < 60 { 0.0 } else { 1.0 }).collect();
    let y: Vec<f64> = t
        .iter()
        .zip(&g)
        .map(|(&t, &g)| {
            if g == 0.0 {
                2.0 * (-0.7 * t).exp()
            } else {
                1.5 * (-0.7 * t).exp() + 0.3
            }
        })
        .collect();
    let sigma = vec![0.01; t.len()];
    let xs: Vec<&[f64]> = vec![&t, &g];
    let view = DataView {
        x: &xs,
        y: &y,
        sigma: &sigma,
        sigma_x: &[],
    };
    let problem = Problem {
        model: &model,
        params: vec![
            ParamSpec::free("a1", 2.0),
            ParamSpec::free("k", 0.7),
            ParamSpec::free("a2", 1.5),
            ParamSpec::free("c", 0.3),
        ],
        options: FitOptions::default(),
    };
    let start = [2.2, 0.6, 1.4, 0.25];
    let free = [true; 4];
    let mut rf = Refitter::new(&problem, t.len());
    rf.refit(&problem, &view, &start, &free);
    let before = allocations();
    let mut ok = true;
    for _ in 0..5 {
        let r = rf.refit(&problem, &view, &start, &free);
        // Exact data: the refit recovers the generating values.
        ok &= r.converged && (rf.params()[1] - 0.7).abs() < 1e-8 && (rf.params()[3] - 0.3).abs() < 1e-8;
        let r = rf.refit(&problem, &view, &start, &[true, false, true, true]);
        ok &= r.converged;
    }
    assert_eq!(allocations() - before, 0, "joint model refits allocated");
    assert!(ok);
}
