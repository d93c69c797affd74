//! Text for the page: number formats. Escaping is not done here: every page is
//! built with maud, which escapes each interpolated value.

use std::fmt::Write as _;

/// The true minus sign (U+2212), for every negative number a page shows.
pub const MINUS: char = '\u{2212}';

/// Replaces an ASCII hyphen-minus leading a number with the true minus sign.
fn true_minus(s: String) -> String {
    match s.strip_prefix('-') {
        Some(rest) => format!("{MINUS}{rest}"),
        None => s,
    }
}

/// Below this a p-value is shown as `< 1e-300` (with its log10 in a tooltip): the
/// double-precision value is no longer trustworthy, and may be 0.
pub const P_FLOOR: f64 = 1e-300;

/// A p-value for people: three decimals from 0.001 up (`0.032`, `1`), two significant
/// digits in scientific notation below (`3.2e-7`), and `< 1e-300` when p underflows
/// (pair it with [`fmt_log10_p`], which stays exact there).
///
/// ```
/// use dispar::page::format::fmt_p;
/// assert_eq!(fmt_p(0.03217), "0.032");
/// assert_eq!(fmt_p(3.2e-7), "3.2e-7");
/// assert_eq!(fmt_p(0.0), "< 1e-300");
/// ```
pub fn fmt_p(p: f64) -> String {
    if !p.is_finite() {
        return "n/a".to_owned();
    }
    if p < P_FLOOR {
        return "< 1e-300".to_owned();
    }
    if p >= 0.9995 {
        "1".to_owned()
    } else if p >= 0.001 {
        format!("{p:.3}")
    } else {
        format!("{p:.1e}")
    }
}

/// `p = 0.032`, or `p < 1e-300` when p underflows (never `p = < 1e-300`).
///
/// ```
/// use dispar::page::format::p_equals;
/// assert_eq!(p_equals(0.03217), "p = 0.032");
/// assert_eq!(p_equals(0.0), "p < 1e-300");
/// ```
pub fn p_equals(p: f64) -> String {
    let shown = fmt_p(p);
    match shown.strip_prefix("< ") {
        Some(bound) => format!("p < {bound}"),
        None => format!("p = {shown}"),
    }
}

/// `log10 p = −412.3` (true minus sign), for a tooltip next to a p-value.
pub fn fmt_log10_p(log10_p: f64) -> String {
    if log10_p.is_finite() {
        format!("log10 p = {}", true_minus(format!("{log10_p:.1}")))
    } else {
        String::new()
    }
}

/// `n` with the singular or the plural noun: `1 pair`, `2 pairs`, `1,024 pairs`.
pub fn count_of(n: usize, singular: &str, plural: &str) -> String {
    format!(
        "{} {}",
        fmt_count(u64::try_from(n).unwrap_or(u64::MAX)),
        if n == 1 { singular } else { plural }
    )
}

/// A whole number with thousands separators: `1,234,567` (the core's, so the cautions
/// it writes and the pages group digits alike).
pub use dispar_core::report::text::fmt_count;

/// A proportion as a percentage: two decimals from 0.1% up (`2.02%`), three
/// significant digits below (`0.0123%`), `0%` for zero.
pub fn fmt_pct(r: f64) -> String {
    if !r.is_finite() {
        return "n/a".to_owned();
    }
    let pct = r * 100.0;
    if pct == 0.0 {
        "0%".to_owned()
    } else if pct.abs() >= 0.1 {
        format!("{pct:.2}%")
    } else {
        // Three significant digits: 0.0123 has its first digit at 10^-2.
        let first = pct.abs().log10().floor() as i32;
        let decimals = usize::try_from(2 - first).unwrap_or(2).min(12);
        format!("{pct:.decimals$}%")
    }
}

/// A share in [0, 1] as a percentage with one decimal: `43.2%`.
pub fn fmt_share(s: f64) -> String {
    if s.is_finite() {
        format!("{:.1}%", s * 100.0)
    } else {
        "n/a".to_owned()
    }
}

/// A signed difference of two proportions in percentage points: `+0.86 pp`,
/// `−0.86 pp` (true minus sign), `0.00 pp`.
pub fn fmt_pp(d: f64) -> String {
    if !d.is_finite() {
        return "n/a".to_owned();
    }
    let s = format!("{:+.2}", d * 100.0);
    if s == "-0.00" || s == "+0.00" {
        return "0.00 pp".to_owned();
    }
    format!("{} pp", true_minus(s))
}

