//! Drawing helpers on top of plotters' SVG backend: line styles (solid,
//! dashed, dotted, long dash) and marker shapes in the colours of
//! [`super::palette`], axis set-up and the
//! conversion of a finished drawing into a self-contained SVG string.
//!
//! Text is written as SVG `<text>` elements in the generic `sans-serif`
//! family: no font file is read or embedded, and plotters escapes the text.

use std::panic::{catch_unwind, AssertUnwindSafe};

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::element::{DashedPathElement, Drawable, PointCollection};
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use plotters_backend::{BackendCoord, DrawingErrorKind};

use super::palette::{self, Ink, Series};
use crate::report::format;
use crate::report::ReportError;

/// Result of a drawing step; plotters' errors are boxed and reported as
/// [`ReportError::Figure`].
pub(crate) type DrawResult = Result<(), Box<dyn std::error::Error>>;

/// A Cartesian chart with floating-point axes on the SVG backend.
pub(crate) type Chart<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// The drawing area handed to a figure.
pub(crate) type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;

/// Font family of every label: a generic family, so no font is needed.
pub(crate) const FONT: &str = "sans-serif";

/// A grey level (0 black, 255 white).
pub(crate) fn grey(level: u8) -> RGBColor {
    RGBColor(level, level, level)
}

/// Dash pattern of a line.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Dash {
    /// Continuous.
    Solid,
    /// 7 px dashes, 4 px gaps.
    Dashed,
    /// 2 px dashes, 3 px gaps.
    Dotted,
    /// 14 px dashes, 5 px gaps.
    Long,
}

impl Dash {
    /// (dash, gap) in pixels; a solid line is one dash longer than any path.
    fn pattern(self) -> (i32, i32) {
        match self {
            Dash::Solid => (1 << 28, 1),
            Dash::Dashed => (7, 4),
            Dash::Dotted => (2, 3),
            Dash::Long => (14, 5),
        }
    }
}

/// How a line is drawn: dash pattern, width in pixels, colour.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Stroke {
    /// Dash pattern.
    pub dash: Dash,
    /// Width in pixels.
    pub width: u32,
    /// Colour.
    pub ink: Ink,
}

impl Stroke {
    /// A stroke.
    pub const fn new(dash: Dash, width: u32, ink: Ink) -> Stroke {
        Stroke { dash, width, ink }
    }

    /// The line style of a palette series at `width` pixels.
    pub const fn of(series: Series, width: u32) -> Stroke {
        let s = palette::series(series);
        Stroke::new(s.dash, width, s.ink)
    }

    fn style(self) -> ShapeStyle {
        self.ink.rgb().stroke_width(self.width)
    }

    fn element<C: Clone>(self, points: Vec<C>) -> DashedPathElement<std::vec::IntoIter<C>, i32> {
        let (on, off) = self.dash.pattern();
        DashedPathElement::new(points, on, off, self.style())
    }
}

/// Marker shape.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shape {
    /// Circle.
    Circle,
    /// Square.
    Square,
    /// Triangle, apex up.
    Triangle,
    /// Diagonal cross.
    Cross,
    /// Diamond.
    Diamond,
}

/// A marker: shape, radius in pixels, colour, filled or hollow.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Mark {
    /// Shape.
    pub shape: Shape,
    /// Radius in pixels.
    pub size: i32,
    /// Colour.
    pub ink: Ink,
    /// Filled (true) or outlined.
    pub filled: bool,
}

impl Mark {
    /// A marker.
    pub const fn new(shape: Shape, size: i32, ink: Ink, filled: bool) -> Mark {
        Mark {
            shape,
            size,
            ink,
            filled,
        }
    }

    /// The marker of a palette series.
    pub const fn of(series: Series, size: i32, filled: bool) -> Mark {
        let s = palette::series(series);
        Mark::new(s.shape, size, s.ink, filled)
    }

    /// The marker as an element at `c` (data or pixel coordinates).
    pub fn at<C>(self, c: C) -> MarkerElement<C> {
        MarkerElement { at: c, mark: self }
    }
}

/// A marker drawn at one point; one element type for every shape.
pub(crate) struct MarkerElement<C> {
    at: C,
    mark: Mark,
}

impl<'a, C: 'a> PointCollection<'a, C> for &'a MarkerElement<C> {
    type Point = &'a C;
    type IntoIter = std::iter::Once<&'a C>;
    fn point_iter(self) -> Self::IntoIter {
        std::iter::once(&self.at)
    }
}

