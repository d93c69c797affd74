//! Pairwise follow-ups: every pair of groups as a 2 x 2 table, raw and adjusted p-values,
//! and the difference of rates with Newcombe's interval.

use crate::adjust::{Adjustment, adjust};
use crate::chisq::{pearson_2x2, upper_tail_unchecked, yates_2x2};
use crate::error::{StatsError, check_open_unit};
use crate::exact::fisher;
use crate::interval::{Interval, newcombe_from_wilson, wilson_z, z_for_confidence};
use crate::validity::cochran_2x2_holds;

/// Which test each pair gets.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PairMethod {
    /// Pearson's X^2 without Yates' correction when Cochran's rule holds for the pair (all
    /// four expected counts >= 5), Fisher's exact test otherwise.
    #[default]
    Auto,
    /// Pearson's X^2 on 1 df for every pair.
    Pearson,
    /// Yates-corrected X^2 on 1 df for every pair.
    PearsonYates,
    /// Fisher's exact test for every pair.
    Fisher,
    /// No pairwise follow-ups ([`pairwise`] returns no pairs).
    Off,
}

/// The test a pair actually got.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PairTest {
    /// Pearson's X^2, 1 df.
    Pearson,
    /// Yates-corrected X^2, 1 df.
    PearsonYates,
    /// Fisher's exact test, two-sided.
    Fisher,
}

/// Options for [`pairwise`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PairwiseOptions {
    /// Significance level for `reject`, and 1 - confidence of the difference intervals.
    pub alpha: f64,
    /// Test per pair.
    pub method: PairMethod,
    /// Multiple-comparison adjustment across all pairs.
    pub adjust: Adjustment,
    /// Smallest difference of rates that matters (a proportion, e.g. 0.005 for half a
    /// percentage point); `None` leaves `practically_different` unset.
    pub min_difference: Option<f64>,
    /// Abandon the work with [`StatsError::DeadlineExceeded`] once this instant has
    /// passed (checked once per group), so a server can bound a request's CPU time.
    pub deadline: Option<std::time::Instant>,
}

impl Default for PairwiseOptions {
    fn default() -> Self {
        PairwiseOptions {
            alpha: 0.05,
            method: PairMethod::Auto,
            adjust: Adjustment::Holm,
            min_difference: None,
            deadline: None,
        }
    }
}

/// One pair of groups.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Pair {
    /// Index of the first group (a < b).
    pub a: usize,
    /// Index of the second group.
    pub b: usize,
    /// The test used.
    pub method: PairTest,
    /// The X^2 statistic (None for Fisher's test).
    pub statistic: Option<f64>,
    /// Raw two-sided p.
    pub p: f64,
    /// log10 of the raw p, finite where p underflows.
    pub log10_p: f64,
    /// p adjusted across all pairs.
    pub p_adjusted: f64,
    /// `p_adjusted < alpha`.
    pub reject: bool,
    /// rate_a - rate_b.
    pub difference: f64,
    /// Newcombe's hybrid score interval for the difference at confidence 1 - alpha.
    pub difference_ci: Interval,
    /// With a minimum difference m: true when the whole interval lies beyond it
    /// (lower > m or upper < -m), false otherwise; None without m.
    pub practically_different: Option<bool>,
}

/// Per-group data reused by every pair.
#[derive(Clone, Copy)]
struct Group {
    n: u64,
    x: u64,
    rate: f64,
    ci: Interval,
}

