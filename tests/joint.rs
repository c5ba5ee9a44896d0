//! Several data sets fitted jointly (`[[datasets]]`): the joint fit against
//! independent joint least-squares solutions written here, one entry
//! against the same study written with `[data]` + `[model]`, the data-set
//! shares, the stratified bootstrap and thread-count independence.

use std::path::{Path, PathBuf};

use assert_cmd::Command;
use fitaudit::audit::{self, AuditOptions};
use fitaudit::diagnostics::{bootstrap, NoProgress};
use fitaudit::fit;
use fitaudit::settings::{BootstrapScheme, Diagnostic};
use fitaudit::study::{self, Study};

/// Writes `files` (name, text) into a fresh folder.
fn folder(files: &[(&str, &str)]) -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    for (name, text) in files {
        std::fs::write(dir.path().join(name), text).unwrap();
    }
    dir
}

fn load(dir: &Path, name: &str) -> Study {
    study::load(&dir.join(name)).unwrap_or_else(|e| panic!("{e}"))
}

fn csv(header: &str, rows: &[Vec<f64>]) -> String {
    let mut s = format!("{header}\n");
    for r in rows {
        let cells: Vec<String> = r.iter().map(|v| format!("{v}")).collect();
        s.push_str(&cells.join(","));
        s.push('\n');
    }
    s
}

// ---------------------------------------------------------------------------
// Two straight lines sharing a slope.

/// Line A: y = a1 + b t with sigma per point; line B: y = a2 + b u with one
/// sigma. Invented numbers, scattered about b = 2.
fn lines() -> (Vec<[f64; 3]>, Vec<[f64; 2]>, f64) {
    let a = vec![
        [0.0, 1.1, 0.1],
        [1.0, 2.9, 0.1],
        [2.0, 5.2, 0.15],
        [3.0, 7.0, 0.1],
        [4.0, 8.8, 0.2],
        [5.0, 11.2, 0.1],
    ];
    let b = vec![[0.5, 4.1], [1.5, 5.9], [2.5, 8.3], [3.5, 9.8], [6.0, 15.2]];
    (a, b, 0.25)
}

const LINES_STUDY: &str = r#"title = "Two lines, one slope"
[[datasets]]
name = "A"
file = "a.csv"
x = "t"
y = "y"
sigma = "u"
formula = "a1 + b*t"

[[datasets]]
name = "B"
file = "b.csv"
x = "u_x"
y = "resp"
sigma = 0.25
formula = "a2 + b*u_x"

[parameters]
a1 = { start = 0 }
b = { start = 1 }
a2 = { start = 0 }
"#;

fn lines_folder() -> tempfile::TempDir {
    let (a, b, _) = lines();
    let a_csv = csv("t,y,u", &a.iter().map(|r| r.to_vec()).collect::<Vec<_>>());
    let b_csv = csv("u_x,resp", &b.iter().map(|r| r.to_vec()).collect::<Vec<_>>());
    folder(&[("study.toml", LINES_STUDY), ("a.csv", &a_csv), ("b.csv", &b_csv)])
}

/// Solves the 3x3 system `m x = r` by Cramer's rule.
fn solve3(m: [[f64; 3]; 3], r: [f64; 3]) -> [f64; 3] {
    let det = |m: [[f64; 3]; 3]| {
        m[0][0] * (m[1][1] * m[2][2] - m[1][2] * m[2][1]) - m[0][1] * (m[1][0] * m[2][2] - m[1][2] * m[2][0])
            + m[0][2] * (m[1][0] * m[2][1] - m[1][1] * m[2][0])
    };
    let d = det(m);
    let mut out = [0.0; 3];
    for (k, o) in out.iter_mut().enumerate() {
        let mut mk = m;
        for i in 0..3 {
            mk[i][k] = r[i];
        }
        *o = det(mk) / d;
    }
    out
}

