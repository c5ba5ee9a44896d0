//! Number formatting shared by every renderer.
//!
//! One rule throughout: an uncertainty is quoted to two significant digits
//! and the value it belongs to is rounded at the same decimal place (JCGM
//! 100:2008, the GUM, 7.2.6), so a table never shows digits the analysis
//! does not support. Numbers without an uncertainty use a fixed count of
//! significant digits. Very large or very small magnitudes switch to
//! exponent notation (`1.23e-7`). Non-finite numbers print as `NaN`, `inf`
//! or `-inf`; absent ones as an em dash.

/// Significant digits of a quoted uncertainty.
pub const UNCERTAINTY_DIGITS: usize = 2;

/// What an absent number prints as.
pub const ABSENT: &str = "\u{2014}";

fn non_finite(x: f64) -> Option<String> {
    if x.is_nan() {
        Some("NaN".into())
    } else if x == f64::INFINITY {
        Some("inf".into())
    } else if x == f64::NEG_INFINITY {
        Some("-inf".into())
    } else {
        None
    }
}

/// Decimal exponent of `x` after rounding it to `digits` significant digits
/// (so that 9.96 rounded to two digits counts as 10, exponent 1).
fn rounded_exponent(x: f64, digits: usize) -> i32 {
    let s = format!("{:.*e}", digits.max(1) - 1, x.abs());
    s.split('e').nth(1).and_then(|e| e.parse().ok()).unwrap_or(0)
}

/// `x` to `digits` significant digits; exponent notation below 1e-4 and
/// from 1e6 on.
pub fn sig(x: f64, digits: usize) -> String {
    if let Some(s) = non_finite(x) {
        return s;
    }
    let digits = digits.max(1);
    if x == 0.0 {
        return "0".into();
    }
    let e = rounded_exponent(x, digits);
    if !(-4..6).contains(&e) {
        return format!("{:.*e}", digits - 1, x);
    }
    let decimals = (digits as i32 - 1 - e).max(0) as usize;
    format!("{x:.decimals$}")
}

/// Decimal place of the last digit of `u` quoted to `digits` significant
/// digits: 0.000354 to two digits is 0.00035, last digit at 10^-5, so -5.
/// None when `u` is not a positive finite number.
pub fn last_place(u: f64, digits: usize) -> Option<i32> {
    if !(u.is_finite() && u > 0.0) {
        return None;
    }
    Some(rounded_exponent(u, digits) - (digits.max(1) as i32 - 1))
}

/// `x` rounded at the decimal place `10^place`: `at(100.021473, -5)` is
/// `100.02147`. Exponent notation from 1e6 on, or when the place lies below
/// 10^-6 (the mantissa then keeps the same absolute precision).
pub fn at(x: f64, place: i32) -> String {
    if let Some(s) = non_finite(x) {
        return s;
    }
    let e = if x == 0.0 {
        place
    } else {
        rounded_exponent(x, 1).max(place)
    };
    if e >= 6 || place < -6 {
        let e = if x == 0.0 {
            place
        } else {
            // exponent of x once rounded at the place
            let digits = (e - place + 1).max(1) as usize;
            rounded_exponent(x, digits)
        };
        let decimals = (e - place).max(0) as usize;
        return format!("{x:.decimals$e}");
    }
    let decimals = (-place).max(0) as usize;
    if place > 0 {
        let scale = 10f64.powi(place);
        let r = (x / scale).round() * scale;
        return format!("{r:.0}");
    }
    format!("{x:.decimals$}")
}

/// A number without an uncertainty: [`DEFAULT_DIGITS`] significant digits,
/// trailing zeros dropped (they would claim a precision nobody stated):
/// `2.5`, `0.666667`, `1.2e-7`.
pub fn plain(x: f64) -> String {
    let s = sig(x, DEFAULT_DIGITS);
    let (mantissa, exp) = match s.split_once('e') {
        Some((m, e)) => (m.to_string(), Some(e.to_string())),
        None => (s.clone(), None),
    };
    let m = if mantissa.contains('.') {
        mantissa.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        mantissa
    };
    match exp {
        Some(e) => format!("{m}e{e}"),
        None => m,
    }
}

/// A value and its standard uncertainty: the uncertainty to two significant
/// digits, the value at the same decimal place. When the uncertainty is not
/// a positive finite number, the value prints [`plain`] and the uncertainty
/// as given (or the absent mark).
pub fn value_and_uncertainty(value: f64, u: Option<f64>) -> (String, String) {
    match u.and_then(|u| last_place(u, UNCERTAINTY_DIGITS).map(|p| (u, p))) {
        Some((u, place)) => (at(value, place), sig(u, UNCERTAINTY_DIGITS)),
        None => (
            plain(value),
            u.map(|u| sig(u, UNCERTAINTY_DIGITS))
                .unwrap_or_else(|| ABSENT.into()),
        ),
    }
}

