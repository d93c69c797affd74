//! The usual spread between groups, estimated over the baseline periods, and each group's
//! record of being above or below the pooled rate.
//!
//! Spiegelhalter (2005), "Funnel plots for comparing institutional performance",
//! Statistics in Medicine 24, and "Handling over-dispersion of performance indicators",
//! Quality and Safety in Health Care 14: the multiplicative overdispersion phi is the mean
//! squared winsorised z-score of the groups around their pooled rate. Here the z-scores of
//! every baseline period (each group against the pooled rate of its own period,
//! z = (p_i - P) / sqrt(P(1 - P)/n_i)) are pooled before winsorising, so phi describes how
//! far apart the groups usually are; the current period is not among them, and a group's
//! excursion in the current period cannot widen its own limit. The same estimator as
//! [`crate::overdispersion::spiegelhalter`] (which this calls).
//!
//! Per group, the number of baseline periods in which it was above, and below, the pooled
//! rate of that period states persistent differences ("above the pooled rate in 8 of the
//! last 8 weeks").

use crate::error::StatsError;
use crate::overdispersion::{Overdispersion, spiegelhalter};

/// One group's record over the baseline periods.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct GroupRecord {
    /// Baseline periods in which the group had units and the period a usable pooled rate.
    pub periods: usize,
    /// Of those, periods with the group's rate above the period's pooled rate.
    pub above: usize,
    /// Of those, periods with the group's rate below it.
    pub below: usize,
}

/// The usual spread between groups over the baseline periods.
#[derive(Debug, Clone, PartialEq)]
pub struct UsualSpread {
    /// Spiegelhalter's phi from the pooled z-scores; None when no baseline period had a
    /// usable pooled rate (strictly between 0 and 1, with at least two groups with units).
    pub overdispersion: Option<Overdispersion>,
    /// Baseline periods that contributed z-scores.
    pub periods: usize,
    /// Per group, in input order.
    pub groups: Vec<GroupRecord>,
}

/// The usual spread of `groups` groups over the baseline periods: `periods[b][i]` is group
/// i's `(inspected, defective)` in baseline period b (every period lists all the groups;
/// a group without production that period has inspected 0).
///
/// Errors: a period with another number of groups, defective > inspected, or a winsor
/// fraction outside [0, 0.5).
///
/// ```
/// use dispar_stats::spread::usual_spread;
/// // Two periods, three groups; group 2 is above the pooled rate both times.
/// let s = usual_spread(&[vec![(1000, 10), (1000, 12), (1000, 20)],
///                        vec![(1000, 11), (1000, 9), (1000, 19)]], 3, 0.1)?;
/// assert_eq!(s.periods, 2);
/// assert_eq!((s.groups[2].above, s.groups[2].periods), (2, 2));
/// let phi = s.overdispersion.expect("estimated").phi;
/// assert!(phi > 1.0); // group 2 stands apart more than binomial sampling explains
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn usual_spread<P: AsRef<[(u64, u64)]>>(
    periods: &[P],
    groups: usize,
    winsor_fraction: f64,
) -> Result<UsualSpread, StatsError> {
    if !(0.0..0.5).contains(&winsor_fraction) {
        return Err(StatsError::InvalidParameter {
            name: "winsor_fraction",
            value: winsor_fraction,
            requirement: "in [0, 0.5)",
        });
    }
    let mut records = vec![GroupRecord::default(); groups];
    let mut z_all = Vec::new();
    let mut used = 0;
    for period in periods {
        let period = period.as_ref();
        if period.len() != groups {
            return Err(StatsError::InvalidParameter {
                name: "groups in a baseline period",
                value: period.len() as f64,
                requirement: "the same number of groups in every period",
            });
        }
        for (index, &(n, d)) in period.iter().enumerate() {
            if d > n {
                return Err(StatsError::DefectiveExceedsInspected {
                    index,
                    inspected: n,
                    defective: d,
                });
            }
        }
        let with_units = period.iter().filter(|g| g.0 > 0).count();
        let big_n: u64 = period.iter().map(|g| g.0).sum();
        let big_d: u64 = period.iter().map(|g| g.1).sum();
        if with_units < 2 || big_d == 0 || big_d == big_n {
            continue;
        }
        used += 1;
        let pooled = big_d as f64 / big_n as f64;
        let var = pooled * (1.0 - pooled);
        for (record, &(n, d)) in records.iter_mut().zip(period) {
            if n == 0 {
                continue;
            }
            let rate = d as f64 / n as f64;
            record.periods += 1;
            if rate > pooled {
                record.above += 1;
            } else if rate < pooled {
                record.below += 1;
            }
            z_all.push((rate - pooled) / (var / n as f64).sqrt());
        }
    }
    let overdispersion = if z_all.is_empty() {
        None
    } else {
        Some(spiegelhalter(&z_all, winsor_fraction)?)
    };
    Ok(UsualSpread {
        overdispersion,
        periods: used,
        groups: records,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn phi_pools_the_z_scores_of_every_baseline_period() {
        // By hand: period 1 pooled 42/3000 = 0.014, period 2 39/3000 = 0.013; z for each
        // group from its own period's pooled rate; phi = mean z^2 (fewer than 10 scores
        // per 10% winsorising end: nothing is winsorised with 6).
        let periods = [
            vec![(1000, 10), (1000, 12), (1000, 20)],
            vec![(1000, 11), (1000, 9), (1000, 19)],
        ];
        let s = usual_spread(&periods, 3, 0.1).expect("valid");
        let mut want = 0.0;
        for p in &periods {
            let pooled = p.iter().map(|g| g.1).sum::<u64>() as f64 / 3000.0;
            for &(n, d) in p {
                let z =
                    (d as f64 / n as f64 - pooled) / (pooled * (1.0 - pooled) / n as f64).sqrt();
                want += z * z / 6.0;
            }
        }
        let o = s.overdispersion.expect("estimated");
        assert_eq!(o.k, 6);
        assert_rel(o.phi, want, 1e-14, "phi");
        assert_eq!(
            s.groups[0],
            GroupRecord {
                periods: 2,
                above: 0,
                below: 2
            }
        );
        assert_eq!(
            s.groups[1],
            GroupRecord {
                periods: 2,
                above: 0,
                below: 2
            }
        );
    }

    #[test]
    fn periods_without_a_usable_pooled_rate_are_skipped() {
        let periods = [
            vec![(100, 0), (100, 0)], // no defectives: no z
            vec![(0, 0), (100, 3)],   // one group with units
            vec![(100, 2), (0, 0)],   // one group with units
            vec![(100, 1), (300, 9)], // usable
        ];
        let s = usual_spread(&periods, 2, 0.1).expect("valid");
        assert_eq!(s.periods, 1);
        assert_eq!(
            s.groups[0],
            GroupRecord {
                periods: 1,
                above: 0,
                below: 1
            }
        );
        assert_eq!(
            s.groups[1],
            GroupRecord {
                periods: 1,
                above: 1,
                below: 0
            }
        );
        let none = usual_spread(&periods[..1], 2, 0.1).expect("valid");
        assert_eq!(none.overdispersion, None);
        assert!(usual_spread(&[vec![(1, 0)]], 2, 0.1).is_err());
        assert!(usual_spread(&[vec![(1, 2), (3, 1)]], 2, 0.1).is_err());
        assert!(usual_spread(&periods, 2, 0.5).is_err());
    }
}
