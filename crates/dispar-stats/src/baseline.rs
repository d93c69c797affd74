//! A group's period against its own baseline: did its defect rate change from its usual?
//!
//! Input: the period's (inspected n, defective d) and the group's earlier periods of the
//! same kind, oldest first, each (n_j, d_j); a period with n_j = 0 had no production and
//! is skipped. Output: the baseline rate, the period's ratio and difference against it
//! with intervals, a z-score with the group's period-to-period variation folded in, the
//! limit, and a verdict: worse, better, usual or unknown, each with its reason.
//!
//! # Method: quasi-binomial prediction
//!
//! - **Baseline rate** p̄ = sum d_j / sum n_j = D / N over the m retained baseline
//!   periods, with its Wilson (1927) score interval.
//! - **Between-period variation**: the quasi-binomial dispersion from the baseline
//!   periods' own homogeneity statistic, the moment (Pearson) estimator of McCullagh &
//!   Nelder (1989), *Generalized Linear Models*, 2nd ed., §4.5 (section number from
//!   memory): X²_b = sum_j (d_j - n_j p̄)² / (n_j p̄ (1 - p̄)) and
//!   phi = max(1, X²_b / (m - 1)), floored at 1 (no less variation than binomial
//!   sampling). sqrt(phi) plays the role of a sigma_z ([`Comparison::sigma_z`]).
//! - **z, prediction form**: z = (p - p̄) / sqrt(phi p̄ (1 - p̄) (1/n + 1/N)). The 1/N term
//!   is the baseline rate's own sampling error, so a short or small baseline widens the
//!   comparison instead of being taken as the truth.
//! - **Limit: Student's t on m - 1 degrees of freedom.** phi is estimated from m periods
//!   on m - 1 df, so under the quasi-binomial model z is approximately t with m - 1 df
//!   (when phi is not floored). The limit is the two-sided t quantile at the per-call
//!   level a, t_{m-1}(1 - a/2), always, also when phi is floored at 1: one rule for every
//!   group, conservative on purely binomial data (the calls are then rarer than a).
//!   A report with k groups makes k calls, so by default a is Šidák-adjusted for them:
//!   a = 1 - (1 - alpha_f)^(1/k) with the family alpha alpha_f = 0.01 per report
//!   ([`DEFAULT_FAMILY_ALPHA`]). The three-sigma limit, common practice in the trade for
//!   control charts and not an error rate chosen for the report, is [`Limit::ThreeSigma`]
//!   (|z| > 3 whatever m is).
//! - **Small counts, exact.** When the period's expected defectives at the baseline rate
//!   n p̄ are below 5 or the baseline has fewer than 10 defectives (and, symmetrically,
//!   when n(1 - p̄) < 5 or the baseline has fewer than 10 conforming units, so rates near
//!   1 are treated alike), the period's z is the two-sided conditional exact p of the
//!   2 x 2 table [d, n - d; D, N - D] (Fisher's test, [`crate::exact::fisher`]; it
//!   conditions on both rows, so the baseline's own error is in it too) turned into a
//!   signed normal-equivalent sign(p - p̄) Phi^-1(1 - p_exact/2), then divided by
//!   sqrt(phi), and compared with the same t limit. This also answers a baseline rate of
//!   0 (or 1): a period with defectives after a baseline with none gets the exact p of
//!   that table. The result says which method ran ([`Method`]).
//! - **Robust to earlier excursions: a forward search from a clean subset** (the forward
//!   search of Atkinson & Riani (2000), *Robust Diagnostic Regression Analysis*, and the
//!   clean-subset growth of Hadi & Simonoff (1993), JASA 88; both from memory).
//!   *Start*: sort the baseline periods by rate; of the runs of `min_periods` consecutive
//!   periods in that order, take the one with the smallest Pearson X² around its own
//!   pooled rate (the most homogeneous; for equal sizes this is the least-trimmed-squares
//!   subset of a location, which is always such a run, Rousseeuw & Leroy 1987, from
//!   memory). *Grow*: repeatedly take the remaining period nearest to the subset
//!   (smallest |z| against it, judged exactly as the current period is judged: the
//!   subset's pooled rate and phi, the same normal-or-exact rule, the t limit for the
//!   subset's size) and add it if its |z| is within the limit; at the first one beyond
//!   it, stop: it and every period not yet added are left out and reported. Ties go to
//!   the earliest. The estimate never rests on fewer than `min_periods` periods, and up to
//!   all but `min_periods` of the periods can be excursions. Judging each period against
//!   all the others instead (leaving out the worst while it is beyond the limit) is
//!   masked by consecutive excursions: on the demo data the drift weeks W15 and W16 in the
//!   baseline of W17 raise the others' phi to over 80, so neither is left out and W17 at
//!   three times the usual rate reads as usual. A group coming back to normal after an
//!   excursion is compared with its normal periods, and an excursion, even one lasting
//!   several periods, does not inflate phi enough to hide the next.
//!
//! **Stated rate: at most a false calls per group-period** on stable data (worse and
//! better together), so at most alpha_f per report, where the period-to-period variation
//! is moderate (up to about 10% of the rate). Measured by the simulation tests below (six
//! groups, alpha_f = 0.01, a = 0.0016737, eight baseline periods, 20,000 units at 1% a
//! period, 15,000 group-periods each, so 25.1 calls at exactly a, sd 5.0):
//!
//! | variation between periods | false calls (worse + better) | per call | / a |
//! |---|---:|---:|---:|
//! | none (binomial) | 0 | 0 | 0 |
//! | lognormal rate multiplier, log-sd 0.02 | 0 | 0 | 0 |
//! | lognormal, sd 0.05 | 1 + 0 | 0.00007 | 0.04 |
//! | lognormal, sd 0.10 | 11 + 2 | 0.00087 | 0.52 |
//! | beta-binomial, rate sd 10% of the rate, sizes 0.6–1.4 n | 6 + 1 | 0.00047 | 0.28 |
//! | lognormal sd 0.05 at 2,000 units (about 20 defectives a period) | 0 | 0 | 0 |
//!
//! Conservative while phi is floored at 1 or barely above it (the t limit for 7 df on an
//! almost known variance). **Not held under strong, skewed variation**: lognormal sd 0.15
//! gives 1.7 a, sd 0.2 2.1 a, sd 0.3 4.5 a (107 of 112 calls "worse"); beta-binomial with
//! a rate sd of 20% 2.1 a, 30% 3.3 a (same design, measured once for this table; the sd
//! 0.3 case is pinned by a test). The excess is in the upper tail of a right-skewed rate,
//! which a symmetric limit does not model and eight periods cannot estimate; the forward
//! search adds a little to it there (it starts from the most homogeneous periods, so with
//! large genuine variation it leaves out a few more of them: 3.8 a at sd 0.3 when the
//! worst was left out against all the others). The earlier
//! method of this module (Laney's sigma_z from seven moving ranges, normal limit, p̄ taken
//! as known) gave 1.7 a at sd 0.02 and 5.3 a at sd 0.05.
//!
//! The price is a wider limit with a short baseline: for six groups t_7(1 - a/2) = 4.94
//! against the normal 3.14; with twelve periods t_11 = 4.13. A step large enough to
//! matter at plant volumes is still far beyond it (the demo's KES drift weeks: z above
//! 10).
//!
//! - **Ratio** p / p̄ with Katz's log interval (Katz, Baptista, Azen & Pike 1978,
//!   "Obtaining confidence intervals for the risk ratio in cohort studies", Biometrics 34):
//!   ln(p/p̄) -/+ z_c sqrt(phi) sqrt(1/d - 1/n + 1/D - 1/N), widened by sqrt(phi) like the
//!   z-score (z_c normal). When d or D is 0, 0.5 is added to each of the four cells for
//!   the interval (`ratio_corrected` says so).
//! - **Difference** p - p̄ with Newcombe's (1998) hybrid score interval (binomial, not
//!   widened).