impl<C, DB: DrawingBackend> Drawable<DB> for MarkerElement<C> {
    fn draw<I: Iterator<Item = BackendCoord>>(
        &self,
        mut pos: I,
        backend: &mut DB,
        _parent: (u32, u32),
    ) -> Result<(), DrawingErrorKind<DB::ErrorType>> {
        let Some((x, y)) = pos.next() else {
            return Ok(());
        };
        let m = self.mark;
        let s = m.size.max(1);
        let colour = m.ink.rgb();
        let style = if m.filled {
            colour.filled()
        } else {
            colour.stroke_width(1)
        };
        let outline = |backend: &mut DB, pts: Vec<BackendCoord>| {
            if m.filled {
                backend.fill_polygon(pts, &style)
            } else {
                let mut closed = pts.clone();
                closed.push(pts[0]);
                backend.draw_path(closed, &style)
            }
        };
        match m.shape {
            Shape::Circle => backend.draw_circle((x, y), s as u32, &style, m.filled),
            Shape::Square => backend.draw_rect((x - s, y - s), (x + s, y + s), &style, m.filled),
            Shape::Triangle => {
                let t = s + 1;
                outline(
                    backend,
                    vec![(x, y - t), (x + t, y + t * 3 / 4), (x - t, y + t * 3 / 4)],
                )
            }
            Shape::Diamond => {
                let t = s + 1;
                outline(backend, vec![(x, y - t), (x + t, y), (x, y + t), (x - t, y)])
            }
            Shape::Cross => {
                let line = colour.stroke_width(if m.filled { 2 } else { 1 });
                backend.draw_line((x - s, y - s), (x + s, y + s), &line)?;
                backend.draw_line((x - s, y + s), (x + s, y - s), &line)
            }
        }
    }
}

/// Whether a finite point lies in the frame.
pub(crate) fn inside(p: (f64, f64), frame: ((f64, f64), (f64, f64))) -> bool {
    let ((x0, x1), (y0, y1)) = frame;
    p.0.is_finite() && p.1.is_finite() && p.0 >= x0 && p.0 <= x1 && p.1 >= y0 && p.1 <= y1
}

/// The part of segment `a`-`b` inside the rectangle, as parameters
/// `(t0, t1)` along it (Liang-Barsky), or None when it misses.
fn clip_segment(a: (f64, f64), b: (f64, f64), x: (f64, f64), y: (f64, f64)) -> Option<(f64, f64)> {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for (p, q) in [
        (-dx, a.0 - x.0),
        (dx, x.1 - a.0),
        (-dy, a.1 - y.0),
        (dy, y.1 - a.1),
    ] {
        if p == 0.0 {
            if q < 0.0 {
                return None;
            }
        } else {
            let r = q / p;
            if p < 0.0 {
                t0 = t0.max(r);
            } else {
                t1 = t1.min(r);
            }
        }
    }
    (t0 <= t1).then_some((t0, t1))
}

/// A polyline clipped to the rectangle: the pieces inside it.
pub(crate) fn clip(points: &[(f64, f64)], x: (f64, f64), y: (f64, f64)) -> Vec<Vec<(f64, f64)>> {
    let at = |a: (f64, f64), b: (f64, f64), t: f64| (a.0 + t * (b.0 - a.0), a.1 + t * (b.1 - a.1));
    let mut out = Vec::new();
    let mut cur: Vec<(f64, f64)> = Vec::new();
    for w in points.windows(2) {
        let (a, b) = (w[0], w[1]);
        match clip_segment(a, b, x, y) {
            None => {
                if cur.len() >= 2 {
                    out.push(std::mem::take(&mut cur));
                }
                cur.clear();
            }
            Some((t0, t1)) => {
                if cur.is_empty() || t0 > 0.0 {
                    if cur.len() >= 2 {
                        out.push(std::mem::take(&mut cur));
                    }
                    cur = vec![at(a, b, t0)];
                }
                cur.push(at(a, b, t1));
                if t1 < 1.0 {
                    out.push(std::mem::take(&mut cur));
                }
            }
        }
    }
    if cur.len() >= 2 {
        out.push(cur);
    }
    out
}

