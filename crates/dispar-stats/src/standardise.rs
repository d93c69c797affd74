//! Indirect standardisation of defect counts across strata (products): how many defective
//! units a group (site, line) produced against how many it would have produced had each
//! of its products failed at that product's pooled rate, with an exact Poisson interval
//! and test of the ratio, and funnel limits for the ratio against the expected count.
//!
//! # Method
//!
//! Groups g, strata s, n_gs units inspected and x_gs defective. The pooled rate of a
//! stratum over all groups is r_s = sum_g x_gs / sum_g n_gs; a group's expected count is
//! E_g = sum_s n_gs r_s and its observed count O_g = sum_s x_gs. The standardised ratio
//! O / E (the "standardised incidence ratio" of epidemiology) is 1 for a group whose
//! products fail at their usual rates, whatever its product mix — Breslow & Day (1987),
//! *Statistical Methods in Cancer Research, Vol. II: The Design and Analysis of Cohort
//! Studies*, IARC Scientific Publications 82, chapter 2.
//!
//! - **Interval**: O is treated as Poisson with mean E times the ratio, E as fixed. The
//!   exact interval of a Poisson mean (Garwood 1936, "Fiducial limits for the Poisson
//!   distribution", Biometrika 28:437-442) is [chi2_{a/2}(2 O) / 2, chi2_{1-a/2}(2 O + 2) / 2]
//!   with chi2_q(k) the lower q-quantile on k df (lower end 0 when O = 0); divided by E it
//!   bounds the ratio.
//! - **Test**: two-sided exact Poisson test of O against mean E, the "central" form
//!   p = min(1, 2 min(P(X <= O), P(X >= O))), the test that inverts Garwood's interval.
//!   Both tails are regularized incomplete gamma functions, P(X <= O) = Q(O + 1, E) and
//!   P(X >= O) = P(O, E), computed in log space so `log10_p` stays finite.
//! - **Funnel**: for a group whose true ratio is 1, O ~ Poisson(E). The limits at E are
//!   Poisson quantiles made continuous by the interpolation of Spiegelhalter (2005),
//!   "Funnel plots for comparing institutional performance", Statistics in Medicine
//!   24:1185-1202, appendix A.1 (recalled from memory): for a tail probability p, r_p is
//!   the smallest r with P(X <= r) >= p, a = (P(X <= r_p) - p) / P(X = r_p), and the limit
//!   is (r_p - a) / E on the ratio scale. The lower limit is clipped at 0.
//!
//! ```
//! use dispar_stats::standardise::indirect;
//! // Two sites, two products. Product 0 fails at 1%, product 1 at 10% when pooled.
//! // Site 0 makes mostly the bad product, so its raw rate is high, but its ratio is ~1.
//! let groups = vec![
//!     vec![(100, 1), (900, 90)], // site 0: 91 / 1000 defective
//!     vec![(900, 9), (100, 10)], // site 1: 19 / 1000 defective
//! ];
//! let s = indirect(&groups, 0.95)?;
//! assert_eq!(s[0].observed, 91);
//! assert!((s[0].expected - 91.0).abs() < 1e-12);
//! assert!((s[0].ratio.expect("E > 0") - 1.0).abs() < 1e-12);
//! assert_eq!(s[0].p_value, Some(1.0));
//! # Ok::<(), dispar_stats::StatsError>(())
//! ```

use crate::chisq::{critical_value, ln_upper_gamma_regularized};
use crate::error::{StatsError, check_open_unit};
use crate::interval::{Interval, normal_upper_quantile};
use crate::loader::ln_dpois;

/// One group's observed and expected defective counts over all strata, with the ratio's
/// exact interval and test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Standardised {
    /// Defective units of the group, over all strata.
    pub observed: u64,
    /// Expected defective units, sum_s n_gs r_s with r_s the pooled rate of stratum s over
    /// all groups.
    pub expected: f64,
    /// observed / expected; `None` when expected is 0 (the group only made products that
    /// never failed anywhere, or inspected nothing).
    pub ratio: Option<f64>,
    /// Garwood's exact Poisson interval of the observed count, divided by `expected`, at
    /// the requested confidence; `None` when expected is 0.
    pub ratio_ci: Option<Interval>,
    /// Two-sided exact ("central") Poisson p of the observed count against mean
    /// `expected`; may underflow to 0 (see `log10_p`). `None` when expected is 0.
    pub p_value: Option<f64>,
    /// log10 of `p_value`, finite where p underflows.
    pub log10_p: Option<f64>,
}

