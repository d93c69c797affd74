//! Power of the two-group comparison of rates: the smallest difference a two-sided test
//! could detect for given volumes, and the volume needed to detect a given difference.
//!
//! The normal approximation on Cohen's arcsine effect size h = 2 asin sqrt(p1) -
//! 2 asin sqrt(p0), whose estimate has variance close to 1/n1 + 1/n2 whatever the rates
//! (Cohen 1988, *Statistical Power Analysis for the Behavioral Sciences*, 2nd ed.,
//! chapter 6, chapter recalled from memory). A two-sided z test at level alpha rejects
//! when |ĥ| / se > z, z = z_{1-alpha/2}; with a true effect of c standard errors its
//! power is Phi(c - z) + Phi(-c - z), counting both rejection tails as statsmodels'
//! `NormalIndPower` does. [`PowerRule`] solves that for c once per (alpha, power); every
//! question after that is a square root and a few trigonometric functions.

use std::f64::consts::FRAC_PI_2;

use crate::chisq::upper_tail_unchecked;
use crate::error::{StatsError, check_open_unit};
use crate::interval::normal_upper_quantile;

/// The multiple c of the standard error at which a two-sided z test at `alpha` has
/// `power`: the root of Phi(c - z) + Phi(-c - z) = power, z = z_{1-alpha/2}.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PowerRule {
    alpha: f64,
    power: f64,
    multiple: f64,
}

/// P(Z > x), accurate in both tails: half the chi-square tail of x² on 1 df for x >= 0.
fn normal_upper(x: f64) -> f64 {
    if x >= 0.0 {
        0.5 * upper_tail_unchecked(x * x, 1).p
    } else {
        1.0 - 0.5 * upper_tail_unchecked(x * x, 1).p
    }
}