/// The maximal runs of finite points of a polyline.
pub(crate) fn finite_runs(points: &[(f64, f64)]) -> Vec<Vec<(f64, f64)>> {
    let mut out = Vec::new();
    let mut cur = Vec::new();
    for &(x, y) in points {
        if x.is_finite() && y.is_finite() {
            cur.push((x, y));
        } else if !cur.is_empty() {
            out.push(std::mem::take(&mut cur));
        }
    }
    if !cur.is_empty() {
        out.push(cur);
    }
    out
}

/// What a legend entry shows beside its label.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Key {
    /// A line sample.
    Line(Stroke),
    /// A marker.
    Mark(Mark),
    /// A filled box of this colour.
    Fill(Ink),
}

/// Scale of a chart axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scale {
    /// Linear.
    Linear,
    /// Base-10 logarithmic: the chart's coordinate is `log10(v)`.
    Log,
}

impl Scale {
    /// The chart coordinate of a data value: itself, or its base-10
    /// logarithm (NaN, so not drawn, at or below zero).
    pub fn to_axis(self, v: f64) -> f64 {
        match self {
            Scale::Linear => v,
            Scale::Log if v > 0.0 => v.log10(),
            Scale::Log => f64::NAN,
        }
    }

    /// The scale a `[report]` setting asks for on these values: `auto`
    /// chooses logarithmic when every finite value is positive, the
    /// largest exceeds the smallest by more than [`AUTO_LOG_RATIO`], and a
    /// linear axis would crowd them: more than half of them lie in the
    /// lowest tenth of their range (a dilution series, a decay over many
    /// lifetimes). Evenly spaced values over decades (times from 0.01 s to
    /// 10 s in equal steps) stay linear.
    pub fn choose(setting: crate::study::AxisScale, values: impl IntoIterator<Item = f64>) -> Scale {
        use crate::study::AxisScale;
        match setting {
            AxisScale::Linear => Scale::Linear,
            AxisScale::Log => Scale::Log,
            AxisScale::Auto => {
                let mut finite = Vec::new();
                for v in values.into_iter().filter(|v| v.is_finite()) {
                    if v <= 0.0 {
                        return Scale::Linear;
                    }
                    finite.push(v);
                }
                let lo = finite.iter().copied().fold(f64::INFINITY, f64::min);
                let hi = finite.iter().copied().fold(0.0, f64::max);
                let low_tenth = lo + 0.1 * (hi - lo);
                let crowded = finite.iter().filter(|v| **v < low_tenth).count();
                if finite.len() >= 2 && hi / lo > AUTO_LOG_RATIO && 2 * crowded > finite.len() {
                    Scale::Log
                } else {
                    Scale::Linear
                }
            }
        }
    }

    /// The axis extent of the values on this scale (chart coordinates),
    /// widened by 5 % on each side.
    pub fn extent(self, values: impl IntoIterator<Item = f64>) -> Option<(f64, f64)> {
        extent(values.into_iter().map(|v| self.to_axis(v)))
    }

    /// Words for a caption: empty for linear, " (logarithmic x axis)".
    pub fn words(self, axis: &str) -> String {
        match self {
            Scale::Linear => String::new(),
            Scale::Log => format!(" (logarithmic {axis} axis)"),
        }
    }
}

/// Ratio of the largest to the smallest positive value above which an
/// `auto` axis is drawn logarithmic: more than two decades.
pub const AUTO_LOG_RATIO: f64 = 100.0;

/// A chart together with the legend entries of what was drawn on it.
pub(crate) struct Plot<'a, 'b> {
    /// The plotters chart.
    pub chart: Chart<'a, 'b>,
    /// Legend entries in drawing order.
    pub legend: Vec<(String, Key)>,
    /// The frame `(x range, y range)`: lines are clipped to it, markers
    /// outside it are not drawn. In chart coordinates (logarithms on a
    /// log axis).
    pub frame: ((f64, f64), (f64, f64)),
    /// Scales of the x and y axes; data coordinates given to the drawing
    /// methods are mapped through them.
    pub scales: (Scale, Scale),
}

