//! `residuals_qq.svg` (normal Q-Q plot) and `residuals_x.svg` (residuals
//! against each independent variable).

use statrs::distribution::{ContinuousCDF, Normal};

use super::fit::{plotted_residuals, residual_label, residual_words};
use super::palette::{grey, Series};
use super::svg::{self, Dash, Mark, Scale, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::report::ReportError;

/// Theoretical standard-normal quantiles of `n` ordered values at the Hazen
/// plotting positions `p_i = (i - 0.5) / n`, i = 1..n (Hazen 1914): the
/// median of each of n equal-probability slices.
pub fn hazen_quantiles(n: usize) -> Vec<f64> {
    let Ok(normal) = Normal::new(0.0, 1.0) else {
        return Vec::new();
    };
    (1..=n)
        .map(|i| normal.inverse_cdf((i as f64 - 0.5) / n as f64))
        .collect()
}

/// The Q-Q plot and the residuals-against-x panels.
pub(crate) fn figures(results: &AuditResults) -> Result<Vec<Figure>, ReportError> {
    let mut out = Vec::new();
    let drawn = plotted_residuals(results);
    // (normal quantile, ordered residual) pairs and the residuals they
    // stand for: all of them, or the order statistics a display reduction
    // kept (every residual entered them).
    let (pts, count): (Vec<(f64, f64)>, usize) = match &results.reduction {
        Some(red) => {
            let s = results.fit.reduced_chi2.sqrt();
            let scale = if results.data.has_sigma() || !(s.is_finite() && s > 0.0) {
                1.0
            } else {
                1.0 / s
            };
            let normal = statrs::distribution::Normal::new(0.0, 1.0).expect("unit normal");
            let pts = red
                .residual_quantiles
                .iter()
                .map(|[p, r]| {
                    (
                        statrs::distribution::ContinuousCDF::inverse_cdf(&normal, *p),
                        r * scale,
                    )
                })
                .collect();
            (pts, red.points)
        }
        None => {
            let mut r: Vec<f64> = drawn.iter().copied().filter(|v| v.is_finite()).collect();
            r.sort_by(f64::total_cmp);
            let q = hazen_quantiles(r.len());
            let n = r.len();
            (q.into_iter().zip(r).collect(), n)
        }
    };
    if pts.len() >= 3 {
        let lim = svg::extent(pts.iter().flat_map(|p| [p.0, p.1])).unwrap_or((-3.0, 3.0));
        let y_label = format!("ordered {}", residual_label(results));
        let text = svg::render("residuals_qq.svg", (560, 520 + svg::LEGEND_HEIGHT), |root| {
            let (plot, side) = root.split_vertically(520);
            let mut c = svg::chart(
                &plot,
                Some("Normal Q-Q plot of the residuals"),
                lim,
                lim,
                "standard normal quantile (Hazen positions)",
                &y_label,
            )?;
            c.lines(
                &[vec![(lim.0, lim.0), (lim.1, lim.1)]],
                Stroke::of(Series::Analytic, 1),
                Some("unit normal (residual = quantile)"),
            )?;
            c.points(
                &pts,
                Mark::new(Shape::Circle, 3, grey(0), false),
                Some("residuals"),
            )?;
            svg::legend(&side, &c.legend)?;
            Ok(())
        })?;
        out.push(Figure {
            file: "residuals_qq.svg".into(),
            title: "Normal Q-Q plot of the residuals".into(),
            caption: if results.data.has_sigma() {
                format!(
                    "The {} ordered normalised residuals against standard normal quantiles at the Hazen \
                     plotting positions (i \u{2212} 0.5)/n. Points on the dashed line are what normally \
                     distributed residuals with the stated uncertainties give; a steeper line means \
                     larger scatter than the uncertainties say, curvature means heavy or skewed tails.",
                    count
                )
            } else {
                format!(
                    "The {} ordered residuals, each divided by the residual standard deviation s = {} \
                     (no \u{3c3} given), against standard normal quantiles at the Hazen plotting \
                     positions (i \u{2212} 0.5)/n. The dashed line is what normally distributed \
                     residuals give; its slope is 1 by construction, so only curvature (heavy or \
                     skewed tails) and outlying points carry information.",
                    count,
                    crate::report::format::sig(results.fit.reduced_chi2.sqrt(), 4)
                )
            },
            svg: text,
        });
        if let (Some(red), Some(f)) = (&results.reduction, out.last_mut()) {
            f.caption.push_str(&format!(
                " Drawn from {} order statistics of all {} residuals (the {} smallest and largest \
                 of them whole).",
                red.residual_quantiles.len(),
                red.points,
                crate::reduction::TAIL_POINTS
            ));
        }
    }

    let data = &results.data;
    let res = &drawn;
    let k = data.x.len();
    if k == 0 || res.is_empty() {
        return Ok(out);
    }
    let rr = svg::extent(res.iter().copied().chain([0.0])).unwrap_or((-1.0, 1.0));
    // One independent variable: fit.svg already draws the residuals against
    // it, so this figure shows what that panel does not, the residuals
    // against the fitted values and against the order of the points in the
    // data file (drift during a run). Several: one panel per variable.
    let fitted_name = format!("fitted {}", data.y_name);
    let order: Vec<f64> = (1..=res.len()).map(|i| i as f64).collect();
    let columns: Vec<(&[f64], &str, Scale)> = if k == 1 {
        vec![
            (results.fit.fitted.as_slice(), fitted_name.as_str(), Scale::Linear),
            (
                order.as_slice(),
                "point number (order in the data file)",
                Scale::Linear,
            ),
        ]
    } else {
        data.x
            .iter()
            .enumerate()
            .map(|(v, col)| {
                let name = data.x_names.get(v).map(String::as_str).unwrap_or("x");
                (
                    col.as_slice(),
                    name,
                    Scale::choose(results.report.x_axis, col.iter().copied()),
                )
            })
            .collect()
    };
    let title = if k == 1 {
        "Residuals against fitted values and point order"
    } else {
        "Residuals against the independent variables"
    };
    let height = 80 + 240 * columns.len() as u32;
    let text = svg::render("residuals_x.svg", (760, height), |root| {
        let panels = root.split_evenly((columns.len(), 1));
        for (v, panel) in panels.iter().enumerate() {
            let (col, name, sx) = columns[v];
            let Some(xr) = sx.extent(col.iter().copied()) else {
                continue;
            };
            let caption = (v == 0).then_some(title);
            let mut c = svg::chart_scaled(
                panel,
                caption,
                xr,
                rr,
                name,
                residual_label(results),
                (sx, Scale::Linear),
            )?;
            let (xlo, xhi) = match sx {
                Scale::Linear => xr,
                Scale::Log => (10f64.powf(xr.0), 10f64.powf(xr.1)),
            };
            c.lines(
                &[vec![(xlo, 0.0), (xhi, 0.0)]],
                Stroke::new(Dash::Solid, 1, grey(110)),
                None,
            )?;
            for band in [-2.0, 2.0] {
                c.lines(
                    &[vec![(xlo, band), (xhi, band)]],
                    Stroke::new(Dash::Dotted, 1, grey(90)),
                    None,
                )?;
            }
            let pts: Vec<(f64, f64)> = col.iter().copied().zip(res.iter().copied()).collect();
            c.points(&pts, Mark::new(Shape::Circle, 3, grey(0), true), None)?;
        }
        Ok(())
    })?;
    let names = if k == 1 {
        format!(
            "the fitted {} (top) and the point number in the data file (bottom; the residuals against {} \
             are in the fit figure)",
            data.y_name,
            data.x_names.join(", ")
        )
    } else {
        data.x_names.join(", ")
    };
    out.push(Figure {
        file: "residuals_x.svg".into(),
        title: title.into(),
        caption: format!(
            "{} against {names}; dotted lines at \u{b1}2. A trend or a funnel shape points to a \
             model or weighting problem; a trend along the point number to drift during the run.",
            capitalise(&residual_words(results))
        ),
        svg: text,
    });
    Ok(out)
}

fn capitalise(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_uppercase().collect::<String>() + c.as_str(),
        None => String::new(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hazen_positions_against_normal_table() {
        // n = 10: the first position is 0.05; the standard normal 5 % point
        // is -1.6449 (NIST/SEMATECH e-Handbook of Statistical Methods,
        // 1.3.6.7.1, table of the normal distribution: z_0.95 = 1.645).
        let q = hazen_quantiles(10);
        assert_eq!(q.len(), 10);
        assert!((q[0] + 1.644_854).abs() < 1e-5, "{}", q[0]);
        assert!((q[9] - 1.644_854).abs() < 1e-5);
        // Symmetry of the positions (identity): q_i = -q_(n+1-i); odd n has 0 in the middle.
        for i in 0..10 {
            assert!((q[i] + q[9 - i]).abs() < 1e-9);
        }
        let q = hazen_quantiles(5);
        assert!(q[2].abs() < 1e-12);
        // n = 4: p = 0.125 -> z = -1.1503 (same table: Phi(1.15) = 0.8749).
        let q = hazen_quantiles(4);
        assert!((q[0] + 1.150_35).abs() < 1e-4, "{}", q[0]);
    }
}