#[test]
fn two_lines_sharing_a_slope_match_the_weighted_normal_equations() {
    let dir = lines_folder();
    let s = load(dir.path(), "study.toml");
    let f = fit::fit(&s.problem(), &s.dataset).unwrap();
    assert!(f.converged);
    // Closed form (weighted linear least squares, normal equations
    // X^T W X beta = X^T W y) in the parameter order (a1, b, a2): a row of
    // A is (1, t, 0), a row of B is (0, u, 1).
    let (a, b, sb) = lines();
    let mut m = [[0.0; 3]; 3];
    let mut r = [0.0; 3];
    let rows = a
        .iter()
        .map(|p| ([1.0, p[0], 0.0], p[1], p[2]))
        .chain(b.iter().map(|p| ([0.0, p[0], 1.0], p[1], sb)));
    for (x, y, s) in rows {
        let w = 1.0 / (s * s);
        for i in 0..3 {
            r[i] += w * x[i] * y;
            for j in 0..3 {
                m[i][j] += w * x[i] * x[j];
            }
        }
    }
    let beta = solve3(m, r);
    // Covariance (X^T W X)^-1, column by column.
    let mut cov = [[0.0; 3]; 3];
    for k in 0..3 {
        let mut e = [0.0; 3];
        e[k] = 1.0;
        let c = solve3(m, e);
        for i in 0..3 {
            cov[i][k] = c[i];
        }
    }
    for (j, p) in f.parameters.iter().enumerate() {
        assert!(
            (p.value - beta[j]).abs() < 1e-9 * beta[j].abs().max(1.0),
            "{} {} {}",
            p.name,
            p.value,
            beta[j]
        );
        let se = cov[j][j].sqrt();
        let got = p.std_error.unwrap();
        assert!((got - se).abs() < 1e-7 * se, "{} se {got} {se}", p.name);
    }
    // chi2 of the closed-form solution.
    let chi2: f64 = a
        .iter()
        .map(|p| ((p[1] - beta[0] - beta[1] * p[0]) / p[2]).powi(2))
        .chain(b.iter().map(|p| ((p[1] - beta[2] - beta[1] * p[0]) / sb).powi(2)))
        .sum();
    assert!((f.chi2 - chi2).abs() < 1e-9 * chi2);
    assert_eq!(f.dof, 11 - 3);
}

// ---------------------------------------------------------------------------
// Two exponential decays sharing a rate: a nonlinear joint problem.

const DECAYS_STUDY: &str = r#"
[[datasets]]
name = "first"
file = "d1.csv"
x = "t"
y = "y"
sigma = 0.02
formula = "A1*exp(-k*t)"

[[datasets]]
name = "second"
file = "d2.csv"
x = "s"
y = "y"
sigma = 0.05
formula = "A2*exp(-k*s) + c"

[parameters]
A1 = { start = 1 }
k = { start = 0.3 }
A2 = { start = 2 }
c = { start = 0 }
"#;

/// Invented decays about k = 0.45 with a deterministic wiggle as noise.
fn decays() -> (Vec<[f64; 2]>, Vec<[f64; 2]>) {
    let d1: Vec<[f64; 2]> = (0..12)
        .map(|i| {
            let t = 0.5 * i as f64;
            [t, 1.3 * (-0.45 * t).exp() + 0.02 * (1.7 * i as f64).sin()]
        })
        .collect();
    let d2: Vec<[f64; 2]> = (0..9)
        .map(|i| {
            let s = 0.8 * i as f64;
            [s, 2.6 * (-0.45 * s).exp() + 0.3 + 0.05 * (2.3 * i as f64).cos()]
        })
        .collect();
    (d1, d2)
}

/// For fixed k the model is linear in (A1, A2, c): the weighted
/// least-squares amplitudes in closed form, and the chi2 they leave.
fn profile_k(k: f64) -> (f64, [f64; 3]) {
    let (d1, d2) = decays();
    let (w1, w2) = (1.0 / 0.02f64.powi(2), 1.0 / 0.05f64.powi(2));
    // A1 alone: sum w e y / sum w e^2.
    let (num, den) = d1.iter().fold((0.0, 0.0), |(n, d), p| {
        let e = (-k * p[0]).exp();
        (n + w1 * e * p[1], d + w1 * e * e)
    });
    let a1 = num / den;
    // (A2, c): 2x2 normal equations of the rows (e, 1).
    let (mut s_ee, mut s_e, mut s_1, mut s_ey, mut s_y) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for p in &d2 {
        let e = (-k * p[0]).exp();
        s_ee += w2 * e * e;
        s_e += w2 * e;
        s_1 += w2;
        s_ey += w2 * e * p[1];
        s_y += w2 * p[1];
    }
    let det = s_ee * s_1 - s_e * s_e;
    let a2 = (s_ey * s_1 - s_e * s_y) / det;
    let c = (s_ee * s_y - s_e * s_ey) / det;
    let chi2: f64 = d1
        .iter()
        .map(|p| w1 * (p[1] - a1 * (-k * p[0]).exp()).powi(2))
        .chain(
            d2.iter()
                .map(|p| w2 * (p[1] - a2 * (-k * p[0]).exp() - c).powi(2)),
        )
        .sum();
    (chi2, [a1, a2, c])
}