impl<'a, 'b: 'a> Plot<'a, 'b> {
    /// A data point in chart coordinates.
    pub fn map(&self, p: (f64, f64)) -> (f64, f64) {
        (self.scales.0.to_axis(p.0), self.scales.1.to_axis(p.1))
    }

    /// Draws polylines (non-finite points break them) with one legend entry.
    pub fn lines(
        &mut self,
        polylines: &[Vec<(f64, f64)>],
        stroke: Stroke,
        label: Option<&str>,
    ) -> DrawResult {
        let (fx, fy) = self.frame;
        let segs: Vec<Vec<(f64, f64)>> = polylines
            .iter()
            .map(|l| l.iter().map(|&p| self.map(p)).collect::<Vec<_>>())
            .flat_map(|l| finite_runs(&l))
            .flat_map(|l| clip(&l, fx, fy))
            .filter(|s| s.len() >= 2)
            .collect();
        if segs.is_empty() {
            return Ok(());
        }
        self.chart
            .draw_series(segs.into_iter().map(|s| stroke.element(s)))?;
        if let Some(l) = label {
            self.legend.push((l.to_string(), Key::Line(stroke)));
        }
        Ok(())
    }

    /// Draws markers at the finite points, with one legend entry.
    pub fn points(&mut self, pts: &[(f64, f64)], mark: Mark, label: Option<&str>) -> DrawResult {
        let pts: Vec<(f64, f64)> = pts
            .iter()
            .map(|&p| self.map(p))
            .filter(|&p| inside(p, self.frame))
            .collect();
        if pts.is_empty() {
            return Ok(());
        }
        self.chart.draw_series(pts.into_iter().map(|p| mark.at(p)))?;
        if let Some(l) = label {
            self.legend.push((l.to_string(), Key::Mark(mark)));
        }
        Ok(())
    }

    /// Vertical error bars from `y - e` to `y + e` with 3 px caps.
    pub fn error_bars(&mut self, bars: &[(f64, f64, f64)], ink: Ink) -> DrawResult {
        let style = ink.rgb().stroke_width(1);
        let ok = |v: &&(f64, f64, f64)| v.0.is_finite() && v.1.is_finite() && v.2.is_finite() && v.2 > 0.0;
        let bottom = self.frame.1 .0;
        // (x, lower end, upper end) in chart coordinates; a lower end at or
        // below zero on a log axis runs to the frame's bottom, uncapped.
        let ends: Vec<(f64, f64, f64, bool)> = bars
            .iter()
            .filter(ok)
            .map(|&(x, y, e)| {
                let (cx, lo) = self.map((x, y - e));
                let (_, hi) = self.map((x, y + e));
                (cx, if lo.is_finite() { lo } else { bottom }, hi, lo.is_finite())
            })
            .filter(|v| v.0.is_finite() && v.2.is_finite())
            .collect();
        self.chart.draw_series(
            ends.iter()
                .map(|&(x, lo, hi, _)| PathElement::new(vec![(x, lo), (x, hi)], style)),
        )?;
        self.chart
            .draw_series(ends.iter().flat_map(|&(x, lo, hi, capped)| {
                let mut caps =
                    vec![EmptyElement::at((x, hi)) + PathElement::new(vec![(-3, 0), (3, 0)], style)];
                if capped {
                    caps.push(EmptyElement::at((x, lo)) + PathElement::new(vec![(-3, 0), (3, 0)], style));
                }
                caps
            }))?;
        Ok(())
    }

    /// Filled boxes `[x0, y0, x1, y1]` in data coordinates, with one legend entry.
    pub fn boxes(&mut self, boxes: &[[f64; 4]], fill: Ink, label: Option<&str>) -> DrawResult {
        let style = fill.rgb().filled();
        self.chart.draw_series(
            boxes
                .iter()
                .filter(|b| b.iter().all(|v| v.is_finite()))
                .map(|b| Rectangle::new([(b[0], b[1]), (b[2], b[3])], style)),
        )?;
        if let Some(l) = label {
            self.legend.push((l.to_string(), Key::Fill(fill)));
        }
        Ok(())
    }

    /// Text at a data position (escaped by the backend).
    pub fn text(&mut self, s: &str, at: (f64, f64), size: u32, pos: Pos) -> DrawResult {
        let at = self.map(at);
        if !(at.0.is_finite() && at.1.is_finite()) {
            return Ok(());
        }
        let style = TextStyle::from((FONT, size).into_font()).color(&BLACK).pos(pos);
        self.chart
            .draw_series(std::iter::once(Text::new(s.to_string(), at, style)))?;
        Ok(())
    }
}

/// Splits a label into lines of at most `width` characters at spaces.
pub(crate) fn wrap(label: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut cur = String::new();
    // A unit sign stays with its number.
    let mut words: Vec<String> = Vec::new();
    for w in label.split(' ') {
        match words.last_mut() {
            Some(last) if w.starts_with('%') => {
                last.push(' ');
                last.push_str(w);
            }
            _ => words.push(w.to_string()),
        }
    }
    for word in &words {
        let len = cur.chars().count();
        if len > 0 && len + 1 + word.chars().count() > width {
            lines.push(std::mem::take(&mut cur));
        }
        if !cur.is_empty() {
            cur.push(' ');
        }
        cur.push_str(word);
    }
    if !cur.is_empty() {
        lines.push(cur);
    }
    lines
}

