//! Text for the page: HTML escaping and number formats.
//!
//! Every string that reaches the page goes through [`escape`] (text and attribute
//! values alike); site and line names are user input.

use std::fmt::Write as _;

/// Escapes `s` for HTML text and for double- or single-quoted attribute values.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
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

/// `log10 p = -412.3`, for a tooltip next to a p-value.
pub fn fmt_log10_p(log10_p: f64) -> String {
    if log10_p.is_finite() {
        format!("log10 p = {log10_p:.1}")
    } else {
        String::new()
    }
}

/// A whole number with thousands separators: `1,234,567`.
pub fn fmt_count(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

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

/// A signed difference of two proportions in percentage points: `+0.86 pp`.
pub fn fmt_pp(d: f64) -> String {
    if d.is_finite() {
        format!("{:+.2} pp", d * 100.0)
    } else {
        "n/a".to_owned()
    }
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
    s.replacen('-', "\u{2212}", 1)
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
        out.push('\u{2212}');
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
    fn markup_characters_are_escaped_in_text_and_attributes() {
        assert_eq!(
            escape(r#"<script>alert("x")</script> & 'y'"#),
            "&lt;script&gt;alert(&quot;x&quot;)&lt;/script&gt; &amp; &#39;y&#39;"
        );
        assert_eq!(escape("Kestelmoor"), "Kestelmoor");
    }

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
        assert_eq!(fmt_log10_p(-412.34), "log10 p = -412.3");
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
        assert_eq!(fmt_pp(-0.0086), "-0.86 pp");
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
