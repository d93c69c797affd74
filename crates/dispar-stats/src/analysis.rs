//! The whole analysis of a table: method choice, omnibus test, effect size, cells; and for
//! rate tables (k x 2), per-group rates, flags, overdispersion and pairwise follow-ups.

use crate::adjust::Adjustment;
use crate::anom::{AnomCritical, critical_for_sizes};
use crate::chisq::{
    critical_value, degrees_of_freedom, likelihood_ratio, pearson, upper_tail_unchecked, yates,
};
use crate::effect::{cramers_v, cramers_v_corrected};
use crate::error::{StatsError, check_open_unit};
use crate::exact::{Fisher, fisher};
use crate::interval::{Interval, wilson_z, z_for_confidence};
use crate::montecarlo::{MonteCarlo, conditional_p_until, table_seed};
use crate::overdispersion::{Overdispersion, spiegelhalter, tau_squared};
use crate::pairwise::{Pair, PairMethod, PairwiseOptions, pairwise};
use crate::residuals::{Cell, cells};
use crate::table::Table;
use crate::validity::{Validity, cochran};

/// The omnibus test asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Method {
    /// Pearson's asymptotic X^2 when Cochran's rule holds; otherwise Fisher's exact test
    /// for a 2 x 2 table and a Monte Carlo conditional p for larger tables.
    #[default]
    Auto,
    /// Pearson's X^2 with the asymptotic chi-square p, whatever the expected counts.
    Pearson,
    /// Likelihood-ratio G^2 with the asymptotic chi-square p.
    LikelihoodRatio,
    /// An exact conditional p: Fisher for 2 x 2, Monte Carlo (Patefield) otherwise.
    Exact,
}

/// The omnibus test that ran.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TestUsed {
    /// Pearson's X^2, asymptotic p.
    Pearson,
    /// Likelihood-ratio G^2, asymptotic p.
    LikelihoodRatio,
    /// Fisher's exact test (2 x 2), two-sided.
    FisherExact,
    /// Monte Carlo conditional p of Pearson's X^2 over tables with the observed margins.
    MonteCarlo,
}

/// What to do with overdispersion between groups of a rate table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Dispersion {
    /// Estimate and report it; flags use the plain ANOM limit.
    #[default]
    Report,
    /// Also widen the flag limit by sqrt(phi) when phi > 1 (Spiegelhalter 2005).
    Widen,
}

/// Options of an analysis.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Options {
    /// Significance level (default 0.05); intervals are at confidence 1 - alpha.
    pub alpha: f64,
    /// Omnibus test (default Auto).
    pub method: Method,
    /// Test per pair of groups, or Off (default Auto).
    pub pairwise: PairMethod,
    /// Adjustment of pairwise p-values (default Holm).
    pub adjust: Adjustment,
    /// Random tables for a Monte Carlo p (default 100,000: the standard error of p is at
    /// most 0.0016, and 0.0007 at p = 0.05; a 10 x 2 table takes well under a second).
    pub resamples: u64,
    /// Smallest rate difference that matters (a proportion), for pairwise
    /// `practically_different`.
    pub min_difference: Option<f64>,
    /// Fraction winsorised at each end for the overdispersion estimate (default 0.1).
    pub winsor_fraction: f64,
    /// Whether overdispersion widens the flag limit (default Report: it does not).
    pub dispersion: Dispersion,
    /// Abandon the work with [`StatsError::DeadlineExceeded`] once this instant has
    /// passed (checked between Monte Carlo chunks and pairwise rows); `None` never does.
    pub deadline: Option<std::time::Instant>,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            alpha: 0.05,
            method: Method::Auto,
            pairwise: PairMethod::Auto,
            adjust: Adjustment::Holm,
            resamples: 100_000,
            min_difference: None,
            winsor_fraction: 0.1,
            dispersion: Dispersion::Report,
            deadline: None,
        }
    }
}

