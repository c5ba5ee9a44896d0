//! `coverage.svg`: the simulated coverage of every parameter's intervals
//! (analytic, profile, quoted) with its binomial standard error, against
//! the nominal level and the band of 3 standard errors an exact interval
//! would stay within.

use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::palette::{Series as Kind, BLACK, BLUE};
use super::svg::{self, Dash, Mark, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::diagnostics::coverage::CoverageKind;
use crate::diagnostics::verdict::CLEAR_SE;
use crate::report::{format, ReportError};

/// Points `(x, coverage, standard error)` of one interval kind.
type Series = (CoverageKind, Vec<(f64, f64, f64)>);

/// The marker of each interval kind: the palette's analytic and profile
/// styles, and blue squares for the quoted interval (a colour and shape no
/// other series of this figure uses).
fn mark(kind: CoverageKind) -> Mark {
    match kind {
        CoverageKind::Analytic => Mark::of(Kind::Analytic, 4, true),
        CoverageKind::Profile => Mark::of(Kind::Profile, 4, true),
        CoverageKind::Quote => Mark::new(Shape::Square, 4, BLUE, true),
    }
}

/// The coverage figure, when the simulation ran and some coverage is finite.
pub(crate) fn figure(results: &AuditResults) -> Result<Option<Figure>, ReportError> {
    let Some(c) = &results.coverage else {
        return Ok(None);
    };
    let level = c.level;
    // One slot per (parameter, kind): x = parameter index + offset by kind.
    let offset = |k: CoverageKind| match k {
        CoverageKind::Analytic => -0.2,
        CoverageKind::Profile => 0.0,
        CoverageKind::Quote => 0.2,
    };
    let mut series: Vec<Series> = Vec::new();
    let mut band = Vec::new();
    for kind in [CoverageKind::Analytic, CoverageKind::Profile, CoverageKind::Quote] {
        let pts: Vec<(f64, f64, f64)> = c
            .parameters
            .iter()
            .enumerate()
            .filter_map(|(j, p)| {
                let ic = p.kind(kind)?;
                (ic.counted > 0 && ic.coverage.is_finite()).then_some((
                    j as f64 + offset(kind),
                    ic.coverage,
                    ic.std_error,
                ))
            })
            .collect();
        for (j, p) in c.parameters.iter().enumerate() {
            if let Some(ic) = p.kind(kind).filter(|ic| ic.counted > 0) {
                band.push((j as f64 + offset(kind), ic.null_std_error));
            }
        }
        series.push((kind, pts));
    }
    let all: Vec<f64> = series
        .iter()
        .flat_map(|(_, s)| s.iter().flat_map(|&(_, y, e)| [y - e, y + e]))
        .collect();
    if all.is_empty() {
        return Ok(None);
    }
    let wide = band.iter().map(|b| b.1).fold(0.0, f64::max) * CLEAR_SE;
    let Some(yr) = svg::extent(all.iter().copied().chain([level - wide, level + wide])) else {
        return Ok(None);
    };
    let yr = (yr.0.max(0.0), yr.1.min(1.0));
    let m = c.parameters.len() as f64;
    let xr = (-0.6, m - 0.4);
    let file = "coverage.svg".to_string();
    let nominal = format!("nominal level {}", format::percent(level, 4));
    let band_label = format!(
        "\u{b1} {} standard errors of an exact interval",
        format::sig(CLEAR_SE, 2)
    );
    let width = (360 + 120 * c.parameters.len() as u32).min(900);
    let legend_h = svg::legend_height(5).max(svg::LEGEND_HEIGHT);
    let text = svg::render(&file, (width, 460 + legend_h), |root| {
        let (plot, side) = root.split_vertically(460);
        let title = format!("Simulated coverage ({} data sets)", c.run - c.failed);
        let mut ch = svg::chart(&plot, Some(&title), xr, yr, "parameter", "coverage")?;
        ch.lines(
            &[vec![(xr.0, level), (xr.1, level)]],
            Stroke::new(Dash::Dashed, 2, BLACK),
            Some(&nominal),
        )?;
        // The 3-SE band of each slot, as short dotted bars above and below.
        let dotted = Stroke::of(Kind::Threshold, 1);
        let mut lines = Vec::new();
        for &(x, se) in &band {
            for sign in [-1.0, 1.0] {
                let y = level + sign * CLEAR_SE * se;
                lines.push(vec![(x - 0.08, y), (x + 0.08, y)]);
            }
        }
        ch.lines(&lines, dotted, Some(&band_label))?;
        for (kind, pts) in &series {
            ch.error_bars(pts, mark(*kind).ink)?;
            let xy: Vec<(f64, f64)> = pts.iter().map(|&(x, y, _)| (x, y)).collect();
            let label = match kind {
                CoverageKind::Analytic => "value \u{b1} k u (bar: \u{b1} 1 SE)",
                CoverageKind::Profile => "profile interval",
                CoverageKind::Quote => "quoted interval",
            };
            ch.points(&xy, mark(*kind), Some(label))?;
        }
        let ylab = yr.0 + 0.02 * (yr.1 - yr.0);
        for (j, p) in c.parameters.iter().enumerate() {
            ch.text(
                &p.name,
                (j as f64, ylab),
                12,
                Pos::new(HPos::Center, VPos::Bottom),
            )?;
        }
        svg::legend(&side, &ch.legend)?;
        Ok(())
    })?;
    Ok(Some(Figure {
        file,
        title: "Simulated coverage of the intervals".to_string(),
        caption: format!(
            "For each parameter, the share of data sets simulated at the fit whose interval contains \
             the fitted value: value \u{b1} k u (diamonds), the profile interval (triangles) and the \
             quoted interval (squares), each with its binomial standard error, against the nominal \
             level (dashed); an exact interval stays within the dotted marks ({} standard errors) but \
             about 3 times in 1000.",
            format::sig(CLEAR_SE, 2)
        ),
        svg: text,
    }))
}