/// Draws a legend in `area`, a strip beneath the charts: the entries in a
/// grid of up to three columns (row by row, in drawing order), each label
/// wrapped to its column, inside a thin frame.
pub(crate) fn legend(area: &Area, entries: &[(String, Key)]) -> DrawResult {
    if entries.is_empty() {
        return Ok(());
    }
    let (w, _) = area.dim_in_pixel();
    let longest = entries.iter().map(|(l, _)| l.chars().count()).max().unwrap_or(0);
    let cols = legend_columns(entries.len(), longest, w);
    let col_w = (w as i32 - 24) / cols as i32;
    let chars = ((col_w as f64 - 44.0) / 6.5).max(12.0) as usize;
    let style = TextStyle::from((FONT, 12).into_font())
        .color(&BLACK)
        .pos(Pos::new(HPos::Left, VPos::Center));
    let top = 8;
    let mut y = top + 14;
    for row in entries.chunks(cols) {
        let mut lines_in_row = 1;
        for (c, (label, key)) in row.iter().enumerate() {
            let x0 = 16 + c as i32 * col_w;
            let x1 = x0 + 24;
            match *key {
                Key::Line(s) => area.draw(&s.element(vec![(x0, y), (x1, y)]))?,
                Key::Mark(m) => area.draw(&m.at(((x0 + x1) / 2, y)))?,
                Key::Fill(g) => area.draw(&Rectangle::new([(x0, y - 6), (x1, y + 6)], g.rgb().filled()))?,
            }
            let lines = wrap(label, chars);
            lines_in_row = lines_in_row.max(lines.len());
            for (i, line) in lines.into_iter().enumerate() {
                area.draw(&Text::new(line, (x1 + 8, y + 15 * i as i32), style.clone()))?;
            }
        }
        y += 15 * lines_in_row as i32 + 5;
    }
    area.draw(&Rectangle::new(
        [(8, top), (w as i32 - 8, y - 8)],
        grey(190).stroke_width(1),
    ))?;
    Ok(())
}

/// Columns of a legend of `n` entries whose longest label has `longest`
/// characters, on a strip `width` pixels wide: as many as three while each
/// label still fits its column on one line (12 px text is about 6.5 px a
/// character), at least one.
pub(crate) fn legend_columns(n: usize, longest: usize, width: u32) -> usize {
    let need = 44.0 + 6.5 * longest as f64;
    let fit = ((width as f64 - 24.0) / need).floor().max(1.0) as usize;
    n.clamp(1, fit.min(3))
}

/// Height reserved beneath the charts for the legend.
pub(crate) const LEGEND_HEIGHT: u32 = 92;

/// Height a legend of `n` entries needs in two columns (one line each).
pub(crate) const fn legend_height(n: usize) -> u32 {
    30 + 20 * n.div_ceil(2) as u32
}

/// Axis extent of the finite values, widened by 5 % on each side; a single
/// value gets a window around it. None when no value is finite.
pub(crate) fn extent(values: impl IntoIterator<Item = f64>) -> Option<(f64, f64)> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for v in values {
        if v.is_finite() {
            lo = lo.min(v);
            hi = hi.max(v);
        }
    }
    if lo > hi {
        return None;
    }
    Some(pad(lo, hi, 0.05))
}

/// `[lo, hi]` widened by `frac` of its width; a zero width gets a window.
pub(crate) fn pad(lo: f64, hi: f64, frac: f64) -> (f64, f64) {
    let w = hi - lo;
    // Values that agree to a part in 1e7 are drawn as one value: their
    // differences are rounding noise, and an axis resolving them would need
    // ticks of a dozen digits.
    let agree = w <= 1e-7 * lo.abs().max(hi.abs());
    if w > 0.0 && w.is_finite() && !agree {
        (lo - frac * w, hi + frac * w)
    } else {
        let mid = 0.5 * (lo + hi);
        let h = if mid != 0.0 { mid.abs() * 0.05 } else { 1.0 };
        (mid - h, mid + h)
    }
}