use crate::anom::sidak;
use crate::error::{StatsError, check_open_unit};
use crate::exact::fisher;
use crate::interval::{Interval, newcombe_difference, normal_upper_quantile, wilson};
use statrs::function::beta::{beta_reg, inv_beta_reg};
use statrs::function::gamma::ln_gamma;

/// The family alpha per report of the default limit: at most 1% expected false calls
/// per report (under the model's assumptions; see the module docs).
pub const DEFAULT_FAMILY_ALPHA: f64 = 0.01;

/// The limit a |z| must exceed for a worse or better call.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Limit {
    /// Two-sided, Šidák-adjusted for `calls` calls (the groups of the report) at the
    /// family alpha `family_alpha`: per call a = 1 - (1 - family_alpha)^(1/calls); the
    /// limit is Student's t_{m-1}(1 - a/2) for a baseline of m periods
    /// ([`Limit::value_for`]), Phi^-1(1 - a/2) as m grows ([`Limit::value`]).
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

    /// The limit's value for an unlimited baseline (the normal quantile; the limit a
    /// comparison uses is [`Limit::value_for`] its number of baseline periods).
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

    /// The limit used with a baseline of `periods` periods (phi estimated on
    /// `periods - 1` degrees of freedom, at least 1): the two-sided Student's t quantile
    /// at the per-call level for the Šidák limit, 3 for three sigma.
    ///
    /// ```
    /// use dispar_stats::baseline::Limit;
    /// // Six groups, eight baseline periods: t on 7 df at 1 - 0.0016737/2 (scipy t.isf).
    /// assert!((Limit::sidak(6).value_for(8)? - 4.940_782_482_751_277).abs() < 1e-10);
    /// assert_eq!(Limit::ThreeSigma.value_for(8)?, 3.0);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn value_for(self, periods: usize) -> Result<f64, StatsError> {
        let normal = self.value()?;
        match self {
            Limit::ThreeSigma => Ok(normal),
            Limit::Sidak { .. } => Ok(t_two_sided_quantile(
                self.per_call_alpha()?,
                periods.saturating_sub(1).max(1) as f64,
                normal,
            )),
        }
    }

    /// The two-sided false-call probability per call when z is standard normal (for the
    /// Šidák limit exactly its per-call level a, which the t limit keeps for t-distributed
    /// z).
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
    /// The quasi-binomial prediction z, (p - p̄) / sqrt(phi p̄(1 - p̄)(1/n + 1/N)).
    Normal,
    /// Fisher's exact test of the period against the pooled baseline, as a signed
    /// normal-equivalent z, divided by sqrt(phi).
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
    /// Katz's log interval of the ratio, widened by sqrt(phi).
    pub ratio_ci: Option<Interval>,
    /// Whether 0.5 was added to each cell for the ratio's interval (d or D was 0).
    pub ratio_corrected: bool,
    /// p - p̄.
    pub difference: Option<f64>,
    /// Newcombe's hybrid score interval of the difference.
    pub difference_ci: Option<Interval>,
    /// The period's z against the baseline (None when unknown).
    pub z: Option<f64>,
    /// The limit |z| is compared with (for the Šidák limit, Student's t on
    /// `used.len() - 1` df; before a verdict, the normal limit).
    pub limit: f64,
    /// sqrt(phi): the factor by which the baseline's variation widens the binomial
    /// standard error (>= 1).
    pub sigma_z: Option<f64>,
    /// The quasi-binomial dispersion phi = max(1, X²_b / (m - 1)) of the retained
    /// baseline periods (>= 1).
    pub dispersion: Option<f64>,
    /// Indices (into the baseline, oldest = 0) of the periods the estimate used.
    pub used: Vec<usize>,
    /// Indices of the periods left out as excursions, oldest first.
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
    phi: f64,
    z: f64,
    method: Method,
    inspected: u64,
    defective: u64,
}

