//! `fit.svg`: the data with their error bars and the fitted curve, with the
//! normalised residuals in a panel below.

use super::palette::{self, grey, Series};
use super::svg::{self, Dash, Mark, Scale, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::diagnostics::bands::NewObservation;
use crate::report::ReportError;

/// Whether the record is a Poisson fit (its statistic is the deviance).
pub(crate) fn is_poisson(results: &AuditResults) -> bool {
    results.fit.likelihood == crate::fit::Likelihood::Poisson
}

/// The fit statistic as an axis or legend symbol: the deviance of a
/// Poisson fit, otherwise chi-squared.
pub(crate) fn stat_symbol(results: &AuditResults) -> &'static str {
    if is_poisson(results) {
        "deviance"
    } else {
        "\u{3c7}\u{b2}"
    }
}

/// The change of the fit statistic from its minimum, as a symbol.
pub(crate) fn delta_symbol(results: &AuditResults) -> &'static str {
    if is_poisson(results) {
        "\u{394} deviance"
    } else {
        "\u{394}\u{3c7}\u{b2}"
    }
}

/// The fit statistic in words (`chi-squared` or `deviance`).
pub(crate) fn stat_words(results: &AuditResults) -> &'static str {
    if is_poisson(results) {
        "deviance"
    } else {
        "chi-squared"
    }
}

/// Axis title of the residuals drawn: the deviance residuals of a Poisson
/// fit; normalised by the stated sigma (by the effective sigma with errors
/// in x), or, without sigma, standardised by the residual standard
/// deviation `s`.
pub(crate) fn residual_label(results: &AuditResults) -> &'static str {
    if is_poisson(results) {
        "deviance residual"
    } else if results.data.sigma_x.is_some() {
        "normalised residual (y \u{2212} f)/\u{3c3}_eff"
    } else if results.data.has_sigma() {
        "normalised residual (y \u{2212} f)/\u{3c3}"
    } else {
        "standardised residual (y \u{2212} f)/s"
    }
}

/// The residuals the figures draw: `(y - f) / sigma` with stated sigma;
/// without sigma `(y - f) / s` with `s = sqrt(sum of squares / dof)`, so
/// that the reference lines at 0 and +-2 and the unit-normal Q-Q line mean
/// the same in both cases (the raw residuals when `s` is 0). A Poisson
/// fit's deviance residuals are drawn as they are (unit scale already).
pub(crate) fn plotted_residuals(results: &AuditResults) -> Vec<f64> {
    let r = &results.fit.residuals;
    let s = results.fit.reduced_chi2.sqrt();
    if is_poisson(results) || results.data.has_sigma() || !(s.is_finite() && s > 0.0) {
        r.clone()
    } else {
        r.iter().map(|v| v / s).collect()
    }
}

/// How the drawn residuals are scaled, for captions.
pub(crate) fn residual_words(results: &AuditResults) -> String {
    if is_poisson(results) {
        "the deviance residual sign(y \u{2212} f)\u{b7}\u{221a}(2 (y ln(y/f) \u{2212} (y \u{2212} f))) of each count"
            .into()
    } else if results.data.sigma_x.is_some() {
        "the normalised residual (y \u{2212} f)/\u{3c3}_eff, with \u{3c3}_eff\u{b2} = \u{3c3}\u{b2} + (df/dx)\u{b2} \u{3c3}_x\u{b2} (errors in x)"
            .into()
    } else if results.data.has_sigma() {
        "the normalised residual (y \u{2212} f)/\u{3c3}".into()
    } else {
        format!(
            "the standardised residual (y \u{2212} f)/s, with s = {} the residual standard deviation \
             (no \u{3c3} given)",
            crate::report::format::sig(results.fit.reduced_chi2.sqrt(), 4)
        )
    }
}

/// One band of the fit figure: its two edges, stroke and legend label.
struct BandLines {
    lines: Vec<Vec<(f64, f64)>>,
    stroke: Stroke,
    label: String,
}

/// The bands to draw over the fitted curve (none without bands).
fn band_lines(results: &AuditResults) -> Vec<BandLines> {
    let Some(b) = &results.bands else {
        return Vec::new();
    };
    let level = crate::report::format::percent(b.level, 4);
    let edge = |v: &[f64]| -> Vec<(f64, f64)> { b.x.iter().copied().zip(v.iter().copied()).collect() };
    let mut out = vec![
        BandLines {
            lines: vec![edge(&b.confidence_lower), edge(&b.confidence_upper)],
            stroke: Stroke::new(Dash::Dashed, 1, palette::VERMILLION),
            label: format!("{level} confidence band"),
        },
        BandLines {
            lines: vec![edge(&b.prediction_lower), edge(&b.prediction_upper)],
            stroke: Stroke::new(Dash::Dotted, 2, palette::REDDISH_PURPLE),
            label: format!("{level} prediction band"),
        },
    ];
    for (name, rb, ink, width) in [
        ("bootstrap", b.bootstrap.as_ref(), palette::SKY_BLUE, 2),
        ("Monte Carlo", b.monte_carlo.as_ref(), palette::ORANGE, 1),
    ] {
        if let Some(rb) = rb {
            out.push(BandLines {
                lines: vec![edge(&rb.lower), edge(&rb.upper)],
                stroke: Stroke::new(Dash::Long, width, ink),
                label: format!("{name} percentile band"),
            });
        }
    }
    out
}

