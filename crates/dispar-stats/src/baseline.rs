//! A group's period against its own baseline: did its defect rate change from its usual?
//!
//! Input: the period's (inspected n, defective d) and the group's earlier periods of the
//! same kind, oldest first, each (n_j, d_j); a period with n_j = 0 had no production and
//! is skipped. Output: the baseline rate, the period's ratio and difference against it
//! with intervals, a z-score with the group's period-to-period variation folded in, the
//! limit, and a verdict: worse, better, usual or unknown, each with its reason.
//!
//! # Method
//!
//! - **Baseline rate** p̄ = sum d_j / sum n_j over the retained baseline periods, with its
//!   Wilson (1927) score interval.
//! - **Between-period variation** after Laney (2002), "Improved control charts for
//!   attributes", Quality Engineering 14(4): each retained baseline period's
//!   z_j = (p_j - p̄) / sqrt(p̄(1 - p̄)/n_j); sigma_z = (mean moving range of consecutive
//!   z_j) / 1.128, floored at 1 (no less variation than binomial sampling). 1.128 is the
//!   control-chart constant d2 for ranges of two (2/sqrt(pi) = 1.1284). The period's
//!   z = (p - p̄) / (sigma_z sqrt(p̄(1 - p̄)/n)).
//! - **Small counts, exact.** When the period's expected defectives at the baseline rate
//!   n p̄ are below 5 or the baseline has fewer than 10 defectives (and, symmetrically,
//!   when n(1 - p̄) < 5 or the baseline has fewer than 10 conforming units, so rates near
//!   1 are treated alike), the period's z is the two-sided conditional exact p of the
//!   2 x 2 table [d, n - d; D, N - D] (Fisher's test, [`crate::exact::fisher`]) turned into
//!   a signed normal-equivalent sign(p - p̄) Phi^-1(1 - p_exact/2), then divided by
//!   sigma_z: exact when the baseline shows no extra variation, widened like the normal
//!   z when it does. This also answers a baseline rate of 0 (or 1): a period with
//!   defectives after a baseline with none gets the exact p of that table. The result
//!   says which method ran ([`Method`]).
//! - **Robust to earlier excursions.** Repeatedly: judge every retained baseline period
//!   against the other retained periods exactly as the current period is judged (their
//!   pooled rate, their own sigma_z, the same normal-or-exact rule); if the most extreme
//!   of these |z| is beyond the limit, leave that one period out (the earliest on a tie)
//!   and repeat. Periods are left out only while more than `min_periods` remain, so the
//!   estimate never rests on fewer. The left-out periods are reported. A group coming
//!   back to normal after an excursion is therefore compared with its normal periods,
//!   and an excursion does not inflate sigma_z enough to hide the next one.
//! - **Limit.** A report with k groups makes k calls. The default limit is two-sided and
//!   Šidák-adjusted for them: per call a = 1 - (1 - alpha_f)^(1/k), limit
//!   Phi^-1(1 - a/2), with the family alpha alpha_f = 0.01 per report
//!   ([`DEFAULT_FAMILY_ALPHA`]). If the z-scores were exactly standard normal on stable
//!   data, the expected number of false calls per report would be at most 1% whatever k
//!   is, about 0.5 a year across 52 weekly reports. The three-sigma limit, common practice
//!   in the trade for control charts (not a stated error rate: per call 0.27%, so
//!   0.027 k false calls per report), is offered as [`Limit::ThreeSigma`].
//!
//! **How well the stated rate holds** (measured by the simulation tests below, six groups,
//! per call a = 0.0016737, eight baseline periods). The z treats p̄ and sigma_z as known.
//! On purely binomial data with large expected counts (20,000 units at 1%) the false-call
//! rate is a within its sampling error. It is higher when:
//! - the group's rate really varies between periods: sigma_z is then estimated from seven
//!   moving ranges (the average moving range has about 0.62 (m - 1) degrees of freedom,
//!   from memory, matching a simulation made for this module), so the z has heavier tails
//!   than the normal; with a lognormal multiplier of sd 0.05 on the rate (true sigma_z
//!   about 1.22) the measured rate is 5.3 a, and even true sigma_z = 1.04 (sd 0.02, below
//!   the floor, so not corrected at all) gives about 1.7 a;
//! - expected counts are moderate (about 20 defectives a period): the binomial's skew puts
//!   more than a/2 beyond the upper limit (measured 1.5 a, nearly all "worse").
//!
//! A t-quantile for sigma_z's degrees of freedom and sqrt(1 + n/N) for p̄'s own error
//! would bring the first case near a at the cost of much wider limits with eight periods;
//! that is a design choice left open here.
//!
//! - **Ratio** p / p̄ with Katz's log interval (Katz, Baptista, Azen & Pike 1978,
//!   "Obtaining confidence intervals for the risk ratio in cohort studies", Biometrics 34):
//!   ln(p/p̄) -/+ z_c sigma_z sqrt(1/d - 1/n + 1/D - 1/N), widened by sigma_z like the
//!   z-score. When d or D is 0, 0.5 is added to each of the four cells for the interval
//!   (`ratio_corrected` says so).
//! - **Difference** p - p̄ with Newcombe's (1998) hybrid score interval (binomial, not
//!   widened).