/// The quasi-binomial dispersion of the periods `base` (all with units) around their
/// pooled rate: Pearson's X² of the periods over its m - 1 df, floored at 1.
fn dispersion(base: &[(u64, u64)], p_bar: f64) -> f64 {
    if base.len() < 2 {
        return 1.0;
    }
    (x2_around(base, p_bar) / (base.len() - 1) as f64).max(1.0)
}

/// Pearson's X² of the periods around the rate `p_bar`; 0 when it is 0 or 1 (every
/// period then sits at it: no variation beyond binomial).
fn x2_around(base: &[(u64, u64)], p_bar: f64) -> f64 {
    if p_bar <= 0.0 || p_bar >= 1.0 {
        return 0.0;
    }
    base.iter()
        .map(|&(n, d)| {
            let e = n as f64 * p_bar;
            let r = d as f64 - e;
            r * r / (e * (1.0 - p_bar))
        })
        .sum()
}

/// Pearson's X² of the periods around their own pooled rate.
fn pearson_x2(base: &[(u64, u64)]) -> f64 {
    let big_n: u64 = base.iter().map(|b| b.0).sum();
    let big_d: u64 = base.iter().map(|b| b.1).sum();
    x2_around(base, big_d as f64 / big_n as f64)
}

fn score(n: u64, d: u64, base: &[(u64, u64)]) -> Score {
    let big_n: u64 = base.iter().map(|b| b.0).sum();
    let big_d: u64 = base.iter().map(|b| b.1).sum();
    let p_bar = big_d as f64 / big_n as f64;
    let phi = dispersion(base, p_bar);
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
            sign * z_from_two_sided(f.p_two_sided, f.log10_p) / phi.sqrt(),
            Method::Exact,
        )
    } else {
        let se = (phi * p_bar * (1.0 - p_bar) * (1.0 / nf + 1.0 / big_n as f64)).sqrt();
        ((p - p_bar) / se, Method::Normal)
    };
    Score {
        p_bar,
        phi,
        z,
        method,
        inspected: big_n,
        defective: big_d,
    }
}

