//! `multistart.svg`: where the starts ended, in the plane of the two
//! parameters whose end points spread most, one marker per minimum; and the
//! chi-squared of every minimum against the share of starts it attracted.

use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::palette::{self, grey};
use super::svg::{self, Dash, Mark, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::diagnostics::multistart::MultistartResult;
use crate::fit::FitResult;
use crate::report::{format, ReportError};

/// Markers of the minima, best first; the last one also marks every further minimum.
pub(crate) const MINIMUM_MARKS: [Mark; 6] = [
    Mark::new(Shape::Circle, 4, palette::BLUE, true),
    Mark::new(Shape::Triangle, 4, palette::VERMILLION, false),
    Mark::new(Shape::Square, 3, palette::BLUISH_GREEN, true),
    Mark::new(Shape::Diamond, 4, palette::REDDISH_PURPLE, false),
    Mark::new(Shape::Cross, 4, palette::ORANGE, true),
    Mark::new(Shape::Circle, 3, palette::SKY_BLUE, false),
];

fn mark_of(k: usize) -> Mark {
    MINIMUM_MARKS[k.min(MINIMUM_MARKS.len() - 1)]
}

/// The free parameters ordered by the relative spread of the converged end
/// points, largest first: (max - min) / max(|median|, |base value|). Fixed
/// parameters and those that did not move are left out.
pub fn spread_order(ms: &MultistartResult, fit: &FitResult) -> Vec<usize> {
    let m = fit.parameters.len();
    let mut scored = Vec::new();
    for j in 0..m {
        if fit.parameters[j].fixed {
            continue;
        }
        let mut v: Vec<f64> = ms
            .runs
            .iter()
            .filter(|r| r.minimum.is_some())
            .filter_map(|r| r.end.get(j).copied())
            .filter(|x| x.is_finite())
            .collect();
        if v.len() < 2 {
            continue;
        }
        v.sort_by(f64::total_cmp);
        let range = v[v.len() - 1] - v[0];
        let median = v[v.len() / 2];
        let scale = median
            .abs()
            .max(fit.parameters[j].value.abs())
            .max(f64::MIN_POSITIVE);
        let s = range / scale;
        if s > 0.0 && s.is_finite() {
            scored.push((j, s));
        }
    }
    scored.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    scored.into_iter().map(|(j, _)| j).collect()
}

/// The multi-start figure, or None when the search did not run.
pub(crate) fn figure(results: &AuditResults) -> Result<Option<Figure>, ReportError> {
    let Some(ms) = &results.multistart else {
        return Ok(None);
    };
    // The search ran from the study's start: mark that fit.
    let fit = results.start_fit.as_ref().unwrap_or(&results.fit);
    let order = spread_order(ms, fit);
    let plane = match (order.first(), order.get(1)) {
        (Some(&a), Some(&b)) => Some((a, Some(b))),
        (Some(&a), None) => Some((a, None)),
        _ => None,
    };
    let Some((ja, jb)) = plane else {
        return Ok(None);
    };
    let name_a = fit.parameters[ja].name.clone();
    let y_of = |r: &crate::diagnostics::multistart::StartRun| match jb {
        Some(jb) => r.end.get(jb).copied().unwrap_or(f64::NAN),
        None => r.chi2,
    };
    let name_b = match jb {
        Some(jb) => fit.parameters[jb].name.clone(),
        None => format!("{} at the end point", super::fit::stat_symbol(results)),
    };
    let ends: Vec<(f64, f64, Option<usize>)> = ms
        .runs
        .iter()
        .map(|r| (r.end.get(ja).copied().unwrap_or(f64::NAN), y_of(r), r.minimum))
        .collect();
    let base = (
        fit.parameters[ja].value,
        match jb {
            Some(jb) => fit.parameters[jb].value,
            None => ms.base_chi2,
        },
    );
    let xr = svg::extent(ends.iter().map(|e| e.0).chain([base.0]));
    let yr = svg::extent(ends.iter().map(|e| e.1).chain([base.1]));
    let (Some(xr), Some(yr)) = (xr, yr) else {
        return Ok(None);
    };
    let kmax = MINIMUM_MARKS.len() - 1;
    let dots: Vec<(f64, f64)> = ms.minima.iter().map(|m| (m.chi2, m.fraction)).collect();
    let cr = svg::extent(dots.iter().map(|d| d.0).chain([ms.base_chi2])).unwrap_or((0.0, 1.0));
    let text = svg::render("multistart.svg", (860, 500 + svg::LEGEND_HEIGHT), |root| {
        let (plots, side) = root.split_vertically(500);
        let (left, right) = plots.split_horizontally(500);
        let mut c = svg::chart(&left, Some("Where the starts ended"), xr, yr, &name_a, &name_b)?;
        let failed: Vec<(f64, f64)> = ends
            .iter()
            .filter(|e| e.2.is_none())
            .map(|e| (e.0, e.1))
            .collect();
        c.points(
            &failed,
            Mark::new(Shape::Cross, 3, grey(170), false),
            Some("degenerate end (no minimum)"),
        )?;
        let first = c.legend.len();
        for k in (0..ms.minima.len().min(kmax + 1)).rev() {
            let pts: Vec<(f64, f64)> = ends
                .iter()
                .filter(|e| match e.2 {
                    Some(i) if k < kmax => i == k,
                    Some(i) => i >= kmax,
                    None => false,
                })
                .map(|e| (e.0, e.1))
                .collect();
            let label = if k < kmax || ms.minima.len() == kmax + 1 {
                let m = &ms.minima[k];
                format!(
                    "minimum {}: {} = {}, {}",
                    k + 1,
                    super::fit::stat_symbol(results),
                    format::chi2(m.chi2),
                    format::percent(m.fraction, 2)
                )
            } else {
                format!("minima {} to {}", kmax + 1, ms.minima.len())
            };
            c.points(&pts, mark_of(k), Some(&label))?;
        }
        // Drawn worst first so the best stays on top; listed best first.
        c.legend[first..].reverse();
        c.points(
            &[base],
            Mark::new(Shape::Diamond, 7, grey(0), false),
            Some("fit from the study's start"),
        )?;
        svg::legend(&side, &c.legend)?;

        let mut d = svg::chart(
            &right,
            Some(&format!(
                "Minima: {} and basin share",
                super::fit::stat_words(results)
            )),
            cr,
            (0.0, 1.05),
            &format!("{} of the minimum", super::fit::stat_symbol(results)),
            "share of starts ending at a minimum",
        )?;
        d.lines(
            &[vec![(ms.base_chi2, 0.0), (ms.base_chi2, 1.0)]],
            Stroke::new(Dash::Dotted, 1, grey(0)),
            None,
        )?;
        d.text(
            "study's start",
            (ms.base_chi2, 1.025),
            11,
            Pos::new(HPos::Center, VPos::Center),
        )?;
        for (k, dot) in dots.iter().enumerate() {
            d.lines(
                &[vec![(dot.0, 0.0), *dot]],
                Stroke::new(Dash::Solid, 1, grey(150)),
                None,
            )?;
            d.points(&[*dot], mark_of(k), None)?;
        }
        Ok(())
    })?;
    let plane = match jb {
        Some(jb) => format!("{name_a} and {}", fit.parameters[jb].name),
        None => format!(
            "{name_a} and the {} at the end point",
            super::fit::stat_words(results)
        ),
    };
    let notice = if ms.base_is_best {
        String::new()
    } else if results.rebased {
        " The study's start reaches a local minimum; the audit is re-based at the best minimum found."
            .to_string()
    } else {
        " The base fit is not the best minimum found.".to_string()
    };
    Ok(Some(Figure {
        file: "multistart.svg".into(),
        title: "Multi-start search".into(),
        caption: format!(
            "Left: end points of {} starts in the plane of {plane} (the parameters whose end points spread \
             most relative to their size), one marker per minimum, best first; crosses are degenerate ends \
             ({} of them: not converged, runaway, vanished Jacobian column or rank drop), which are no \
             minima. Right: chi-squared of each of the {} distinct minima against the share of the starts \
             ending at a minimum that ended there.{notice}",
            ms.starts,
            ms.failed,
            ms.minima.len()
        ),
        svg: text,
    }))
}