use crate::anom::sidak;
use crate::error::{StatsError, check_open_unit};
use crate::exact::fisher;
use crate::interval::{Interval, newcombe_difference, normal_upper_quantile, wilson};

/// The family alpha per report of the default limit: at most 1% expected false calls
/// per report (under the model's assumptions; see the module docs).
pub const DEFAULT_FAMILY_ALPHA: f64 = 0.01;

/// Laney's divisor of the average moving range: d2 for ranges of two.
const D2: f64 = 1.128;

/// The limit a |z| must exceed for a worse or better call.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Limit {
    /// Two-sided, Šidák-adjusted for `calls` calls (the groups of the report) at the
    /// family alpha `family_alpha`: Phi^-1(1 - a/2), a = 1 - (1 - family_alpha)^(1/calls).
    Sidak {
        /// Expected false calls per report are at most this.
        family_alpha: f64,
        /// Number of groups judged in the report (k >= 1).
        calls: usize,
    },
    /// Three sigma: common practice in the trade for control charts, not an error rate
    /// chosen for the report (0.27% per call).
    ThreeSigma,
}

impl Limit {
    /// The Šidák limit for `calls` groups at the default family alpha.
    pub fn sidak(calls: usize) -> Limit {
        Limit::Sidak {
            family_alpha: DEFAULT_FAMILY_ALPHA,
            calls,
        }
    }

    /// The limit's value.
    ///
    /// ```
    /// use dispar_stats::baseline::Limit;
    /// // One group at alpha 0.01: the two-sided 0.5% normal quantile.
    /// assert!((Limit::sidak(1).value()? - 2.575_829_303_548_901).abs() < 1e-12);
    /// // Six groups: per call 1 - 0.99^(1/6) = 0.0016737, limit 3.142756 (scipy norm.isf).
    /// assert!((Limit::sidak(6).value()? - 3.142_755_833_413_517).abs() < 1e-12);
    /// assert_eq!(Limit::ThreeSigma.value()?, 3.0);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn value(self) -> Result<f64, StatsError> {
        match self {
            Limit::Sidak {
                family_alpha,
                calls,
            } => {
                check_open_unit("family_alpha", family_alpha)?;
                if calls == 0 {
                    return Err(StatsError::InvalidParameter {
                        name: "calls (groups)",
                        value: 0.0,
                        requirement: "at least 1",
                    });
                }
                Ok(sidak(family_alpha, calls))
            }
            Limit::ThreeSigma => Ok(3.0),
        }
    }

    /// The two-sided false-call probability per call when z is standard normal.
    pub fn per_call_alpha(self) -> Result<f64, StatsError> {
        let limit = self.value()?;
        // P(|Z| > x) = P(chi-square on 1 df > x^2), with the crate's accurate tail.
        Ok(crate::chisq::upper_tail_unchecked(limit * limit, 1).p)
    }
}

/// Options of [`compare`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BaselineOptions {
    /// The limit (default: Šidák for one call at alpha 0.01; a report passes its k).
    pub limit: Limit,
    /// Fewest baseline periods with units for a verdict (default 4, at least 2); periods
    /// are left out only while more than this remain.
    pub min_periods: usize,
    /// Confidence of the intervals (default 0.95).
    pub confidence: f64,
}

