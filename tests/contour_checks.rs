//! Checks of the contour maps: the 2-degree-of-freedom levels against
//! published values, the linear-model identity (profiled contour = the
//! covariance ellipse), pair selection and validation, and a
//! non-identifiable model.
#![allow(clippy::needless_range_loop)]

use fitaudit::data::Dataset;
use fitaudit::diagnostics::contour::{
    self, choose_pairs, delta_chi2_2dof, level_probabilities, validate_pairs, ContourError,
};
use fitaudit::diagnostics::{Fitted, NoProgress};
use fitaudit::fit::{fit, FitOptions, ParamSpec, Problem};
use fitaudit::model::NativeModel;
use fitaudit::settings::AuditSettings;
use nalgebra::{Matrix2, Matrix3, Vector2};

type PointFn = fn(&[f64], &[f64], &mut [f64]) -> f64;

fn quadratic(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    g[0] = 1.0;
    g[1] = x[0];
    g[2] = x[0] * x[0];
    p[0] + p[1] * x[0] + p[2] * x[0] * x[0]
}

/// Points with known sigma. The identities checked below hold for any
/// data; these numbers are only inputs, not reference results.
fn data() -> Dataset {
    let x = vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0];
    let y = vec![2.9, 5.2, 7.1, 8.8, 11.3, 12.9, 15.2, 16.8];
    let s = vec![0.1, 0.2, 0.1, 0.3, 0.2, 0.1, 0.4, 0.2];
    Dataset::single("x", x, "y", y, Some(s))
}

#[test]
fn levels_match_published_quantiles() {
    // Two degrees of freedom at 1, 2, 3 sigma: 2.30, 6.18, 11.83, the
    // values customarily quoted for joint two-parameter regions (common
    // practice, from memory); the closed form below is the exact check.
    let p = level_probabilities();
    for (pk, want) in p.iter().zip([0.6827, 0.9545, 0.9973]) {
        assert!((pk - want).abs() < 5e-5, "{pk}");
    }
    for (pk, want) in p.iter().zip([2.30, 6.18, 11.83]) {
        let l = delta_chi2_2dof(*pk);
        assert!((l - want).abs() < 5e-3, "{l} vs {want}");
        // Closed form for 2 dof: -2 ln(1 - p) (identity).
        assert!((l + 2.0 * (1.0 - pk).ln()).abs() < 1e-9 * l);
    }
    // NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4,
    // 2 degrees of freedom, upper tail 0.05: 5.991 (from memory).
    assert!((delta_chi2_2dof(0.95) - 5.991).abs() < 5e-4);
}

#[test]
fn linear_model_contour_is_the_covariance_ellipse() {
    let model = NativeModel::new(3, quadratic as PointFn);
    let problem = Problem {
        model: &model,
        params: vec![
            ParamSpec::free("a", 0.0),
            ParamSpec::free("b", 1.0),
            ParamSpec::free("c", 0.0),
        ],
        options: FitOptions::default(),
    };
    let data = data();
    let base = fit(&problem, &data).unwrap();
    let mut st = AuditSettings::default();
    st.contours.grid = 25;
    st.contours.pairs = Some(vec![["a".into(), "b".into()], ["c".into(), "a".into()]]);
    let ctx = Fitted {
        problem,
        data: &data,
        fit: &base,
        settings: &st,
    };
    let maps = contour::run(&ctx, &NoProgress);
    assert_eq!(maps.len(), 2);

    // Independent covariance: (J^T W J)^-1 of the quadratic (weighted
    // least squares, an identity for a linear model).
    let s = data.sigma.as_ref().unwrap();
    let mut nmat = Matrix3::<f64>::zeros();
    for i in 0..data.len() {
        let x = data.x[0][i];
        let g = [1.0, x, x * x];
        let w = 1.0 / (s[i] * s[i]);
        for r in 0..3 {
            for c in 0..3 {
                nmat[(r, c)] += w * g[r] * g[c];
            }
        }
    }
    let cov = nmat.try_inverse().unwrap();
    let mut worst_ratio: f64 = 0.0;
    for (map, [i, k]) in maps.iter().zip([[0usize, 1usize], [2, 0]]) {
        assert!(map.skipped.is_none());
        assert_eq!(map.failed, 0);
        assert_eq!(map.grid.x.len(), 25);
        assert_eq!(map.grid.chi2.len(), 25);
        let block = Matrix2::new(cov[(i, i)], cov[(i, k)], cov[(k, i)], cov[(k, k)]);
        let inv = block.try_inverse().unwrap();
        let centre = Vector2::new(base.parameters[i].value, base.parameters[k].value);
        let quad = |v: [f64; 2]| {
            let d = Vector2::new(v[0], v[1]) - centre;
            (d.transpose() * inv * d)[(0, 0)]
        };
        let hx = map.grid.x[1] - map.grid.x[0];
        let hy = map.grid.y[1] - map.grid.y[0];
        // Linear interpolation of a quadratic g along an edge of length h in
        // direction e misplaces the level by at most g''/8 = h^2 (C^-1)_ee / 4.
        let bound = (hx * hx * inv[(0, 0)]).max(hy * hy * inv[(1, 1)]) / 4.0;
        for (line, ell) in map.lines.iter().zip(&map.ellipse) {
            assert_eq!(line.level, ell.level);
            // One closed line inside the grid per level.
            assert_eq!(line.paths.len(), 1, "level {}", line.level);
            let path = &line.paths[0];
            assert_eq!(path.first(), path.last());
            assert!(path.len() > 20);
            for v in path {
                let err = (quad(*v) - line.level).abs();
                worst_ratio = worst_ratio.max(err / bound);
                assert!(err <= bound * (1.0 + 1e-6) + 1e-9, "{v:?}: {err} > {bound}");
            }
            // The ellipse itself lies on the quadratic form's level (identity).
            assert_eq!(ell.paths.len(), 1);
            for v in &ell.paths[0] {
                assert!((quad(*v) - ell.level).abs() < 1e-9 * ell.level, "{v:?}");
            }
        }
        // The lattice covers the outer level with room to spare.
        let outer = map.levels.iter().copied().fold(0.0, f64::max);
        let reach_x = outer.sqrt() * block[(0, 0)].sqrt();
        assert!(map.grid.x[0] < centre[0] - reach_x && *map.grid.x.last().unwrap() > centre[0] + reach_x);
    }
    eprintln!(
        "linear contour: worst vertex error {:.3} of the interpolation bound",
        worst_ratio
    );
    // JSON shape of the issue.
    let v = serde_json::to_value(&maps).unwrap();
    for key in ["pair", "levels", "grid", "lines", "ellipse"] {
        assert!(v[0].get(key).is_some(), "{key}");
    }
}