/// Indirect standardisation of every group: `groups[g][s]` = (inspected, defective) of
/// group g in stratum s (product s). Every group must list the same strata, in the same
/// order; a product a group did not make is (0, 0).
///
/// Errors: no groups or no strata ([`StatsError::EmptyTable`]); a group with another
/// number of strata than group 0 ([`StatsError::RaggedRows`], `row` = the group);
/// defective above inspected ([`StatsError::DefectiveExceedsInspected`], `index` = the
/// group); totals beyond u64 ([`StatsError::Overflow`]); confidence outside (0, 1).
pub fn indirect(
    groups: &[Vec<(u64, u64)>],
    confidence: f64,
) -> Result<Vec<Standardised>, StatsError> {
    check_open_unit("confidence", confidence)?;
    let (inspected, defective) = stratum_totals(groups)?;
    groups
        .iter()
        .map(|row| {
            // The group's defectives cannot overflow: they are part of the checked totals.
            let observed: u64 = row.iter().map(|&(_, x)| x).sum();
            let expected: f64 = row
                .iter()
                .zip(inspected.iter().zip(&defective))
                .filter(|&(&(n, _), (&ns, _))| n > 0 && ns > 0)
                .map(|(&(n, _), (&ns, &xs))| n as f64 * (xs as f64 / ns as f64))
                .sum();
            standardised(observed, expected, confidence)
        })
        .collect()
}

/// Checks `groups[g][s]` = (inspected, defective) (see [`indirect`] for the errors) and
/// returns the units inspected and defective of each stratum over all groups.
pub(crate) fn stratum_totals(
    groups: &[Vec<(u64, u64)>],
) -> Result<(Vec<u64>, Vec<u64>), StatsError> {
    let strata = groups.first().map_or(0, Vec::len);
    if strata == 0 {
        return Err(StatsError::EmptyTable);
    }
    let mut inspected = vec![0u64; strata];
    let mut defective = vec![0u64; strata];
    for (g, row) in groups.iter().enumerate() {
        if row.len() != strata {
            return Err(StatsError::RaggedRows {
                row: g,
                len: row.len(),
                expected: strata,
            });
        }
        for (s, &(n, x)) in row.iter().enumerate() {
            if x > n {
                return Err(StatsError::DefectiveExceedsInspected {
                    index: g,
                    inspected: n,
                    defective: x,
                });
            }
            inspected[s] = inspected[s].checked_add(n).ok_or(StatsError::Overflow)?;
            defective[s] = defective[s].checked_add(x).ok_or(StatsError::Overflow)?;
        }
    }
    Ok((inspected, defective))
}

/// The ratio, interval and test of one group from its observed and expected counts.
fn standardised(observed: u64, expected: f64, confidence: f64) -> Result<Standardised, StatsError> {
    if expected <= 0.0 {
        return Ok(Standardised {
            observed,
            expected,
            ratio: None,
            ratio_ci: None,
            p_value: None,
            log10_p: None,
        });
    }
    let ln_p = ln_poisson_central_p(observed, expected);
    Ok(Standardised {
        observed,
        expected,
        ratio: Some(observed as f64 / expected),
        ratio_ci: Some(poisson_ratio_interval(observed, expected, confidence)?),
        p_value: Some(ln_p.exp()),
        log10_p: Some(ln_p / std::f64::consts::LN_10),
    })
}

/// Garwood's exact interval for the ratio observed / expected: the exact interval of a
/// Poisson mean given the count `observed`, divided by `expected`.
///
/// Errors: `expected` not finite and positive, confidence outside (0, 1),
/// `observed` above 2^63 - 2 (the chi-square df would not fit).
///
/// ```
/// use dispar_stats::standardise::poisson_ratio_interval;
/// // 95% exact interval for a Poisson count of 10 (Garwood 1936's construction; digits
/// // from scipy 1.17.1, chi2.ppf(0.025, 20) / 2 and chi2.ppf(0.975, 22) / 2).
/// let ci = poisson_ratio_interval(10, 1.0, 0.95)?;
/// assert!((ci.lower - 4.795_388_696_132_434).abs() < 1e-12);
/// assert!((ci.upper - 18.390_356_042_017_78).abs() < 1e-12);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn poisson_ratio_interval(
    observed: u64,
    expected: f64,
    confidence: f64,
) -> Result<Interval, StatsError> {
    check_open_unit("confidence", confidence)?;
    if !(expected.is_finite() && expected > 0.0) {
        return Err(StatsError::InvalidParameter {
            name: "expected",
            value: expected,
            requirement: "finite and positive",
        });
    }
    let df_upper = observed
        .checked_mul(2)
        .and_then(|d| d.checked_add(2))
        .ok_or(StatsError::Overflow)?;
    let tail = 0.5 * (1.0 - confidence);
    let lower = if observed == 0 {
        0.0
    } else {
        // The lower a/2-quantile is the upper (1 - a/2) critical value.
        0.5 * critical_value(1.0 - tail, df_upper - 2)?
    };
    let upper = 0.5 * critical_value(tail, df_upper)?;
    Ok(Interval {
        lower: lower / expected,
        upper: upper / expected,
    })
}

