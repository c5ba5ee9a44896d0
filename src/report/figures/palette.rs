//! The one palette of every figure: the eight colours of Okabe and Ito
//! (2008, "Color Universal Design", a set chosen to stay distinct under the
//! common forms of colour-vision deficiency), each series combined with its
//! own line style and marker shape so that a figure also reads in greyscale
//! print, where the colours collapse to similar greys.
//!
//! A figure asks for the style of a [`Series`] (what is drawn: data, the
//! fitted curve, an interval type ...) or, for numbered series such as the
//! minima of a multi-start search or contour levels, for [`nth`].

use plotters::style::RGBColor;

use super::svg::{Dash, Shape};

/// A colour as red, green, blue.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Ink(pub u8, pub u8, pub u8);

impl Ink {
    /// The colour for plotters.
    pub fn rgb(self) -> RGBColor {
        RGBColor(self.0, self.1, self.2)
    }

    /// The colour as a CSS hex string, e.g. `#e69f00`.
    pub fn hex(self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.0, self.1, self.2)
    }

    /// Relative luminance (ITU-R BT.709 weights on the gamma-encoded
    /// values, a common approximation): how light the colour prints in
    /// greyscale, 0 black to 1 white.
    pub fn lightness(self) -> f64 {
        (0.2126 * f64::from(self.0) + 0.7152 * f64::from(self.1) + 0.0722 * f64::from(self.2)) / 255.0
    }
}

/// `ink` mixed with white: `share` of the colour (0 white, 1 the colour
/// itself), for fills behind lines.
pub fn tint(ink: Ink, share: f64) -> Ink {
    let s = share.clamp(0.0, 1.0);
    let mix = |c: u8| (255.0 - (255.0 - f64::from(c)) * s).round() as u8;
    Ink(mix(ink.0), mix(ink.1), mix(ink.2))
}

/// A grey level (0 black, 255 white).
pub const fn grey(level: u8) -> Ink {
    Ink(level, level, level)
}

/// Okabe-Ito black.
pub const BLACK: Ink = Ink(0, 0, 0);
/// Okabe-Ito orange.
pub const ORANGE: Ink = Ink(230, 159, 0);
/// Okabe-Ito sky blue.
pub const SKY_BLUE: Ink = Ink(86, 180, 233);
/// Okabe-Ito bluish green.
pub const BLUISH_GREEN: Ink = Ink(0, 158, 115);
/// Okabe-Ito yellow (too light for thin lines on white: used for fills only).
pub const YELLOW: Ink = Ink(240, 228, 66);
/// Okabe-Ito blue.
pub const BLUE: Ink = Ink(0, 114, 178);
/// Okabe-Ito vermillion.
pub const VERMILLION: Ink = Ink(213, 94, 0);
/// Okabe-Ito reddish purple.
pub const REDDISH_PURPLE: Ink = Ink(204, 121, 167);

/// The eight colours in the order of Okabe and Ito (2008).
pub const OKABE_ITO: [Ink; 8] = [
    BLACK,
    ORANGE,
    SKY_BLUE,
    BLUISH_GREEN,
    YELLOW,
    BLUE,
    VERMILLION,
    REDDISH_PURPLE,
];

/// What a series shows; each has one fixed style in every figure.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Series {
    /// Measured points.
    Data,
    /// The fitted curve or the profiled chi-squared.
    Curve,
    /// The analytic (covariance) value +- k u, parabola, ellipse, normal curve.
    Analytic,
    /// Bootstrap percentile interval, bootstrap histogram or cloud.
    Bootstrap,
    /// Bootstrap BCa interval.
    Bca,
    /// Monte Carlo interval or histogram.
    MonteCarlo,
    /// Profile interval or contour line.
    Profile,
    /// A threshold or reference level.
    Threshold,
    /// The study's start or the base-fit estimate.
    Estimate,
}

/// Colour, dash pattern and marker of a series.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Style {
    /// Colour.
    pub ink: Ink,
    /// Line style.
    pub dash: Dash,
    /// Marker shape.
    pub shape: Shape,
}