#[test]
fn two_decays_sharing_a_rate_match_an_independent_profile_minimisation() {
    let (d1, d2) = decays();
    let dir = folder(&[
        ("study.toml", DECAYS_STUDY),
        (
            "d1.csv",
            &csv("t,y", &d1.iter().map(|r| r.to_vec()).collect::<Vec<_>>()),
        ),
        (
            "d2.csv",
            &csv("s,y", &d2.iter().map(|r| r.to_vec()).collect::<Vec<_>>()),
        ),
    ]);
    let s = load(dir.path(), "study.toml");
    let f = fit::fit(&s.problem(), &s.dataset).unwrap();
    assert!(f.converged, "{:?}", f.stop_reason);
    // Independent minimisation: the amplitudes in closed form for each k
    // (variable projection), k by golden-section search on [0.1, 1].
    let phi = (5f64.sqrt() - 1.0) / 2.0;
    let (mut lo, mut hi) = (0.1f64, 1.0f64);
    for _ in 0..200 {
        let m1 = hi - phi * (hi - lo);
        let m2 = lo + phi * (hi - lo);
        if profile_k(m1).0 < profile_k(m2).0 {
            hi = m2;
        } else {
            lo = m1;
        }
    }
    let k = 0.5 * (lo + hi);
    let (chi2, [a1, a2, c]) = profile_k(k);
    let got: Vec<f64> = f.parameters.iter().map(|p| p.value).collect();
    for (name, g, want) in [
        ("A1", got[0], a1),
        ("k", got[1], k),
        ("A2", got[2], a2),
        ("c", got[3], c),
    ] {
        assert!(
            (g - want).abs() < 1e-6 * want.abs().max(0.1),
            "{name}: {g} vs {want}"
        );
    }
    assert!((f.chi2 - chi2).abs() < 1e-8 * chi2, "{} vs {chi2}", f.chi2);
    // The shared rate's standard error: the curvature of the profile
    // chi2(k) (amplitudes re-optimised) is 2 / u(k)^2 for a locally
    // quadratic problem; a central second difference reads it off.
    let h = 1e-4;
    let curv = (profile_k(k + h).0 - 2.0 * profile_k(k).0 + profile_k(k - h).0) / (h * h);
    let u_k = (2.0 / curv).sqrt();
    let se = f.parameters[1].std_error.unwrap();
    // Gauss-Newton covariance versus the full curvature: equal up to the
    // residual-weighted second derivatives, small for a good fit.
    assert!((se - u_k).abs() < 0.02 * u_k, "{se} vs {u_k}");
}

// ---------------------------------------------------------------------------
// One [[datasets]] entry against [data] + [model].

const COOLING_CSV: &str = "t,temp,u\n0,70.3,0.3\n60,62.9,0.3\n120,56.8,0.3\n180,51.6,0.3\n240,47.6,0.3\n\
300,44.1,0.3\n420,38.9,0.3\n540,35.1,0.3\n660,32.6,0.3\n780,30.5,0.3\n900,29.0,0.3\n1080,27.6,0.3\n";

const PLAIN: &str = r#"[data]
file = "c.csv"
x = "t"
y = "temp"
sigma = "u"

[model]
formula = "T_env + dT*exp(-t/tau)"

[parameters]
T_env = { start = 20 }
dT = { start = 50, min = 0 }
tau = { start = 300, min = 1 }

[audit]
seed = 5
"#;

const ONE_ENTRY: &str = r#"[[datasets]]
name = "vial"
file = "c.csv"
x = "t"
y = "temp"
sigma = "u"
formula = "T_env + dT*exp(-t/tau)"

[parameters]
T_env = { start = 20 }
dT = { start = 50, min = 0 }
tau = { start = 300, min = 1 }

[audit]
seed = 5
"#;

fn audit_cli(dir: &Path, study: &str, extra: &[&str]) -> serde_json::Value {
    let out: PathBuf = dir.join(format!("out_{study}"));
    Command::cargo_bin("fitaudit")
        .unwrap()
        .arg("audit")
        .arg(dir.join(study))
        .arg("--out")
        .arg(&out)
        .args([
            "--quiet",
            "--replicates",
            "150",
            "--starts",
            "16",
            "--threads",
            "2",
        ])
        .args(extra)
        .assert()
        .success();
    serde_json::from_str(&std::fs::read_to_string(out.join("results.json")).unwrap()).unwrap()
}

#[test]
fn one_entry_equals_the_same_study_written_with_data_and_model() {
    let dir = folder(&[
        ("plain.toml", PLAIN),
        ("one.toml", ONE_ENTRY),
        ("c.csv", COOLING_CSV),
    ]);
    let plain = audit_cli(dir.path(), "plain.toml", &[]);
    let one = audit_cli(dir.path(), "one.toml", &[]);
    // Every result field for field; what only names the study, the data's
    // layout (the joint data carry a data-set column) or is drawn on one
    // x column only (curve and bands) is left out.
    let same = [
        "fit",
        "bootstrap",
        "monte_carlo",
        "profile",
        "contours",
        "multistart",
        "verdicts",
        "derived",
        "rebased",
        "settings",
        "diagnostics_run",
    ];
    for key in same {
        assert_eq!(plain[key], one[key], "{key}");
    }
    assert!(plain["bootstrap"]["estimates"].as_array().unwrap().len() > 100);
    assert_eq!(plain["data"]["y"], one["data"]["y"]);
    assert_eq!(plain["data"]["x"][0], one["data"]["x"][0]);
    // The one data set carries the whole chi2 and every degree of freedom.
    let d = &one["datasets"][0];
    assert_eq!(d["name"], "vial");
    assert_eq!(d["points"], 12);
    assert_eq!(d["chi2"], one["fit"]["chi2"]);
    assert_eq!(d["dof_share"].as_f64().unwrap(), 9.0);
    assert!(plain.get("datasets").is_none());
    // Case bootstrap too: one stratum draws exactly as the unstratified scheme.
    let case = [("plain_case.toml", PLAIN), ("one_case.toml", ONE_ENTRY)];
    for (name, text) in case {
        std::fs::write(
            dir.path().join(name),
            text.replace("[audit]\n", "[audit]\nbootstrap = { scheme = \"case\" }\n"),
        )
        .unwrap();
    }
    let only = ["--only", "bootstrap"];
    let p = audit_cli(dir.path(), "plain_case.toml", &only);
    let o = audit_cli(dir.path(), "one_case.toml", &only);
    assert_eq!(p["bootstrap"]["scheme"], "case");
    assert_eq!(p["bootstrap"], o["bootstrap"]);
}