/// Caption words on the axis scales: empty when both are linear.
fn scale_words(sx: Scale, sy: Scale) -> String {
    match (sx, sy) {
        (Scale::Linear, Scale::Linear) => String::new(),
        (Scale::Log, Scale::Log) => " (both axes logarithmic)".into(),
        (Scale::Log, _) => sx.words("x"),
        (_, Scale::Log) => sy.words("y"),
    }
}

/// The caption's words on the bands drawn (empty without bands).
fn band_words(results: &AuditResults) -> String {
    let Some(b) = &results.bands else {
        return String::new();
    };
    let fmt = crate::report::format::sig;
    let new_obs = match b.new_observation {
        NewObservation::InterpolatedSigma => "\u{3c3} interpolated at x",
        NewObservation::ScaledSigma => "\u{3c3} interpolated at x times \u{221a}(\u{3c7}\u{b2}/dof)",
        NewObservation::ResidualVariance => "the residual standard deviation s",
        NewObservation::PoissonCount => "\u{221a}f, the standard deviation of a Poisson count",
    };
    let mut w = format!(
        " with its pointwise {} confidence band (dashed, f \u{b1} k u_f, k = {}) and prediction band \
         (dotted, adding one new observation of standard uncertainty {new_obs})",
        crate::report::format::percent(b.level, 4),
        fmt(b.coverage_factor, 4)
    );
    let resampled: Vec<&str> = [
        b.bootstrap.as_ref().map(|_| "bootstrap"),
        b.monte_carlo.as_ref().map(|_| "Monte Carlo"),
    ]
    .into_iter()
    .flatten()
    .collect();
    if !resampled.is_empty() {
        w.push_str(&format!(
            ", and the {} percentile band{} of the replicate curves (long dashes)",
            resampled.join(" and "),
            if resampled.len() > 1 { "s" } else { "" }
        ));
    }
    w
}

