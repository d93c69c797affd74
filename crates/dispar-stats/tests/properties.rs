//! Invariants that hold for every input (proptest): ordering of rows and columns changes
//! nothing, p-values are probabilities, adjusted p-values are monotone and never below
//! the raw ones, X^2 is the sum of its contributions, the Monte Carlo p is reproducible,
//! and Fisher's test does not care which margin is called the row.

mod common;

use common::tolerance;
use dispar_stats::adjust::{Adjustment, adjust};
use dispar_stats::analysis::{Method, Options, analyze};
use dispar_stats::chisq::{critical_value, likelihood_ratio, pearson, upper_tail};
use dispar_stats::exact::fisher;
use dispar_stats::montecarlo::{conditional_p, table_seed};
use dispar_stats::residuals::cells;
use dispar_stats::table::Table;
use proptest::prelude::*;

/// Relative agreement for the same statistic summed in another order.
const REORDER_REL: f64 = 1e-12;

/// A table of 2..=6 rows and 2..=5 columns; counts small (sparse, zeros likely) or large.
fn table_strategy() -> impl Strategy<Value = (usize, usize, Vec<u64>)> {
    (2usize..=6, 2usize..=5).prop_flat_map(|(r, c)| {
        let small = prop::collection::vec(0u64..12, r * c).boxed();
        let large = prop::collection::vec(0u64..2_000_000, r * c).boxed();
        (Just(r), Just(c), prop_oneof![3 => small, 1 => large])
    })
}

/// A table with the row and column permutations applied.
fn permuted(r: usize, c: usize, counts: &[u64], rows: &[usize], cols: &[usize]) -> Table {
    let mut out = Vec::with_capacity(r * c);
    for &i in rows {
        for &j in cols {
            out.push(counts[i * c + j]);
        }
    }
    Table::new(r, c, out).expect("a permutation of a valid table is valid")
}

/// A small-count table (for the Monte Carlo properties).
fn small_table_strategy() -> impl Strategy<Value = (usize, usize, Vec<u64>)> {
    (2usize..=6, 2usize..=5)
        .prop_flat_map(|(r, c)| (Just(r), Just(c), prop::collection::vec(0u64..20, r * c)))
}

type Permuted = (usize, usize, Vec<u64>, Vec<usize>, Vec<usize>);

/// A table with a row order and a column order: (r, c, counts, rows, cols).
fn with_permutations(
    t: impl Strategy<Value = (usize, usize, Vec<u64>)>,
) -> impl Strategy<Value = Permuted> {
    t.prop_flat_map(|(r, c, counts)| {
        let rows = Just((0..r).collect::<Vec<_>>()).prop_shuffle();
        let cols = Just((0..c).collect::<Vec<_>>()).prop_shuffle();
        (Just(r), Just(c), Just(counts), rows, cols)
    })
}

fn near(a: f64, b: f64, rel: f64) -> bool {
    tolerance::close(a, b, rel, 1e-300)
}

