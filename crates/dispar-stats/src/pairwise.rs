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

/// Why a pair is no test.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Untestable {
    /// Neither group has a defective unit: the pair's table has an empty column, so every
    /// table with its margins is the observed one and no outcome could speak against
    /// equal rates.
    NoDefectives,
    /// Every unit of both groups is defective (the other empty column).
    NoConforming,
}

impl Untestable {
    /// The reason in words.
    pub fn reason(self) -> &'static str {
        match self {
            Untestable::NoDefectives => "neither group has a defective unit",
            Untestable::NoConforming => "every unit of both groups is defective",
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
    /// The test used; for an untestable pair the one the method would have chosen (none
    /// ran).
    pub method: PairTest,
    /// Set when the pair is no test; it then has no statistic and no p, and is left out
    /// of the adjustment.
    pub untestable: Option<Untestable>,
    /// The X^2 statistic (None for Fisher's test and for an untestable pair).
    pub statistic: Option<f64>,
    /// Raw two-sided p (None for an untestable pair).
    pub p: Option<f64>,
    /// log10 of the raw p, finite where p underflows (None for an untestable pair).
    pub log10_p: Option<f64>,
    /// p adjusted across the testable pairs only (as R's `p.adjust` treats missing
    /// p-values); None for an untestable pair.
    pub p_adjusted: Option<f64>,
    /// `p_adjusted < alpha` (false for an untestable pair).
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
/// (1,2), ...; adjusted p across the testable ones (a pair in which neither group has a
/// defective unit, or neither a conforming one, is marked [`Untestable`] and has no p).
///
/// Errors: alpha outside (0, 1), a negative or non-finite minimum difference, a group with
/// defective > inspected or with nothing inspected. Large inputs are split across the
/// available cores (results do not depend on the split).
///
/// ```
/// use dispar_stats::adjust::{adjust, Adjustment};
/// use dispar_stats::pairwise::{pairwise, PairwiseOptions, PairTest, Untestable};
/// let pairs = pairwise(&[(300, 36), (300, 63), (300, 38)], &PairwiseOptions::default())?;
/// assert_eq!(pairs.len(), 3);
/// assert_eq!((pairs[0].a, pairs[0].b), (0, 1));
/// assert_eq!(pairs[0].method, PairTest::Pearson);
/// assert!(pairs[0].p_adjusted >= pairs[0].p);
/// // Neither group has a defective unit: no test, no p, not in the adjustment.
/// let pairs = pairwise(&[(50, 0), (80, 0), (60, 9)], &PairwiseOptions::default())?;
/// assert_eq!(pairs[0].untestable, Some(Untestable::NoDefectives));
/// assert_eq!(pairs[0].p, None);
/// let raw: Vec<f64> = pairs[1..].iter().filter_map(|p| p.p).collect();
/// let holm = adjust(&raw, Adjustment::Holm); // a family of two, not three
/// assert_eq!(pairs[1].p_adjusted, Some(holm[0]));
/// assert_eq!(pairs[2].p_adjusted, Some(holm[1]));
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
    let raw: Vec<f64> = pairs.iter().filter_map(|p| p.p).collect();
    let adjusted = adjust(&raw, options.adjust);
    for (pair, adj) in pairs.iter_mut().filter(|p| p.p.is_some()).zip(adjusted) {
        pair.p_adjusted = Some(adj);
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
    let untestable = if a + c == 0 {
        Some(Untestable::NoDefectives)
    } else if b + d == 0 {
        Some(Untestable::NoConforming)
    } else {
        None
    };
    let (statistic, p, log10_p) = match method {
        _ if untestable.is_some() => (None, None, None),
        PairTest::Pearson | PairTest::PearsonYates => {
            let x2 = if method == PairTest::Pearson {
                pearson_2x2(a, b, c, d)
            } else {
                yates_2x2(a, b, c, d)
            };
            let t = upper_tail_unchecked(x2, 1);
            (Some(x2), Some(t.p), Some(t.log10_p))
        }
        PairTest::Fisher => {
            let f = fisher(a, b, c, d);
            (None, Some(f.p_two_sided), Some(f.log10_p))
        }
    };
    let ci = newcombe_from_wilson(g1.rate, g1.ci, g2.rate, g2.ci);
    Pair {
        a: i,
        b: j,
        method,
        untestable,
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
        let raw: Vec<f64> = pairs.iter().map(|p| p.p.expect("testable")).collect();
        let holm = adjust(&raw, Adjustment::Holm);
        for (pair, h) in pairs.iter().zip(holm) {
            let (n1, x1) = groups[pair.a];
            let (n2, x2) = groups[pair.b];
            let t = crate::table::Table::from_rates(&[(n1, x1), (n2, x2)]).expect("valid");
            let x2s = crate::chisq::pearson(&t);
            assert_eq!(pair.method, PairTest::Pearson);
            assert_rel(pair.statistic.expect("chi-square"), x2s, 1e-14, "X^2");
            assert_rel(
                pair.p.expect("testable"),
                crate::chisq::upper_tail(x2s, 1).expect("ok").p,
                1e-14,
                "p",
            );
            assert_eq!(pair.p_adjusted, Some(h));
            assert_eq!(pair.untestable, None);
            let ci = crate::interval::newcombe_difference(x1, n1, x2, n2, 0.95).expect("ok");
            assert_rel(pair.difference_ci.lower, ci.lower, 1e-14, "lower");
            assert_rel(pair.difference_ci.upper, ci.upper, 1e-14, "upper");
        }
    }

    #[test]
    fn a_pair_without_defectives_is_no_test_and_leaves_the_family() {
        // Five groups, the first two without a defective unit: 9 testable pairs. Reference:
        // scipy 1.17.1 fisher_exact (two-sided) per pair and statsmodels 0.15.0
        // multipletests(method="holm") over the 9; with the no-test pair counted as p = 1
        // (the old behaviour) statsmodels gives 0.003149 for (0, 2) instead of 0.002699.
        let groups = [(400u64, 0u64), (350, 0), (300, 9), (500, 31), (450, 14)];
        let opts = PairwiseOptions {
            method: PairMethod::Fisher,
            ..PairwiseOptions::default()
        };
        let pairs = pairwise(&groups, &opts).expect("valid");
        assert_eq!(pairs.len(), 10);
        let none = &pairs[0];
        assert_eq!((none.a, none.b), (0, 1));
        assert_eq!(none.untestable, Some(Untestable::NoDefectives));
        assert_eq!((none.p, none.log10_p, none.p_adjusted), (None, None, None));
        assert!(!none.reject);
        assert_eq!(none.difference, 0.0);
        const STATSMODELS: [(usize, usize, f64, f64); 9] = [
            (
                0,
                2,
                0.000_455_009_459_385_677_4,
                0.002_699_365_214_517_027_4,
            ),
            (0, 3, 1.345_394_555_210_240_3e-8, 1.210_855_099_689_216_2e-7),
            (
                0,
                4,
                0.000_146_458_838_557_843_12,
                0.001_025_211_869_904_901_8,
            ),
            (
                1,
                2,
                0.000_890_051_721_915_962_1,
                0.003_560_206_887_663_848_5,
            ),
            (1, 3, 5.738_301_543_553_676_4e-8, 4.590_641_234_842_941e-7),
            (
                1,
                4,
                0.000_449_894_202_419_504_55,
                0.002_699_365_214_517_027_4,
            ),
            (2, 3, 0.045_536_826_545_534_3, 0.094_302_078_607_686_11),
            (2, 4, 1.0, 1.0),
            (3, 4, 0.031_434_026_202_562_03, 0.094_302_078_607_686_11),
        ];
        for (pair, &(a, b, p, holm)) in pairs[1..].iter().zip(&STATSMODELS) {
            assert_eq!((pair.a, pair.b), (a, b));
            assert_eq!(pair.untestable, None);
            assert_rel(pair.p.expect("testable"), p, 1e-9, &format!("({a}, {b}) p"));
            assert_rel(
                pair.p_adjusted.expect("testable"),
                holm,
                1e-9,
                &format!("({a}, {b}) Holm over 9"),
            );
        }
        // Every unit defective in both groups is the other empty column.
        let all = pairwise(&[(5, 5), (7, 7), (9, 3)], &opts).expect("valid");
        assert_eq!(all[0].untestable, Some(Untestable::NoConforming));
        assert_eq!(all[1].untestable, None);
        assert_eq!(
            Untestable::NoConforming.reason(),
            "every unit of both groups is defective"
        );
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
        assert_eq!(pairs[0].p, Some(f.p_two_sided));
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
