//! Confidence intervals for a proportion (Wilson score) and for a difference of two
//! proportions (Newcombe's hybrid score interval, method 10).
//!
//! Wilson (1927), "Probable inference, the law of succession, and statistical inference",
//! JASA 22; Newcombe (1998), "Interval estimation for the difference between independent
//! proportions: comparison of eleven methods", Statistics in Medicine 17, method 10.

use statrs::function::erf::erfc_inv;

use crate::error::{StatsError, check_open_unit};

/// A closed interval [lower, upper].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    /// Lower end.
    pub lower: f64,
    /// Upper end.
    pub upper: f64,
}

impl Interval {
    /// Whether `value` lies in the interval (ends included).
    pub fn contains(&self, value: f64) -> bool {
        self.lower <= value && value <= self.upper
    }
}

/// The standard normal quantile z with P(Z > z) = q, accurate for tiny q
/// (z = sqrt(2) erfc^-1(2q)).
pub(crate) fn normal_upper_quantile(q: f64) -> f64 {
    std::f64::consts::SQRT_2 * erfc_inv(2.0 * q)
}

/// Two-sided z for a confidence level: P(|Z| <= z) = confidence.
pub(crate) fn z_for_confidence(confidence: f64) -> Result<f64, StatsError> {
    check_open_unit("confidence", confidence)?;
    Ok(normal_upper_quantile(0.5 * (1.0 - confidence)))
}

/// Wilson score interval for the proportion x / n at the given confidence (e.g. 0.95).
///
/// The ends are (2x + z^2 -/+ z sqrt(z^2 + 4x(n-x)/n)) / (2(n + z^2)), with the lower end
/// exactly 0 when x = 0 and the upper end exactly 1 when x = n. Errors: n = 0
/// ([`StatsError::NoTrials`]), x > n, confidence outside (0, 1).
///
/// ```
/// use dispar_stats::interval::wilson;
/// // Newcombe (1998a, Stat. Med. 17:857), Table I: 0/20 -> 0 to 0.1611 (from memory).
/// let ci = wilson(0, 20, 0.95)?;
/// assert_eq!(ci.lower, 0.0);
/// assert!((ci.upper - 0.1611).abs() < 5e-5);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn wilson(x: u64, n: u64, confidence: f64) -> Result<Interval, StatsError> {
    let z = z_for_confidence(confidence)?;
    wilson_z(x, n, z)
}

/// [`wilson`] with the z already computed.
pub(crate) fn wilson_z(x: u64, n: u64, z: f64) -> Result<Interval, StatsError> {
    if n == 0 {
        return Err(StatsError::NoTrials);
    }
    if x > n {
        return Err(StatsError::SuccessesExceedTrials {
            successes: x,
            trials: n,
        });
    }
    let (xf, nf) = (x as f64, n as f64);
    let z2 = z * z;
    let spread = z * (z2 + 4.0 * xf * ((n - x) as f64 / nf)).sqrt();
    let denom = 2.0 * (nf + z2);
    let lower = if x == 0 {
        0.0
    } else {
        ((2.0 * xf + z2 - spread) / denom).max(0.0)
    };
    let upper = if x == n {
        1.0
    } else {
        ((2.0 * xf + z2 + spread) / denom).min(1.0)
    };
    Ok(Interval { lower, upper })
}

/// Newcombe's hybrid score interval (method 10) for p1 - p2 = x1/n1 - x2/n2:
/// L = d - sqrt((p1 - l1)^2 + (u2 - p2)^2), U = d + sqrt((u1 - p1)^2 + (p2 - l2)^2), where
/// (l_i, u_i) are the Wilson intervals of each proportion at the same confidence.
///
/// ```
/// use dispar_stats::interval::newcombe_difference;
/// // Newcombe (1998), Table II, example (a): 56/70 - 48/80 -> 0.0524 to 0.3339 (from memory).
/// let ci = newcombe_difference(56, 70, 48, 80, 0.95)?;
/// assert!((ci.lower - 0.0524).abs() < 5e-5);
/// assert!((ci.upper - 0.3339).abs() < 5e-5);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn newcombe_difference(
    x1: u64,
    n1: u64,
    x2: u64,
    n2: u64,
    confidence: f64,
) -> Result<Interval, StatsError> {
    let z = z_for_confidence(confidence)?;
    let w1 = wilson_z(x1, n1, z)?;
    let w2 = wilson_z(x2, n2, z)?;
    Ok(newcombe_from_wilson(
        x1 as f64 / n1 as f64,
        w1,
        x2 as f64 / n2 as f64,
        w2,
    ))
}