fn product(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    g[0] = p[1] * x[0];
    g[1] = p[0] * x[0];
    p[0] * p[1] * x[0] + p[2]
}

#[test]
fn pairs_are_validated_and_a_flat_valley_gives_no_nan() {
    let specs = vec![
        ParamSpec::free("a", 1.5),
        ParamSpec::free("b", 1.0),
        ParamSpec {
            fixed: true,
            ..ParamSpec::free("c", 0.0)
        },
    ];
    assert_eq!(
        validate_pairs(&[["a".into(), "b".into()], ["b".into(), "a".into()]], &specs),
        Ok(vec![[0, 1], [1, 0]])
    );
    let unknown = validate_pairs(&[["a".into(), "b".into()], ["a".into(), "bb".into()]], &specs).unwrap_err();
    assert_eq!(
        unknown,
        ContourError::UnknownParameter {
            index: 1,
            name: "bb".into()
        }
    );
    assert!(unknown.to_string().contains("audit.contours.pairs[1]"));
    assert!(matches!(
        validate_pairs(&[["a".into(), "c".into()]], &specs),
        Err(ContourError::FixedParameter { .. })
    ));
    assert!(matches!(
        validate_pairs(&[["a".into(), "a".into()]], &specs),
        Err(ContourError::SameParameter { .. })
    ));

    // y = a b x (+ fixed c): only a b is determined; the map runs, default
    // pairs (only one pair of free parameters), with finite values and lines.
    let model = NativeModel::new(3, product as PointFn);
    let problem = Problem {
        model: &model,
        params: specs.clone(),
        options: FitOptions::default(),
    };
    let data = data();
    let base = fit(&problem, &data).unwrap();
    let mut st = AuditSettings::default();
    st.contours.grid = 9;
    let mut st_bad = st.clone();
    st_bad.contours.pairs = Some(vec![["a".into(), "zz".into()]]);
    let ctx = Fitted {
        problem,
        data: &data,
        fit: &base,
        settings: &st,
    };
    let maps = contour::run(&ctx, &NoProgress);
    assert_eq!(maps.len(), 1);
    assert_eq!(maps[0].pair, ["a".to_string(), "b".to_string()]);
    assert!(maps[0].skipped.is_none());
    for line in maps[0].lines.iter().chain(&maps[0].ellipse) {
        assert!(line
            .paths
            .iter()
            .flatten()
            .all(|v| v[0].is_finite() && v[1].is_finite()));
    }
    assert!(maps[0]
        .grid
        .x
        .iter()
        .chain(&maps[0].grid.y)
        .all(|v| v.is_finite()));

    // An invalid pair in the settings is reported, not dropped.
    let ctx = Fitted {
        settings: &st_bad,
        ..ctx
    };
    let maps = contour::run(&ctx, &NoProgress);
    assert!(matches!(
        maps[0].skipped,
        Some(ContourError::UnknownParameter { .. })
    ));
    assert!(maps[0].grid.chi2.is_empty());
}

fn quintic(p: &[f64], x: &[f64], g: &mut [f64]) -> f64 {
    let mut v = 0.0;
    let mut t = 1.0;
    for j in 0..6 {
        g[j] = t;
        v += p[j] * t;
        t *= x[0];
    }
    v
}