/// One row of an interval strip: a horizontal bar from `lo` to `hi` (an
/// absent end runs to the frame edge, dotted) labelled at the left.
#[derive(Debug, Clone)]
pub(crate) struct Bar {
    /// Short label written left of the frame.
    pub label: String,
    /// The bar's line style (drawn 3 px wide).
    pub stroke: Stroke,
    /// Lower end, when found.
    pub lo: Option<f64>,
    /// Upper end, when found.
    pub hi: Option<f64>,
}

/// Pixel height of an interval strip of `rows` rows.
pub(crate) const fn strip_height(rows: usize) -> u32 {
    58 + 22 * rows as u32
}

/// Draws intervals as labelled horizontal bars, one row each (first row on
/// top), on `area` under a chart with the same x range, so that interval
/// ends never crowd the chart above; a vertical line marks `centre`. The
/// x axis carries the tick labels and `x_desc`.
pub(crate) fn interval_strip(
    area: &Area,
    x: (f64, f64),
    rows: &[Bar],
    centre: Option<f64>,
    x_desc: &str,
) -> DrawResult {
    let n = rows.len().max(1) as f64;
    let mut builder = ChartBuilder::on(area);
    builder
        .margin_left(12)
        .margin_right(12)
        .x_label_area_size(44)
        .y_label_area_size(68);
    let mut chart = builder.build_cartesian_2d(x.0..x.1, 0.0..n)?;
    let xs = x.1 - x.0;
    let fx = move |v: &f64| format::tick(*v, xs);
    chart
        .configure_mesh()
        .disable_y_mesh()
        .disable_y_axis()
        .x_desc(x_desc)
        .x_labels(7)
        .x_label_formatter(&fx)
        .bold_line_style(grey(235))
        .light_line_style(grey(248))
        .axis_style(grey(60))
        .label_style((FONT, 12))
        .axis_desc_style((FONT, 14))
        .draw()?;
    if let Some(c) = centre.filter(|c| c.is_finite() && *c >= x.0 && *c <= x.1) {
        chart.draw_series(std::iter::once(PathElement::new(
            vec![(c, 0.0), (c, n)],
            grey(150).stroke_width(1),
        )))?;
    }
    let label_style = TextStyle::from((FONT, 11).into_font())
        .color(&BLACK)
        .pos(Pos::new(HPos::Right, VPos::Center));
    for (i, bar) in rows.iter().enumerate() {
        let y = n - i as f64 - 0.5;
        let clamp = |v: f64| v.clamp(x.0, x.1);
        let lo = bar.lo.filter(|v| v.is_finite());
        let hi = bar.hi.filter(|v| v.is_finite());
        let thick = Stroke::new(bar.stroke.dash, 3, bar.stroke.ink);
        let open = Stroke::new(Dash::Dotted, 2, bar.stroke.ink);
        match (lo, hi) {
            (Some(a), Some(b)) => {
                chart.draw_series(std::iter::once(thick.element(vec![(clamp(a), y), (clamp(b), y)])))?;
            }
            (Some(a), None) => {
                chart.draw_series(std::iter::once(open.element(vec![(clamp(a), y), (x.1, y)])))?;
            }
            (None, Some(b)) => {
                chart.draw_series(std::iter::once(open.element(vec![(x.0, y), (clamp(b), y)])))?;
            }
            (None, None) => {}
        }
        let cap = bar.stroke.ink.rgb().stroke_width(2);
        for v in [lo, hi].into_iter().flatten().filter(|v| *v >= x.0 && *v <= x.1) {
            chart.draw_series(std::iter::once(PathElement::new(
                vec![(v, y - 0.32), (v, y + 0.32)],
                cap,
            )))?;
        }
        let (px, py) = chart.backend_coord(&(x.0, y));
        let (ox, oy) = area.get_base_pixel();
        area.draw(&Text::new(
            bar.label.clone(),
            (px - ox - 6, py - oy),
            label_style.clone(),
        ))?;
    }
    Ok(())
}

/// The label of a tick at chart coordinate `v` on an axis of `span` chart
/// units. Over two decades or more, a log axis labels only its decades
/// (the grid lines between stay, unlabelled), so that every label is a
/// round `10^e`; a shorter log axis labels each tick with its value.
fn tick_label(scale: Scale, v: f64, span: f64) -> String {
    match scale {
        Scale::Linear => format::tick(v, span),
        Scale::Log if span >= 2.0 && (v - v.round()).abs() > 1e-9 => String::new(),
        Scale::Log => format::log_tick(v),
    }
}