impl Options {
    /// Checks every option's domain.
    pub fn validate(&self) -> Result<(), StatsError> {
        check_open_unit("alpha", self.alpha)?;
        if self.resamples == 0 {
            return Err(StatsError::InvalidParameter {
                name: "resamples",
                value: 0.0,
                requirement: "at least 1",
            });
        }
        if let Some(m) = self.min_difference
            && !(m.is_finite() && (0.0..1.0).contains(&m))
        {
            return Err(StatsError::InvalidParameter {
                name: "min_difference",
                value: m,
                requirement: "in [0, 1)",
            });
        }
        if !(0.0..0.5).contains(&self.winsor_fraction) {
            return Err(StatsError::InvalidParameter {
                name: "winsor_fraction",
                value: self.winsor_fraction,
                requirement: "in [0, 0.5)",
            });
        }
        Ok(())
    }
}

/// The omnibus analysis of an r x c table (after dropping all-zero rows and columns).
#[derive(Debug, Clone, PartialEq)]
pub struct Analysis {
    /// The test that ran.
    pub test: TestUsed,
    /// Why that test, in words.
    pub reason: String,
    /// The test's statistic: G^2 for the likelihood-ratio test, Pearson's X^2 otherwise
    /// (for Fisher's test it is descriptive only).
    pub statistic: f64,
    /// Degrees of freedom (r - 1)(c - 1) of the reduced table.
    pub df: u64,
    /// The p-value.
    pub p: f64,
    /// log10 of the p-value, finite where p underflows.
    pub log10_p: f64,
    /// The chi-square critical value at alpha on df.
    pub critical_value: f64,
    /// `p < alpha`.
    pub reject: bool,
    /// Pearson's X^2.
    pub pearson: f64,
    /// Likelihood-ratio G^2.
    pub likelihood_ratio: f64,
    /// Yates-corrected X^2 (2 x 2 only).
    pub yates: Option<f64>,
    /// Cramer's V.
    pub cramers_v: f64,
    /// Bias-corrected Cramer's V (Bergsma 2013).
    pub cramers_v_corrected: f64,
    /// Cochran's rule on the reduced table.
    pub validity: Validity,
    /// Fisher's test details, when it ran.
    pub fisher: Option<Fisher>,
    /// Monte Carlo details, when it ran.
    pub monte_carlo: Option<MonteCarlo>,
    /// Per-cell statistics of the reduced table, row-major.
    pub cells: Vec<Cell>,
    /// Input indices of the rows tested.
    pub kept_rows: Vec<usize>,
    /// Input indices of the columns tested.
    pub kept_cols: Vec<usize>,
    /// Input rows dropped (total 0).
    pub dropped_rows: Vec<usize>,
    /// Input columns dropped (total 0).
    pub dropped_cols: Vec<usize>,
}

/// Direction of a flagged group relative to the pooled rate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Flag {
    /// Rate significantly above the pooled rate.
    Above,
    /// Rate significantly below the pooled rate.
    Below,
}

/// One group of a rate analysis.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GroupStats {
    /// Position of the group in the input.
    pub index: usize,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
    /// defective / inspected.
    pub rate: f64,
    /// Wilson score interval of the rate at confidence 1 - alpha.
    pub rate_ci: Interval,
    /// Expected defective units at the pooled rate.
    pub expected: f64,
    /// The group's contribution to X^2 (both cells of its row).
    pub contribution: f64,
    /// Adjusted residual of the defective cell = the group's ANOM z-score.
    pub adjusted_residual: f64,
    /// Funnel-plot z-score (rate - pooled) / sqrt(pooled (1 - pooled) / inspected), the
    /// input of the overdispersion estimate.
    pub z_score: f64,
    /// Above or Below when |adjusted residual| exceeds the limit; None otherwise.
    pub flag: Option<Flag>,
    /// contribution / X^2 (0 when X^2 is 0).
    pub share_of_x2: f64,
}

/// The analysis of a rate comparison (k groups, inspected and defective).
#[derive(Debug, Clone, PartialEq)]
pub struct RateAnalysis {
    /// The omnibus test on the k x 2 table (columns: defective, conforming).
    pub test: Analysis,
    /// Total defective / total inspected over the tested groups.
    pub pooled_rate: f64,
    /// The ANOM critical value for the tested groups' sizes
    /// ([`crate::anom::critical_for_sizes`]).
    pub anom: AnomCritical,
    /// The limit flags use: anom.h, times sqrt(phi) when widening applied.
    pub limit: f64,
    /// Spiegelhalter's overdispersion estimate over the tested groups.
    pub overdispersion: Overdispersion,
    /// Additive random-effects variance of the rates (Spiegelhalter 2005), 0 when none.
    pub tau_squared: f64,
    /// Tested groups, in input order.
    pub groups: Vec<GroupStats>,
    /// Pairwise follow-ups over the tested groups (a, b are input positions).
    pub pairwise: Vec<Pair>,
}