/// Significant digits of a number quoted without an uncertainty.
pub const DEFAULT_DIGITS: usize = 6;

/// A number at the precision of a parameter: at the place of its standard
/// uncertainty's second significant digit, or [`plain`] when there is no
/// usable uncertainty.
pub fn at_precision_of(x: f64, u: Option<f64>) -> String {
    match u.and_then(|u| last_place(u, UNCERTAINTY_DIGITS)) {
        Some(place) => at(x, place),
        None => plain(x),
    }
}

/// An optional number with [`sig`], the absent mark for None.
pub fn opt_sig(x: Option<f64>, digits: usize) -> String {
    x.map(|x| sig(x, digits)).unwrap_or_else(|| ABSENT.into())
}

/// A fraction as a percentage with `digits` significant digits: `0.6827` to
/// four digits is `68.27 %`.
pub fn percent(fraction: f64, digits: usize) -> String {
    format!("{} %", sig(100.0 * fraction, digits))
}

/// A ratio near one (standard deviation ratios, asymmetries): three
/// significant digits.
pub fn ratio(r: f64) -> String {
    sig(r, 3)
}

/// Chi-squared, deviances and similar sums, wherever the report prints
/// one (tables, verdict sentences, notices, figures): six significant
/// digits with trailing zeros dropped (`57.6755`, `3354.75`, `12.5`), so
/// that two nearby minima stay distinguishable and one sum reads the same
/// in every place.
pub fn chi2(x: f64) -> String {
    trim_zeros(&sig(x, 6))
}

/// A p-value: two significant digits; `< 1e-300` below that (including an
/// underflow to exactly 0), where the digits mean nothing.
pub fn p_value(p: f64) -> String {
    // An exact 0 is an underflow, not a certainty.
    if p.is_finite() && (0.0..1e-300).contains(&p) {
        return "< 1e-300".into();
    }
    sig(p, 2)
}

/// Most significant digits a tick label shows.
pub const TICK_DIGITS: i32 = 6;

/// Decimal place of the last digit tick labels need on an axis spanning
/// `span` around values of magnitude `magnitude`: the place of the tick
/// step (about a seventh of the span, as the charts put up to seven ticks),
/// but never more than [`TICK_DIGITS`] significant digits of the magnitude.
pub fn tick_place(span: f64, magnitude: f64) -> i32 {
    let step = span / 7.0;
    let mut place = if step.is_finite() && step > 0.0 {
        step.log10().floor() as i32
    } else {
        0
    };
    if magnitude.is_finite() && magnitude > 0.0 {
        place = place.max(magnitude.log10().floor() as i32 - (TICK_DIGITS - 1));
    }
    place
}

/// Tick label for an axis spanning `span`: rounded at [`tick_place`], so
/// ticks a step apart are told apart and no digit beyond the axis'
/// resolution is printed; trailing zeros dropped.
pub fn tick(v: f64, span: f64) -> String {
    if !(span.is_finite() && span > 0.0) {
        return sig(v, 3);
    }
    if v.abs() < span * 1e-9 {
        return "0".into();
    }
    let place = tick_place(span, v.abs().max(span)).min(0);
    let s = at(v, place);
    trim_zeros(&s)
}

/// Tick labels of a logarithmic axis at `10^e`: the value itself with at
/// most three significant digits (`0.01`, `3.16`, `1000`, `1e6`).
pub fn log_tick(exponent: f64) -> String {
    let v = 10f64.powf(exponent);
    trim_zeros(&sig(v, 3))
}

