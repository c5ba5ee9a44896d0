//! `hist_<p>.svg`: bootstrap and Monte Carlo estimates of one parameter as
//! densities, the analytic normal curve, and the ends of every interval.

use super::palette::{self, Series};
use super::svg::{self, Dash, Stroke};
use super::{column, estimate_column, Figure};
use crate::audit::AuditResults;
use crate::report::{format, ReportError};

/// Number of histogram bins for `n` values: the Rice rule 2 n^(1/3)
/// (common practice), kept between 8 and 50.
pub(crate) fn bins(n: usize) -> usize {
    ((2.0 * (n as f64).cbrt()).ceil() as usize).clamp(8, 50)
}

/// Densities of `values` over `k` equal bins from `lo` to `hi`: count / (n
/// width), with n all the values, so that values outside `[lo, hi]` (not
/// counted in any bin) keep the scale comparable with a density curve.
pub(crate) fn densities(values: &[f64], lo: f64, hi: f64, k: usize) -> Vec<f64> {
    let mut counts = vec![0usize; k];
    let w = (hi - lo) / k as f64;
    if values.is_empty() || w.is_nan() || w <= 0.0 {
        return vec![0.0; k];
    }
    for &v in values.iter().filter(|v| **v >= lo && **v <= hi) {
        let b = (((v - lo) / w).floor() as usize).min(k - 1);
        counts[b] += 1;
    }
    counts
        .iter()
        .map(|&c| c as f64 / (values.len() as f64 * w))
        .collect()
}

/// The `[q, 1 - q]` quantile range of sorted values holding `share` of them
/// in the middle (order statistics, no interpolation).
pub(crate) fn central_range(sorted: &[f64], share: f64) -> (f64, f64) {
    let n = sorted.len();
    if n == 0 {
        return (f64::NAN, f64::NAN);
    }
    let cut = (((1.0 - share) / 2.0) * n as f64).floor() as usize;
    let cut = cut.min((n - 1) / 2);
    (sorted[cut], sorted[n - 1 - cut])
}

struct Marker {
    label: String,
    short: &'static str,
    stroke: Stroke,
    lo: Option<f64>,
    hi: Option<f64>,
}

impl Marker {
    fn ends(&self) -> impl Iterator<Item = f64> + '_ {
        [self.lo, self.hi].into_iter().flatten()
    }
}