// ---------------------------------------------------------------------------
// Three data sets, one parameter shared by two of them.

const THREE: &str = r#"
[[datasets]]
name = "low"
file = "low.csv"
x = "t"
y = "y"
sigma = 0.05
formula = "A*exp(-k1*t)"

[[datasets]]
name = "mid"
file = "mid.csv"
x = "t"
y = "y"
sigma = 0.05
formula = "A*exp(-k2*t)"

[[datasets]]
name = "high"
file = "high.csv"
x = "t"
y = "y"
sigma = 0.05
formula = "B*exp(-k2*t)"

[parameters]
A = { start = 1 }
k1 = { start = 0.2 }
k2 = { start = 0.5 }
B = { start = 1 }
"#;

fn three_folder(scheme: &str) -> tempfile::TempDir {
    let data = |amp: f64, k: f64, phase: f64, n: usize| {
        let rows: Vec<Vec<f64>> = (0..n)
            .map(|i| {
                let t = 0.4 * i as f64;
                vec![t, amp * (-k * t).exp() + 0.05 * (phase + 1.9 * i as f64).sin()]
            })
            .collect();
        csv("t,y", &rows)
    };
    let study = format!("{THREE}\n[audit]\nseed = 3\nbootstrap = {{ scheme = \"{scheme}\", replicates = 120 }}\nmonte_carlo = {{ replicates = 120 }}\nmultistart = {{ starts = 16 }}\nprofile = {{ points = 11 }}\ncontours = {{ grid = 9 }}\n");
    folder(&[
        ("study.toml", &study),
        ("low.csv", &data(1.0, 0.25, 0.0, 10)),
        ("mid.csv", &data(1.0, 0.6, 1.0, 8)),
        ("high.csv", &data(1.8, 0.6, 2.0, 9)),
    ])
}

fn run_audit(s: &Study, threads: usize) -> audit::AuditResults {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap();
    let input = audit::input_from_study(s);
    pool.install(|| audit::run(&input, &AuditOptions::default(), &NoProgress))
        .unwrap()
}

#[test]
fn shares_add_up_to_the_joint_chi2_and_dof() {
    let dir = three_folder("residual");
    let s = load(dir.path(), "study.toml");
    let r = run_audit(&s, 2);
    assert_eq!(r.datasets.len(), 3);
    let chi2: f64 = r.datasets.iter().map(|d| d.chi2).sum();
    assert!(
        (chi2 - r.fit.chi2).abs() < 1e-10 * r.fit.chi2,
        "{chi2} {}",
        r.fit.chi2
    );
    let dof: f64 = r.datasets.iter().map(|d| d.dof_share).sum();
    assert!((dof - r.fit.dof as f64).abs() < 1e-12, "{dof} {}", r.fit.dof);
    let fractions: f64 = r.datasets.iter().map(|d| d.chi2_fraction).sum();
    assert!((fractions - 1.0).abs() < 1e-12);
    // dof shares by hand: low uses A (shared by low and mid: 1/2) and k1
    // (own: 1); mid uses A (1/2) and k2 (shared with high: 1/2); high uses
    // B (1) and k2 (1/2).
    let shares: Vec<f64> = r.datasets.iter().map(|d| d.dof_share).collect();
    assert_eq!(shares, vec![10.0 - 1.5, 8.0 - 1.0, 9.0 - 1.5]);
    assert_eq!(r.datasets[0].shared, vec!["A".to_string()]);
    assert_eq!(r.datasets[1].shared, vec!["A".to_string(), "k2".to_string()]);
    assert_eq!(r.datasets[2].parameters, vec!["k2".to_string(), "B".to_string()]);
    // Each contribution is the sum of its own squared residuals.
    let own: f64 = r.fit.residuals[10..18].iter().map(|v| v * v).sum();
    assert!((r.datasets[1].chi2 - own).abs() < 1e-12 * own.max(1.0));
    // Each data set's curve is its own formula at the fitted values.
    let p: Vec<f64> = r.fit.parameters.iter().map(|p| p.value).collect();
    let c = r.datasets[2].curve.as_ref().unwrap();
    let i = 123;
    let want = p[3] * (-p[2] * c.x[i]).exp();
    assert!((c.y[i] - want).abs() < 1e-12 * want.abs());
    // Every diagnostic ran on the joint problem: profiles of shared and
    // local parameters, and one contour map per pair.
    let prof = r.profile.as_ref().unwrap();
    assert_eq!(prof.parameters.len(), 4);
    assert_eq!(r.contours.as_ref().unwrap().len(), 6);
    assert_eq!(r.bootstrap.as_ref().unwrap().estimates.len(), 120);
}