/// The style of a series: no two interval types share colour and dash.
pub const fn series(s: Series) -> Style {
    let (ink, dash, shape) = match s {
        Series::Data => (BLACK, Dash::Solid, Shape::Circle),
        Series::Curve => (BLUE, Dash::Solid, Shape::Circle),
        Series::Analytic => (VERMILLION, Dash::Dashed, Shape::Diamond),
        Series::Bootstrap => (SKY_BLUE, Dash::Solid, Shape::Square),
        Series::Bca => (BLUISH_GREEN, Dash::Dotted, Shape::Triangle),
        Series::MonteCarlo => (ORANGE, Dash::Long, Shape::Cross),
        Series::Profile => (REDDISH_PURPLE, Dash::Solid, Shape::Triangle),
        Series::Threshold => (BLACK, Dash::Dotted, Shape::Square),
        Series::Estimate => (BLACK, Dash::Solid, Shape::Diamond),
    };
    Style { ink, dash, shape }
}

/// The style of the `k`-th of a numbered set of series (0-based): colour,
/// dash and marker all change from one to the next, and the sequence skips
/// yellow (too light for lines); after seven it repeats.
pub const fn nth(k: usize) -> Style {
    const SEQ: [(Ink, Dash, Shape); 7] = [
        (BLACK, Dash::Solid, Shape::Circle),
        (VERMILLION, Dash::Dashed, Shape::Triangle),
        (BLUE, Dash::Dotted, Shape::Square),
        (BLUISH_GREEN, Dash::Long, Shape::Diamond),
        (ORANGE, Dash::Solid, Shape::Cross),
        (REDDISH_PURPLE, Dash::Dashed, Shape::Circle),
        (SKY_BLUE, Dash::Dotted, Shape::Triangle),
    ];
    let (ink, dash, shape) = SEQ[k % SEQ.len()];
    Style { ink, dash, shape }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn okabe_ito_values_and_distinct_styles() {
        // Okabe and Ito (2008), "Color Universal Design (CUD): how to make
        // figures and presentations that are friendly to colorblind people",
        // RGB values 0-255: orange (230,159,0), sky blue (86,180,233),
        // bluish green (0,158,115), yellow (240,228,66), blue (0,114,178),
        // vermillion (213,94,0), reddish purple (204,121,167) (from memory).
        assert_eq!(ORANGE.hex(), "#e69f00");
        assert_eq!(SKY_BLUE.hex(), "#56b4e9");
        assert_eq!(BLUISH_GREEN.hex(), "#009e73");
        assert_eq!(YELLOW.hex(), "#f0e442");
        assert_eq!(BLUE.hex(), "#0072b2");
        assert_eq!(VERMILLION.hex(), "#d55e00");
        assert_eq!(REDDISH_PURPLE.hex(), "#cc79a7");
        // Interval types never share colour and dash, so they stay apart in
        // greyscale too.
        let kinds = [
            Series::Analytic,
            Series::Bootstrap,
            Series::Bca,
            Series::MonteCarlo,
            Series::Profile,
        ];
        for (i, a) in kinds.iter().enumerate() {
            for b in &kinds[i + 1..] {
                let (sa, sb) = (series(*a), series(*b));
                assert_ne!(sa.ink, sb.ink, "{a:?} {b:?}");
                assert!(sa.dash != sb.dash || sa.shape != sb.shape, "{a:?} {b:?}");
            }
        }
        // Consecutive numbered styles differ in dash and marker alike.
        for k in 0..10 {
            assert_ne!(nth(k).dash, nth(k + 1).dash);
            assert_ne!(nth(k).shape, nth(k + 1).shape);
            assert_ne!(nth(k).ink, YELLOW);
        }
        // BT.709 luminance of white is 1, of black 0 (identity of the weights).
        assert!((grey(255).lightness() - 1.0).abs() < 1e-12);
        assert_eq!(BLACK.lightness(), 0.0);
        // A tint is the linear mix with white (identity at the ends).
        assert_eq!(tint(BLUE, 1.0), BLUE);
        assert_eq!(tint(BLUE, 0.0), grey(255));
        assert_eq!(tint(Ink(0, 100, 255), 0.5), Ink(128, 178, 255));
    }
}