/// ln of the two-sided central Poisson p, min(1, 2 min(P(X <= o), P(X >= o))), X with
/// mean `mean` > 0.
fn ln_poisson_central_p(o: u64, mean: f64) -> f64 {
    let ln_tail = ln_poisson_cdf(o, mean).min(ln_poisson_at_least(o, mean));
    (std::f64::consts::LN_2 + ln_tail).min(0.0)
}

/// ln P(X <= r), X Poisson with mean `mean` > 0: ln Q(r + 1, mean).
fn ln_poisson_cdf(r: u64, mean: f64) -> f64 {
    ln_upper_gamma_regularized(r as f64 + 1.0, mean)
}

/// ln P(X >= r), X Poisson with mean `mean` > 0: ln P(r, mean), 0 for r = 0.
fn ln_poisson_at_least(r: u64, mean: f64) -> f64 {
    if r == 0 {
        0.0
    } else {
        ln_lower_gamma_regularized(r as f64, mean)
    }
}

/// P(X = r), X Poisson with mean `mean` > 0.
fn poisson_pmf(r: u64, mean: f64) -> f64 {
    if r == 0 {
        (-mean).exp()
    } else {
        ln_dpois(r as f64, mean).exp()
    }
}

/// ln P(a, y), the log of the regularized lower incomplete gamma function, a > 0, y > 0.
/// Below y = a + 1 the series P = D sum_n y^n / ((a + 1)...(a + n)), D = y^a e^-y /
/// Gamma(a + 1) from Loader's form (Numerical Recipes 3rd ed. eq. 6.2.5), summed in log
/// space so a tiny P keeps its digits; above it P = 1 - Q is at least ~0.4, so
/// ln(1 - Q) from the crate's upper function loses nothing.
fn ln_lower_gamma_regularized(a: f64, y: f64) -> f64 {
    if y > a + 1.0 {
        return (-ln_upper_gamma_regularized(a, y).exp()).ln_1p();
    }
    let (mut term, mut sum) = (1.0f64, 1.0f64);
    let mut n = 1.0;
    while n < 1e7 {
        term *= y / (a + n);
        sum += term;
        if term < 1e-17 * sum {
            break;
        }
        n += 1.0;
    }
    ln_dpois(a, y) + sum.ln()
}

/// Funnel limits for the ratio O / E of a group whose true ratio is 1, against its
/// expected count E: Poisson quantiles with Spiegelhalter's (2005) interpolation (see the
/// module docs). Evaluate with [`RatioFunnel::at`].
///
/// ```
/// use dispar_stats::standardise::RatioFunnel;
/// let f = RatioFunnel::new(0.95)?;
/// let band = f.at(100.0);
/// // The band holds 1 and narrows like 1 +- 1.96 / sqrt(E).
/// assert!(band.contains(1.0));
/// assert!((band.lower - (1.0 - 0.196)).abs() < 0.01);
/// assert!((band.upper - (1.0 + 0.196)).abs() < 0.02);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RatioFunnel {
    /// Probability outside the band on each side, (1 - coverage) / 2.
    tail: f64,
    /// The normal quantile of `tail`, where the quantile search starts.
    z: f64,
}

impl RatioFunnel {
    /// Limits covering `coverage` (in (0, 1), two-sided) of the ratios of groups whose
    /// true ratio is 1. Errors: coverage outside (0, 1).
    pub fn new(coverage: f64) -> Result<Self, StatsError> {
        check_open_unit("coverage", coverage)?;
        let tail = 0.5 * (1.0 - coverage);
        Ok(Self {
            tail,
            z: normal_upper_quantile(tail),
        })
    }

    /// The limits on the ratio scale at expected count `expected`. A non-positive or
    /// non-finite `expected` gives [0, infinity]. The Poisson tails are exact to about
    /// 1e-13 for E up to ~1e9 (the incomplete gamma's series and continued fraction need
    /// ~sqrt(E) terms).
    pub fn at(&self, expected: f64) -> Interval {
        if !(expected.is_finite() && expected > 0.0) {
            return Interval {
                lower: 0.0,
                upper: f64::INFINITY,
            };
        }
        // Lower end: smallest r with P(X <= r) >= tail.
        let cdf = |r: u64| ln_poisson_cdf(r, expected).exp();
        let r = smallest_with(start(expected, -self.z), |r| cdf(r) >= self.tail);
        let a = (cdf(r) - self.tail) / poisson_pmf(r, expected);
        let lower = ((r as f64 - a) / expected).max(0.0);
        // Upper end: smallest r with P(X <= r) >= 1 - tail, written with the survival
        // function P(X > r) = P(X >= r + 1) so a small tail keeps its digits.
        let above = |r: u64| ln_poisson_at_least(r + 1, expected).exp();
        let r = smallest_with(start(expected, self.z), |r| above(r) <= self.tail);
        let a = (self.tail - above(r)) / poisson_pmf(r, expected);
        Interval {
            lower,
            upper: (r as f64 - a) / expected,
        }
    }
}

