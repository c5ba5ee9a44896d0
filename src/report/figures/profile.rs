//! `profile_<p>.svg`: the chi-squared profile of one parameter with the
//! covariance parabola and the threshold of the profile interval.

use super::svg::{self, Dash, Mark, Shape, Stroke};
use super::Figure;
use crate::audit::AuditResults;
use crate::diagnostics::profile::{ParameterProfile, ProfileResult};
use crate::report::{format, ReportError};

/// The profile figure of one parameter, or None with fewer than two finite points.
pub(crate) fn figure(
    _results: &AuditResults,
    profile: &ProfileResult,
    p: &ParameterProfile,
    stem: &str,
) -> Result<Option<Figure>, ReportError> {
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
    let t = profile.threshold;
    let xr = svg::extent(
        prof.iter()
            .map(|q| q.0)
            .chain(para.iter().map(|q| q.0))
            .chain([p.estimate]),
    );
    let yr = svg::extent(prof.iter().map(|q| q.1).chain([0.0, t * 1.2]));
    let (Some(xr), Some((_, ytop))) = (xr, yr) else {
        return Ok(None);
    };
    // The parabola grows fast far out; the frame follows the profile.
    let para: Vec<(f64, f64)> = para.into_iter().filter(|q| q.1 <= ytop).collect();
    let yr = (0.0 - 0.03 * ytop, ytop);
    let file = format!("profile_{stem}.svg");
    let name = p.name.as_str();
    let threshold_label = format!(
        "threshold \u{394}\u{3c7}\u{b2} = {} ({})",
        format::sig(t, 4),
        format::percent(profile.level, 4)
    );
    let text = svg::render(&file, (680 + svg::LEGEND_WIDTH, 500), |root| {
        let (plot, side) = root.split_horizontally(680);
        let title = format!("Chi-squared profile of {name}");
        let mut c = svg::chart(
            &plot,
            Some(&title),
            xr,
            yr,
            name,
            "\u{394}\u{3c7}\u{b2} (profiled minus minimum)",
        )?;
        c.lines(
            &[para.clone()],
            Stroke::new(Dash::Dashed, 2, 100),
            Some("covariance parabola"),
        )?;
        c.lines(&[prof.clone()], Stroke::new(Dash::Solid, 2, 0), Some("profile"))?;
        c.points(&prof, Mark::new(Shape::Circle, 2, 0, true), None)?;
        c.lines(
            &[vec![(xr.0, t), (xr.1, t)]],
            Stroke::new(Dash::Dotted, 2, 0),
            Some(&threshold_label),
        )?;
        let mut ends = Vec::new();
        if p.lower_found {
            ends.push((p.lower, t));
        }
        if p.upper_found {
            ends.push((p.upper, t));
        }
        c.points(
            &ends,
            Mark::new(Shape::Triangle, 5, 0, false),
            Some("profile interval ends"),
        )?;
        c.points(
            &[(p.estimate, 0.0)],
            Mark::new(Shape::Diamond, 4, 0, true),
            Some("estimate"),
        )?;
        svg::legend(&side, &c.legend)?;
        Ok(())
    })?;
    let missing: Vec<&str> = [(!p.lower_found, "lower"), (!p.upper_found, "upper")]
        .iter()
        .filter(|(m, _)| *m)
        .map(|(_, s)| *s)
        .collect();
    let note = if missing.is_empty() {
        String::new()
    } else {
        format!(
            " The profile did not reach the threshold on the {} side within the scan: that end of the \
             interval is open.",
            missing.join(" and ")
        )
    };
    Ok(Some(Figure {
        file,
        title: format!("Chi-squared profile of {name}"),
        caption: format!(
            "Minimum chi-squared with {name} held at each value and the other parameters refitted (solid), \
             against the parabola the covariance matrix predicts (dashed). The profile interval lies where \
             the profile crosses the dotted threshold ({}).{note}",
            format::percent(profile.level, 4)
        ),
        svg: text,
    }))
}