#[test]
fn more_than_five_parameters_map_the_six_most_correlated_pairs() {
    // Selection rule of the issue: with more than five free parameters the
    // six pairs of largest |correlation| in the base fit, largest first.
    let model = NativeModel::new(6, quintic as PointFn);
    let params = (0..6).map(|j| ParamSpec::free(&format!("p{j}"), 0.0)).collect();
    let problem = Problem {
        model: &model,
        params,
        options: FitOptions::default(),
    };
    let data = data();
    let base = fit(&problem, &data).unwrap();
    let st = AuditSettings::default();
    let ctx = Fitted {
        problem,
        data: &data,
        fit: &base,
        settings: &st,
    };
    let pairs = choose_pairs(&ctx);
    assert_eq!(pairs.len(), 6);
    let corr: Vec<f64> = pairs
        .iter()
        .map(|(_, r)| {
            let [i, k] = *r.as_ref().unwrap();
            base.correlation[i][k].abs()
        })
        .collect();
    assert!(corr.windows(2).all(|w| w[0] >= w[1]), "{corr:?}");
    // No unchosen pair is more correlated than the weakest chosen one.
    let weakest = corr[5];
    for i in 0..6 {
        for k in i + 1..6 {
            let chosen = pairs.iter().any(|(_, r)| r.as_ref().unwrap() == &[i, k]);
            assert!(chosen || base.correlation[i][k].abs() <= weakest);
        }
    }
}

/// The enzyme demo's thin curved valley (Vmax and Km correlated almost
/// perfectly): on the default 41 x 41 lattice its 95.45 % contour used to
/// fall apart into islands around single nodes (3 pieces at 6.18, 21 at
/// 11.83). With the saddle cells refined every closed contour is one closed
/// line, and no level leaves a tiny island behind. (A marching-squares
/// contour of a connected region below the level is one polyline: closed,
/// or ending on the lattice edge where the region runs off it.)
#[test]
fn thin_valley_contours_are_traced_whole() {
    use fitaudit::audit::{self, AuditOptions};
    use fitaudit::demo::{self, SCENARIOS};
    use fitaudit::settings::Diagnostic;
    let work = tempfile::tempdir().unwrap();
    let sc = SCENARIOS.iter().find(|s| s.name == "enzyme").unwrap();
    let study = demo::load_scenario(sc, work.path()).unwrap();
    let options = AuditOptions {
        only: vec![Diagnostic::Contours],
        ..AuditOptions::default()
    };
    let r = audit::run(&audit::input_from_study(&study), &options, &NoProgress).unwrap();
    let c = &r.contours.as_ref().unwrap()[0];
    assert_eq!(c.grid.x.len(), 41);
    for (k, line) in c.lines.iter().enumerate() {
        assert_eq!(
            line.paths.len(),
            1,
            "level {}: {} pieces",
            line.level,
            line.paths.len()
        );
        let p = &line.paths[0];
        // The 68.27 % region spans only a few nodes of the default lattice
        // (6 points); the wider ones are long lines, not islands.
        assert!(
            p.len() >= if k == 0 { 5 } else { 12 },
            "level {}: {} points",
            line.level,
            p.len()
        );
        if k < 2 {
            // 68.27 % and 95.45 %: the region lies inside the lattice.
            assert_eq!(p.first(), p.last(), "level {} is closed", line.level);
        }
    }
}

/// A saddle cell is resolved by the centre value when one is supplied: with
/// corners 0 and 2 low, a low centre joins them (one line crossing the
/// cell twice as two segments around the high corners), a high centre
/// cuts them off; the mean of the corners decides otherwise (identity of
/// the construction).
#[test]
fn saddle_cells_follow_the_refined_centre() {
    use fitaudit::diagnostics::marching::{contour_paths, contour_paths_with, saddle_cells};
    let x = [0.0, 1.0];
    let y = [0.0, 1.0];
    // z[r][c]: (0,0) = 0 low, (0,1) = 10 high, (1,1) = 0 low, (1,0) = 10 high; mean 5.
    let z = vec![vec![0.0, 10.0], vec![10.0, 0.0]];
    assert_eq!(saddle_cells(&z, &[4.0]), vec![(0, 0)]);
    assert!(saddle_cells(&z, &[11.0]).is_empty());
    let mean = contour_paths(&x, &y, &z, 4.0);
    let low = contour_paths_with(&x, &y, &z, 4.0, &|_, _| Some(1.0));
    let high = contour_paths_with(&x, &y, &z, 4.0, &|_, _| Some(9.0));
    // Level 4 below the mean 5: the mean says "centre high", as a high centre does.
    assert_eq!(mean, high);
    assert_ne!(low, high);
    // A low centre cuts off the two high corners: the segments run from
    // edge to edge around (1, 0) and (0, 1), crossing at 0.4 of each edge.
    let ends: Vec<[f64; 2]> = low.iter().flat_map(|p| [p[0], p[p.len() - 1]]).collect();
    assert!(
        ends.iter().any(|e| (e[0] - 0.4).abs() < 1e-12 && e[1] == 0.0),
        "{low:?}"
    );
}