#[test]
fn the_case_bootstrap_never_mixes_data_sets() {
    let dir = three_folder("case");
    let s = load(dir.path(), "study.toml");
    let groups = &s.dataset.groups;
    assert_eq!(groups.iter().map(|g| g.len).collect::<Vec<_>>(), vec![10, 8, 9]);
    let group_of = |i: usize| groups.iter().position(|g| g.range().contains(&i)).unwrap();
    let mut drawn_from = vec![0usize; s.dataset.len()];
    for k in 0..200 {
        let idx = bootstrap::case_indices(&s.dataset, s.audit.seed, k);
        assert_eq!(idx.len(), s.dataset.len());
        for (o, &i) in idx.iter().enumerate() {
            assert_eq!(
                group_of(o),
                group_of(i),
                "replicate {k}: position {o} drew point {i}"
            );
            drawn_from[i] += 1;
        }
    }
    // Every point of every data set is drawn at some time (27 points, 200
    // replicates: a point is missed with probability (1 - 1/n_g)^(200 n_g)).
    assert!(drawn_from.iter().all(|&c| c > 0));
    // The data-set column the joint model reads goes with each drawn point.
    let col = s.dataset.x.last().unwrap();
    assert_eq!(col[0], 0.0);
    assert_eq!(col[10], 1.0);
    assert_eq!(col[26], 2.0);
    assert_eq!(s.dataset.x_names, vec!["t".to_string(), "dataset".to_string()]);
}

#[test]
fn the_joint_audit_does_not_depend_on_the_thread_count() {
    let dir = three_folder("case");
    let s = load(dir.path(), "study.toml");
    let mut one = run_audit(&s, 1);
    let mut two = run_audit(&s, 2);
    assert!(one.bootstrap.as_ref().unwrap().estimates.len() > 100);
    assert_eq!(one.diagnostics_run, Diagnostic::ALL.to_vec());
    assert_eq!(s.audit.bootstrap.scheme, BootstrapScheme::Case);
    one.provenance = two.provenance.clone();
    two.provenance = one.provenance.clone();
    assert_eq!(one, two);
}

#[test]
fn the_arrhenius_example_recovers_its_generating_values() {
    // examples/arrhenius: invented runs generated from k_45 = 0.05 /min,
    // Ea = 60000 J/mol, c0 = 1.00, 0.98, 1.02 mM with noise sd 0.005 mM
    // (study.toml says how). Each estimate lies within 3 standard errors of
    // its generating value, and the shared parameters are the designed ones.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/arrhenius/study.toml");
    let s = study::load(&path).unwrap_or_else(|e| panic!("{e}"));
    let f = fit::fit(&s.problem(), &s.dataset).unwrap();
    assert!(f.converged);
    for (p, truth) in f.parameters.iter().zip([1.00, 0.98, 1.02, 0.05, 60000.0]) {
        let u = p.std_error.unwrap();
        assert!(
            (p.value - truth).abs() < 3.0 * u,
            "{} = {} +- {u}, generated {truth}",
            p.name,
            p.value
        );
    }
    let shares = audit::dataset_shares(s.model_fn(), &s.dataset, &f, &s.parameters);
    let shared: Vec<Vec<String>> = shares.iter().map(|d| d.shared.clone()).collect();
    assert_eq!(shared[0], vec!["k_45".to_string(), "Ea".to_string()]);
    assert_eq!(shared[1], vec!["k_45".to_string()]);
    assert_eq!(shares.iter().map(|d| d.points).sum::<usize>(), 49);
    // The 45 degC run does not involve Ea at all.
    assert_eq!(
        s.dataset.groups[1].parameters,
        vec!["c0_45".to_string(), "k_45".to_string()]
    );
}