/// Drops trailing zeros of a decimal mantissa (`1.500` -> `1.5`, `2.0e6` ->
/// `2e6`); integers are left alone.
pub fn trim_zeros(s: &str) -> String {
    let (m, e) = match s.split_once('e') {
        Some((m, e)) => (m, Some(e)),
        None => (s, None),
    };
    let m = if m.contains('.') {
        m.trim_end_matches('0').trim_end_matches('.')
    } else {
        m
    };
    match e {
        Some(e) => format!("{m}e{e}"),
        None => m.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gum_example_value_with_two_digit_uncertainty() {
        // JCGM 100:2008 (GUM) 7.2.2: m_s = 100.021 47 g with u_c = 0.35 mg.
        let (v, u) = value_and_uncertainty(100.021_473, Some(0.000_354));
        assert_eq!(v, "100.02147");
        assert_eq!(u, "0.00035");
        // GUM 7.2.6: quote u_c to at most two significant digits; the
        // rounding of 0.354 to 0.35 and of 0.0996 to 0.10 (common practice).
        assert_eq!(sig(0.0996, 2), "0.10");
        assert_eq!(last_place(0.0996, 2), Some(-2));
        assert_eq!(last_place(0.354, 2), Some(-2));
        assert_eq!(last_place(9.96, 2), Some(0));
        assert_eq!(
            value_and_uncertainty(12.3456, Some(9.96)),
            ("12".into(), "10".into())
        );
    }

    #[test]
    fn codata_style_values() {
        // CODATA 2018 (NIST SP 961): G = 6.674 30(15) x 10^-11 m^3 kg^-1 s^-2,
        // electron mass 9.109 383 7015(28) x 10^-31 kg: the value keeps the
        // digits of the two-digit uncertainty, in exponent notation.
        let (v, u) = value_and_uncertainty(6.674_30e-11, Some(0.000_15e-11));
        assert_eq!(v, "6.67430e-11");
        assert_eq!(u, "1.5e-15");
        let (v, u) = value_and_uncertainty(9.109_383_701_5e-31, Some(0.000_000_002_8e-31));
        assert_eq!(v, "9.1093837015e-31");
        assert_eq!(u, "2.8e-40");
    }

    #[test]
    fn significant_digits_and_exponent_switch() {
        assert_eq!(sig(1.234567, 3), "1.23");
        assert_eq!(sig(-0.000_123_4, 2), "-0.00012");
        assert_eq!(sig(0.000_012_34, 2), "1.2e-5");
        assert_eq!(sig(123_456.0, 3), "123456");
        assert_eq!(sig(1_234_567.0, 3), "1.23e6");
        assert_eq!(sig(999_999.0, 2), "1.0e6");
        assert_eq!(sig(0.0, 3), "0");
        assert_eq!(sig(f64::NAN, 3), "NaN");
        assert_eq!(sig(f64::NEG_INFINITY, 3), "-inf");
        assert_eq!(at(1234.5678, 1), "1230");
        assert_eq!(at(1234.5678, -2), "1234.57");
        assert_eq!(at(-0.5, -1), "-0.5");
        assert_eq!(at(2.5e7, 5), "2.50e7");
    }

    #[test]
    fn missing_or_useless_uncertainty_falls_back_to_significant_digits() {
        assert_eq!(
            value_and_uncertainty(2.0 / 3.0, None),
            ("0.666667".into(), ABSENT.into())
        );
        assert_eq!(value_and_uncertainty(1.5, Some(0.0)), ("1.5".into(), "0".into()));
        assert_eq!(
            value_and_uncertainty(1.5, Some(f64::NAN)),
            ("1.5".into(), "NaN".into())
        );
        assert_eq!(plain(1.2e-7), "1.2e-7");
        assert_eq!(plain(1.0e-7), "1e-7");
        assert_eq!(plain(120.0), "120");
        assert_eq!(plain(2_500_000.0), "2.5e6");
        assert_eq!(at_precision_of(21.4873, Some(0.061)), "21.487");
        assert_eq!(at_precision_of(21.4873, None), "21.4873");
    }

    #[test]
    fn percentages_p_values_and_ticks() {
        // 68.27 % is the coverage of +-1 standard deviation of a normal
        // distribution (GUM G.1.3, table G.1: 68.27).
        assert_eq!(percent(0.6827, 4), "68.27 %");
        assert_eq!(p_value(0.0412), "0.041");
        assert_eq!(p_value(1e-320), "< 1e-300");
        assert_eq!(p_value(0.0), "< 1e-300");
        assert_eq!(tick(0.30000000000000004, 1.0), "0.3");
        assert_eq!(tick(1500.0, 2000.0), "1500");
        assert_eq!(tick(-2.0, 8.0), "-2");
        assert_eq!(tick(1e-17, 1.0), "0");
        // A value known to 18 digits on an axis that needs one decimal: the
        // label stops at the axis' resolution.
        assert_eq!(tick(0.482_944_883_619_826_2, 0.7), "0.5");
        assert_eq!(tick(0.482_944_883_619_826_2, 0.07), "0.48");
        // Never more than six significant digits, however narrow the axis.
        assert_eq!(tick(57.700_000_01, 1e-12), "57.7");
        assert_eq!(tick_place(1.0, 1.0), -1);
        assert_eq!(tick_place(7000.0, 5000.0), 3);
        assert_eq!(log_tick(2.0), "100");
        assert_eq!(log_tick(-2.0), "0.01");
        assert_eq!(log_tick(0.5), "3.16");
        assert_eq!(log_tick(6.0), "1e6");
        assert_eq!(trim_zeros("2.50e7"), "2.5e7");
    }
}
