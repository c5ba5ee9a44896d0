//! `profile_<p>.svg`: the chi-squared profile of one parameter with the
//! covariance parabola and the threshold of the profile interval.

use super::palette::{self, grey, Series};
use super::svg::{self, Dash, Mark, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::diagnostics::profile::{ParameterProfile, ProfileResult};
use crate::report::{format, tables, ReportError};

/// The profile figure of one parameter, or None with fewer than two finite points.
pub(crate) fn figure(
    results: &AuditResults,
    profile: &ProfileResult,
    p: &ParameterProfile,
    stem: &str,
) -> Result<Option<Figure>, ReportError> {
    let poisson = results.fit.likelihood == crate::fit::Likelihood::Poisson;
    let (stat, upper) = if poisson {
        ("deviance", "Deviance")
    } else {
        ("chi-squared", "Chi-squared")
    };
    let base = profile.chi2_min;
    let shift = |pts: &[[f64; 2]]| -> Vec<(f64, f64)> { pts.iter().map(|q| (q[0], q[1] - base)).collect() };
    let prof = shift(&p.points);
    let para = shift(&p.parabola);
    let finite = prof
        .iter()
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .count();
    if finite < 2 || !base.is_finite() {
        return Ok(None);
    }
    // The crossings lie at chi2_min + threshold * chi2_scale (the scale is
    // chi2/dof when the covariance is scaled).
    let scale = if profile.chi2_scale.is_finite() && profile.chi2_scale > 0.0 {
        profile.chi2_scale
    } else {
        1.0
    };
    let t = profile.threshold * scale;
    let below = p.below_minimum.as_ref().map(|b| (b.value, b.chi2 - base));
    let below_y = below.map(|b| b.1).filter(|y| y.is_finite()).unwrap_or(0.0);
    let xr = svg::extent(
        prof.iter()
            .map(|q| q.0)
            .chain(para.iter().map(|q| q.0))
            .chain([p.estimate])
            .chain(below.map(|b| b.0)),
    );
    let yr = svg::extent(prof.iter().map(|q| q.1).chain([0.0, t * 1.2, below_y]));
    let (Some(xr), Some((_, ytop))) = (xr, yr) else {
        return Ok(None);
    };
    // The parabola grows fast far out; the frame follows the profile.
    let para: Vec<(f64, f64)> = para.into_iter().filter(|q| q.1 <= ytop).collect();
    let ybot = below_y.min(0.0);
    let yr = (ybot - 0.03 * (ytop - ybot), ytop);
    let file = format!("profile_{stem}.svg");
    let name = p.name.as_str();
    let threshold_label = if scale == 1.0 {
        format!(
            "threshold {} = {} ({})",
            super::fit::delta_symbol(results),
            format::sig(t, 4),
            format::percent(profile.level, 4)
        )
    } else {
        format!(
            "threshold {} = {} \u{d7} {} ({})",
            super::fit::delta_symbol(results),
            format::sig(profile.threshold, 4),
            format::sig(scale, 4),
            format::percent(profile.level, 4)
        )
    };
    let text = svg::render(&file, (680, 500 + svg::LEGEND_HEIGHT), |root| {
        let (plot, side) = root.split_vertically(500);
        let title = format!("{upper} profile of {name}");
        let y_desc = format!("{} (profiled minus minimum)", super::fit::delta_symbol(results));
        let mut c = svg::chart(&plot, Some(&title), xr, yr, name, &y_desc)?;
        let parabola = Stroke::of(Series::Analytic, 2);
        c.lines(std::slice::from_ref(&para), parabola, Some("covariance parabola"))?;
        c.lines(
            std::slice::from_ref(&prof),
            Stroke::of(Series::Curve, 2),
            Some("profile"),
        )?;
        c.points(&prof, Mark::of(Series::Curve, 2, true), None)?;
        let threshold = Stroke::new(Dash::Dotted, 2, grey(0));
        c.lines(&[vec![(xr.0, t), (xr.1, t)]], threshold, Some(&threshold_label))?;
        let mut ends = Vec::new();
        if p.lower_found {
            ends.push((p.lower, t));
        }
        if p.upper_found {
            ends.push((p.upper, t));
        }
        let end_mark = Mark::new(Shape::Triangle, 5, palette::REDDISH_PURPLE, true);
        c.points(&ends, end_mark, Some("profile interval ends"))?;
        let estimate = Mark::new(Shape::Diamond, 4, grey(0), true);
        c.points(&[(p.estimate, 0.0)], estimate, Some("estimate"))?;
        if let Some(b) = below {
            let mark = Mark::new(Shape::Square, 4, grey(0), false);
            c.points(&[b], mark, Some("point below the base fit"))?;
        }
        svg::legend(&side, &c.legend)?;
        Ok(())
    })?;
    let mut note = String::new();
    for (found, status, side) in [
        (p.lower_found, p.lower_status, "lower"),
        (p.upper_found, p.upper_status, "upper"),
    ] {
        if !found {
            note.push_str(&format!(
                " The profile did not reach the threshold on the {side} side ({}): that end of the \
                 interval is open.",
                tables::end_status_words(status)
            ));
        }
    }
    if p.non_identifiable {
        note.push_str(&format!(
            " {name} is practically non-identifiable from these data."
        ));
    }
    if let Some(b) = &p.below_minimum {
        note.push_str(&format!(
            " At {name} = {} the profile lies {} below the base fit: the base fit is not the minimum.",
            format::sig(b.value, 6),
            format::sig(b.below_by, 3)
        ));
    }
    Ok(Some(Figure {
        file,
        title: format!("{upper} profile of {name}"),
        caption: format!(
            "Minimum {stat} with {name} held at each value and the other parameters refitted (solid), \
             against the parabola the covariance matrix predicts (dashed). The profile interval lies where \
             the profile crosses the dotted threshold ({}).{note}",
            format::percent(profile.level, 4)
        ),
        svg: text,
    }))
}
