//! The Cochran-Armitage test for a trend in proportions across ordered periods, with a
//! widened form for series whose period-to-period variation exceeds binomial sampling.
//!
//! Cochran (1954), "Some methods for strengthening the common chi-squared tests",
//! Biometrics 10; Armitage (1955), "Tests for linear trends in proportions and
//! frequencies", Biometrics 11.
//!
//! # Method
//!
//! Points i (periods with units inspected, n_i > 0) with defectives d_i and scores t_i;
//! N = sum n_i, D = sum d_i, p̄ = D / N, q̄ = 1 - p̄, t̄ = sum n_i t_i / N.
//!
//! - **Slope**: the weighted least-squares line of the rate d_i / n_i on t_i with weights
//!   n_i (Armitage 1955): b = T / Sxx with T = sum (d_i - n_i p̄)(t_i - t̄) and
//!   Sxx = sum n_i (t_i - t̄)² = sum n_i t_i² - (sum n_i t_i)² / N.
//! - **z, binomial variance convention**: z = T / sqrt(p̄ q̄ Sxx), i.e.
//!   Var T = p̄ q̄ [sum n t² - (sum n t)² / N], signed (positive: rising rate). This is the
//!   statistic of R's `prop.trend.test` (its X-squared is z²). The hypergeometric
//!   (permutation) convention, which conditions on D as well, divides by N - 1 instead of
//!   N: its z² is z² (N - 1) / N, a difference that vanishes at plant volumes. p is
//!   two-sided from the normal distribution.
//! - **Departure from the line**: X² of homogeneity minus z², which equals the weighted
//!   residual sum of squares sum n_i (p_i - p̂_i)² / (p̄ q̄) around the fitted line (computed
//!   in that form, so it never cancels to a negative value); on k - 2 df under binomial
//!   sampling around a straight line.
//! - **Widened test**: the dispersion phi = departure / (k - 2) estimates the variation of
//!   the periods around the line relative to binomial sampling, the quasi-likelihood
//!   moment estimator (McCullagh & Nelder 1989, *Generalized Linear Models*, 2nd ed.).
//!   z_w = z / sqrt(max(1, phi)), and when phi > 1 its p is two-sided from Student's t
//!   on k - 2 df (phi being estimated from k - 2 df); otherwise it is the normal p. At
//!   plant volumes (1e5 units a period) the period-to-period variation is many times the
//!   binomial, and the unwidened z then calls nearly every trendless series a trend (see
//!   the simulation test below).

use statrs::function::beta::checked_beta_reg;

use crate::chisq::upper_tail_unchecked;
use crate::error::{NotTestable, NotTestableReason, StatsError};

/// The Cochran-Armitage trend test of one series (see the module docs for the formulas).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trend {
    /// Points with units inspected (points with 0 units are skipped, keeping their scores).
    pub periods: usize,
    /// Change in the rate per unit of score (per period with the default scores 0, 1,
    /// 2, ...): the weighted least-squares slope of rate on score, weights = units.
    pub slope: f64,
    /// z, signed (positive = rising), binomial variance convention
    /// Var = p̄ (1 - p̄) [sum n t² - (sum n t)² / N].
    pub statistic: f64,
    /// Two-sided normal p of `statistic`; may underflow to 0 (see `log10_p`).
    pub p_value: f64,
    /// log10 of `p_value`, finite where p underflows.
    pub log10_p: f64,
    /// X² of homogeneity minus z²: departure from a linear trend, on `periods - 2` df.
    pub departure: f64,
    /// Chi-square p of `departure` on `periods - 2` df (small: the rates do not lie on a
    /// line, whether from curvature or from extra-binomial variation).
    pub departure_p: f64,
    /// `departure / (periods - 2)`: variation around the line relative to binomial.
    pub dispersion: f64,
    /// `statistic / sqrt(max(1, dispersion))`.
    pub z_widened: f64,
    /// Two-sided p of `z_widened`: Student's t on `periods - 2` df when
    /// `dispersion > 1`, else equal to `p_value`.
    pub p_widened: f64,
}