/// Builds a chart on `area` with axis titles and tick labels formatted by
/// [`format::tick`], both axes linear.
pub(crate) fn chart<'a, 'b>(
    area: &'a Area<'b>,
    caption: Option<&str>,
    x: (f64, f64),
    y: (f64, f64),
    x_desc: &str,
    y_desc: &str,
) -> Result<Plot<'a, 'b>, Box<dyn std::error::Error>> {
    chart_scaled(
        area,
        caption,
        x,
        y,
        x_desc,
        y_desc,
        (Scale::Linear, Scale::Linear),
    )
}

/// Builds a chart on `area` with the given axis scales; `x` and `y` are in
/// chart coordinates ([`Scale::extent`]). A log axis labels its ticks
/// with the values (`10^t`, [`format::log_tick`]), only the decades when
/// it spans two or more.
pub(crate) fn chart_scaled<'a, 'b>(
    area: &'a Area<'b>,
    caption: Option<&str>,
    x: (f64, f64),
    y: (f64, f64),
    x_desc: &str,
    y_desc: &str,
    scales: (Scale, Scale),
) -> Result<Plot<'a, 'b>, Box<dyn std::error::Error>> {
    let mut builder = ChartBuilder::on(area);
    builder.margin(12).x_label_area_size(44).y_label_area_size(68);
    if let Some(c) = caption {
        builder.caption(c, (FONT, 16));
    }
    let mut chart = builder.build_cartesian_2d(x.0..x.1, y.0..y.1)?;
    let (xs, ys) = (x.1 - x.0, y.1 - y.0);
    let fx = move |v: &f64| tick_label(scales.0, *v, xs);
    let fy = move |v: &f64| tick_label(scales.1, *v, ys);
    chart
        .configure_mesh()
        .x_desc(x_desc)
        .y_desc(y_desc)
        .x_labels(7)
        .y_labels(7)
        .x_label_formatter(&fx)
        .y_label_formatter(&fy)
        .bold_line_style(grey(225))
        .light_line_style(grey(245))
        .axis_style(grey(60))
        .label_style((FONT, 12))
        .axis_desc_style((FONT, 14))
        .draw()?;
    Ok(Plot {
        chart,
        legend: Vec::new(),
        frame: (x, y),
        scales,
    })
}

/// Renders a drawing of `size` pixels into a standalone SVG document.
/// Errors and panics inside plotters both become [`ReportError::Figure`].
pub(crate) fn render(
    name: &str,
    size: (u32, u32),
    draw: impl FnOnce(&Area) -> DrawResult,
) -> Result<String, ReportError> {
    let fail = |message: String| ReportError::Figure {
        name: name.to_string(),
        message,
    };
    let outcome = catch_unwind(AssertUnwindSafe(|| {
        let mut buf = String::new();
        let res = {
            let root = SVGBackend::with_string(&mut buf, size).into_drawing_area();
            root.fill(&WHITE)
                .map_err(|e| e.to_string())
                .and_then(|_| draw(&root).map_err(|e| e.to_string()))
                .and_then(|_| root.present().map_err(|e| e.to_string()))
        };
        res.map(|_| buf)
    }));
    match outcome {
        Ok(Ok(svg)) => Ok(svg),
        Ok(Err(msg)) => Err(fail(msg)),
        Err(_) => Err(fail("the plotting library stopped on these values".into())),
    }
}