/// The two-sided Student's t quantile: t with P(|T_df| > t) = a. statrs' inverse of the
/// regularized incomplete beta gives the start (P(|T| > t) = I_x(df/2, 1/2) with
/// x = df / (df + t²)); Newton steps on the tail with the t density polish it to the
/// accuracy of statrs' `beta_reg`. `normal` (the normal quantile at a, a lower bound of
/// every t quantile) is the fallback should the start not be finite.
fn t_two_sided_quantile(a: f64, df: f64, normal: f64) -> f64 {
    let x = inv_beta_reg(0.5 * df, 0.5, a);
    let mut t = (df * (1.0 - x) / x).sqrt();
    if !t.is_finite() || t <= 0.0 {
        t = normal;
    }
    let ln_c =
        ln_gamma(0.5 * (df + 1.0)) - ln_gamma(0.5 * df) - 0.5 * (df * std::f64::consts::PI).ln();
    for _ in 0..6 {
        let tail = beta_reg(0.5 * df, 0.5, df / (df + t * t));
        let density = (ln_c - 0.5 * (df + 1.0) * (t * t / df).ln_1p()).exp();
        // d tail / dt = -2 density.
        let step = (tail - a) / (2.0 * density);
        let next = t + step;
        if !next.is_finite() || next <= 0.0 {
            break;
        }
        t = next;
        if step.abs() <= 1e-15 * t {
            break;
        }
    }
    t
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

/// The baseline periods `with_units` (indices into `baseline`, all with units) split into
/// the clean subset the estimate uses and the excursions left out (both oldest first):
/// the forward search of the module docs.
fn clean_subset(
    baseline: &[(u64, u64)],
    with_units: Vec<usize>,
    options: &BaselineOptions,
) -> Result<(Vec<usize>, Vec<usize>), StatsError> {
    let core = options.min_periods;
    if with_units.len() <= core {
        return Ok((with_units, Vec::new()));
    }
    // The start: of the runs of `core` consecutive periods in rate order (ties by index),
    // the one with the smallest Pearson X² around its own pooled rate (the earliest run
    // on a tie).
    let rate = |j: usize| baseline[j].1 as f64 / baseline[j].0 as f64;
    let mut by_rate = with_units.clone();
    by_rate.sort_by(|&a, &b| rate(a).total_cmp(&rate(b)).then(a.cmp(&b)));
    let mut best: Option<(usize, f64)> = None;
    for start in 0..=by_rate.len() - core {
        let run: Vec<(u64, u64)> = by_rate[start..start + core]
            .iter()
            .map(|&j| baseline[j])
            .collect();
        let x2 = pearson_x2(&run);
        if best.is_none_or(|(_, b)| x2 < b) {
            best = Some((start, x2));
        }
    }
    let start = best.map_or(0, |b| b.0);
    let mut subset: Vec<usize> = by_rate[start..start + core].to_vec();
    let mut rest: Vec<usize> = by_rate[..start]
        .iter()
        .chain(&by_rate[start + core..])
        .copied()
        .collect();
    rest.sort_unstable();
    // Every t limit is at least the normal one, so the t quantile (an iterative solve) is
    // needed only for a |z| beyond the normal limit.
    let normal = options.limit.value()?;
    let within = |z: f64, size: usize| -> Result<bool, StatsError> {
        Ok(z <= normal || z <= options.limit.value_for(size)?)
    };
    // Grow: add the remaining period nearest the subset (smallest |z| against it, the
    // earliest on a tie) while it is within the limit for the subset's size.
    while !rest.is_empty() {
        let base: Vec<(u64, u64)> = subset.iter().map(|&j| baseline[j]).collect();
        let mut nearest: Option<(usize, f64)> = None;
        for (pos, &j) in rest.iter().enumerate() {
            let z = score(baseline[j].0, baseline[j].1, &base).z.abs();
            if nearest.is_none_or(|(_, w)| z < w) {
                nearest = Some((pos, z));
            }
        }
        match nearest {
            Some((pos, z)) if within(z, subset.len())? => {
                subset.push(rest.remove(pos));
            }
            _ => break,
        }
    }
    subset.sort_unstable();
    Ok((subset, rest))
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
/// // X² of the eight weeks is 1.33 on 7 df: phi is floored at 1.
/// assert_eq!(c.dispersion, Some(1.0));
/// // z = (0.016 - 0.01) / sqrt(0.01 * 0.99 * (1/5000 + 1/40000)) = 4.0201,
/// // beyond t on 7 df at 0.5% each side, 3.4995.
/// assert!((c.z.unwrap() - 0.006 / (0.0099f64 * 0.000225).sqrt()).abs() < 1e-12);
/// assert!((c.limit - 3.499_483_297_350_493).abs() < 1e-12);
/// assert_eq!(c.verdict, Verdict::Worse);
/// assert!(c.left_out.is_empty());
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn compare(
    period: (u64, u64),
    baseline: &[(u64, u64)],
    options: &BaselineOptions,
) -> Result<Comparison, StatsError> {
    // Validates the limit's parameters once; the value used depends on the periods.
    options.limit.value()?;
    check_open_unit("confidence", options.confidence)?;
    if options.min_periods < 2 {
        return Err(StatsError::InvalidParameter {
            name: "min_periods",
            value: options.min_periods as f64,
            requirement: "at least 2 (phi needs a degree of freedom)",
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
    let used: Vec<usize> = (0..baseline.len()).filter(|&j| baseline[j].0 > 0).collect();
    let with_units = used.len();
    let counts = |idx: &[usize]| -> Vec<(u64, u64)> { idx.iter().map(|&j| baseline[j]).collect() };
    let unknown = |reason: Reason, used: Vec<usize>| -> Result<Comparison, StatsError> {
        let limit = options.limit.value_for(used.len().max(2))?;
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
            dispersion: None,
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

    let (used, left_out) = clean_subset(baseline, used, options)?;

    let base = counts(&used);
    let limit = options.limit.value_for(used.len())?;
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
    let se = (1.0 / a - 1.0 / an + 1.0 / c - 1.0 / cn).max(0.0).sqrt() * s.phi.sqrt();
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
        sigma_z: Some(s.phi.sqrt()),
        dispersion: Some(s.phi),
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
    fn dispersion_and_z_by_hand() {
        // Rates 1%, 2%, 1%, 2% of 1,000: p̄ = 1.5%, each (d - n p̄)² / (n p̄ (1 - p̄)) =
        // 25 / 14.775, X² = 100 / 14.775 = 6.7682 on 3 df, phi = 2.2561.
        let base = [(1_000, 10), (1_000, 20), (1_000, 10), (1_000, 20)];
        let phi = 100.0 / 14.775 / 3.0;
        assert_rel(dispersion(&base, 0.015), phi, 1e-14, "phi");
        let c = compare((1_000, 40), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.method, Some(Method::Normal));
        assert_rel(c.dispersion.expect("phi"), phi, 1e-14, "phi");
        assert_rel(c.sigma_z.expect("sigma_z"), phi.sqrt(), 1e-14, "sigma_z");
        // Prediction form: 1/n + 1/N = 1/1000 + 1/4000.
        let se = (phi * 0.015 * 0.985 * (1.0 / 1000.0 + 1.0 / 4000.0)).sqrt();
        assert_rel(c.z.expect("z"), 0.025 / se, 1e-13, "z");
        // z = 3.873 against t on 3 df at 0.5% each side, 5.8409 (scipy t.isf): usual, where
        // the normal limit 2.576 would have called it.
        assert_rel(c.limit, 5.840_909_309_733_357, 1e-12, "limit");
        assert_eq!(c.verdict, Verdict::Usual);
        let more = compare((1_000, 55), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(more.verdict, Verdict::Worse);
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
        assert_eq!(c.dispersion, Some(1.0));
        // Without leaving it out, the baseline rate would be 1.25% and phi inflated.
        let all = score(5_000, 50, &base);
        assert!(all.p_bar > 0.0123 && all.phi > 10.0);
        // A second excursion after the first is still caught.
        let again = compare((5_000, 150), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(again.verdict, Verdict::Worse);
    }

    #[test]
    fn consecutive_excursions_do_not_mask_each_other() {
        // Weeks 5, 6 and 7 ran at 2%, 3% and 3.2% among weeks at 1%; the week judged is at
        // 2.5%. Judged against all the others, each excursion hides behind the other two
        // (their phi is in the hundreds); the forward search from the four most central
        // weeks leaves all three out and calls the week worse.
        let mut base = STABLE;
        base[5] = (5_000, 100);
        base[6] = (5_000, 150);
        base[7] = (5_000, 160);
        let c = compare((5_000, 125), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.left_out, vec![5, 6, 7]);
        assert_eq!(c.used, vec![0, 1, 2, 3, 4]);
        assert_eq!(c.verdict, Verdict::Worse);
        // Each of them against all the others: within the t limit for seven periods.
        let limit = Limit::sidak(1).value_for(7).expect("valid");
        for j in 5..8 {
            let others: Vec<(u64, u64)> = (0..8).filter(|&q| q != j).map(|q| base[q]).collect();
            let z = score(base[j].0, base[j].1, &others).z;
            assert!(z.abs() < limit, "week {j}: z {z} masked? limit {limit}");
        }
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
        assert_eq!(c.dispersion, Some(1.0));
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
    fn the_exact_path_divides_by_sqrt_phi() {
        // Few defectives (sum < 10) with visible variation: the exact z is widened.
        let base = [(400, 0), (400, 4), (400, 0), (400, 4), (400, 0)];
        let c = compare((400, 6), &base, &BaselineOptions::default()).expect("valid");
        assert_eq!(c.method, Some(Method::Exact));
        assert!(c.left_out.is_empty());
        let s = c.sigma_z.expect("sigma_z");
        assert!(s > 1.0);
        assert_rel(s * s, c.dispersion.expect("phi"), 1e-14, "sigma_z^2 = phi");
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
        let t = compare((5_000, 74), &STABLE, &opts).expect("valid");
        assert_eq!(t.limit, 3.0);
        // phi = 1 (X² = 66 / 49.5 on 7 df), z = 0.0048 / sqrt(0.0099 (1/5000 + 1/40000))
        // = 3.216: beyond three sigma, within the default t_7 limit 3.4995.
        assert_rel(
            t.z.expect("z"),
            0.0048 / (0.0099f64 * 0.000225).sqrt(),
            1e-12,
            "z",
        );
        assert_eq!(t.verdict, Verdict::Worse);
        let s = compare((5_000, 74), &STABLE, &BaselineOptions::default()).expect("valid");
        assert_eq!(s.verdict, Verdict::Usual);
        assert_rel(
            s.limit,
            3.499_483_297_350_493_2,
            1e-12,
            "t_7 at 0.5% each side",
        );
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
    fn t_quantiles_agree_with_scipy() {
        // scipy 1.17.1 stats.t.isf(a / 2, df) at the Šidák per-call a of k = 1, 6, 20,
        // 600 groups at family alpha 0.01.
        let cases: [(usize, [f64; 7]); 4] = [
            (
                1,
                [
                    63.65674116287158,
                    9.924843200918293,
                    5.840909309733357,
                    4.032142983555229,
                    3.4994832973504932,
                    3.105806515539281,
                    2.749995653567226,
                ],
            ),
            (
                6,
                [
                    380.3763274147176,
                    24.413019747512198,
                    10.853330937515912,
                    6.132659961401441,
                    4.940782482751277,
                    4.129458297071349,
                    3.452773014505477,
                ],
            ),
            (
                20,
                [
                    1267.1807567863386,
                    44.598020325727894,
                    16.300164587135036,
                    7.967540505198289,
                    6.076927911822917,
                    4.860345397913277,
                    3.8998975545481827,
                ],
            ),
            (
                600,
                [
                    38006.19880076134,
                    244.33275975529114,
                    50.84874471346973,
                    16.11781894276588,
                    10.377349625727433,
                    7.23539316131987,
                    5.116810483897638,
                ],
            ),
        ];
        let mut worst = 0.0f64;
        for (k, want) in cases {
            for (df, w) in [1, 2, 3, 5, 7, 11, 30].into_iter().zip(want) {
                let got = Limit::sidak(k).value_for(df + 1).expect("valid");
                worst = worst.max((got / w - 1.0).abs());
            }
        }
        assert!(worst < 1e-12, "worst relative error {worst:e}");
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
    //! False calls on stable data with variation beyond binomial: the stated rate is "at
    //! most a per group-period"; each test allows a plus three standard errors of the
    //! simulated count (sqrt(series a)). Seeded, so the counts are always the same; the
    //! measured counts are in the module docs' table.
    use super::*;
    use rand_chacha::ChaCha8Rng;
    use rand_core::{RngCore, SeedableRng};
    use statrs::function::factorial::ln_binomial;

    fn uniform(rng: &mut ChaCha8Rng) -> f64 {
        // 53 random bits in (0, 1).
        ((rng.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    fn normal(rng: &mut ChaCha8Rng) -> f64 {
        let (u, v) = (uniform(rng), uniform(rng));
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }

    /// Gamma(shape >= 1, scale 1): Marsaglia & Tsang (2000).
    fn gamma(rng: &mut ChaCha8Rng, shape: f64) -> f64 {
        let d = shape - 1.0 / 3.0;
        let c = 1.0 / (9.0 * d).sqrt();
        loop {
            let x = normal(rng);
            let v = (1.0 + c * x).powi(3);
            if v > 0.0 && uniform(rng).ln() < 0.5 * x * x + d - d * v + d * v.ln() {
                return d * v;
            }
        }
    }

    /// Binomial(n, p) by inversion searching outwards from the mode (subtracting the pmf
    /// alternately below and above it): exact, O(sd) per draw, so a 20,000-unit period
    /// costs tens of steps, not hundreds.
    fn binomial(rng: &mut ChaCha8Rng, n: u64, p: f64) -> u64 {
        if p <= 0.0 {
            return 0;
        }
        if p >= 1.0 {
            return n;
        }
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

    /// How each period's true rate varies around `p`.
    #[derive(Clone, Copy)]
    enum Noise {
        /// Binomial only.
        None,
        /// Rate times a lognormal multiplier of log-sd s (mean 1).
        Lognormal(f64),
        /// Rate drawn from a beta distribution with mean p and sd `cv` p, and the period's
        /// size drawn uniformly from 0.6 to 1.4 times n.
        BetaVarying(f64),
    }

    /// False (worse, better) calls over `series` stable series of `b` baseline periods
    /// plus the period judged, each period about `n` units at rate `p` with `noise`.
    fn false_calls(
        seed: u64,
        series: usize,
        b: usize,
        n: u64,
        p: f64,
        noise: Noise,
    ) -> (usize, usize) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let opts = BaselineOptions {
            limit: Limit::sidak(6),
            ..BaselineOptions::default()
        };
        let draw = |rng: &mut ChaCha8Rng| match noise {
            Noise::None => (n, binomial(rng, n, p)),
            Noise::Lognormal(s) => {
                let m = (s * normal(rng) - 0.5 * s * s).exp();
                (n, binomial(rng, n, (p * m).min(1.0)))
            }
            Noise::BetaVarying(cv) => {
                // mean p, variance (cv p)² = p(1 - p) / (alpha + beta + 1).
                let total = p * (1.0 - p) / (cv * p).powi(2) - 1.0;
                let (ga, gb) = (gamma(rng, p * total), gamma(rng, (1.0 - p) * total));
                let size = (n as f64 * (0.6 + 0.8 * uniform(rng))).round() as u64;
                (size, binomial(rng, size, ga / (ga + gb)))
            }
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

    /// Asserts at most a plus three standard errors, and returns the count for the
    /// message of a failing sibling.
    fn at_most_the_stated_rate(what: &str, series: usize, (worse, better): (usize, usize)) {
        let a = Limit::sidak(6).per_call_alpha().expect("valid");
        let expected = series as f64 * a;
        let calls = (worse + better) as f64;
        println!("{what}: {worse} worse + {better} better of {series} (a gives {expected:.1})");
        assert!(
            calls <= expected + 3.0 * expected.sqrt(),
            "{what}: {worse} worse + {better} better = {:.2} a",
            calls / expected
        );
    }

    const SERIES: usize = 15_000;

    #[test]
    fn binomial_stable_data_stay_within_the_stated_rate() {
        // 20,000 units at 1% a period, eight baseline periods, six groups per report:
        // a = 0.0016737, 25.1 calls at exactly a (sd 5.0). Measured: see the module docs.
        let got = false_calls(1, SERIES, 8, 20_000, 0.01, Noise::None);
        at_most_the_stated_rate("binomial", SERIES, got);
    }

    #[test]
    fn small_lognormal_variation_stays_within_the_stated_rate() {
        let got = false_calls(2, SERIES, 8, 20_000, 0.01, Noise::Lognormal(0.02));
        at_most_the_stated_rate("lognormal sd 0.02", SERIES, got);
    }

    #[test]
    fn moderate_lognormal_variation_stays_within_the_stated_rate() {
        let got = false_calls(3, SERIES, 8, 20_000, 0.01, Noise::Lognormal(0.05));
        at_most_the_stated_rate("lognormal sd 0.05", SERIES, got);
    }

    #[test]
    fn large_lognormal_variation_stays_within_the_stated_rate() {
        let got = false_calls(4, SERIES, 8, 20_000, 0.01, Noise::Lognormal(0.10));
        at_most_the_stated_rate("lognormal sd 0.10", SERIES, got);
    }

    #[test]
    fn strong_skewed_variation_exceeds_the_stated_rate_as_documented() {
        // Lognormal sd 0.3 (30% between periods, right-skewed): the symmetric t limit
        // under-covers the upper tail. Measured 107 worse + 5 better of 15,000 = 4.5 a; the
        // module docs state it, and the band pins it so a change of method shows here.
        let (w, b) = false_calls(7, SERIES, 8, 20_000, 0.01, Noise::Lognormal(0.3));
        let a = Limit::sidak(6).per_call_alpha().expect("valid");
        let ratio = (w + b) as f64 / (SERIES as f64 * a);
        assert!(
            (2.5..6.0).contains(&ratio),
            "{w} worse + {b} better = {ratio:.2} a"
        );
        assert!(
            w > 5 * b,
            "the excess is on the worse side: {w} worse, {b} better"
        );
    }

    #[test]
    fn beta_binomial_variation_and_varying_sizes_stay_within_the_stated_rate() {
        let got = false_calls(5, SERIES, 8, 20_000, 0.01, Noise::BetaVarying(0.1));
        at_most_the_stated_rate("beta-binomial cv 0.1, sizes 0.6-1.4 n", SERIES, got);
    }

    #[test]
    fn moderate_counts_stay_within_the_stated_rate() {
        // 2,000 units at 1%: about 20 defectives a period, where the binomial's skew shows.
        let got = false_calls(6, SERIES, 8, 2_000, 0.01, Noise::Lognormal(0.05));
        at_most_the_stated_rate("lognormal sd 0.05 at 2,000 units", SERIES, got);
    }

    #[test]
    fn the_sampler_is_binomial() {
        // Mean and variance of 20,000 draws of Binomial(20,000, 0.01): 200 and 198, within
        // a few standard errors (sd of the mean 0.1, of the variance about 2).
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        let x: Vec<f64> = (0..20_000)
            .map(|_| binomial(&mut rng, 20_000, 0.01) as f64)
            .collect();
        let mean = x.iter().sum::<f64>() / x.len() as f64;
        let var = x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (x.len() - 1) as f64;
        assert!((mean - 200.0).abs() < 0.5, "mean {mean}");
        assert!((var - 198.0).abs() < 8.0, "variance {var}");
    }
}