/// The Cochran-Armitage test for a trend in the proportions of `points`, given in period
/// order as (inspected, defective). `scores` (one per point, finite) default to 0, 1,
/// 2, ...; a point with 0 units is skipped but keeps its score, so a gap in production
/// stays a gap in time.
///
/// Errors: a point with more defective than inspected units
/// ([`StatsError::DefectiveExceedsInspected`]); scores of another length than the points,
/// not finite, or all equal over the points with units, or fewer than 3 points with units
/// ([`StatsError::InvalidParameter`]); no defective or no conforming unit at all
/// ([`StatsError::NotTestable`], reason `TooFewColumns`); a total beyond u64
/// ([`StatsError::Overflow`]). Never a NaN.
///
/// ```
/// use dispar_stats::trend::cochran_armitage;
/// // Agresti (2002), Categorical Data Analysis, 2nd ed., Wiley: infant malformation by
/// // the mother's alcohol consumption, scores 0, 0.5, 1.5, 4, 7; the linear-by-linear
/// // statistic M² = 6.57, P = 0.01 (recalled from memory). M² is the hypergeometric
/// // form, z² (N - 1) / N.
/// let t = cochran_armitage(
///     &[(17114, 48), (14502, 38), (793, 5), (127, 1), (38, 1)],
///     Some(&[0.0, 0.5, 1.5, 4.0, 7.0]),
/// )?;
/// let n = 32574.0;
/// assert!((t.statistic.powi(2) * (n - 1.0) / n - 6.57).abs() < 0.005);
/// assert!(t.statistic > 0.0 && (t.p_value - 0.01).abs() < 0.005);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn cochran_armitage(
    points: &[(u64, u64)],
    scores: Option<&[f64]>,
) -> Result<Trend, StatsError> {
    if let Some(s) = scores {
        if s.len() != points.len() {
            return Err(StatsError::InvalidParameter {
                name: "number of scores",
                value: s.len() as f64,
                requirement: "one score per point",
            });
        }
        if let Some(&bad) = s.iter().find(|t| !t.is_finite()) {
            return Err(StatsError::InvalidParameter {
                name: "score",
                value: bad,
                requirement: "finite",
            });
        }
    }
    let mut kept: Vec<(u64, u64, f64)> = Vec::with_capacity(points.len());
    let mut dropped_rows = Vec::new();
    let (mut big_n, mut big_d) = (0u64, 0u64);
    for (index, &(n, d)) in points.iter().enumerate() {
        if d > n {
            return Err(StatsError::DefectiveExceedsInspected {
                index,
                inspected: n,
                defective: d,
            });
        }
        if n == 0 {
            dropped_rows.push(index);
            continue;
        }
        big_n = big_n.checked_add(n).ok_or(StatsError::Overflow)?;
        big_d += d; // d <= n, so D <= N did not overflow
        let t = scores.map_or(index as f64, |s| s[index]);
        kept.push((n, d, t));
    }
    let k = kept.len();
    if k < 3 {
        return Err(StatsError::InvalidParameter {
            name: "points with units",
            value: k as f64,
            requirement: "at least 3 (a line and its departure need 3)",
        });
    }
    if big_d == 0 || big_d == big_n {
        return Err(StatsError::NotTestable(NotTestable {
            reason: NotTestableReason::TooFewColumns { usable: 1 },
            dropped_rows,
            // Column 0 is defective, column 1 conforming, as in `Table::from_rates`.
            dropped_cols: vec![if big_d == 0 { 0 } else { 1 }],
        }));
    }
    if kept.iter().all(|p| p.2 == kept[0].2) {
        return Err(StatsError::InvalidParameter {
            name: "score",
            value: kept[0].2,
            requirement: "not the same for every point with units",
        });
    }

    let nf = big_n as f64;
    let p_bar = big_d as f64 / nf;
    // From the integers, so a rate near 1 keeps its digits.
    let q_bar = (big_n - big_d) as f64 / nf;
    let t_bar = kept.iter().map(|&(n, _, t)| n as f64 * t).sum::<f64>() / nf;
    // Centred sums: an error in t̄ then multiplies sum (d - n p̄) = 0, not D.
    let (mut sxx, mut big_t) = (0.0, 0.0);
    for &(n, d, t) in &kept {
        let dt = t - t_bar;
        sxx += n as f64 * dt * dt;
        big_t += (d as f64 - n as f64 * p_bar) * dt;
    }
    if !(sxx > 0.0 && sxx.is_finite()) {
        return Err(StatsError::InvalidParameter {
            name: "score spread (sum n (t - mean t)^2)",
            value: sxx,
            requirement: "positive and finite",
        });
    }
    let slope = big_t / sxx;
    let variance_unit = p_bar * q_bar;
    let z = big_t / (variance_unit * sxx).sqrt();
    let departure = kept
        .iter()
        .map(|&(n, d, t)| {
            let nf = n as f64;
            let r = d as f64 - nf * (p_bar + slope * (t - t_bar));
            r * r / (nf * variance_unit)
        })
        .sum::<f64>();
    let df = (k - 2) as u64;
    let dispersion = departure / df as f64;
    let tail = upper_tail_unchecked(z * z, 1);
    let departure_p = upper_tail_unchecked(departure, df).p;
    let (z_widened, p_widened) = if dispersion > 1.0 {
        let zw = z / dispersion.sqrt();
        (zw, student_two_sided(zw, df as f64))
    } else {
        (z, tail.p)
    };
    Ok(Trend {
        periods: k,
        slope,
        statistic: z,
        p_value: tail.p,
        log10_p: tail.log10_p,
        departure,
        departure_p,
        dispersion,
        z_widened,
        p_widened,
    })
}

