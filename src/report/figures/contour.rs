//! `contour_<p1>_<p2>.svg`: profiled chi-squared contour lines of one
//! parameter pair, the covariance ellipses at the same levels and, when the
//! bootstrap ran, the cloud of bootstrap estimates.

use super::palette::{self, grey};
use super::svg::{self, Dash, Mark, Shape, Stroke};
use super::{estimate_column, Figure};
use crate::audit::AuditResults;
use crate::diagnostics::contour::{ContourLine, ContourResult};
use crate::report::{format, ReportError};

/// Most bootstrap points drawn (the first ones in replicate order).
pub(crate) const MAX_CLOUD: usize = 2000;

fn polylines(lines: &ContourLine) -> Vec<Vec<(f64, f64)>> {
    lines
        .paths
        .iter()
        .map(|p| p.iter().map(|q| (q[0], q[1])).collect())
        .collect()
}

const LEVEL_STROKES: [Stroke; 3] = [
    Stroke::new(Dash::Solid, 2, palette::BLUE),
    Stroke::new(Dash::Solid, 1, palette::BLUE),
    Stroke::new(Dash::Solid, 1, palette::BLUISH_GREEN),
];
const ELLIPSE_STROKES: [Stroke; 3] = [
    Stroke::new(Dash::Dashed, 2, palette::VERMILLION),
    Stroke::new(Dash::Dashed, 1, palette::VERMILLION),
    Stroke::new(Dash::Dotted, 1, palette::ORANGE),
];

/// The contour figure of one pair, or None when nothing can be drawn.
pub(crate) fn figure(
    results: &AuditResults,
    c: &ContourResult,
    file: String,
) -> Result<Option<Figure>, ReportError> {
    if c.skipped.is_some() {
        return Ok(None);
    }
    let [a, b] = [&c.pair[0], &c.pair[1]];
    // The frame holds the two innermost profiled levels and every ellipse
    // (the grid itself when nothing was traced); an outer level that runs
    // far along a valley is clipped rather than allowed to shrink the rest.
    let inner = c.lines.len().min(2);
    let mut pts: Vec<[f64; 2]> = c.lines[..inner]
        .iter()
        .chain(c.ellipse.iter())
        .flat_map(|l| l.paths.iter().flatten())
        .copied()
        .filter(|p| p[0].is_finite() && p[1].is_finite())
        .collect();
    if pts.is_empty() {
        pts = c
            .grid
            .x
            .iter()
            .flat_map(|&x| c.grid.y.iter().map(move |&y| [x, y]))
            .collect();
    }
    let xr = svg::extent(pts.iter().map(|p| p[0]));
    let yr = svg::extent(pts.iter().map(|p| p[1]));
    let (Some(xr), Some(yr)) = (xr, yr) else {
        return Ok(None);
    };
    let in_frame = |p: &[f64; 2]| svg::inside((p[0], p[1]), (xr, yr));
    let clipped: Vec<f64> = c
        .lines
        .iter()
        .filter(|l| l.paths.iter().flatten().any(|p| p[0].is_finite() && !in_frame(p)))
        .map(|l| l.level)
        .collect();
    let fit = &results.fit;
    let value = |n: &str| fit.parameters.iter().find(|p| p.name == n).map(|p| p.value);
    let centre = value(a).zip(value(b));

    // The bootstrap cloud, inside the frame.
    let names: Vec<String> = fit.parameters.iter().map(|p| p.name.clone()).collect();
    let mut cloud = Vec::new();
    let mut outside = 0usize;
    let mut total = 0usize;
    if let Some(bs) = &results.bootstrap {
        if let (Some(ja), Some(jb)) = (estimate_column(bs, &names, a), estimate_column(bs, &names, b)) {
            for row in &bs.estimates {
                let (Some(&x), Some(&y)) = (row.get(ja), row.get(jb)) else {
                    continue;
                };
                if !(x.is_finite() && y.is_finite()) {
                    continue;
                }
                total += 1;
                if x < xr.0 || x > xr.1 || y < yr.0 || y > yr.1 {
                    outside += 1;
                } else if cloud.len() < MAX_CLOUD {
                    cloud.push((x, y));
                }
            }
        }
    }
    let drawn = cloud.len();
    let level_label = |k: usize, what: &str| {
        let p = c.level_probabilities.get(k).copied();
        let lv = c
            .lines
            .get(k)
            .map(|l| l.level)
            .or(c.levels.get(k).copied())
            .unwrap_or(f64::NAN);
        match p {
            Some(p) => format!(
                "{what} {} = {} ({})",
                super::fit::delta_symbol(results),
                format::sig(lv, 3),
                format::percent(p, 3)
            ),
            None => format!(
                "{what} {} = {}",
                super::fit::delta_symbol(results),
                format::sig(lv, 3)
            ),
        }
    };
    let entries =
        usize::from(!cloud.is_empty()) + c.lines.len() + c.ellipse.len() + usize::from(centre.is_some());
    let legend_h = svg::legend_height(entries).max(svg::LEGEND_HEIGHT);
    let text = svg::render(&file, (640, 600 + legend_h), |root| {
        let (plot, side) = root.split_vertically(600);
        let title = format!("Contours of {a} and {b}");
        let mut ch = svg::chart(&plot, Some(&title), xr, yr, a, b)?;
        if !cloud.is_empty() {
            ch.points(
                &cloud,
                Mark::new(Shape::Circle, 1, palette::tint(palette::SKY_BLUE, 0.8), true),
                Some("bootstrap estimates"),
            )?;
        }
        for (k, l) in c.lines.iter().enumerate() {
            let stroke = LEVEL_STROKES[k.min(LEVEL_STROKES.len() - 1)];
            ch.lines(&polylines(l), stroke, Some(&level_label(k, "profiled")))?;
        }
        for (k, l) in c.ellipse.iter().enumerate() {
            let stroke = ELLIPSE_STROKES[k.min(ELLIPSE_STROKES.len() - 1)];
            ch.lines(&polylines(l), stroke, Some(&level_label(k, "ellipse")))?;
        }
        if let Some(ct) = centre {
            ch.points(&[ct], Mark::new(Shape::Cross, 5, grey(0), true), Some("base fit"))?;
        }
        svg::legend(&side, &ch.legend)?;
        Ok(())
    })?;
    let stat = if results.fit.likelihood == crate::fit::Likelihood::Poisson {
        "deviance"
    } else {
        "chi-squared"
    };
    let mut caption = format!(
        "Profiled {stat} contours of {a} and {b} (solid; the other parameters refitted at every grid \
         node) and the covariance ellipses at the same levels (dashed), for two parameters jointly."
    );
    if total > 0 {
        caption.push_str(&format!(
            " Light blue dots: {drawn} of {total} bootstrap estimates"
        ));
        if outside > 0 {
            caption.push_str(&format!(" ({outside} outside the frame)"));
        }
        caption.push('.');
    }
    if !clipped.is_empty() {
        let lv: Vec<String> = clipped.iter().map(|l| format::sig(*l, 3)).collect();
        caption.push_str(&format!(
            " The contour at {} = {} runs beyond the frame.",
            super::fit::delta_symbol(results),
            lv.join(" and ")
        ));
    }
    if c.failed > 0 {
        caption.push_str(&format!(" {} grid nodes failed to refit.", c.failed));
    }
    Ok(Some(Figure {
        file,
        title: format!("Contours of {a} and {b}"),
        caption,
        svg: text,
    }))
}