impl Default for BaselineOptions {
    fn default() -> Self {
        BaselineOptions {
            limit: Limit::sidak(1),
            min_periods: 4,
            confidence: 0.95,
        }
    }
}

/// The verdict on a period against its baseline.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Verdict {
    /// The rate is above its usual beyond the limit.
    Worse,
    /// The rate is below its usual beyond the limit.
    Better,
    /// Within the limit.
    Usual,
    /// No verdict possible (see the reason).
    Unknown,
}

/// Why the verdict.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reason {
    /// z above +limit.
    AboveLimit,
    /// z below -limit.
    BelowLimit,
    /// |z| within the limit.
    WithinLimit,
    /// Fewer baseline periods with units than the minimum.
    TooFewBaselinePeriods {
        /// Baseline periods with units.
        with_units: usize,
        /// The minimum asked for.
        minimum: usize,
    },
    /// The period itself inspected nothing.
    NoUnitsInPeriod,
}

/// How the period's z was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Laney's z with the normal approximation.
    Normal,
    /// Fisher's exact test of the period against the pooled baseline, as a signed
    /// normal-equivalent z, divided by sigma_z.
    Exact,
}

/// A period against its baseline.
#[derive(Debug, Clone, PartialEq)]
pub struct Comparison {
    /// Worse, better, usual or unknown.
    pub verdict: Verdict,
    /// Why.
    pub reason: Reason,
    /// Normal or exact; None when unknown.
    pub method: Option<Method>,
    /// The period's rate d / n; None without units.
    pub period_rate: Option<f64>,
    /// The baseline rate p̄ over the retained periods; None when the baseline has no units.
    pub rate: Option<f64>,
    /// Wilson interval of p̄.
    pub rate_ci: Option<Interval>,
    /// p / p̄ (None when unknown or p̄ = 0).
    pub ratio: Option<f64>,
    /// Katz's log interval of the ratio, widened by sigma_z.
    pub ratio_ci: Option<Interval>,
    /// Whether 0.5 was added to each cell for the ratio's interval (d or D was 0).
    pub ratio_corrected: bool,
    /// p - p̄.
    pub difference: Option<f64>,
    /// Newcombe's hybrid score interval of the difference.
    pub difference_ci: Option<Interval>,
    /// The period's z against the baseline (None when unknown).
    pub z: Option<f64>,
    /// The limit |z| is compared with.
    pub limit: f64,
    /// Laney's sigma_z of the retained baseline periods (>= 1).
    pub sigma_z: Option<f64>,
    /// Indices (into the baseline, oldest = 0) of the periods the estimate used.
    pub used: Vec<usize>,
    /// Indices of the periods left out as excursions, in the order they were left out.
    pub left_out: Vec<usize>,
    /// Baseline periods with units (before any were left out).
    pub with_units: usize,
    /// Units inspected over the retained baseline periods (N).
    pub baseline_inspected: u64,
    /// Units defective over the retained baseline periods (D).
    pub baseline_defective: u64,
}

impl Comparison {
    /// The reason in words.
    pub fn explanation(&self) -> String {
        match self.reason {
            Reason::AboveLimit | Reason::BelowLimit | Reason::WithinLimit => {
                let z = self.z.unwrap_or(f64::NAN);
                let side = match self.reason {
                    Reason::AboveLimit => "above the usual rate beyond",
                    Reason::BelowLimit => "below the usual rate beyond",
                    _ => "within",
                };
                format!(
                    "z = {z:.2} ({}), {side} the limit {:.2}, against {} baseline periods{}",
                    match self.method {
                        Some(Method::Exact) => "exact",
                        _ => "normal",
                    },
                    self.limit,
                    self.used.len(),
                    if self.left_out.is_empty() {
                        String::new()
                    } else {
                        format!(" ({} left out as excursions)", self.left_out.len())
                    }
                )
            }
            Reason::TooFewBaselinePeriods {
                with_units,
                minimum,
            } => format!(
                "only {with_units} baseline periods with units; at least {minimum} are needed"
            ),
            Reason::NoUnitsInPeriod => "no units were inspected in the period".to_string(),
        }
    }
}

/// One period's z against a set of baseline periods (the same rule for the current
/// period and for each baseline period judged against the others).
#[derive(Debug, Clone, Copy)]
struct Score {
    p_bar: f64,
    sigma_z: f64,
    z: f64,
    method: Method,
    inspected: u64,
    defective: u64,
}