/// P(|T_df| >= |t|) = I_x(df/2, 1/2) with x = df / (df + t²), the regularized incomplete
/// beta function (Abramowitz & Stegun 1964, 26.7.1 with 26.5.2; equation numbers recalled
/// from memory).
fn student_two_sided(t: f64, df: f64) -> f64 {
    let x = df / (df + t * t);
    // x lies in (0, 1] for finite t and df >= 1; the fallback keeps a NaN out should it not.
    checked_beta_reg(0.5 * df, 0.5, x).unwrap_or(if t == 0.0 { 1.0 } else { 0.0 })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_zero_unit_point_is_skipped_but_keeps_its_score() {
        let gap = cochran_armitage(&[(200, 4), (0, 0), (210, 9), (190, 15)], None).expect("valid");
        let same = cochran_armitage(&[(200, 4), (210, 9), (190, 15)], Some(&[0.0, 2.0, 3.0]))
            .expect("valid");
        assert_eq!(gap, same);
        assert_eq!(gap.periods, 3);
    }

    #[test]
    fn fewer_than_three_points_with_units_are_refused() {
        let err = cochran_armitage(&[(100, 3), (0, 0), (100, 5)], None).expect_err("refused");
        assert!(
            matches!(
                err,
                StatsError::InvalidParameter {
                    name: "points with units",
                    ..
                }
            ),
            "{err}"
        );
    }

    #[test]
    fn no_defective_at_all_is_not_testable() {
        let err =
            cochran_armitage(&[(100, 0), (0, 0), (100, 0), (50, 0)], None).expect_err("refused");
        let StatsError::NotTestable(nt) = err else {
            panic!("{err}")
        };
        assert_eq!(nt.reason, NotTestableReason::TooFewColumns { usable: 1 });
        assert_eq!(nt.dropped_rows, vec![1]);
        assert_eq!(nt.dropped_cols, vec![0]);
        let all = cochran_armitage(&[(10, 10), (10, 10), (10, 10)], None).expect_err("refused");
        assert!(
            matches!(all, StatsError::NotTestable(ref nt) if nt.dropped_cols == vec![1]),
            "{all}"
        );
    }

    #[test]
    fn bad_scores_are_refused() {
        let pts = [(100, 3), (100, 4), (100, 5)];
        for scores in [
            &[0.0, 1.0][..],
            &[0.0, f64::NAN, 2.0],
            &[1.0, 1.0, 1.0],
            &[0.0, f64::INFINITY, 1.0],
        ] {
            let err = cochran_armitage(&pts, Some(scores)).expect_err("refused");
            assert!(
                matches!(err, StatsError::InvalidParameter { .. }),
                "{scores:?}: {err}"
            );
        }
        // Equal scores on the points with units only: still no spread.
        let err = cochran_armitage(
            &[(100, 3), (0, 0), (100, 4), (100, 5)],
            Some(&[1.0, 9.0, 1.0, 1.0]),
        )
        .expect_err("refused");
        assert!(
            matches!(err, StatsError::InvalidParameter { name: "score", .. }),
            "{err}"
        );
    }

    #[test]
    fn more_defective_than_inspected_is_refused() {
        let err = cochran_armitage(&[(100, 3), (10, 11), (100, 5)], None).expect_err("refused");
        assert_eq!(
            err,
            StatsError::DefectiveExceedsInspected {
                index: 1,
                inspected: 10,
                defective: 11
            }
        );
    }

    #[test]
    fn reversing_the_periods_flips_the_sign_only() {
        let pts = [(1000, 12), (900, 15), (1100, 25), (950, 19), (1020, 31)];
        let rev: Vec<(u64, u64)> = pts.iter().rev().copied().collect();
        let (a, b) = (
            cochran_armitage(&pts, None).expect("valid"),
            cochran_armitage(&rev, None).expect("valid"),
        );
        assert!((a.statistic + b.statistic).abs() < 1e-12 * a.statistic.abs());
        assert!((a.slope + b.slope).abs() < 1e-12 * a.slope.abs());
        assert!((a.departure - b.departure).abs() < 1e-12 * a.departure);
    }

    #[test]
    fn the_student_tail_has_its_known_values() {
        // t on 1 df is Cauchy: P(|T| > 1) = 1/2 exactly; on 2 df P(|T| > t) = 1 -
        // t / sqrt(2 + t²) in closed form.
        assert!((student_two_sided(1.0, 1.0) - 0.5).abs() < 1e-15);
        let t: f64 = 3.0;
        assert!((student_two_sided(t, 2.0) - (1.0 - t / (2.0 + t * t).sqrt())).abs() < 1e-15);
        assert_eq!(student_two_sided(0.0, 5.0), 1.0);
    }
}