/// The SVG document in a form fit for inlining into HTML: without the XML
/// namespace declaration (HTML puts `<svg>` in the SVG namespace by itself,
/// and the report must not contain a single URL).
pub fn inline(svg: &str) -> String {
    svg.replacen(r#" xmlns="http://www.w3.org/2000/svg""#, "", 1)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_axes_over_two_decades_label_only_decades() {
        // Chart coordinates are log10 of the value (identity).
        assert_eq!(tick_label(Scale::Log, 2.0, 3.0), "100");
        assert_eq!(tick_label(Scale::Log, -1.0, 3.0), "0.1");
        assert_eq!(tick_label(Scale::Log, 2.5, 3.0), "");
        // Under two decades every tick keeps its value.
        assert_eq!(tick_label(Scale::Log, 0.5, 1.5), "3.16");
        assert_eq!(tick_label(Scale::Linear, 2.5, 3.0), "2.5");
    }

    #[test]
    fn legend_labels_wrap_at_spaces_keeping_units() {
        assert_eq!(
            wrap("profiled level (68.3 %)", 16),
            vec!["profiled level", "(68.3 %)"]
        );
        assert_eq!(wrap("a b c", 3), vec!["a b", "c"]);
        assert_eq!(
            wrap("averyveryverylongword x", 5),
            vec!["averyveryverylongword", "x"]
        );
        assert_eq!(
            finite_runs(&[(0.0, 1.0), (1.0, f64::NAN), (2.0, 2.0), (3.0, 3.0)]),
            vec![vec![(0.0, 1.0)], vec![(2.0, 2.0), (3.0, 3.0)]]
        );
        assert_eq!(pad(1.0, 1.0, 0.05), (0.95, 1.05));
        assert_eq!(pad(0.0, 0.0, 0.05), (-1.0, 1.0));
        // Values that agree to rounding noise (all starts at one minimum)
        // get the window of a single value, not an axis of 1e-13 width
        // whose ticks would need a dozen digits and overlap.
        let (lo, hi) = pad(57.7, 57.7 + 1e-12, 0.05);
        assert!((lo - 57.7 * 0.95).abs() < 1e-9 && (hi - 57.7 * 1.05).abs() < 1e-9);
        assert_eq!(format::tick(57.7, hi - lo), "57.7");
        assert_eq!(extent([f64::NAN, 0.0, 10.0]), Some((-0.5, 10.5)));
        assert_eq!(extent([f64::NAN]), None);
        // Clipping to the unit square: a line crossing it twice leaves two pieces.
        let path = [(-1.0, 0.5), (0.5, 0.5), (0.5, 2.0), (0.8, 0.5), (0.9, 0.5)];
        let pieces = clip(&path, (0.0, 1.0), (0.0, 1.0));
        assert_eq!(
            pieces,
            vec![
                vec![(0.0, 0.5), (0.5, 0.5), (0.5, 1.0)],
                vec![(0.7, 1.0), (0.8, 0.5), (0.9, 0.5)]
            ]
        );
        assert!(clip(&[(2.0, 2.0), (3.0, 3.0)], (0.0, 1.0), (0.0, 1.0)).is_empty());
    }

    #[test]
    fn automatic_log_scale_beyond_two_decades() {
        use crate::study::AxisScale;
        // 0.1 to 100 spans three decades: logarithmic; 1 to 50 does not.
        assert_eq!(Scale::choose(AxisScale::Auto, [0.1, 1.0, 100.0]), Scale::Log);
        // A dilution series crowds a linear axis; equal steps over the same
        // decades do not.
        let doses = [0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0, 100.0];
        assert_eq!(Scale::choose(AxisScale::Auto, doses), Scale::Log);
        let times: Vec<f64> = (1..=100).map(|i| 0.05 * i as f64).collect();
        assert_eq!(Scale::choose(AxisScale::Auto, times), Scale::Linear);
        assert_eq!(Scale::choose(AxisScale::Auto, [1.0, 50.0]), Scale::Linear);
        // A zero or negative value keeps it linear; the settings override.
        assert_eq!(Scale::choose(AxisScale::Auto, [0.0, 1.0, 1000.0]), Scale::Linear);
        assert_eq!(Scale::choose(AxisScale::Log, [1.0, 2.0]), Scale::Log);
        assert_eq!(Scale::choose(AxisScale::Linear, [1e-3, 1e3]), Scale::Linear);
        // log10 identities: 1000 -> 3, 0.01 -> -2; no logarithm of 0.
        assert_eq!(Scale::Log.to_axis(1000.0), 3.0);
        assert_eq!(Scale::Log.to_axis(0.01), -2.0);
        assert!(Scale::Log.to_axis(0.0).is_nan());
    }

    #[test]
    fn legend_columns_fit_their_labels() {
        // 640 px: (640 - 24) / (44 + 6.5 * 28) = 2.7, so two columns.
        assert_eq!(legend_columns(5, 28, 640), 2);
        assert_eq!(legend_columns(5, 12, 680), 3);
        assert_eq!(legend_columns(1, 12, 680), 1);
        assert_eq!(legend_columns(4, 200, 680), 1);
    }

    #[test]
    fn inlined_svg_carries_no_url() {
        let svg = render("t.svg", (40, 30), |_| Ok(())).unwrap();
        assert!(svg.contains("http://www.w3.org/2000/svg"));
        let inl = inline(&svg);
        assert!(!inl.contains("http"));
        assert!(inl.starts_with("<svg"));
    }
}
