//! The display reduction of large studies: bounded records, every extreme
//! point kept, the Q-Q order statistics of all residuals. The data are
//! synthetic inputs with fixed seeds; the checks are properties of the
//! reduction (what it must keep), not reference values.

use fitaudit::audit::{self, AuditOptions};
use fitaudit::data::Dataset;
use fitaudit::diagnostics::NoProgress;
use fitaudit::reduction::{residual_quantiles, select, BINS, RECORD_POINTS, TAIL_POINTS};
use fitaudit::settings::Diagnostic;
use fitaudit::study::{ParamEntry, Study, StudySpec};
use rand::SeedableRng;
use rand_distr::{Distribution, Normal};

/// A line with unit noise on `n` points, x shuffled (not in point order),
/// and one outlier of 12 sigma at point `n / 3`.
fn line(n: usize) -> (Dataset, Vec<f64>) {
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(99);
    let d = Normal::new(0.0, 1.0).unwrap();
    let x: Vec<f64> = (0..n).map(|i| ((i * 7919) % n) as f64 / n as f64).collect();
    let mut r: Vec<f64> = (0..n).map(|_| d.sample(&mut rng)).collect();
    r[n / 3] = 12.0;
    let y: Vec<f64> = x.iter().zip(&r).map(|(x, e)| 1.0 + 2.0 * x + e).collect();
    (Dataset::single("x", x, "y", y, Some(vec![1.0; n])), r)
}

#[test]
fn small_studies_are_kept_whole() {
    let (data, r) = line(RECORD_POINTS);
    assert_eq!(select(&data, &r), (0..RECORD_POINTS).collect::<Vec<_>>());
}

#[test]
fn the_reduction_keeps_every_slice_extreme_and_the_outlier() {
    let n = 100_000;
    let (data, r) = line(n);
    let kept = select(&data, &r);
    assert!(kept.len() <= 4 * BINS && kept.len() >= BINS, "{}", kept.len());
    assert!(kept.windows(2).all(|w| w[0] < w[1]), "in point order");
    assert!(kept.contains(&(n / 3)), "the 12-sigma outlier is drawn");
    // The global extremes of y and of the residual are kept.
    let arg = |v: &[f64], max: bool| {
        (0..n)
            .max_by(|&a, &b| {
                if max {
                    v[a].total_cmp(&v[b])
                } else {
                    v[b].total_cmp(&v[a])
                }
            })
            .unwrap()
    };
    for i in [
        arg(&data.y, true),
        arg(&data.y, false),
        arg(&r, true),
        arg(&r, false),
    ] {
        assert!(kept.contains(&i), "extreme point {i} dropped");
    }
    // Within every slice of x, the kept points span the slice's residuals.
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| data.x[0][a].total_cmp(&data.x[0][b]).then(a.cmp(&b)));
    for b in 0..BINS {
        let slice = &order[b * n / BINS..(b + 1) * n / BINS];
        let max = slice.iter().map(|&i| r[i]).fold(f64::NEG_INFINITY, f64::max);
        let kept_max = slice
            .iter()
            .filter(|i| kept.binary_search(i).is_ok())
            .map(|&i| r[i])
            .fold(f64::NEG_INFINITY, f64::max);
        assert_eq!(max, kept_max, "slice {b}");
    }
}

#[test]
fn qq_order_statistics_keep_the_tails_whole() {
    let (_, r) = line(50_000);
    let q = residual_quantiles(&r);
    let mut sorted = r.clone();
    sorted.sort_by(f64::total_cmp);
    let n = sorted.len();
    assert!(q.len() <= 1000 + 2 * TAIL_POINTS);
    for k in 0..TAIL_POINTS {
        assert_eq!(q[k][1], sorted[k]);
        assert_eq!(q[k][0], (k as f64 + 0.5) / n as f64, "Hazen position");
        assert_eq!(q[q.len() - 1 - k][1], sorted[n - 1 - k]);
    }
    assert_eq!(
        q.last().unwrap()[1],
        12.0,
        "the outlier is the last order statistic"
    );
    assert!(q.windows(2).all(|w| w[0][0] < w[1][0] && w[0][1] <= w[1][1]));
}

#[test]
fn a_large_audit_records_a_bounded_reduction() {
    let n = 20_000;
    let (data, _) = line(n);
    let spec = StudySpec::new(
        "a + b*x",
        vec![
            ("a".to_string(), ParamEntry::start(0.0)),
            ("b".to_string(), ParamEntry::start(1.0)),
        ],
    );
    let study = Study::from_dataset(spec, data, "large-line").unwrap();
    let options = AuditOptions {
        only: vec![Diagnostic::Profile],
        ..AuditOptions::default()
    };
    let r = audit::run(&audit::input_from_study(&study), &options, &NoProgress).unwrap();
    let red = r.reduction.as_ref().expect("reduced");
    assert_eq!(red.points, n);
    assert_eq!(red.kept, red.indices.len());
    assert_eq!(r.data.len(), red.kept);
    assert_eq!(r.fit.residuals.len(), red.kept);
    assert_eq!(r.fit.fitted.len(), red.kept);
    assert!(red.kept <= 4 * BINS);
    // The kept points are the study's own, with their own residuals.
    for (k, &i) in red.indices.iter().enumerate().step_by(97) {
        assert_eq!(r.data.y[k], study.dataset.y[i]);
        assert_eq!(r.data.x[0][k], study.dataset.x[0][i]);
    }
    assert!(red.indices.contains(&(n / 3)));
    // The fit summary still describes all points.
    assert_eq!(r.fit.dof, n - 2);
    let json = serde_json::to_string(&r).unwrap();
    assert!(json.len() < 2_000_000, "results.json of {} bytes", json.len());
}