/// Laney's sigma_z of the periods `base` (time order, all with units) around their
/// pooled rate.
fn sigma_z(base: &[(u64, u64)], p_bar: f64) -> f64 {
    let var = p_bar * (1.0 - p_bar);
    if base.len() < 2 || var <= 0.0 {
        // Every period sits at a pooled rate of 0 or 1: no variation beyond binomial.
        return 1.0;
    }
    let z: Vec<f64> = base
        .iter()
        .map(|&(n, d)| (d as f64 / n as f64 - p_bar) / (var / n as f64).sqrt())
        .collect();
    let mr = z.windows(2).map(|w| (w[1] - w[0]).abs()).sum::<f64>() / (z.len() - 1) as f64;
    (mr / D2).max(1.0)
}

fn score(n: u64, d: u64, base: &[(u64, u64)]) -> Score {
    let big_n: u64 = base.iter().map(|b| b.0).sum();
    let big_d: u64 = base.iter().map(|b| b.1).sum();
    let p_bar = big_d as f64 / big_n as f64;
    let s = sigma_z(base, p_bar);
    let nf = n as f64;
    let p = d as f64 / nf;
    let exact = nf * p_bar < 5.0 || nf * (1.0 - p_bar) < 5.0 || big_d < 10 || big_n - big_d < 10;
    let (z, method) = if exact {
        let f = fisher(d, n - d, big_d, big_n - big_d);
        let sign = if p > p_bar {
            1.0
        } else if p < p_bar {
            -1.0
        } else {
            0.0
        };
        (
            sign * z_from_two_sided(f.p_two_sided, f.log10_p) / s,
            Method::Exact,
        )
    } else {
        let se = (p_bar * (1.0 - p_bar) / nf).sqrt();
        ((p - p_bar) / (s * se), Method::Normal)
    };
    Score {
        p_bar,
        sigma_z: s,
        z,
        method,
        inspected: big_n,
        defective: big_d,
    }
}

/// |z| with P(|Z| > z) = p; from log10 p where p underflows (then by the Mills-ratio
/// expansion, good to far better than any limit needs at |z| > 37).
fn z_from_two_sided(p: f64, log10_p: f64) -> f64 {
    if p >= 1.0 {
        return 0.0;
    }
    if p > 0.0 {
        return normal_upper_quantile(0.5 * p);
    }
    // ln q = -z^2/2 - ln z - ln sqrt(2 pi), q = p / 2.
    let ln_q = log10_p * std::f64::consts::LN_10 - std::f64::consts::LN_2;
    let big_l = -2.0 * ln_q - (2.0 * std::f64::consts::PI).ln();
    let mut z = big_l.sqrt();
    for _ in 0..8 {
        z = (big_l - 2.0 * z.ln()).sqrt();
    }
    z
}