/// The fit figure, or None when there are no points.
pub(crate) fn figure(results: &AuditResults) -> Result<Option<Figure>, ReportError> {
    let data = &results.data;
    if data.is_empty() || data.x.is_empty() {
        return Ok(None);
    }
    let sigma = data.sigma.clone();
    let n = data.len();
    let err = |i: usize| sigma.as_ref().and_then(|s| s.get(i).copied()).unwrap_or(0.0);
    let res_label = residual_label(results);
    let fitted = &results.fit.fitted;
    let residuals = &plotted_residuals(results);
    let y_name = data.y_name.as_str();

    if data.x.len() == 1 {
        let x = &data.x[0];
        let x_name = data.x_names.first().map(String::as_str).unwrap_or("x");
        let curve: Vec<(f64, f64)> = results
            .curve
            .as_ref()
            .map(|c| c.x.iter().copied().zip(c.y.iter().copied()).collect())
            .unwrap_or_default();
        let bands = band_lines(results);
        let sx = Scale::choose(results.report.x_axis, x.iter().copied());
        let sy = Scale::choose(results.report.y_axis, data.y.iter().copied());
        let xr = sx.extent(x.iter().copied().chain(curve.iter().map(|p| p.0)));
        let yr = sy.extent(
            (0..n)
                .flat_map(|i| [data.y[i] - err(i), data.y[i] + err(i)])
                .chain(curve.iter().map(|p| p.1))
                .chain(bands.iter().flat_map(|b| b.lines.iter().flatten().map(|p| p.1))),
        );
        let left_out = (0..n)
            .filter(|&i| !(sx.to_axis(x[i]).is_finite() && sy.to_axis(data.y[i]).is_finite()))
            .count();
        let (Some(xr), Some(yr)) = (xr, yr) else {
            return Ok(None);
        };
        let res_pts: Vec<(f64, f64)> = x.iter().copied().zip(residuals.iter().copied()).collect();
        let rr = svg::extent(res_pts.iter().map(|p| p.1).chain([0.0])).unwrap_or((-1.0, 1.0));
        let svg_text = svg::render("fit.svg", (720, 620 + svg::LEGEND_HEIGHT), |root| {
            let (plot, side) = root.split_vertically(620);
            let (top, bottom) = plot.split_vertically(410);
            let mut c = svg::chart_scaled(
                &top,
                Some("Data and fitted model"),
                xr,
                yr,
                x_name,
                y_name,
                (sx, sy),
            )?;
            let bars: Vec<(f64, f64, f64)> = (0..n).map(|i| (x[i], data.y[i], err(i))).collect();
            c.error_bars(&bars, grey(120))?;
            let pts: Vec<(f64, f64)> = (0..n).map(|i| (x[i], data.y[i])).collect();
            let label = if sigma.is_some() {
                "data \u{b1} \u{3c3}"
            } else {
                "data"
            };
            c.points(&pts, Mark::new(Shape::Circle, 3, grey(0), false), Some(label))?;
            c.lines(
                std::slice::from_ref(&curve),
                Stroke::of(Series::Curve, 2),
                Some("fitted model"),
            )?;
            for b in &bands {
                c.lines(&b.lines, b.stroke, Some(&b.label))?;
            }
            svg::legend(&side, &c.legend)?;
            let mut r = svg::chart_scaled(&bottom, None, xr, rr, x_name, res_label, (sx, Scale::Linear))?;
            let (x_lo, x_hi) = match sx {
                Scale::Linear => xr,
                Scale::Log => (10f64.powf(xr.0), 10f64.powf(xr.1)),
            };
            r.lines(
                &[vec![(x_lo, 0.0), (x_hi, 0.0)]],
                Stroke::new(Dash::Solid, 1, grey(110)),
                None,
            )?;
            r.points(&res_pts, Mark::new(Shape::Circle, 3, grey(0), true), None)?;
            Ok(())
        })?;
        return Ok(Some(Figure {
            file: "fit.svg".into(),
            title: "Data and fitted model".into(),
            caption: format!(
                "Top: {y_name} against {x_name}{}, {}, and the fitted model{}. Bottom: {} of each point.{}",
                scale_words(sx, sy),
                if sigma.is_some() {
                    "error bars \u{b1}1 standard uncertainty"
                } else {
                    "no uncertainties given"
                },
                band_words(results),
                residual_words(results),
                if left_out > 0 {
                    format!(" {left_out} points at or below zero cannot be drawn on the logarithmic axis.")
                } else {
                    String::new()
                }
            ),
            svg: svg_text,
        }));
    }

    // Several independent variables: observed against fitted, residuals against fitted.
    let m = n.min(fitted.len());
    if m == 0 {
        return Ok(None);
    }
    let obs: Vec<(f64, f64)> = (0..m).map(|i| (fitted[i], data.y[i])).collect();
    let lim = svg::extent((0..m).flat_map(|i| [fitted[i], data.y[i] - err(i), data.y[i] + err(i)]));
    let Some(lim) = lim else {
        return Ok(None);
    };
    let res_pts: Vec<(f64, f64)> = fitted.iter().copied().zip(residuals.iter().copied()).collect();
    let rr = svg::extent(res_pts.iter().map(|p| p.1).chain([0.0])).unwrap_or((-1.0, 1.0));
    let fitted_label = format!("fitted {y_name}");
    let svg_text = svg::render("fit.svg", (720, 620 + svg::LEGEND_HEIGHT), |root| {
        let (plot, side) = root.split_vertically(620);
        let (top, bottom) = plot.split_vertically(410);
        let mut c = svg::chart(
            &top,
            Some("Observed against fitted"),
            lim,
            lim,
            &fitted_label,
            y_name,
        )?;
        let bars: Vec<(f64, f64, f64)> = (0..m).map(|i| (fitted[i], data.y[i], err(i))).collect();
        c.error_bars(&bars, grey(120))?;
        c.lines(
            &[vec![(lim.0, lim.0), (lim.1, lim.1)]],
            Stroke::new(Dash::Dashed, 1, grey(0)),
            Some("observed = fitted"),
        )?;
        c.points(&obs, Mark::new(Shape::Circle, 3, grey(0), false), Some("data"))?;
        svg::legend(&side, &c.legend)?;
        let mut r = svg::chart(&bottom, None, lim, rr, &fitted_label, res_label)?;
        r.lines(
            &[vec![(lim.0, 0.0), (lim.1, 0.0)]],
            Stroke::new(Dash::Solid, 1, grey(110)),
            None,
        )?;
        r.points(&res_pts, Mark::new(Shape::Circle, 3, grey(0), true), None)?;
        Ok(())
    })?;
    Ok(Some(Figure {
        file: "fit.svg".into(),
        title: "Observed against fitted".into(),
        caption: format!(
            "Top: observed {y_name} against the fitted values ({} independent variables), with the line \
             where they agree. Bottom: the residuals against the fitted values.",
            data.x.len()
        ),
        svg: svg_text,
    }))
}