#[test]
fn a_large_joint_study_keeps_each_data_set_in_its_display_reduction() {
    // 2600 + 2400 points: above the 4000 points a record keeps, so the
    // record holds a display reduction; each data set's kept points must
    // stay its own (its range in `data.groups` recomputed).
    let rows = |n: usize, amp: f64, phase: f64| {
        let r: Vec<Vec<f64>> = (0..n)
            .map(|i| {
                let t = 10.0 * i as f64 / n as f64;
                vec![t, amp * (-0.3 * t).exp() + 0.01 * (phase + 3.7 * i as f64).sin()]
            })
            .collect();
        csv("t,y", &r)
    };
    let study = DECAYS_STUDY
        .replace("\"d2.csv\"\nx = \"s\"", "\"d2.csv\"\nx = \"t\"")
        .replace("*s)", "*t)");
    let dir = folder(&[
        ("study.toml", &study),
        ("d1.csv", &rows(2600, 1.3, 0.0)),
        ("d2.csv", &rows(2400, 2.1, 1.0)),
    ]);
    let s = load(dir.path(), "study.toml");
    let input = audit::input_from_study(&s);
    let options = AuditOptions {
        only: vec![Diagnostic::Profile],
        ..AuditOptions::default()
    };
    let mut settings = input.settings.clone();
    settings.profile.points = 7;
    let input = audit::AuditInput { settings, ..input };
    let r = audit::run(&input, &options, &NoProgress).unwrap();
    let red = r.reduction.as_ref().expect("a display reduction");
    assert_eq!(red.points, 5000);
    let groups = &r.data.groups;
    assert_eq!(groups[0].len + groups[1].len, red.kept);
    assert_eq!(groups[1].start, groups[0].len);
    for (g, group) in groups.iter().enumerate() {
        let original = r.datasets[g].start..r.datasets[g].start + r.datasets[g].points;
        assert!(group.len > 100, "{}", group.len);
        for &i in &red.indices[group.range()] {
            assert!(
                original.contains(&i),
                "data set {g}: kept point {i} outside {original:?}"
            );
        }
        // The data-set column of the kept points says the same.
        assert!(r.data.x.last().unwrap()[group.range()]
            .iter()
            .all(|&v| v == g as f64));
    }
    // The chi2 contributions are of all points, not of the kept ones.
    let total: f64 = r.datasets.iter().map(|d| d.chi2).sum();
    assert!((total - r.fit.chi2).abs() < 1e-9 * r.fit.chi2);
    // Each data set's figure draws its kept points.
    let figs = fitaudit::report::figures::build(&r).unwrap();
    assert!(figs.get("fit_first.svg").is_some() && figs.get("fit_second.svg").is_some());
}

#[test]
fn fit_prints_each_data_sets_share_and_carries_it_in_json() {
    let dir = lines_folder();
    let study = dir.path().join("study.toml");
    let out = Command::cargo_bin("fitaudit")
        .unwrap()
        .args(["fit", "--json"])
        .arg(&study)
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let chi2 = v["fit"]["chi2"].as_f64().unwrap();
    let parts: Vec<f64> = v["datasets"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d["chi2"].as_f64().unwrap())
        .collect();
    assert_eq!(parts.len(), 2);
    assert!((parts.iter().sum::<f64>() - chi2).abs() < 1e-10 * chi2);
    // Line A has 6 points and its own intercept; the slope is shared by
    // both: 6 - 1 - 1/2 and 5 - 1 - 1/2.
    assert_eq!(v["datasets"][0]["dof_share"].as_f64().unwrap(), 4.5);
    assert_eq!(v["datasets"][1]["dof_share"].as_f64().unwrap(), 3.5);
    let text = Command::cargo_bin("fitaudit")
        .unwrap()
        .arg("fit")
        .arg(&study)
        .output()
        .unwrap();
    let text = String::from_utf8(text.stdout).unwrap();
    assert!(text.contains("data set  points  parameters"), "{text}");
    assert!(
        text.lines().any(|l| l.starts_with("A ") && l.contains("a1, b*")),
        "{text}"
    );
}