/// All pairs i < j of the groups `(inspected, defective)`, in the order (0,1), (0,2), ...,
/// (1,2), ...; adjusted p across all of them.
///
/// Errors: alpha outside (0, 1), a negative or non-finite minimum difference, a group with
/// defective > inspected or with nothing inspected. Large inputs are split across the
/// available cores (results do not depend on the split).
///
/// ```
/// use dispar_stats::pairwise::{pairwise, PairwiseOptions, PairTest};
/// let pairs = pairwise(&[(300, 36), (300, 63), (300, 38)], &PairwiseOptions::default())?;
/// assert_eq!(pairs.len(), 3);
/// assert_eq!((pairs[0].a, pairs[0].b), (0, 1));
/// assert_eq!(pairs[0].method, PairTest::Pearson);
/// assert!(pairs[0].p_adjusted >= pairs[0].p);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn pairwise(groups: &[(u64, u64)], options: &PairwiseOptions) -> Result<Vec<Pair>, StatsError> {
    check_open_unit("alpha", options.alpha)?;
    if let Some(m) = options.min_difference
        && !(m.is_finite() && m >= 0.0)
    {
        return Err(StatsError::InvalidParameter {
            name: "min_difference",
            value: m,
            requirement: "finite and >= 0",
        });
    }
    if options.method == PairMethod::Off {
        return Ok(Vec::new());
    }
    let z = z_for_confidence(1.0 - options.alpha)?;
    let mut data = Vec::with_capacity(groups.len());
    for (index, &(n, x)) in groups.iter().enumerate() {
        if x > n {
            return Err(StatsError::DefectiveExceedsInspected {
                index,
                inspected: n,
                defective: x,
            });
        }
        if n == 0 {
            return Err(StatsError::EmptyGroup { index });
        }
        data.push(Group {
            n,
            x,
            rate: x as f64 / n as f64,
            ci: wilson_z(x, n, z)?,
        });
    }
    if data.len() < 2 {
        return Ok(Vec::new());
    }
    let k = data.len();
    let total = k * (k - 1) / 2;
    let threads = if total < 20_000 {
        1
    } else {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
            .min(8)
    };
    let mut pairs = if threads <= 1 {
        pairs_for_rows(&data, 0, k, options)?
    } else {
        // Split the rows so that each thread gets about the same number of pairs.
        let mut bounds = vec![0usize];
        let mut acc = 0usize;
        for i in 0..k {
            acc += k - 1 - i;
            if acc * threads >= total * bounds.len() && bounds.len() < threads {
                bounds.push(i + 1);
            }
        }
        bounds.push(k);
        bounds.dedup();
        let parts: Vec<Result<Vec<Pair>, StatsError>> = std::thread::scope(|s| {
            let handles: Vec<_> = bounds
                .windows(2)
                .map(|w| {
                    let (from, to) = (w[0], w[1]);
                    let data = &data;
                    s.spawn(move || pairs_for_rows(data, from, to, options))
                })
                .collect();
            handles
                .into_iter()
                .map(|h| h.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
                .collect()
        });
        let mut all = Vec::with_capacity(total);
        for part in parts {
            all.extend(part?);
        }
        all
    };
    let raw: Vec<f64> = pairs.iter().map(|p| p.p).collect();
    let adjusted = adjust(&raw, options.adjust);
    for (pair, adj) in pairs.iter_mut().zip(adjusted) {
        pair.p_adjusted = adj;
        pair.reject = adj < options.alpha;
    }
    Ok(pairs)
}

/// The pairs (i, j), from <= i < to, i < j < k.
fn pairs_for_rows(
    data: &[Group],
    from: usize,
    to: usize,
    options: &PairwiseOptions,
) -> Result<Vec<Pair>, StatsError> {
    let k = data.len();
    let count: usize = (from..to).map(|i| k - 1 - i).sum();
    let mut out = Vec::with_capacity(count);
    for i in from..to {
        if options
            .deadline
            .is_some_and(|d| std::time::Instant::now() >= d)
        {
            return Err(StatsError::DeadlineExceeded);
        }
        let g1 = data[i];
        for (j, g2) in data.iter().enumerate().skip(i + 1) {
            // Exact tests on huge counts take a millisecond each: check within a row.
            if j % 16 == 0
                && options
                    .deadline
                    .is_some_and(|d| std::time::Instant::now() >= d)
            {
                return Err(StatsError::DeadlineExceeded);
            }
            out.push(one_pair(i, g1, j, *g2, options));
        }
    }
    Ok(out)
}