/// A signed z-score or residual with one decimal: `+27.5`, `−8.9` (true minus sign).
pub fn fmt_signed(x: f64) -> String {
    if !x.is_finite() {
        return "n/a".to_owned();
    }
    let s = format!("{x:+.1}");
    if s == "-0.0" || s == "+0.0" {
        return "0.0".to_owned();
    }
    true_minus(s)
}

/// A statistic or expected count: thousands separators, `decimals` decimals.
pub fn fmt_num(x: f64, decimals: usize) -> String {
    if !x.is_finite() {
        return "n/a".to_owned();
    }
    let text = format!("{:.decimals$}", x.abs());
    let (int, frac) = match text.split_once('.') {
        Some((i, f)) => (i, Some(f)),
        None => (text.as_str(), None),
    };
    let mut out = String::new();
    if x < 0.0 && text.bytes().any(|b| (b'1'..=b'9').contains(&b)) {
        out.push(MINUS);
    }
    match int.parse::<u64>() {
        Ok(n) => out.push_str(&fmt_count(n)),
        Err(_) => out.push_str(int),
    }
    if let Some(f) = frac {
        let _ = write!(out, ".{f}");
    }
    out
}

/// A number for SVG coordinates: two decimals, no exponent.
pub fn coord(x: f64) -> String {
    if x.is_finite() {
        let s = format!("{x:.2}");
        let s = s.trim_end_matches('0').trim_end_matches('.');
        if s == "-0" {
            "0".to_owned()
        } else {
            s.to_owned()
        }
    } else {
        "0".to_owned()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn p_values_are_short_and_never_zero() {
        let cases = [
            (1.0, "1"),
            (0.99999, "1"),
            (0.5, "0.500"),
            (0.0495, "0.050"),
            (0.001, "0.001"),
            (0.0004, "4.0e-4"),
            (3.2e-7, "3.2e-7"),
            (1.234e-250, "1.2e-250"),
            (5e-310, "< 1e-300"),
            (0.0, "< 1e-300"),
            (f64::NAN, "n/a"),
        ];
        for (p, want) in cases {
            assert_eq!(fmt_p(p), want, "p = {p:e}");
        }
        assert_eq!(fmt_log10_p(-412.34), "log10 p = \u{2212}412.3");
        assert_eq!(p_equals(0.5), "p = 0.500");
        assert_eq!(p_equals(5e-310), "p < 1e-300");
        assert_eq!(p_equals(f64::NAN), "p = n/a");
    }

    #[test]
    fn counts_rates_and_residuals_read_naturally() {
        assert_eq!(fmt_count(0), "0");
        assert_eq!(fmt_count(999), "999");
        assert_eq!(fmt_count(1000), "1,000");
        assert_eq!(fmt_count(104_539), "104,539");
        assert_eq!(fmt_count(16_300_000), "16,300,000");
        assert_eq!(fmt_pct(0.020_21), "2.02%");
        assert_eq!(fmt_pct(0.0), "0%");
        assert_eq!(fmt_pct(0.000_123_4), "0.0123%");
        assert_eq!(fmt_pct(1.0), "100.00%");
        assert_eq!(fmt_share(0.4321), "43.2%");
        assert_eq!(fmt_pp(0.0086), "+0.86 pp");
        assert_eq!(fmt_pp(-0.0086), "\u{2212}0.86 pp");
        assert_eq!(fmt_pp(-0.000_01), "0.00 pp");
        assert_eq!(count_of(1, "pair", "pairs"), "1 pair");
        assert_eq!(count_of(0, "pair", "pairs"), "0 pairs");
        assert_eq!(count_of(664_474, "unit", "units"), "664,474 units");
        assert_eq!(fmt_signed(27.46), "+27.5");
        assert_eq!(fmt_signed(-8.91), "\u{2212}8.9");
        assert_eq!(fmt_signed(-0.01), "0.0");
        assert_eq!(fmt_num(1132.44, 1), "1,132.4");
        assert_eq!(fmt_num(-1132.44, 1), "\u{2212}1,132.4");
        assert_eq!(fmt_num(-0.001, 1), "0.0");
        assert_eq!(fmt_num(11.07, 2), "11.07");
        assert_eq!(coord(12.5), "12.5");
        assert_eq!(coord(3.0), "3");
        assert_eq!(coord(-0.001), "0");
        assert_eq!(coord(f64::NAN), "0");
    }
}