#[test]
fn the_residual_bootstrap_resamples_each_data_sets_own_residuals() {
    // Two constants, one per data set (no x columns, no shared parameter),
    // sigma 1 stated for both, but data set `quiet` scatters by 0.1 and
    // `loud` by 1. For y = mu the residual bootstrap's replicate is
    // ybar + mean of n residuals drawn from the pool of r_i / sqrt(1 - 1/n)
    // re-centred, so its standard deviation is sqrt(sum r_i^2 / (n (n - 1))),
    // the standard error of a mean (Davison and Hinkley 1997, sec. 2.3
    // and 6.2.3, leverage 1/n). Drawing from one pool of both data sets
    // would give both the same spread.
    let w = [0.9, -1.3, 0.4, 1.6, -0.2, -0.8, 1.1, -1.7, 0.6, -0.5, 1.2, -1.3];
    let quiet: Vec<f64> = w.iter().map(|v| 5.0 + 0.1 * v).collect();
    let loud: Vec<f64> = w[..10].iter().rev().map(|v| 3.0 + 1.0 * v).collect();
    let col = |ys: &[f64]| {
        let rows: Vec<Vec<f64>> = ys.iter().map(|&y| vec![y]).collect();
        csv("y", &rows)
    };
    let study = "[[datasets]]\nname = \"quiet\"\nfile = \"q.csv\"\nx = []\ny = \"y\"\nsigma = 1\nformula = \"mu1\"\n\n\
                 [[datasets]]\nname = \"loud\"\nfile = \"l.csv\"\nx = []\ny = \"y\"\nsigma = 1\nformula = \"mu2\"\n\n\
                 [parameters]\nmu1 = { start = 4 }\nmu2 = { start = 2 }\n\n\
                 [audit]\nseed = 11\nbootstrap = { scheme = \"residual\", replicates = 2000 }\n";
    let dir = folder(&[
        ("study.toml", study),
        ("q.csv", &col(&quiet)),
        ("l.csv", &col(&loud)),
    ]);
    let s = load(dir.path(), "study.toml");
    let f = fit::fit(&s.problem(), &s.dataset).unwrap();
    let input = audit::input_from_study(&s);
    let ctx = fitaudit::diagnostics::Fitted {
        problem: input.problem(),
        data: &s.dataset,
        fit: &f,
        settings: &s.audit,
    };
    let b = bootstrap::run(&ctx, &NoProgress);
    let se_mean = |ys: &[f64]| {
        let n = ys.len() as f64;
        let m = ys.iter().sum::<f64>() / n;
        (ys.iter().map(|y| (y - m).powi(2)).sum::<f64>() / (n * (n - 1.0))).sqrt()
    };
    for (j, ys) in [(0, &quiet), (1, &loud)] {
        let want = se_mean(ys);
        let got = b.parameters[j].std;
        // 2000 replicates: the SD of an SD estimate is about 1/sqrt(2B) = 1.6 %.
        assert!(
            (got / want - 1.0).abs() < 0.06,
            "{}: {got} vs {want}",
            b.parameters[j].name
        );
    }
    assert!(b.parameters[1].std > 5.0 * b.parameters[0].std);
}

#[test]
fn coverage_runs_on_a_joint_study_and_two_lines_cover_at_the_level() {
    use fitaudit::diagnostics::coverage::CoverageKind;
    // The joint model is an ordinary model of the stacked data (the
    // data-set column travels with every simulated point), so the coverage
    // simulation needs nothing of its own. Two straight lines sharing a
    // slope are linear in (a1, b, a2) with stated sigma: the estimate is
    // exactly normal with the covariance (J^T W J)^-1 (Gauss-Markov, normal
    // errors), so value +- k u covers with probability L exactly, and the
    // profile's chi-squared is exactly quadratic, so its interval is the
    // same one (mathematical identities).
    let dir = lines_folder();
    let mut s = load(dir.path(), "study.toml");
    s.audit.coverage.replicates = 300;
    let options = AuditOptions {
        only: vec![Diagnostic::Coverage],
        ..AuditOptions::default()
    };
    let input = audit::input_from_study(&s);
    let r = audit::run(&input, &options, &NoProgress).unwrap();
    let c = r.coverage.as_ref().expect("coverage ran on the joint study");
    assert_eq!((c.replicates, c.run, c.failed), (300, 300, 0));
    assert_eq!(c.parameters.len(), 3);
    let level = r.settings.level;
    for p in &c.parameters {
        let an = p.kind(CoverageKind::Analytic).unwrap();
        let pr = p.kind(CoverageKind::Profile).unwrap();
        assert_eq!(an.counted, 300, "{}", p.name);
        // Within 3 binomial standard errors of an exact interval
        // (sqrt(L (1 - L) / 300) = 0.027 at L = 0.6827).
        assert!(
            (an.coverage - level).abs() < 3.0 * an.null_std_error,
            "{}: {} against {level}",
            p.name,
            an.coverage
        );
        // The profile interval equals value +- k u here: the same data sets
        // are covered, but for one on the edge of rounding.
        assert!(
            (pr.covered as i64 - an.covered as i64).abs() <= 1,
            "{}: profile {} analytic {}",
            p.name,
            pr.covered,
            an.covered
        );
        assert_eq!(pr.open_below + pr.open_above, 0);
    }
    // The coverage rule speaks on every parameter and finds no departure.
    for v in &r.verdicts {
        let f = v
            .findings
            .iter()
            .find(|f| f.rule == fitaudit::diagnostics::verdict::Rule::Coverage)
            .unwrap_or_else(|| panic!("{}: no coverage finding", v.parameter));
        assert_eq!(f.status, fitaudit::diagnostics::verdict::Status::Holds);
    }
}

// ---------------------------------------------------------------------------
// Counts in two data sets (Poisson likelihood).