proptest! {
    #[test]
    fn permuting_rows_and_columns_leaves_x2_g2_and_p_unchanged(
        (r, c, counts, rows, cols) in with_permutations(table_strategy())
    ) {
        let t = Table::new(r, c, counts.clone()).expect("valid table");
        let u = permuted(r, c, &counts, &rows, &cols);
        prop_assert!(near(pearson(&t), pearson(&u), REORDER_REL), "X^2 {} vs {}", pearson(&t), pearson(&u));
        prop_assert!(
            near(likelihood_ratio(&t), likelihood_ratio(&u), REORDER_REL),
            "G^2 {} vs {}", likelihood_ratio(&t), likelihood_ratio(&u)
        );
        for method in [Method::Pearson, Method::LikelihoodRatio] {
            let opts = Options { method, ..Options::default() };
            match (analyze(&t, &opts), analyze(&u, &opts)) {
                (Ok(a), Ok(b)) => {
                    prop_assert_eq!(a.df, b.df);
                    // p moves with the statistic's last-bit changes: d ln p = (d ln p/dx) dx.
                    let slack = REORDER_REL * a.statistic.max(1.0);
                    prop_assert!(near(a.p, b.p, slack), "{method:?} p {} vs {}", a.p, b.p);
                    prop_assert!(
                        (a.log10_p - b.log10_p).abs() <= slack * (1.0 + a.log10_p.abs()),
                        "{method:?} log10 p {} vs {}", a.log10_p, b.log10_p
                    );
                }
                (Err(_), Err(_)) => {}
                (a, b) => prop_assert!(false, "testable in one order only: {a:?} / {b:?}"),
            }
        }
    }

    #[test]
    fn upper_tail_p_is_a_probability_and_decreases_in_x(
        x in 0.0f64..1e5, dx in 0.0f64..100.0, df in 1u64..2000
    ) {
        let a = upper_tail(x, df).expect("valid");
        let b = upper_tail(x + dx, df).expect("valid");
        prop_assert!((0.0..=1.0).contains(&a.p), "p = {}", a.p);
        prop_assert!(a.log10_p <= 0.0 && a.log10_p.is_finite(), "log10 p = {}", a.log10_p);
        prop_assert!(b.p <= a.p && b.log10_p <= a.log10_p + 1e-12, "tail not decreasing at x = {x}, df = {df}");
    }

    #[test]
    fn critical_value_inverts_the_upper_tail(alpha in 1e-12f64..0.5, df in 1u64..500) {
        let x = critical_value(alpha, df).expect("valid");
        let back = upper_tail(x, df).expect("valid").p;
        prop_assert!(near(back, alpha, 1e-10), "alpha {alpha}, df {df}: tail at critical value {back}");
    }

    #[test]
    fn fisher_p_values_are_probabilities_and_symmetric_under_transposition(
        a in 0u64..60, b in 0u64..60, c in 0u64..60, d in 0u64..60
    ) {
        let f = fisher(a, b, c, d);
        for p in [f.p_two_sided, f.p_less, f.p_greater] {
            prop_assert!((0.0..=1.0).contains(&p), "p = {p} for [[{a},{b}],[{c},{d}]]");
        }
        // p_less + p_greater = 1 + P(observed) >= 1.
        prop_assert!(f.p_less + f.p_greater >= 1.0 - 1e-12);
        // Transposition keeps cell a and its distribution.
        let t = fisher(a, c, b, d);
        prop_assert!(near(t.p_two_sided, f.p_two_sided, 1e-12), "two-sided {} vs {}", t.p_two_sided, f.p_two_sided);
        prop_assert!(near(t.p_less, f.p_less, 1e-12), "less {} vs {}", t.p_less, f.p_less);
        prop_assert!(near(t.p_greater, f.p_greater, 1e-12), "greater {} vs {}", t.p_greater, f.p_greater);
        // Swapping the rows mirrors the one-sided tests.
        let s = fisher(c, d, a, b);
        prop_assert!(near(s.p_two_sided, f.p_two_sided, 1e-12), "two-sided {} vs {}", s.p_two_sided, f.p_two_sided);
        prop_assert!(near(s.p_less, f.p_greater, 1e-12), "less/greater {} vs {}", s.p_less, f.p_greater);
    }

    #[test]
    fn adjusted_p_is_at_least_raw_p_at_most_one_and_monotone_in_raw_order(
        p in prop::collection::vec(
            prop_oneof![0.0f64..=1.0, prop::sample::select(vec![0.0, 0.01, 0.05, 0.2, 1.0])],
            1..60,
        )
    ) {
        for method in [Adjustment::Holm, Adjustment::Bonferroni, Adjustment::Hochberg, Adjustment::BenjaminiHochberg] {
            let adj = adjust(&p, method);
            prop_assert_eq!(adj.len(), p.len());
            for i in 0..p.len() {
                prop_assert!(adj[i] >= p[i], "{method:?}: adjusted {} below raw {}", adj[i], p[i]);
                prop_assert!(adj[i] <= 1.0, "{method:?}: adjusted {} above 1", adj[i]);
                for j in 0..p.len() {
                    if p[i] <= p[j] {
                        prop_assert!(adj[i] <= adj[j], "{method:?}: raw {} <= {} but adjusted {} > {}", p[i], p[j], adj[i], adj[j]);
                    }
                }
            }
        }
    }

    #[test]
    fn x2_is_the_sum_of_the_cell_contributions((r, c, counts) in table_strategy()) {
        let t = Table::new(r, c, counts).expect("valid table");
        let reduced = t.reduce();
        if let Ok(tt) = reduced.testable() {
            let sum: f64 = cells(tt).iter().map(|cell| cell.contribution).sum();
            let x2 = pearson(&t);
            prop_assert!(near(sum, x2, 1e-12) || (sum - x2).abs() <= 1e-9, "sum {sum} vs X^2 {x2}");
        }
    }
}

proptest! {
    // Each case runs a few thousand Monte Carlo tables.
    #![proptest_config(ProptestConfig::with_cases(48))]

    #[test]
    fn monte_carlo_p_is_reproducible_for_the_same_table(
        (r, c, counts, rows, _cols) in with_permutations(small_table_strategy())
    ) {
        let t = Table::new(r, c, counts.clone()).expect("valid table");
        if t.reduce().testable().is_err() {
            return Ok(());
        }
        let seed = table_seed(&t);
        let a = conditional_p(&t, 2_000, seed).expect("testable");
        let b = conditional_p(&t, 2_000, seed).expect("testable");
        prop_assert_eq!(a, b);
        prop_assert!(a.p > 0.0 && a.p <= 1.0, "p = {}", a.p);
        // The seed and so the p do not depend on the order of the rows.
        let keep_cols: Vec<usize> = (0..c).collect();
        let u = permuted(r, c, &counts, &rows, &keep_cols);
        prop_assert_eq!(table_seed(&u), seed);
        let pu = conditional_p(&u, 2_000, table_seed(&u)).expect("testable");
        prop_assert_eq!(pu.p, a.p);
    }

    #[test]
    fn monte_carlo_p_does_not_depend_on_row_or_column_order(
        (r, c, counts, rows, cols) in with_permutations(small_table_strategy())
    ) {
        let t = Table::new(r, c, counts.clone()).expect("valid table");
        if t.reduce().testable().is_err() {
            return Ok(());
        }
        let u = permuted(r, c, &counts, &rows, &cols);
        let a = conditional_p(&t, 1_000, table_seed(&t)).expect("testable");
        let b = conditional_p(&u, 1_000, table_seed(&u)).expect("testable");
        prop_assert_eq!(a.p, b.p, "table {:?} (rows {:?}, cols {:?})", counts, rows, cols);
    }
}