/// A first guess at the Poisson quantile near mean + z sqrt(mean), with the
/// Cornish-Fisher skewness term (z^2 - 1) / 6, so the search takes a few steps.
fn start(mean: f64, z: f64) -> u64 {
    let guess = mean + z * mean.sqrt() + (z * z - 1.0) / 6.0;
    if guess > 0.0 { guess as u64 } else { 0 }
}

/// The smallest r >= 0 with `holds(r)`, for a `holds` that is false below some r and true
/// from it on, searching outward from `guess`.
fn smallest_with(guess: u64, holds: impl Fn(u64) -> bool) -> u64 {
    let mut r = guess;
    while !holds(r) {
        r += 1;
    }
    while r > 0 && holds(r - 1) {
        r -= 1;
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn poisson_tails_match_scipy() {
        // scipy 1.17.1: poisson.cdf(r, mu), poisson.sf(r - 1, mu).
        let cases: &[(u64, f64, f64, f64)] = &[
            (0, 2.5, 0.0820849986238988, 1.0),
            (3, 2.5, 0.7575761331330662, 0.45618688411667035),
            (10, 2.5, 0.999938373089875, 0.0002773520946208362),
            (150, 100.0, 0.9999987669055809, 1.8842104660386844e-06),
        ];
        for &(r, mu, cdf, at_least) in cases {
            assert_rel(ln_poisson_cdf(r, mu).exp(), cdf, 1e-12, "cdf");
            assert_rel(ln_poisson_at_least(r, mu).exp(), at_least, 1e-12, "sf");
        }
    }

    #[test]
    fn a_group_at_the_pooled_rates_has_ratio_one_and_p_one() {
        // Every group with the same rate in every stratum: E = O exactly.
        let groups = vec![vec![(100, 5), (200, 40)], vec![(300, 15), (50, 10)]];
        for s in indirect(&groups, 0.95).expect("valid") {
            assert_rel(s.expected, s.observed as f64, 1e-14, "E");
            assert_eq!(s.p_value, Some(1.0));
            assert!(s.ratio_ci.expect("E > 0").contains(1.0));
        }
    }

    #[test]
    fn a_group_with_nothing_expected_has_no_ratio() {
        // Product 1 never fails; group 1 only made product 1.
        let groups = vec![vec![(100, 5), (100, 0)], vec![(0, 0), (400, 0)]];
        let s = indirect(&groups, 0.95).expect("valid");
        assert_eq!(s[1].expected, 0.0);
        assert_eq!(s[1].ratio, None);
        assert_eq!(s[1].p_value, None);
        assert_eq!(s[0].ratio, Some(1.0));
    }

    #[test]
    fn bad_input_is_refused() {
        assert_eq!(indirect(&[], 0.95), Err(StatsError::EmptyTable));
        assert!(matches!(
            indirect(&[vec![(1, 0)], vec![(1, 0), (2, 1)]], 0.95),
            Err(StatsError::RaggedRows { row: 1, .. })
        ));
        assert!(matches!(
            indirect(&[vec![(1, 2)]], 0.95),
            Err(StatsError::DefectiveExceedsInspected { index: 0, .. })
        ));
        assert!(matches!(
            indirect(&[vec![(u64::MAX, 0)], vec![(1, 0)]], 0.95),
            Err(StatsError::Overflow)
        ));
        assert!(indirect(&[vec![(1, 0)]], 1.0).is_err());
        assert!(poisson_ratio_interval(3, 0.0, 0.95).is_err());
        assert!(RatioFunnel::new(0.0).is_err());
        assert!(
            RatioFunnel::new(0.95)
                .expect("valid")
                .at(0.0)
                .upper
                .is_infinite()
        );
    }

    #[test]
    fn the_funnel_interpolates_between_the_discrete_quantiles() {
        // At E = 5, 95%: the lower quantile is r = 1 (P(X <= 0) = 0.0067 < 0.025 <=
        // P(X <= 1) = 0.0404); the limit lies in (0, 1/5].
        let band = RatioFunnel::new(0.95).expect("valid").at(5.0);
        assert!(band.lower > 0.0 && band.lower <= 0.2, "{band:?}");
        // The upper quantile is r = 10 (P(X <= 9) = 0.968, P(X <= 10) = 0.986).
        assert!(
            band.upper > 9.0 / 5.0 && band.upper <= 10.0 / 5.0,
            "{band:?}"
        );
    }
}