/// The histogram of parameter `j`, or None when no resampling ran for it.
pub(crate) fn figure(results: &AuditResults, j: usize, stem: &str) -> Result<Option<Figure>, ReportError> {
    let p = &results.fit.parameters[j];
    if p.fixed {
        return Ok(None);
    }
    let names: Vec<String> = results.fit.parameters.iter().map(|p| p.name.clone()).collect();
    let take = |rs: Option<&crate::diagnostics::resample::ResampleResult>| {
        rs.and_then(|rs| estimate_column(rs, &names, &p.name).map(|c| column(rs, c)))
            .filter(|v| v.len() >= 2)
    };
    let boot = take(results.bootstrap.as_ref());
    let mc = take(results.monte_carlo.as_ref());
    if boot.is_none() && mc.is_none() {
        return Ok(None);
    }
    let level = results.settings.level;
    let k = results.fit.coverage_factor;
    let se = p.std_error.filter(|s| s.is_finite() && *s > 0.0);

    let mut markers = Vec::new();
    if let Some(se) = se {
        markers.push(Marker {
            label: format!("analytic value \u{b1} {}\u{b7}u", format::sig(k, 3)),
            short: "value \u{b1} ku",
            stroke: Stroke::of(Series::Analytic, 2),
            lo: Some(p.value - k * se),
            hi: Some(p.value + k * se),
        });
    }
    let find = |rs: Option<&crate::diagnostics::resample::ResampleResult>| {
        rs.and_then(|rs| rs.parameters.iter().find(|q| q.name == p.name).cloned())
    };
    if let Some(b) = find(results.bootstrap.as_ref()) {
        markers.push(Marker {
            label: "bootstrap percentile".into(),
            short: "percentile",
            stroke: Stroke::of(Series::Bootstrap, 2),
            lo: Some(b.lower),
            hi: Some(b.upper),
        });
        if let (Some(lo), Some(hi)) = (b.bca_lower, b.bca_upper) {
            markers.push(Marker {
                label: "bootstrap BCa".into(),
                short: "BCa",
                stroke: Stroke::of(Series::Bca, 2),
                lo: Some(lo),
                hi: Some(hi),
            });
        }
    }
    if let Some(m) = find(results.monte_carlo.as_ref()) {
        markers.push(Marker {
            label: "Monte Carlo interval".into(),
            short: "Monte Carlo",
            stroke: Stroke::of(Series::MonteCarlo, 2),
            lo: Some(m.lower),
            hi: Some(m.upper),
        });
    }
    if let Some(pp) = results
        .profile
        .as_ref()
        .and_then(|pr| pr.parameters.iter().find(|q| q.name == p.name))
    {
        markers.push(Marker {
            label: "profile interval".into(),
            short: "profile",
            stroke: Stroke::of(Series::Profile, 2),
            lo: pp.lower_found.then_some(pp.lower),
            hi: pp.upper_found.then_some(pp.upper),
        });
    }
    for m in &mut markers {
        m.lo = m.lo.filter(|v| v.is_finite());
        m.hi = m.hi.filter(|v| v.is_finite());
    }

    // The frame: the central 99 % of the estimates (a few runaway replicates
    // would squash the histogram), widened to every interval end.
    let mut pooled: Vec<f64> = boot.iter().chain(mc.iter()).flatten().copied().collect();
    pooled.sort_by(f64::total_cmp);
    let (q_lo, q_hi) = central_range(&pooled, 0.99);
    let (lo, hi) = svg::pad(q_lo, q_hi, 0.02);
    let Some(xr) = svg::extent(
        [lo, hi]
            .into_iter()
            .chain(markers.iter().flat_map(|m| m.ends().collect::<Vec<_>>())),
    ) else {
        return Ok(None);
    };
    let outside = pooled.iter().filter(|v| **v < lo || **v > hi).count();
    let nb = bins(
        boot.as_ref()
            .map_or(0, Vec::len)
            .max(mc.as_ref().map_or(0, Vec::len)),
    );
    let w = (hi - lo) / nb as f64;
    let dens_b = boot.as_ref().map(|v| densities(v, lo, hi, nb));
    let dens_m = mc.as_ref().map(|v| densities(v, lo, hi, nb));
    let hist_max = dens_b
        .iter()
        .chain(dens_m.iter())
        .flatten()
        .copied()
        .fold(0.0, f64::max);
    let normal: Vec<(f64, f64)> = match se {
        Some(se) => (0..=200)
            .map(|i| {
                let x = xr.0 + (xr.1 - xr.0) * i as f64 / 200.0;
                let z = (x - p.value) / se;
                (
                    x,
                    (-0.5 * z * z).exp() / (se * (2.0 * std::f64::consts::PI).sqrt()),
                )
            })
            .collect(),
        None => Vec::new(),
    };
    let peak = normal.iter().map(|p| p.1).fold(hist_max, f64::max);
    let ymax = if peak > 0.0 && peak.is_finite() {
        peak * 1.25
    } else {
        1.0
    };
    let file = format!("hist_{stem}.svg");
    let name = p.name.as_str();

    let strip_h = svg::strip_height(markers.len());
    let legend_h = svg::legend_height(3 + markers.len());
    let text = svg::render(&file, (680, 380 + strip_h + legend_h), |root| {
        let (plots, side) = root.split_vertically(380 + strip_h);
        let (plot, strip) = plots.split_vertically(380);
        let title = format!("Resampled estimates of {name}");
        let mut c = svg::chart(&plot, Some(&title), xr, (0.0, ymax), "", "density")?;
        if let Some(d) = &dens_b {
            let boxes: Vec<[f64; 4]> = d
                .iter()
                .enumerate()
                .filter(|(_, h)| **h > 0.0)
                .map(|(i, h)| [lo + w * i as f64, 0.0, lo + w * (i + 1) as f64, *h])
                .collect();
            let label = format!("bootstrap ({} replicates)", boot.as_ref().map_or(0, Vec::len));
            c.boxes(&boxes, palette::tint(palette::SKY_BLUE, 0.45), Some(&label))?;
        }
        if let Some(d) = &dens_m {
            let mut step = vec![(lo, 0.0)];
            for (i, h) in d.iter().enumerate() {
                step.push((lo + w * i as f64, *h));
                step.push((lo + w * (i + 1) as f64, *h));
            }
            step.push((hi, 0.0));
            let label = format!("Monte Carlo ({} trials)", mc.as_ref().map_or(0, Vec::len));
            c.lines(
                &[step],
                Stroke::new(Dash::Dashed, 1, palette::ORANGE),
                Some(&label),
            )?;
        }
        if !normal.is_empty() {
            c.lines(
                std::slice::from_ref(&normal),
                Stroke::new(Dash::Solid, 2, palette::BLACK),
                Some("analytic normal"),
            )?;
        }
        let bars: Vec<svg::Bar> = markers
            .iter()
            .map(|m| svg::Bar {
                label: m.short.to_string(),
                stroke: m.stroke,
                lo: m.lo,
                hi: m.hi,
            })
            .collect();
        for m in &markers {
            c.legend.push((m.label.clone(), svg::Key::Line(m.stroke)));
        }
        svg::interval_strip(&strip, xr, &bars, Some(p.value), name)?;
        svg::legend(&side, &c.legend)?;
        Ok(())
    })?;

    let mut parts = Vec::new();
    let beyond = if outside > 0 {
        format!(" {outside} estimates lie beyond the frame (the central 99 % is shown) and are not drawn.")
    } else {
        String::new()
    };
    if let Some(b) = &boot {
        parts.push(format!("{} bootstrap replicates (light blue bars)", b.len()));
    }
    if let Some(m) = &mc {
        parts.push(format!("{} Monte Carlo trials (dashed orange outline)", m.len()));
    }
    Ok(Some(Figure {
        file,
        title: format!("Resampled estimates of {name}"),
        caption: format!(
            "Estimates of {name} from {} as densities{}. The strip beneath draws every interval at the {} \
             level as a horizontal bar, one row per type: analytic value \u{b1} {}\u{b7}u, bootstrap \
             percentile and BCa, Monte Carlo and profile (an end not found runs dotted to the frame); the \
             thin vertical line is the estimate.{beyond}",
            parts.join(" and "),
            if se.is_some() {
                ", with the normal density of the analytic value and standard error (solid curve)"
            } else {
                "; no analytic standard error"
            },
            format::percent(level, 4),
            format::sig(k, 3)
        ),
        svg: text,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rice_bins_and_densities_integrate_to_one() {
        // Rice rule: 2 n^(1/3); n = 1000 gives 20 (common practice).
        assert_eq!(bins(1000), 20);
        assert_eq!(bins(5), 8);
        assert_eq!(bins(1_000_000), 50);
        let v: Vec<f64> = (0..100).map(|i| i as f64 / 10.0).collect();
        let d = densities(&v, 0.0, 9.9, 11);
        let w = 9.9 / 11.0;
        let total: f64 = d.iter().map(|h| h * w).sum();
        // Identity: a density histogram has unit area.
        assert!((total - 1.0).abs() < 1e-12);
        // The maximum lands in the last bin.
        assert!(d[10] > 0.0);
        // Values outside the range count in n but in no bin.
        let d = densities(&[0.5, 1.5, 99.0, -5.0], 0.0, 2.0, 2);
        assert_eq!(d, vec![0.25, 0.25]);
        // 1000 values 0..999: 99 % central range cuts 5 at each end.
        let v: Vec<f64> = (0..1000).map(f64::from).collect();
        assert_eq!(central_range(&v, 0.99), (5.0, 994.0));
        assert_eq!(central_range(&[3.0], 0.99), (3.0, 3.0));
    }
}
