//! `correlation.svg`: the correlation matrix of the base fit as a grey heat
//! map, darker for larger |r|, with every value written in its cell (white
//! on dark cells, black on light ones).

use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use super::palette;
use super::svg::{self, FONT};
use super::Figure;
use crate::audit::AuditResults;
use crate::report::ReportError;

/// Grey level of a cell: 255 (white) at r = 0 down to 55 at |r| = 1.
pub fn cell_grey(r: f64) -> u8 {
    if !r.is_finite() {
        return 255;
    }
    (255.0 - 200.0 * r.abs().min(1.0)).round() as u8
}

/// Whether the number in a cell of that grey is written in white.
pub fn white_text(grey: u8) -> bool {
    grey < 128
}

/// `name` cut to `max` characters with an ellipsis.
fn shorten(name: &str, max: usize) -> String {
    if name.chars().count() <= max {
        name.to_string()
    } else {
        let mut s: String = name.chars().take(max.saturating_sub(1)).collect();
        s.push('\u{2026}');
        s
    }
}

/// The heat map, or None with fewer than two parameters.
pub(crate) fn figure(results: &AuditResults) -> Result<Option<Figure>, ReportError> {
    let full = &results.fit.correlation;
    let all = results.fit.parameters.len();
    if full.len() != all || full.iter().any(|row| row.len() != all) {
        return Ok(None);
    }
    // Only the estimated parameters: fixed, at-bound and undetermined ones
    // have rows of zeros.
    let keep: Vec<usize> = (0..all)
        .filter(|&j| results.fit.parameters[j].std_error.is_some())
        .collect();
    let names: Vec<&str> = keep
        .iter()
        .map(|&j| results.fit.parameters[j].name.as_str())
        .collect();
    let r: Vec<Vec<f64>> = keep
        .iter()
        .map(|&i| keep.iter().map(|&j| full[i][j]).collect())
        .collect();
    let m = names.len();
    if m < 2 {
        return Ok(None);
    }
    let cell = (480 / m as i32).clamp(34, 90);
    let (left, top) = (150, 70);
    let w = (left + cell * m as i32 + 30) as u32;
    let h = (top + cell * m as i32 + 30) as u32;
    let text = svg::render("correlation.svg", (w, h), |root| {
        let title = TextStyle::from((FONT, 16).into_font())
            .color(&BLACK)
            .pos(Pos::new(HPos::Center, VPos::Top));
        root.draw(&Text::new(
            "Correlation matrix of the base fit",
            (w as i32 / 2, 10),
            title,
        ))?;
        let label = |pos| TextStyle::from((FONT, 12).into_font()).color(&BLACK).pos(pos);
        let col_chars = (cell / 7).max(3) as usize;
        for (j, n) in names.iter().enumerate() {
            let cx = left + cell * j as i32 + cell / 2;
            root.draw(&Text::new(
                shorten(n, col_chars),
                (cx, top - 8),
                label(Pos::new(HPos::Center, VPos::Bottom)),
            ))?;
            let cy = top + cell * j as i32 + cell / 2;
            root.draw(&Text::new(
                shorten(n, 20),
                (left - 8, cy),
                label(Pos::new(HPos::Right, VPos::Center)),
            ))?;
        }
        let digits = if cell >= 44 { 2 } else { 1 };
        for (i, row) in r.iter().enumerate() {
            for (j, &v) in row.iter().enumerate() {
                let x0 = left + cell * j as i32;
                let y0 = top + cell * i as i32;
                let g = cell_grey(v);
                root.draw(&Rectangle::new(
                    [(x0, y0), (x0 + cell, y0 + cell)],
                    palette::grey(g).rgb().filled(),
                ))?;
                root.draw(&Rectangle::new(
                    [(x0, y0), (x0 + cell, y0 + cell)],
                    palette::grey(90).rgb().stroke_width(1),
                ))?;
                let s = if v.is_finite() {
                    format!("{v:.digits$}")
                } else {
                    "n/a".to_string()
                };
                let colour = if white_text(g) { WHITE } else { BLACK };
                let style = TextStyle::from((FONT, 13).into_font())
                    .color(&colour)
                    .pos(Pos::new(HPos::Center, VPos::Center));
                root.draw(&Text::new(s, (x0 + cell / 2, y0 + cell / 2), style))?;
            }
        }
        Ok(())
    })?;
    Ok(Some(Figure {
        file: "correlation.svg".into(),
        title: "Correlation matrix".into(),
        caption: format!(
            "Correlation coefficients of the {m} parameters from the covariance matrix of the base fit; the \
             darker the cell, the larger |r|. Values near \u{b1}1 mean the data hardly separate the two \
             parameters.{}",
            if m < all {
                " Parameters without a standard error (fixed, at a bound or undetermined) are left out."
            } else {
                ""
            }
        ),
        svg: text,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grey_scale_and_text_contrast() {
        assert_eq!(cell_grey(0.0), 255);
        assert_eq!(cell_grey(-1.0), 55);
        assert_eq!(cell_grey(0.5), 155);
        assert_eq!(cell_grey(f64::NAN), 255);
        // |r| = 0.9: grey 75, white text; |r| = 0.3: grey 195, black text.
        assert!(white_text(cell_grey(0.9)));
        assert!(!white_text(cell_grey(-0.3)));
        assert_eq!(shorten("abcdef", 4), "abc\u{2026}");
    }
}