/// Newcombe's interval from the two proportions and their Wilson intervals.
pub(crate) fn newcombe_from_wilson(p1: f64, w1: Interval, p2: f64, w2: Interval) -> Interval {
    let d = p1 - p2;
    let lo = d - ((p1 - w1.lower).powi(2) + (w2.upper - p2).powi(2)).sqrt();
    let hi = d + ((w1.upper - p1).powi(2) + (p2 - w2.lower).powi(2)).sqrt();
    Interval {
        lower: lo.max(-1.0),
        upper: hi.min(1.0),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64, what: &str) {
        assert!((a - b).abs() <= tol, "{what}: {a} vs {b}");
    }

    #[test]
    fn wilson_matches_newcombe_1998a_table() {
        // Newcombe (1998a), "Two-sided confidence intervals for the single proportion:
        // comparison of seven methods", Stat. Med. 17:857-872, Table II, method 3 (score
        // without continuity correction). Values from memory, printed to 4 decimals.
        let cases: &[(u64, u64, f64, f64)] = &[
            (81, 263, 0.2553, 0.3662),
            (15, 148, 0.0624, 0.1605),
            (0, 20, 0.0, 0.1611),
            (1, 29, 0.0061, 0.1718),
        ];
        for &(x, n, lo, hi) in cases {
            let ci = wilson(x, n, 0.95).expect("valid");
            close(ci.lower, lo, 5e-5, &format!("{x}/{n} lower"));
            close(ci.upper, hi, 5e-5, &format!("{x}/{n} upper"));
        }
    }

    #[test]
    fn newcombe_matches_newcombe_1998_table_ii() {
        // Newcombe (1998), Stat. Med. 17:873-890, Table II, method 10. Values from memory,
        // printed to 4 decimals.
        let cases: &[(u64, u64, u64, u64, f64, f64)] = &[
            (56, 70, 48, 80, 0.0524, 0.3339),
            (9, 10, 3, 10, 0.1705, 0.8090),
            (6, 7, 2, 7, 0.0582, 0.8062),
            (5, 56, 0, 29, -0.0381, 0.1926),
            (0, 10, 0, 20, -0.1611, 0.2775),
            (0, 10, 0, 10, -0.2775, 0.2775),
            (10, 10, 0, 20, 0.6791, 1.0),
            (10, 10, 0, 10, 0.6075, 1.0),
        ];
        for &(x1, n1, x2, n2, lo, hi) in cases {
            let ci = newcombe_difference(x1, n1, x2, n2, 0.95).expect("valid");
            close(ci.lower, lo, 5e-5, &format!("{x1}/{n1} - {x2}/{n2} lower"));
            close(ci.upper, hi, 5e-5, &format!("{x1}/{n1} - {x2}/{n2} upper"));
        }
    }

    #[test]
    fn edges_are_exact_and_bad_input_is_typed() {
        let all = wilson(7, 7, 0.95).expect("valid");
        assert_eq!(all.upper, 1.0);
        assert!(all.lower > 0.0);
        assert_eq!(wilson(0, 0, 0.95), Err(StatsError::NoTrials));
        assert!(matches!(
            wilson(3, 2, 0.95),
            Err(StatsError::SuccessesExceedTrials { .. })
        ));
        assert!(wilson(1, 2, 1.0).is_err());
        assert_eq!(
            newcombe_difference(1, 0, 1, 2, 0.95),
            Err(StatsError::NoTrials)
        );
    }

    #[test]
    fn normal_quantile_is_accurate() {
        // 1.959963984540054: the 0.975 normal quantile (Abramowitz & Stegun 26.2; digits from
        // memory, agreeing with mpmath 1.3.0 sqrt(2)*erfinv(0.95)).
        close(
            normal_upper_quantile(0.025),
            1.959_963_984_540_054,
            1e-14,
            "z",
        );
    }
}