#[test]
fn joint_poisson_counts_match_the_closed_form_mle_and_fisher_information() {
    // Invented counts. A: mean r; B: mean r q. The Poisson MLE is
    // r = mean(A), q = mean(B) / mean(A) (closed form: the likelihood
    // factorises); the Fisher information J^T diag(1/mu) J inverted by
    // hand gives Var r = r / n_A and Var q = q (n_A + n_B q) / (r n_A n_B).
    let a = [4.0, 7.0, 5.0, 3.0, 6.0, 5.0, 8.0, 2.0, 5.0, 6.0];
    let b = [12.0, 9.0, 11.0, 14.0, 10.0, 13.0, 8.0, 11.0];
    let rows =
        |v: &[f64]| -> Vec<Vec<f64>> { v.iter().enumerate().map(|(i, y)| vec![i as f64, *y]).collect() };
    let toml = "title = \"joint counts\"\n[[datasets]]\nname = \"A\"\nfile = \"a.csv\"\nx = \"t\"\ny = \"n\"\n\
                formula = \"r + 0*t\"\n[[datasets]]\nname = \"B\"\nfile = \"b.csv\"\nx = \"t\"\ny = \"n\"\n\
                formula = \"r*q + 0*t\"\n[parameters]\nr = { start = 3, min = 0.01 }\nq = { start = 1, min = 0.01 }\n\
                [fit]\nlikelihood = \"poisson\"\n[audit]\nseed = 2\nbootstrap = { replicates = 40 }\n\
                monte_carlo = { replicates = 40 }\nprofile = { points = 7 }\ncontours = { grid = 5 }\n\
                multistart = { starts = 4 }\n";
    let dir = folder(&[
        ("a.csv", &csv("t,n", &rows(&a))),
        ("b.csv", &csv("t,n", &rows(&b))),
        ("j.toml", toml),
    ]);
    let s = load(dir.path(), "j.toml");
    let f = fit::fit(&s.problem(), &s.dataset).unwrap();
    assert!(f.converged);
    let (na, nb) = (a.len() as f64, b.len() as f64);
    let r = a.iter().sum::<f64>() / na;
    let q = b.iter().sum::<f64>() / nb / r;
    assert!(
        (f.parameters[0].value - r).abs() < 1e-7 * r,
        "{}",
        f.parameters[0].value
    );
    assert!(
        (f.parameters[1].value - q).abs() < 1e-7 * q,
        "{}",
        f.parameters[1].value
    );
    let ur = (r / na).sqrt();
    let uq = (q * (na + nb * q) / (r * na * nb)).sqrt();
    assert!((f.parameters[0].std_error.unwrap() - ur).abs() < 1e-5 * ur);
    assert!((f.parameters[1].std_error.unwrap() - uq).abs() < 1e-5 * uq);
    // The residual bootstrap becomes the parametric Poisson bootstrap, and
    // the curvature measures say they do not apply.
    let res = run_audit(&s, 1);
    assert_eq!(res.bootstrap.as_ref().unwrap().scheme, "parametric-poisson");
    assert_eq!(res.monte_carlo.as_ref().unwrap().scheme, "poisson");
    assert_eq!(
        res.nonlinearity.not_available,
        Some(fitaudit::diagnostics::nonlinearity::NotAvailable::PoissonLikelihood)
    );
    // Each data set's contribution is its share of the deviance, headed so;
    // the contributions add up to the joint deviance (identity).
    let t = fitaudit::report::datasets::table(&res);
    assert_eq!(t.header[4], "Deviance");
    let sum: f64 = res.datasets.iter().map(|d| d.chi2).sum();
    assert!((sum - res.fit.chi2).abs() < 1e-9 * res.fit.chi2.max(1.0));
}

#[test]
fn the_data_digest_covers_every_data_file_and_the_record_names_each() {
    // SHA-256 of each file's bytes, and of the digests in entry order (hex
    // and a newline each), computed here with the sha2 crate; the
    // provenance table lists each data set's file with its digest.
    use sha2::{Digest, Sha256};
    let hex = |b: &[u8]| format!("{:x}", Sha256::digest(b));
    let dir = lines_folder();
    let s = load(dir.path(), "study.toml");
    let a = hex(&std::fs::read(dir.path().join("a.csv")).unwrap());
    let b = hex(&std::fs::read(dir.path().join("b.csv")).unwrap());
    let groups = &s.dataset.groups;
    assert_eq!(groups[0].sha256.as_deref(), Some(a.as_str()));
    assert_eq!(groups[1].sha256.as_deref(), Some(b.as_str()));
    assert_eq!(s.data_sha256, Some(hex(format!("{a}\n{b}\n").as_bytes())));
    let r = audit::run(
        &audit::input_from_study(&s),
        &AuditOptions {
            only: vec![Diagnostic::Profile],
            ..AuditOptions::default()
        },
        &NoProgress,
    )
    .unwrap();
    let rows = fitaudit::report::tables::provenance(&r);
    let row = |k: &str| rows.iter().find(|(key, _)| key == k).map(|(_, v)| v.clone());
    assert!(row("Data file of A").unwrap().contains(&a), "{rows:?}");
    assert!(row("Data file of B").unwrap().contains(&b), "{rows:?}");
    assert_eq!(row("SHA-256 of the data files' digests"), s.data_sha256.clone());
    assert_eq!(row("Data file"), None);
}