fn one_pair(i: usize, g1: Group, j: usize, g2: Group, options: &PairwiseOptions) -> Pair {
    let (a, b, c, d) = (g1.x, g1.n - g1.x, g2.x, g2.n - g2.x);
    let method = match options.method {
        PairMethod::Pearson => PairTest::Pearson,
        PairMethod::PearsonYates => PairTest::PearsonYates,
        PairMethod::Fisher => PairTest::Fisher,
        PairMethod::Auto | PairMethod::Off => {
            if cochran_2x2_holds(a, b, c, d) {
                PairTest::Pearson
            } else {
                PairTest::Fisher
            }
        }
    };
    let (statistic, p, log10_p) = match method {
        PairTest::Pearson | PairTest::PearsonYates => {
            let x2 = if method == PairTest::Pearson {
                pearson_2x2(a, b, c, d)
            } else {
                yates_2x2(a, b, c, d)
            };
            let t = upper_tail_unchecked(x2, 1);
            (Some(x2), t.p, t.log10_p)
        }
        PairTest::Fisher => {
            let f = fisher(a, b, c, d);
            (None, f.p_two_sided, f.log10_p)
        }
    };
    let ci = newcombe_from_wilson(g1.rate, g1.ci, g2.rate, g2.ci);
    Pair {
        a: i,
        b: j,
        method,
        statistic,
        p,
        log10_p,
        p_adjusted: p,
        reject: false,
        difference: g1.rate - g2.rate,
        difference_ci: ci,
        practically_different: options
            .min_difference
            .map(|m| ci.lower > m || ci.upper < -m),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::assert_rel;

    #[test]
    fn a_passed_deadline_abandons_the_pairs() {
        let opts = PairwiseOptions {
            deadline: Some(std::time::Instant::now()),
            ..PairwiseOptions::default()
        };
        assert_eq!(
            pairwise(&[(100, 3), (100, 9), (100, 5)], &opts),
            Err(StatsError::DeadlineExceeded)
        );
    }

    #[test]
    fn each_pair_matches_the_two_by_two_functions() {
        let groups = [(300u64, 36u64), (300, 46), (300, 42), (300, 63), (300, 38)];
        let pairs = pairwise(&groups, &PairwiseOptions::default()).expect("valid");
        assert_eq!(pairs.len(), 10);
        let raw: Vec<f64> = pairs.iter().map(|p| p.p).collect();
        let holm = adjust(&raw, Adjustment::Holm);
        for (pair, h) in pairs.iter().zip(holm) {
            let (n1, x1) = groups[pair.a];
            let (n2, x2) = groups[pair.b];
            let t = crate::table::Table::from_rates(&[(n1, x1), (n2, x2)]).expect("valid");
            let x2s = crate::chisq::pearson(&t);
            assert_eq!(pair.method, PairTest::Pearson);
            assert_rel(pair.statistic.expect("chi-square"), x2s, 1e-14, "X^2");
            assert_rel(
                pair.p,
                crate::chisq::upper_tail(x2s, 1).expect("ok").p,
                1e-14,
                "p",
            );
            assert_eq!(pair.p_adjusted, h);
            let ci = crate::interval::newcombe_difference(x1, n1, x2, n2, 0.95).expect("ok");
            assert_rel(pair.difference_ci.lower, ci.lower, 1e-14, "lower");
            assert_rel(pair.difference_ci.upper, ci.upper, 1e-14, "upper");
        }
    }

    #[test]
    fn auto_uses_fisher_for_sparse_pairs() {
        let pairs = pairwise(
            &[(20, 1), (20, 6), (1000, 100)],
            &PairwiseOptions::default(),
        )
        .expect("valid");
        assert_eq!(pairs[0].method, PairTest::Fisher);
        assert_eq!(pairs[0].statistic, None);
        let f = fisher(1, 19, 6, 14);
        assert_eq!(pairs[0].p, f.p_two_sided);
        // (20, 6) vs (1000, 100): expected defective in the small group 20 * 106/1020 < 5.
        assert_eq!(pairs[2].method, PairTest::Fisher);
    }

    #[test]
    fn practical_difference_needs_the_whole_interval_beyond_the_threshold() {
        let opts = PairwiseOptions {
            min_difference: Some(0.05),
            ..PairwiseOptions::default()
        };
        let pairs =
            pairwise(&[(10_000, 2_000), (10_000, 1_000), (10_000, 1_030)], &opts).expect("valid");
        assert_eq!(pairs[0].practically_different, Some(true)); // 0.10, CI well above 0.05
        assert_eq!(pairs[2].practically_different, Some(false)); // -0.003
        let none = pairwise(&[(10, 1), (10, 2)], &PairwiseOptions::default()).expect("valid");
        assert_eq!(none[0].practically_different, None);
    }

    #[test]
    fn threaded_and_single_threaded_results_agree() {
        let groups: Vec<(u64, u64)> = (0..260u64).map(|i| (1000 + i, 10 + i % 37)).collect();
        let all = pairwise(&groups, &PairwiseOptions::default()).expect("valid");
        assert_eq!(all.len(), 260 * 259 / 2);
        let mut idx = 0;
        for i in 0..260 {
            for j in i + 1..260 {
                assert_eq!((all[idx].a, all[idx].b), (i, j));
                idx += 1;
            }
        }
        let single = pairs_for_rows(
            &groups
                .iter()
                .map(|&(n, x)| Group {
                    n,
                    x,
                    rate: x as f64 / n as f64,
                    ci: wilson_z(x, n, z_for_confidence(0.95).expect("ok")).expect("ok"),
                })
                .collect::<Vec<_>>(),
            0,
            260,
            &PairwiseOptions::default(),
        )
        .expect("no deadline");
        for (x, y) in all.iter().zip(&single) {
            assert_eq!(x.p, y.p);
            assert_eq!(x.difference_ci, y.difference_ci);
        }
    }

    #[test]
    fn bad_input_is_typed() {
        let o = PairwiseOptions::default();
        assert!(matches!(
            pairwise(&[(0, 0), (5, 1)], &o),
            Err(StatsError::EmptyGroup { index: 0 })
        ));
        assert!(matches!(
            pairwise(&[(5, 6)], &o),
            Err(StatsError::DefectiveExceedsInspected { .. })
        ));
        let bad = PairwiseOptions {
            min_difference: Some(-0.1),
            ..o
        };
        assert!(pairwise(&[(5, 1), (5, 2)], &bad).is_err());
        let off = PairwiseOptions {
            method: PairMethod::Off,
            ..o
        };
        assert!(pairwise(&[(5, 1), (5, 2)], &off).expect("valid").is_empty());
    }
}