#[cfg(test)]
mod simulation {
    //! False trend calls on trendless series with period-to-period variation beyond
    //! binomial, at plant volumes. Seeded, so the counts are always the same.
    use super::*;
    use rand_chacha::ChaCha8Rng;
    use rand_core::{RngCore, SeedableRng};

    fn uniform(rng: &mut ChaCha8Rng) -> f64 {
        // 53 random bits in (0, 1).
        ((rng.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        let (u, v) = (uniform(rng), uniform(rng));
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }

    /// Binomial(n, p) by inversion outwards from the mode (as in the baseline
    /// simulation): exact, O(sd) steps per draw.
    fn binomial(rng: &mut ChaCha8Rng, n: u64, p: f64) -> u64 {
        use statrs::function::factorial::ln_binomial;
        let q = 1.0 - p;
        let mode = (((n + 1) as f64 * p).floor() as u64).min(n);
        let pm = (ln_binomial(n, mode) + mode as f64 * p.ln() + (n - mode) as f64 * q.ln()).exp();
        let mut u = uniform(rng) - pm;
        let (mut lo, mut hi, mut p_lo, mut p_hi) = (mode, mode, pm, pm);
        while u > 0.0 && (lo > 0 || hi < n) {
            if lo > 0 {
                p_lo *= lo as f64 * q / ((n - lo + 1) as f64 * p);
                lo -= 1;
                u -= p_lo;
                if u <= 0.0 {
                    return lo;
                }
            }
            if hi < n {
                p_hi *= (n - hi) as f64 * p / ((hi + 1) as f64 * q);
                hi += 1;
                u -= p_hi;
                if u <= 0.0 {
                    return hi;
                }
            }
        }
        mode
    }

    /// (widened, unwidened) calls at `alpha` over `series` trendless series of `k`
    /// periods of `n` units at rate `p` times a lognormal multiplier of log-sd `s`.
    fn calls(
        seed: u64,
        series: usize,
        k: usize,
        n: u64,
        p: f64,
        s: f64,
        alpha: f64,
    ) -> (usize, usize) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let (mut widened, mut plain) = (0, 0);
        for _ in 0..series {
            let pts: Vec<(u64, u64)> = (0..k)
                .map(|_| {
                    let m = (s * normal(&mut rng) - 0.5 * s * s).exp();
                    (n, binomial(&mut rng, n, p * m))
                })
                .collect();
            let t = cochran_armitage(&pts, None).expect("valid");
            widened += usize::from(t.p_widened < alpha);
            plain += usize::from(t.p_value < alpha);
        }
        (widened, plain)
    }

    #[test]
    fn the_widened_test_calls_trendless_overdispersed_series_at_about_alpha() {
        // 10 periods of 100,000 units at 1%, 10% lognormal variation between periods: the
        // binomial sd of a period's count is 31, the extra variation 100, so phi ~ 11.
        // With equal sizes the residuals are nearly normal with one variance, so z_w is
        // nearly t on 8 df and the widened calls should be alpha = 0.05: 500 of 10,000
        // (sd 21.8). Allowed: within four sd. Measured: 494 widened, 5,624 unwidened (the
        // unwidened z calls most trendless series a trend); 40,000 series gave 4.8%.
        let series = 10_000;
        let (widened, plain) = calls(11, series, 10, 100_000, 0.01, 0.1, 0.05);
        let expected = series as f64 * 0.05;
        let sd = (expected * 0.95).sqrt();
        println!("widened {widened}, unwidened {plain} of {series}");
        assert!(
            (widened as f64 - expected).abs() <= 4.0 * sd,
            "widened false calls {widened} of {series}, expected about {expected}"
        );
        assert!(
            plain > series / 2,
            "unwidened false calls {plain} of {series}"
        );
    }

    #[test]
    fn on_binomial_series_the_widened_test_is_not_above_alpha() {
        // No extra variation: phi is below 1 about half the time (then the normal p is
        // used) and the t p otherwise, so the calls are at or below alpha. Measured: 303
        // widened (3.0%), 449 unwidened of 10,000.
        let series = 10_000;
        let (widened, plain) = calls(12, series, 10, 100_000, 0.01, 0.0, 0.05);
        let expected = series as f64 * 0.05;
        let sd = (expected * 0.95).sqrt();
        println!("widened {widened}, unwidened {plain} of {series}");
        assert!(
            widened as f64 <= expected + 4.0 * sd,
            "widened {widened} of {series}"
        );
        assert!(
            (plain as f64 - expected).abs() <= 4.0 * sd,
            "unwidened {plain} of {series}"
        );
    }
}