/// The period `(inspected, defective)` against its `baseline` periods (oldest first).
///
/// Errors: a period or baseline period with defective > inspected; options out of range
/// (family alpha or confidence outside (0, 1), zero calls, `min_periods` < 2).
///
/// ```
/// use dispar_stats::baseline::{compare, BaselineOptions, Method, Verdict};
/// // Eight stable weeks around 1.0%, then 1.6% in a week of 5,000 units.
/// let weeks = [(5_000, 52), (5_000, 47), (5_000, 50), (5_000, 55),
///              (5_000, 45), (5_000, 49), (5_000, 51), (5_000, 51)];
/// let c = compare((5_000, 80), &weeks, &BaselineOptions::default())?;
/// assert_eq!(c.rate, Some(0.01));
/// assert_eq!(c.method, Some(Method::Normal));
/// // Moving ranges of the weekly z average below 1.128: sigma_z is floored at 1.
/// assert_eq!(c.sigma_z, Some(1.0));
/// // z = (0.016 - 0.01) / sqrt(0.01 * 0.99 / 5000) = 4.2640
/// assert!((c.z.unwrap() - 4.264_014_327_112_209).abs() < 1e-12);
/// assert_eq!(c.verdict, Verdict::Worse);
/// assert!(c.left_out.is_empty());
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn compare(
    period: (u64, u64),
    baseline: &[(u64, u64)],
    options: &BaselineOptions,
) -> Result<Comparison, StatsError> {
    let limit = options.limit.value()?;
    check_open_unit("confidence", options.confidence)?;
    if options.min_periods < 2 {
        return Err(StatsError::InvalidParameter {
            name: "min_periods",
            value: options.min_periods as f64,
            requirement: "at least 2 (sigma_z needs a moving range)",
        });
    }
    let (n, d) = period;
    if d > n {
        return Err(StatsError::DefectiveExceedsInspected {
            index: baseline.len(),
            inspected: n,
            defective: d,
        });
    }
    for (index, &(bn, bd)) in baseline.iter().enumerate() {
        if bd > bn {
            return Err(StatsError::DefectiveExceedsInspected {
                index,
                inspected: bn,
                defective: bd,
            });
        }
    }
    let mut used: Vec<usize> = (0..baseline.len()).filter(|&j| baseline[j].0 > 0).collect();
    let with_units = used.len();
    let counts = |idx: &[usize]| -> Vec<(u64, u64)> { idx.iter().map(|&j| baseline[j]).collect() };
    let unknown = |reason: Reason, used: Vec<usize>| -> Result<Comparison, StatsError> {
        let base = counts(&used);
        let big_n: u64 = base.iter().map(|b| b.0).sum();
        let big_d: u64 = base.iter().map(|b| b.1).sum();
        let (rate, rate_ci) = if big_n > 0 {
            (
                Some(big_d as f64 / big_n as f64),
                Some(wilson(big_d, big_n, options.confidence)?),
            )
        } else {
            (None, None)
        };
        Ok(Comparison {
            verdict: Verdict::Unknown,
            reason,
            method: None,
            period_rate: (n > 0).then(|| d as f64 / n as f64),
            rate,
            rate_ci,
            ratio: None,
            ratio_ci: None,
            ratio_corrected: false,
            difference: None,
            difference_ci: None,
            z: None,
            limit,
            sigma_z: None,
            used,
            left_out: Vec::new(),
            with_units,
            baseline_inspected: big_n,
            baseline_defective: big_d,
        })
    };
    if with_units < options.min_periods {
        return unknown(
            Reason::TooFewBaselinePeriods {
                with_units,
                minimum: options.min_periods,
            },
            used,
        );
    }
    if n == 0 {
        return unknown(Reason::NoUnitsInPeriod, used);
    }

    let mut left_out = Vec::new();
    while used.len() > options.min_periods {
        let mut worst: Option<(usize, f64)> = None;
        for pos in 0..used.len() {
            let others: Vec<(u64, u64)> = used
                .iter()
                .enumerate()
                .filter(|&(q, _)| q != pos)
                .map(|(_, &j)| baseline[j])
                .collect();
            let (bn, bd) = baseline[used[pos]];
            let z = score(bn, bd, &others).z.abs();
            if worst.is_none_or(|(_, w)| z > w) {
                worst = Some((pos, z));
            }
        }
        match worst {
            Some((pos, z)) if z > limit => left_out.push(used.remove(pos)),
            _ => break,
        }
    }

    let base = counts(&used);
    let s = score(n, d, &base);
    let (big_n, big_d) = (s.inspected, s.defective);
    let p = d as f64 / n as f64;
    let (verdict, reason) = if s.z > limit {
        (Verdict::Worse, Reason::AboveLimit)
    } else if s.z < -limit {
        (Verdict::Better, Reason::BelowLimit)
    } else {
        (Verdict::Usual, Reason::WithinLimit)
    };
    let zc = normal_upper_quantile(0.5 * (1.0 - options.confidence));
    let corrected = d == 0 || big_d == 0;
    let (a, an, c, cn) = if corrected {
        (
            d as f64 + 0.5,
            n as f64 + 1.0,
            big_d as f64 + 0.5,
            big_n as f64 + 1.0,
        )
    } else {
        (d as f64, n as f64, big_d as f64, big_n as f64)
    };
    let ln_ratio = (a / an).ln() - (c / cn).ln();
    let se = (1.0 / a - 1.0 / an + 1.0 / c - 1.0 / cn).max(0.0).sqrt() * s.sigma_z;
    let ratio_ci = Interval {
        lower: (ln_ratio - zc * se).exp(),
        upper: (ln_ratio + zc * se).exp(),
    };
    Ok(Comparison {
        verdict,
        reason,
        method: Some(s.method),
        period_rate: Some(p),
        rate: Some(s.p_bar),
        rate_ci: Some(wilson(big_d, big_n, options.confidence)?),
        ratio: (s.p_bar > 0.0).then(|| p / s.p_bar),
        ratio_ci: Some(ratio_ci),
        ratio_corrected: corrected,
        difference: Some(p - s.p_bar),
        difference_ci: Some(newcombe_difference(d, n, big_d, big_n, options.confidence)?),
        z: Some(s.z),
        limit,
        sigma_z: Some(s.sigma_z),
        used,
        left_out,
        with_units,
        baseline_inspected: big_n,
        baseline_defective: big_d,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    const STABLE: [(u64, u64); 8] = [
        (5_000, 52),
        (5_000, 47),
        (5_000, 50),
        (5_000, 55),
        (5_000, 45),
        (5_000, 49),
        (5_000, 51),
        (5_000, 51),
    ];

    #[test]
    fn sigma_z_by_hand_from_the_moving_ranges() {
        // Rates 1%, 2%, 1%, 2% of 1,000: p̄ = 1.5%, se = sqrt(0.015 * 0.985 / 1000) =
        // 0.0038438, z = -/+1.30080; every moving range 2.60160; sigma_z = 2.60160 / 1.128.
        let base = [(1_000, 10), (1_000, 20), (1_000, 10), (1_000, 20)];
        let se = (0.015f64 * 0.985 / 1000.0).sqrt();
        let want = 2.0 * 0.005 / se / 1.128;
        assert_rel(sigma_z(&base, 0.015), want, 1e-14, "sigma_z");
        assert!(want > 2.3 && want < 2.31);
        let c = compare((1_000, 40), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.method, Some(Method::Normal));
        assert_rel(c.z.expect("z"), 0.025 / se / want, 1e-13, "z");
        assert_eq!(c.verdict, Verdict::Worse);
    }

    #[test]
    fn an_earlier_excursion_is_left_out_and_the_return_to_normal_is_usual() {
        // Week 3 ran at 3% among weeks at 1%; now back to 1%.
        let mut base = STABLE;
        base[3] = (5_000, 150);
        let c = compare((5_000, 50), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.left_out, vec![3]);
        assert_eq!(c.used, vec![0, 1, 2, 4, 5, 6, 7]);
        assert_eq!(c.verdict, Verdict::Usual);
        assert_eq!(c.sigma_z, Some(1.0));
        // Without leaving it out, the week back at 1% would look better than usual
        // against a baseline of 1.25%, or sigma_z would be inflated.
        let all = score(5_000, 50, &base);
        assert!(all.p_bar > 0.0123 && all.sigma_z > 2.0);
        // A second excursion after the first is still caught.
        let again = compare((5_000, 150), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(again.verdict, Verdict::Worse);
    }

    #[test]
    fn leaving_out_stops_at_the_minimum() {
        // Five periods, all different: at most one may go with min_periods 4.
        let base = [
            (10_000, 100),
            (10_000, 300),
            (10_000, 100),
            (10_000, 500),
            (10_000, 100),
        ];
        let c = compare((10_000, 100), &base, &BaselineOptions::default()).expect("valid");
        assert!(c.left_out.len() <= 1);
        assert_eq!(c.used.len() + c.left_out.len(), 5);
        assert!(c.used.len() >= 4);
    }

    #[test]
    fn too_few_periods_and_no_units_are_unknown_with_the_reason() {
        let base = [(100, 1), (0, 0), (100, 2), (0, 0), (100, 0)];
        let c = compare((100, 5), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.verdict, Verdict::Unknown);
        assert_eq!(
            c.reason,
            Reason::TooFewBaselinePeriods {
                with_units: 3,
                minimum: 4
            }
        );
        assert_eq!(c.rate, Some(0.01));
        assert!(c.explanation().contains("only 3 baseline periods"));
        let none = compare((0, 0), &STABLE, &BaselineOptions::default()).expect("valid");
        assert_eq!(none.reason, Reason::NoUnitsInPeriod);
        assert_eq!(none.period_rate, None);
        assert_eq!(none.z, None);
    }

    #[test]
    fn a_zero_baseline_rate_goes_the_exact_way() {
        // No defective in eight weeks of 500, then 4 of 500: the two-sided Fisher p of
        // [4, 496; 0, 4000] is the probability of the observed table alone (all 4
        // defectives in the period's row; every other table is more likely),
        // C(500, 4) / C(4500, 4).
        let base = [(500, 0); 8];
        let c = compare((500, 4), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.method, Some(Method::Exact));
        assert_eq!(c.rate, Some(0.0));
        assert_eq!(c.sigma_z, Some(1.0));
        assert_eq!(c.ratio, None);
        assert!(c.ratio_corrected);
        let p: f64 = (0..4)
            .map(|i| (500.0 - i as f64) / (4500.0 - i as f64))
            .product();
        let want = normal_upper_quantile(0.5 * p);
        assert_rel(c.z.expect("z"), want, 1e-10, "exact z");
        assert_eq!(c.verdict, Verdict::Worse);
        // And no defective in the period either: usual, z = 0.
        let same = compare((500, 0), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!((same.z, same.verdict), (Some(0.0), Verdict::Usual));
    }

    #[test]
    fn the_exact_path_divides_by_sigma_z() {
        // Few defectives (sum < 10) with visible variation: the exact z is widened.
        let base = [(400, 0), (400, 4), (400, 0), (400, 4), (400, 0)];
        let c = compare((400, 6), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.method, Some(Method::Exact));
        assert!(c.left_out.is_empty());
        let s = c.sigma_z.expect("sigma_z");
        assert!(s > 1.0);
        let f = fisher(6, 394, 8, 1_992);
        assert_rel(
            c.z.expect("z"),
            normal_upper_quantile(0.5 * f.p_two_sided) / s,
            1e-12,
            "z",
        );
    }

    #[test]
    fn ratio_and_difference_intervals() {
        let c = compare((5_000, 80), &STABLE, &BaselineOptions::default()).expect("valid");
        assert_rel(c.ratio.expect("ratio"), 1.6, 1e-14, "ratio");
        // Katz: se = sqrt(1/80 - 1/5000 + 1/400 - 1/40000), sigma_z = 1.
        let se = (1.0f64 / 80.0 - 1.0 / 5000.0 + 1.0 / 400.0 - 1.0 / 40_000.0).sqrt();
        let ci = c.ratio_ci.expect("ci");
        assert_rel(
            ci.lower,
            (1.6f64.ln() - 1.959_963_984_540_054 * se).exp(),
            1e-12,
            "lower",
        );
        assert_rel(
            ci.upper,
            (1.6f64.ln() + 1.959_963_984_540_054 * se).exp(),
            1e-12,
            "upper",
        );
        assert!(!c.ratio_corrected);
        let nd = newcombe_difference(80, 5_000, 400, 40_000, 0.95).expect("valid");
        assert_eq!(c.difference_ci, Some(nd));
        assert_rel(
            c.difference.expect("difference"),
            0.006,
            1e-12,
            "difference",
        );
    }

    #[test]
    fn better_is_below_and_three_sigma_is_an_option() {
        let c = compare((5_000, 20), &STABLE, &BaselineOptions::default()).expect("valid");
        assert_eq!((c.verdict, c.reason), (Verdict::Better, Reason::BelowLimit));
        let opts = BaselineOptions {
            limit: Limit::ThreeSigma,
            ..BaselineOptions::default()
        };
        let t = compare((5_000, 70), &STABLE, &opts).expect("valid");
        assert_eq!(t.limit, 3.0);
        // z = 0.004 / 0.0014071 = 2.843: within three sigma, beyond the default 2.576.
        assert_eq!(t.verdict, Verdict::Usual);
        let s = compare((5_000, 70), &STABLE, &BaselineOptions::default()).expect("valid");
        assert_eq!(s.verdict, Verdict::Worse);
        assert_rel(
            Limit::ThreeSigma.per_call_alpha().expect("ok"),
            0.002_699_796_063_260_207,
            1e-12,
            "three-sigma two-sided tail",
        );
    }

    #[test]
    fn bad_input_is_typed() {
        let o = BaselineOptions::default();
        assert!(matches!(
            compare((5, 6), &STABLE, &o),
            Err(StatsError::DefectiveExceedsInspected { .. })
        ));
        assert!(matches!(
            compare((5, 1), &[(3, 4)], &o),
            Err(StatsError::DefectiveExceedsInspected { index: 0, .. })
        ));
        for bad in [
            BaselineOptions {
                min_periods: 1,
                ..o
            },
            BaselineOptions {
                confidence: 1.0,
                ..o
            },
            BaselineOptions {
                limit: Limit::Sidak {
                    family_alpha: 0.01,
                    calls: 0,
                },
                ..o
            },
        ] {
            assert!(compare((5, 1), &STABLE, &bad).is_err());
        }
    }

    #[test]
    fn an_underflowing_exact_p_still_gives_a_large_z() {
        // P(|Z| > 40) = 7.3e-350 underflows; log10 of it is -349.14.
        let z = z_from_two_sided(0.0, -349.137);
        assert!((z - 40.0).abs() < 0.01, "{z}");
        assert_eq!(z_from_two_sided(1.0, 0.0), 0.0);
    }
}

#[cfg(test)]
mod simulation {
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

    /// Binomial(n, p) by inversion (sequential search from 0): exact, O(np) per draw.
    fn binomial(rng: &mut ChaCha8Rng, n: u64, p: f64) -> u64 {
        let u = uniform(rng);
        let q = 1.0 - p;
        let mut pmf = q.powf(n as f64);
        let mut cdf = pmf;
        let mut x = 0u64;
        while cdf < u && x < n {
            pmf *= (n - x) as f64 / (x + 1) as f64 * p / q;
            x += 1;
            cdf += pmf;
        }
        x
    }

    /// False (worse, better) calls over `series` stable series of `b` baseline periods
    /// plus the period judged, each period `n` units at rate `p` times a lognormal
    /// multiplier of log-sd `noise` (mean 1).
    fn false_calls(
        seed: u64,
        series: usize,
        b: usize,
        n: u64,
        p: f64,
        noise: f64,
        calls: usize,
    ) -> (usize, usize) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let opts = BaselineOptions {
            limit: Limit::sidak(calls),
            ..BaselineOptions::default()
        };
        let draw = |rng: &mut ChaCha8Rng| {
            let m = (noise * normal(rng) - 0.5 * noise * noise).exp();
            (n, binomial(rng, n, (p * m).min(1.0)))
        };
        let (mut worse, mut better) = (0, 0);
        for _ in 0..series {
            let base: Vec<(u64, u64)> = (0..b).map(|_| draw(&mut rng)).collect();
            let period = draw(&mut rng);
            match compare(period, &base, &opts).expect("valid").verdict {
                Verdict::Worse => worse += 1,
                Verdict::Better => better += 1,
                _ => {}
            }
        }
        (worse, better)
    }

    /// Per-call rate of the Šidák limit for six groups at family alpha 0.01.
    fn a6() -> f64 {
        Limit::sidak(6).per_call_alpha().expect("valid")
    }

    #[test]
    fn binomial_stable_data_are_called_at_the_stated_rate() {
        // 20,000 group-periods of 20,000 units at 1%, eight baseline periods each, no
        // variation beyond binomial; six groups per report: per call a = 0.0016737, so
        // 33.5 false calls are expected (Poisson sd 5.8). Seeded: the count is always
        // the same; the band is four standard errors.
        let series = 20_000;
        let expected = series as f64 * a6();
        let (worse, better) = false_calls(1, series, 8, 20_000, 0.01, 0.0, 6);
        let calls = (worse + better) as f64;
        assert!(
            (calls - expected).abs() <= 4.0 * expected.sqrt(),
            "{calls} false calls ({worse} worse, {better} better), expected {expected:.1}"
        );
    }

    #[test]
    fn extra_binomial_variation_raises_the_false_call_rate_above_the_stated_one() {
        // The same with a lognormal multiplier (sd 0.05) on each period's rate: true
        // sigma_z about 1.22, estimated from seven moving ranges. Measured: 177 calls of
        // 20,000 (0.0089 per call, 5.3 times a). The module docs state this; the band
        // below pins it so that a change of the method shows here.
        let series = 20_000;
        let expected = series as f64 * a6();
        let (worse, better) = false_calls(6, series, 8, 20_000, 0.01, 0.05, 6);
        let ratio = (worse + better) as f64 / expected;
        assert!(
            (3.0..8.0).contains(&ratio),
            "{worse} worse + {better} better = {ratio:.2} times the stated rate"
        );
    }
}