/// Analyses an r x c table.
///
/// All-zero rows and columns are dropped (and listed); fewer than 2 usable rows or
/// columns is `Err(StatsError::NotTestable(..))`. The method follows [`Options::method`];
/// the result says which test ran and why.
///
/// ```
/// use dispar_stats::analysis::{analyze, Options, TestUsed};
/// use dispar_stats::table::Table;
/// // NIST/SEMATECH e-Handbook 7.4.6: X^2 = 12.13 on 4 df, rejected at 0.05.
/// let t = Table::from_rates(&[(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)])?;
/// let a = analyze(&t, &Options::default())?;
/// assert_eq!(a.test, TestUsed::Pearson);
/// assert_eq!(a.df, 4);
/// assert!((a.statistic - 12.13).abs() < 0.005);
/// assert!(a.reject);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn analyze(table: &Table, options: &Options) -> Result<Analysis, StatsError> {
    options.validate()?;
    let reduced = table.reduce();
    let t = reduced.testable()?;
    let x2 = pearson(t);
    let g2 = likelihood_ratio(t);
    let df = degrees_of_freedom(t);
    let validity = cochran(t);
    let rule = format!(
        "Cochran's rule {} (smallest expected count {:.3}, {} of {} cells below 5, {} below 1)",
        if validity.holds { "holds" } else { "fails" },
        validity.min_expected,
        validity.cells_below_5,
        validity.cells,
        validity.cells_below_1
    );
    let exact_name = if t.is_2x2() {
        "Fisher's exact test (2 x 2)".to_string()
    } else {
        format!(
            "a Monte Carlo conditional p over {} random tables with the observed margins \
             (Patefield's algorithm, seeded from the table)",
            options.resamples
        )
    };
    let (test, reason) = match options.method {
        Method::Auto if validity.holds => (
            TestUsed::Pearson,
            format!("{rule}: asymptotic Pearson chi-square test"),
        ),
        Method::Auto | Method::Exact => {
            let why = if options.method == Method::Exact {
                format!("exact test requested ({rule}): {exact_name}")
            } else {
                format!("{rule}: {exact_name}")
            };
            let used = if t.is_2x2() {
                TestUsed::FisherExact
            } else {
                TestUsed::MonteCarlo
            };
            (used, why)
        }
        Method::Pearson => (
            TestUsed::Pearson,
            format!("Pearson chi-square test requested ({rule})"),
        ),
        Method::LikelihoodRatio => (
            TestUsed::LikelihoodRatio,
            format!("likelihood-ratio test requested ({rule})"),
        ),
    };
    let (mut fisher_result, mut monte_carlo) = (None, None);
    let (statistic, p, log10_p) = match test {
        TestUsed::Pearson => {
            let tail = upper_tail_unchecked(x2, df);
            (x2, tail.p, tail.log10_p)
        }
        TestUsed::LikelihoodRatio => {
            let tail = upper_tail_unchecked(g2, df);
            (g2, tail.p, tail.log10_p)
        }
        TestUsed::FisherExact => {
            let c = t.counts();
            let f = fisher(c[0], c[1], c[2], c[3]);
            fisher_result = Some(f);
            (x2, f.p_two_sided, f.log10_p)
        }
        TestUsed::MonteCarlo => {
            let mc = conditional_p_until(t, options.resamples, table_seed(t), options.deadline)?;
            monte_carlo = Some(mc);
            (x2, mc.p, mc.p.log10())
        }
    };
    Ok(Analysis {
        test,
        reason,
        statistic,
        df,
        p,
        log10_p,
        critical_value: critical_value(options.alpha, df)?,
        reject: p < options.alpha,
        pearson: x2,
        likelihood_ratio: g2,
        yates: yates(t),
        cramers_v: cramers_v(x2, t.total(), t.rows(), t.cols()),
        cramers_v_corrected: cramers_v_corrected(x2, t.total(), t.rows(), t.cols()),
        validity,
        fisher: fisher_result,
        monte_carlo,
        cells: cells(t),
        kept_rows: reduced.kept_rows,
        kept_cols: reduced.kept_cols,
        dropped_rows: reduced.dropped_rows,
        dropped_cols: reduced.dropped_cols,
    })
}