/// The standard normal density.
fn normal_density(x: f64) -> f64 {
    (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt()
}

impl PowerRule {
    /// The rule for a two-sided test at `alpha` with the wanted `power`.
    ///
    /// Errors: `alpha` outside (0, 1); `power` not strictly between `alpha` (the power of
    /// a test against no effect) and 1.
    ///
    /// ```
    /// use dispar_stats::power::PowerRule;
    /// let rule = PowerRule::new(0.05, 0.8)?;
    /// // z_{0.975} + z_{0.8} = 2.8015853 if the far tail is ignored; counting it, 2.8015818
    /// // (mpmath 1.4.1, tools/reference/trend_power_fixtures.py).
    /// assert!((rule.multiple() - 2.801_581_787).abs() < 1e-9);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn new(alpha: f64, power: f64) -> Result<Self, StatsError> {
        check_open_unit("alpha", alpha)?;
        if !(power > alpha && power < 1.0) {
            return Err(StatsError::InvalidParameter {
                name: "power",
                value: power,
                requirement: "strictly between alpha and 1",
            });
        }
        let z = normal_upper_quantile(0.5 * alpha);
        // f(c) = power(c) - power rises from alpha - power < 0 at c = 0; ignoring the far
        // tail gives c0 = z + Phi^-1(power) > 0 (as power > alpha / 2), where f >= 0. So
        // [0, c0] brackets the root; Newton steps that leave it are replaced by bisection.
        let f = |c: f64| normal_upper(z - c) + normal_upper(z + c) - power;
        let (mut lo, mut hi) = (0.0, z + normal_upper_quantile(1.0 - power));
        let mut c = hi;
        for _ in 0..200 {
            let fc = f(c);
            if fc == 0.0 {
                break;
            }
            if fc < 0.0 {
                lo = c;
            } else {
                hi = c;
            }
            let slope = normal_density(c - z) - normal_density(c + z);
            let newton = c - fc / slope;
            let next = if newton > lo && newton < hi && newton.is_finite() {
                newton
            } else {
                0.5 * (lo + hi)
            };
            let done = (next - c).abs() <= 4.0 * f64::EPSILON * c;
            c = next;
            if done || hi - lo <= 4.0 * f64::EPSILON * hi {
                break;
            }
        }
        Ok(PowerRule {
            alpha,
            power,
            multiple: c,
        })
    }

    /// The test's level.
    pub fn alpha(&self) -> f64 {
        self.alpha
    }

    /// The wanted power.
    pub fn power(&self) -> f64 {
        self.power
    }

    /// The multiple c of the standard error (about 2.8016 at alpha 0.05, power 0.8).
    pub fn multiple(&self) -> f64 {
        self.multiple
    }

    /// The smallest effect h = 2 asin sqrt(p1) - 2 asin sqrt(p0) detectable between groups
    /// of `n1` and `n2` units: c sqrt(1/n1 + 1/n2). Units may be fractional (expected
    /// volumes); a group with no units (n <= 0, or NaN) detects nothing: infinity.
    pub fn detectable_effect(&self, n1: f64, n2: f64) -> f64 {
        if !(n1 > 0.0 && n2 > 0.0) {
            return f64::INFINITY;
        }
        self.multiple * (1.0 / n1 + 1.0 / n2).sqrt()
    }

    /// The smallest rise from the rate `p0` detectable between groups of `n1` and `n2`
    /// units: p1 - p0 with p1 = sin²(asin sqrt(p0) + h/2), h from
    /// [`detectable_effect`](Self::detectable_effect). `None` when no rate up to 1 gets
    /// there (small groups, or a rate near 1), when `p0` is outside [0, 1], or when a
    /// group has no units. Computed as sin(2a + h/2) sin(h/2), a = asin sqrt(p0), the same
    /// difference of squares without the cancellation of sin²(a + h/2) - p0 at large
    /// volumes. A handful of floating-point functions: cheap enough for every pair.
    ///
    /// ```
    /// use dispar_stats::power::PowerRule;
    /// let rule = PowerRule::new(0.05, 0.8)?;
    /// // 1,000 units each at 2%: a rise of 2.13 points (to 4.13%) is detectable.
    /// let d = rule.detectable_difference(0.02, 1000.0, 1000.0).expect("reachable");
    /// assert!((d - 0.021_257_348).abs() < 1e-8); // mpmath 1.4.1
    /// // Five units each at 99% cannot show any rise.
    /// assert_eq!(rule.detectable_difference(0.99, 5.0, 5.0), None);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn detectable_difference(&self, p0: f64, n1: f64, n2: f64) -> Option<f64> {
        if !(0.0..=1.0).contains(&p0) {
            return None;
        }
        let half = 0.5 * self.detectable_effect(n1, n2);
        let a = p0.sqrt().asin();
        if !half.is_finite() || a + half > FRAC_PI_2 {
            return None;
        }
        Some((2.0 * a + half).sin() * half.sin())
    }

    /// Units per group (two equal groups) needed to detect a change of the rate from `p0`
    /// to `p0 + difference`: 2 (c / h)². A fall (negative `difference`) is answered too.
    /// h is computed as 2 asin((p1 - p0) / (sqrt(p1 q0) + sqrt(p0 q1))), equal to
    /// 2 asin sqrt(p1) - 2 asin sqrt(p0) but without its cancellation for small
    /// differences.
    ///
    /// Errors: `p0` outside [0, 1], `difference` 0 or not finite, or `p0 + difference`
    /// outside [0, 1].
    ///
    /// ```
    /// use dispar_stats::power::PowerRule;
    /// let rule = PowerRule::new(0.05, 0.8)?;
    /// // From 2% to 3%: 3,788.3 units in each group (mpmath 1.4.1).
    /// assert!((rule.units_needed(0.02, 0.01)? - 3788.294_974).abs() < 1e-5);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn units_needed(&self, p0: f64, difference: f64) -> Result<f64, StatsError> {
        if !(0.0..=1.0).contains(&p0) {
            return Err(StatsError::InvalidParameter {
                name: "rate",
                value: p0,
                requirement: "between 0 and 1",
            });
        }
        if !(difference.is_finite() && difference != 0.0) {
            return Err(StatsError::InvalidParameter {
                name: "difference",
                value: difference,
                requirement: "finite and not 0",
            });
        }
        let p1 = p0 + difference;
        if !(0.0..=1.0).contains(&p1) {
            return Err(StatsError::InvalidParameter {
                name: "rate plus difference",
                value: p1,
                requirement: "between 0 and 1",
            });
        }
        let (q0, q1) = (1.0 - p0, (1.0 - p0) - difference);
        let denominator = (p1 * q0).sqrt() + (p0 * q1.max(0.0)).sqrt();
        // asin(sqrt p1) - asin(sqrt p0) = asin(sqrt(p1) sqrt(q0) - sqrt(p0) sqrt(q1)), and
        // that difference of products is (p1 - p0) / denominator.
        let half_h = (difference / denominator).clamp(-1.0, 1.0).asin();
        Ok(0.5 * (self.multiple / half_h).powi(2))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_rule_reaches_its_power() {
        for &(alpha, power) in &[
            (0.05, 0.8),
            (0.01, 0.9),
            (0.05, 0.06),
            (1e-8, 0.99),
            (0.5, 0.51),
        ] {
            let rule = PowerRule::new(alpha, power).expect("valid");
            let z = normal_upper_quantile(0.5 * alpha);
            let c = rule.multiple();
            let got = normal_upper(z - c) + normal_upper(z + c);
            assert!(
                (got - power).abs() < 1e-14,
                "alpha {alpha}, power {power}: {got}"
            );
        }
    }

    #[test]
    fn impossible_levels_are_refused() {
        for &(alpha, power) in &[
            (0.0, 0.8),
            (1.0, 0.8),
            (0.05, 0.05),
            (0.05, 0.01),
            (0.05, 1.0),
            (0.05, f64::NAN),
        ] {
            assert!(
                PowerRule::new(alpha, power).is_err(),
                "alpha {alpha}, power {power}"
            );
        }
    }

    #[test]
    fn empty_groups_and_bad_rates_detect_nothing() {
        let rule = PowerRule::new(0.05, 0.8).expect("valid");
        assert_eq!(rule.detectable_effect(0.0, 100.0), f64::INFINITY);
        assert_eq!(rule.detectable_effect(f64::NAN, 100.0), f64::INFINITY);
        assert_eq!(rule.detectable_difference(0.1, 0.0, 100.0), None);
        assert_eq!(rule.detectable_difference(-0.1, 100.0, 100.0), None);
        assert_eq!(rule.detectable_difference(f64::NAN, 100.0, 100.0), None);
        assert_eq!(rule.detectable_difference(1.0, 1e9, 1e9), None);
        assert!(rule.units_needed(0.1, 0.0).is_err());
        assert!(rule.units_needed(0.95, 0.1).is_err());
        assert!(rule.units_needed(1.5, -0.6).is_err());
        assert!(rule.units_needed(0.1, f64::NAN).is_err());
    }

    #[test]
    fn units_needed_inverts_the_detectable_difference() {
        let rule = PowerRule::new(0.05, 0.8).expect("valid");
        for &(p0, n) in &[
            (0.01, 1e5),
            (0.3, 50.0),
            (1e-6, 1e9),
            (0.9, 2000.0),
            (0.0, 400.0),
        ] {
            let d = rule.detectable_difference(p0, n, n).expect("reachable");
            let back = rule.units_needed(p0, d).expect("valid");
            assert!((back - n).abs() <= 1e-9 * n, "p0 {p0}, n {n}: {back}");
        }
    }
}
