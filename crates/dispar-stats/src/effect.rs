//! Effect sizes: Cramer's V and its bias-corrected form.

/// Cramer's V = sqrt(X^2 / (N (min(r, c) - 1))).
///
/// Returns 0.0 where V is undefined (N = 0, or fewer than 2 rows or columns).
///
/// ```
/// use dispar_stats::effect::cramers_v;
/// // A 2 x 2 table with X^2 = N has V = 1.
/// assert_eq!(cramers_v(100.0, 100, 2, 2), 1.0);
/// ```
pub fn cramers_v(x2: f64, n: u64, rows: usize, cols: usize) -> f64 {
    let m = rows.min(cols);
    if n == 0 || m < 2 || x2.is_nan() || x2 <= 0.0 {
        return 0.0;
    }
    (x2 / (n as f64 * (m - 1) as f64)).sqrt()
}

/// Bias-corrected Cramer's V (Bergsma 2013, "A bias-correction for Cramér's V and
/// Tschuprow's T", Journal of the Korean Statistical Society 42(3)):
/// phi2~ = max(0, X^2/N - (r-1)(c-1)/(N-1)), r~ = r - (r-1)^2/(N-1), c~ = c - (c-1)^2/(N-1),
/// V~ = sqrt(phi2~ / min(r~ - 1, c~ - 1)).
///
/// Returns 0.0 where undefined (N <= 1, fewer than 2 rows or columns, or a non-positive
/// denominator).
pub fn cramers_v_corrected(x2: f64, n: u64, rows: usize, cols: usize) -> f64 {
    if n <= 1 || rows < 2 || cols < 2 || x2.is_nan() || x2 <= 0.0 {
        return 0.0;
    }
    let nf = n as f64;
    let (r, c) = (rows as f64, cols as f64);
    let phi2 = (x2 / nf - (r - 1.0) * (c - 1.0) / (nf - 1.0)).max(0.0);
    let r_t = r - (r - 1.0) * (r - 1.0) / (nf - 1.0);
    let c_t = c - (c - 1.0) * (c - 1.0) / (nf - 1.0);
    let denom = (r_t - 1.0).min(c_t - 1.0);
    if denom <= 0.0 {
        return 0.0;
    }
    (phi2 / denom).sqrt()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn cramers_v_follows_its_definition() {
        // NIST e-Handbook 7.4.6 five lots: X^2 = 12.1316 (our computation), N = 1500, 5 x 2.
        assert_rel(
            cramers_v(12.0, 1500, 5, 2),
            (12.0f64 / 1500.0).sqrt(),
            1e-15,
            "V",
        );
        assert_rel(
            cramers_v(30.0, 100, 3, 4),
            (30.0f64 / 200.0).sqrt(),
            1e-15,
            "V",
        );
        assert_eq!(cramers_v(5.0, 0, 2, 2), 0.0);
        assert_eq!(cramers_v(5.0, 10, 1, 2), 0.0);
    }

    #[test]
    fn corrected_v_follows_bergsma() {
        // Hand evaluation of Bergsma's formulas for X^2 = 30, N = 101, 3 x 4:
        // phi2~ = 30/101 - 6/100, r~ = 3 - 4/100, c~ = 4 - 9/100, min(r~, c~) - 1 = 1.96.
        let expected = ((30.0f64 / 101.0 - 0.06) / 1.96).sqrt();
        assert_rel(cramers_v_corrected(30.0, 101, 3, 4), expected, 1e-14, "V~");
        // No association beyond chance gives 0, not a negative root.
        assert_eq!(cramers_v_corrected(0.5, 100, 2, 2), 0.0);
    }
}