/// Analyses a comparison of defect rates, one `(inspected, defective)` per group.
///
/// Groups that inspected nothing are dropped (listed in `test.dropped_rows`). When no
/// tested group has a defective unit (or every unit is defective) the result is
/// `Err(StatsError::NotTestable(..))` with reason `TooFewColumns`. Flags compare each
/// group's adjusted residual with the ANOM critical value h for the groups' sizes (widened by
/// sqrt(phi) under [`Dispersion::Widen`] when overdispersion is present).
///
/// ```
/// use dispar_stats::analysis::{analyze_rates, Flag, Options};
/// let r = analyze_rates(&[(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)],
///                       &Options::default())?;
/// assert_eq!(r.groups.len(), 5);
/// assert_eq!(r.groups[3].flag, Some(Flag::Above)); // 63 of 300
/// assert_eq!(r.pairwise.len(), 10);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn analyze_rates(groups: &[(u64, u64)], options: &Options) -> Result<RateAnalysis, StatsError> {
    options.validate()?;
    let table = Table::from_rates(groups)?;
    let test = analyze(&table, options)?;
    let kept = &test.kept_rows;
    let k = kept.len();
    let (mut n_total, mut x_total) = (0u64, 0u64);
    for &i in kept {
        n_total += groups[i].0;
        x_total += groups[i].1;
    }
    let pooled = x_total as f64 / n_total as f64;
    // The residuals' correlations depend on the groups' shares of the units, so h is the
    // one for these sizes (the balanced constant only when they are equal).
    let sizes: Vec<u64> = kept.iter().map(|&i| groups[i].0).collect();
    let anom = critical_for_sizes(options.alpha, &sizes)?;
    let pooled_var = pooled * (1.0 - pooled);
    let z_scores: Vec<f64> = kept
        .iter()
        .map(|&i| {
            let (n, x) = groups[i];
            (x as f64 / n as f64 - pooled) / (pooled_var / n as f64).sqrt()
        })
        .collect();
    let overdispersion = spiegelhalter(&z_scores, options.winsor_fraction)?;
    let weights: Vec<f64> = kept
        .iter()
        .map(|&i| groups[i].0 as f64 / pooled_var)
        .collect();
    let tau2 = tau_squared(overdispersion.phi, &weights);
    let limit = match options.dispersion {
        Dispersion::Widen => anom.h * overdispersion.scale,
        Dispersion::Report => anom.h,
    };
    let z = z_for_confidence(1.0 - options.alpha)?;
    let x2 = test.pearson;
    let mut stats = Vec::with_capacity(k);
    for (row, &i) in kept.iter().enumerate() {
        let (n, x) = groups[i];
        let defective_cell = test.cells[2 * row];
        let contribution = defective_cell.contribution + test.cells[2 * row + 1].contribution;
        let adj = defective_cell.adjusted_residual;
        let flag = if adj.abs() > limit {
            Some(if adj > 0.0 { Flag::Above } else { Flag::Below })
        } else {
            None
        };
        stats.push(GroupStats {
            index: i,
            inspected: n,
            defective: x,
            rate: x as f64 / n as f64,
            rate_ci: wilson_z(x, n, z)?,
            expected: defective_cell.expected,
            contribution,
            adjusted_residual: adj,
            z_score: z_scores[row],
            flag,
            share_of_x2: if x2 > 0.0 { contribution / x2 } else { 0.0 },
        });
    }
    let tested: Vec<(u64, u64)> = kept.iter().map(|&i| groups[i]).collect();
    let mut pairs = pairwise(
        &tested,
        &PairwiseOptions {
            alpha: options.alpha,
            method: options.pairwise,
            adjust: options.adjust,
            min_difference: options.min_difference,
            deadline: options.deadline,
        },
    )?;
    for pair in &mut pairs {
        pair.a = kept[pair.a];
        pair.b = kept[pair.b];
    }
    Ok(RateAnalysis {
        test,
        pooled_rate: pooled,
        anom,
        limit,
        overdispersion,
        tau_squared: tau2,
        groups: stats,
        pairwise: pairs,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::error::NotTestableReason;
    use crate::testutil::assert_rel;

    const NIST_LOTS: [(u64, u64); 5] = [(300, 36), (300, 46), (300, 42), (300, 63), (300, 38)];

    #[test]
    fn nist_five_lots_example() {
        // NIST/SEMATECH e-Handbook 7.4.6 ("Comparing several proportions"): 36, 46, 42, 63,
        // 38 nonconforming of 300 per lot; X^2 about 12.13 on 4 df; critical value 9.488;
        // the hypothesis of equal proportions is rejected at 0.05.
        let r = analyze_rates(&NIST_LOTS, &Options::default()).expect("testable");
        assert_eq!(r.test.test, TestUsed::Pearson);
        assert_eq!(r.test.df, 4);
        assert!((r.test.statistic - 12.13).abs() < 0.005);
        assert!((r.test.critical_value - 9.488).abs() < 5e-4);
        assert!(r.test.reject);
        assert_rel(r.pooled_rate, 225.0 / 1500.0, 1e-15, "pooled");
        let shares: f64 = r.groups.iter().map(|g| g.share_of_x2).sum();
        assert_rel(shares, 1.0, 1e-13, "shares of X^2");
        // Lot 4 (63 of 300): adjusted residual by hand, (63 - 45) / sqrt(45 * 0.8 * 0.85).
        assert_rel(
            r.groups[3].adjusted_residual,
            18.0 / (45.0f64 * 0.8 * 0.85).sqrt(),
            1e-13,
            "lot 4 adjusted residual",
        );
        assert_eq!(r.groups[3].flag, Some(Flag::Above));
        assert!(r.groups.iter().filter(|g| g.flag.is_some()).count() == 1);
    }

    #[test]
    fn a_group_below_the_pooled_rate_is_flagged_below_with_its_share() {
        // By hand from the definitions: pooled rate 440/5000 = 0.088, expected defective 88
        // per group; Haberman's adjusted residual (40 - 88) / sqrt(88 (1 - 0.2) (1 - 0.088))
        // = -5.99, beyond h(0.05, 5) (< 3); the other groups sit at +1.50. With equal group
        // sizes each group's share of X^2 is d_i^2 / sum d^2: 2304 / 2880 = 0.8 for the low
        // one, 144 / 2880 = 0.05 for each of the others.
        let groups = [
            (1000, 100),
            (1000, 100),
            (1000, 100),
            (1000, 100),
            (1000, 40),
        ];
        let r = analyze_rates(&groups, &Options::default()).expect("testable");
        assert!(r.limit < 3.0, "h(0.05, 5) = {}", r.limit);
        let low = &r.groups[4];
        assert_rel(
            low.adjusted_residual,
            -48.0 / (88.0f64 * 0.8 * 0.912).sqrt(),
            1e-13,
            "adjusted residual",
        );
        assert_eq!(low.flag, Some(Flag::Below));
        assert_rel(low.share_of_x2, 0.8, 1e-13, "share of X^2");
        for g in &r.groups[..4] {
            assert_eq!(g.flag, None);
            assert_rel(g.share_of_x2, 0.05, 1e-13, "share of X^2");
        }
    }

    #[test]
    fn flags_use_the_critical_value_for_the_groups_own_sizes() {
        // Issue 9: sizes 8,976 / 1,518 / 22,595 at alpha 0.01 have h = 2.8796, not the
        // balanced 2.9135; a residual between the two is flagged only with the sizes' h.
        let groups = [(8_976u64, 80u64), (1_518, 14), (22_595, 200)];
        let sizes: Vec<u64> = groups.iter().map(|g| g.0).collect();
        let opts = Options {
            alpha: 0.01,
            ..Options::default()
        };
        let r = analyze_rates(&groups, &opts).expect("testable");
        let own = crate::anom::critical_for_sizes(0.01, &sizes).expect("valid");
        assert_eq!(r.anom, own);
        assert_eq!(r.limit, own.h);
        assert!(r.anom.h < crate::anom::critical(0.01, 3).expect("valid").h - 0.03);
        // A dropped (empty) group does not enter the size profile.
        let with_empty = [(8_976u64, 80u64), (0, 0), (1_518, 14), (22_595, 200)];
        assert_eq!(
            analyze_rates(&with_empty, &opts).expect("testable").anom,
            own
        );
    }

    #[test]
    fn zero_groups_are_dropped_and_indices_kept() {
        let r = analyze_rates(
            &[(300, 36), (0, 0), (300, 63), (300, 38)],
            &Options::default(),
        )
        .expect("testable");
        assert_eq!(r.test.dropped_rows, vec![1]);
        assert_eq!(
            r.groups.iter().map(|g| g.index).collect::<Vec<_>>(),
            vec![0, 2, 3]
        );
        assert_eq!((r.pairwise[0].a, r.pairwise[0].b), (0, 2));
        assert_eq!((r.pairwise[2].a, r.pairwise[2].b), (2, 3));
    }

    #[test]
    fn no_defectives_anywhere_is_not_testable() {
        match analyze_rates(&[(100, 0), (200, 0)], &Options::default()) {
            Err(StatsError::NotTestable(nt)) => {
                assert_eq!(nt.reason, NotTestableReason::TooFewColumns { usable: 1 });
                assert_eq!(nt.dropped_cols, vec![0]);
            }
            other => panic!("expected NotTestable, got {other:?}"),
        }
        assert!(matches!(
            analyze_rates(&[(100, 3)], &Options::default()),
            Err(StatsError::NotTestable(_))
        ));
    }

    #[test]
    fn auto_picks_fisher_for_a_sparse_2x2_and_monte_carlo_for_larger() {
        let a = analyze(
            &Table::from_rows(&[vec![3, 1], vec![1, 3]]).expect("valid"),
            &Options::default(),
        )
        .expect("testable");
        assert_eq!(a.test, TestUsed::FisherExact);
        assert_rel(a.p, 34.0 / 70.0, 1e-13, "tea tasting");
        assert!(a.reason.contains("fails"));
        let opts = Options {
            resamples: 5_000,
            ..Options::default()
        };
        let b = analyze(
            &Table::from_rows(&[vec![3, 1, 0], vec![1, 3, 2]]).expect("valid"),
            &opts,
        )
        .expect("testable");
        assert_eq!(b.test, TestUsed::MonteCarlo);
        let mc = b.monte_carlo.expect("ran");
        assert_eq!(mc.resamples, 5_000);
        assert_eq!(b.p, mc.p);
    }

    #[test]
    fn forced_methods_are_honoured_and_say_so() {
        let t = Table::from_rows(&[vec![3, 1], vec![1, 3]]).expect("valid");
        for (method, used) in [
            (Method::Pearson, TestUsed::Pearson),
            (Method::LikelihoodRatio, TestUsed::LikelihoodRatio),
            (Method::Exact, TestUsed::FisherExact),
        ] {
            let a = analyze(
                &t,
                &Options {
                    method,
                    ..Options::default()
                },
            )
            .expect("testable");
            assert_eq!(a.test, used);
            assert!(a.reason.contains("requested"), "{}", a.reason);
        }
    }

    #[test]
    fn invalid_options_are_typed() {
        let t = Table::from_rates(&NIST_LOTS).expect("valid");
        for bad in [
            Options {
                alpha: 0.0,
                ..Options::default()
            },
            Options {
                resamples: 0,
                ..Options::default()
            },
            Options {
                min_difference: Some(f64::NAN),
                ..Options::default()
            },
            Options {
                winsor_fraction: 0.5,
                ..Options::default()
            },
        ] {
            assert!(matches!(
                analyze(&t, &bad),
                Err(StatsError::InvalidParameter { .. })
            ));
        }
    }

    #[test]
    fn widening_for_overdispersion_changes_the_limit() {
        let groups: Vec<(u64, u64)> = (0..20u64).map(|i| (10_000, 100 + 7 * i)).collect();
        let report = analyze_rates(&groups, &Options::default()).expect("testable");
        assert!(report.overdispersion.applied);
        assert_eq!(report.limit, report.anom.h);
        let widened = analyze_rates(
            &groups,
            &Options {
                dispersion: Dispersion::Widen,
                ..Options::default()
            },
        )
        .expect("testable");
        assert_rel(
            widened.limit,
            widened.anom.h * widened.overdispersion.phi.sqrt(),
            1e-15,
            "widened",
        );
        assert!(
            widened.groups.iter().filter(|g| g.flag.is_some()).count()
                <= report.groups.iter().filter(|g| g.flag.is_some()).count()
        );
        assert!(report.tau_squared > 0.0);
    }
}
