//! What a report's Monte Carlo work would cost, estimated from the loaded sums before
//! any statistics run, so an absurd request is refused up front (422 naming
//! `resamples`) instead of holding a CPU slot until the time limit.
//!
//! A Monte Carlo p-value draws `resamples` random tables with the table's margins
//! (Patefield's algorithm: work in proportion to rows x columns per table). It runs for
//! a table when `method=exact`, or with `method=auto` when Cochran's rule fails on a
//! table larger than 2 x 2 (2 x 2 tables get Fisher's exact test, which costs nothing
//! comparable). The tables are the groups x (defective, conforming) table and, with
//! categories, the groups x categories table. The estimate is the sum of resamples x
//! rows x columns over the tables that would be resampled, for every period of a
//! series. [`MAX_RESAMPLED_CELLS`] (2 x 10^8, a few seconds on one core: 10^6 cells of
//! a 10 x 2 table take about 25 ms, BENCHMARKS.md section 1) bounds it.

use dispar_core::report::GroupCounts;
use dispar_core::report::MethodChoice;
use dispar_stats::table::Table;
use dispar_stats::validity::cochran;

/// The most table cells a request may have resampled.
pub const MAX_RESAMPLED_CELLS: u128 = 200_000_000;

/// Would a table of these rows be resampled (module docs)?
fn resampled(method: MethodChoice, rows: &[Vec<u64>]) -> bool {
    let rows: Vec<Vec<u64>> = rows
        .iter()
        .filter(|r| r.iter().any(|&c| c > 0))
        .cloned()
        .collect();
    let cols = rows.first().map_or(0, Vec::len);
    if rows.len() < 2 || cols < 2 {
        return false;
    }
    match method {
        MethodChoice::Exact => !(rows.len() == 2 && cols == 2),
        MethodChoice::Auto => {
            if rows.len() == 2 && cols == 2 {
                return false;
            }
            Table::from_rows(&rows).is_ok_and(|t| !cochran(&t).holds)
        }
        MethodChoice::Pearson | MethodChoice::G => false,
    }
}

/// Cells resampled for one period's groups.
pub fn period_cells(method: MethodChoice, resamples: u64, groups: &[GroupCounts]) -> u128 {
    let mut cells = 0u128;
    let defects: Vec<Vec<u64>> = groups
        .iter()
        .map(|g| vec![g.defective, g.inspected.saturating_sub(g.defective)])
        .collect();
    if resampled(method, &defects) {
        cells += u128::from(resamples) * (defects.len() as u128) * 2;
    }
    let mut categories: Vec<&String> = groups.iter().flat_map(|g| g.defects.keys()).collect();
    categories.sort_unstable();
    categories.dedup();
    if categories.len() >= 2 {
        let table: Vec<Vec<u64>> = groups
            .iter()
            .map(|g| {
                categories
                    .iter()
                    .map(|c| g.defects.get(*c).copied().unwrap_or(0))
                    .collect()
            })
            .collect();
        if resampled(method, &table) {
            cells += u128::from(resamples) * (table.len() as u128) * (categories.len() as u128);
        }
    }
    cells
}

/// The problem for a request over the bound, naming `resamples` with the most it could
/// have, when fewer would fit.
pub fn refusal(cells: u128, resamples: u64) -> Option<String> {
    if cells <= MAX_RESAMPLED_CELLS {
        return None;
    }
    let per_resample = cells / u128::from(resamples.max(1));
    let fits = MAX_RESAMPLED_CELLS / per_resample.max(1);
    Some(format!(
        "this request would resample {cells} table cells (resamples x groups x columns of \
         every table that needs a Monte Carlo p-value); at most {MAX_RESAMPLED_CELLS} are \
         computed per request: ask for at most {fits} resamples, fewer groups or a shorter \
         series, or method=pearson"
    ))
}

#[cfg(test)]
mod tests {
    use super::*;
    fn group(i: usize, inspected: u64, defective: u64) -> GroupCounts {
        GroupCounts {
            code: format!("S{i}"),
            name: None,
            inspected,
            defective,
            defects: Default::default(),
            products: Default::default(),
        }
    }

    #[test]
    fn sparse_tables_with_many_groups_are_costed_and_large_ones_are_not() {
        // 500 small lines: Cochran fails, so auto would resample.
        let sparse: Vec<GroupCounts> = (0..500).map(|i| group(i, 40, (i % 3) as u64)).collect();
        let cells = period_cells(MethodChoice::Auto, 1_000_000, &sparse);
        assert_eq!(cells, 1_000_000 * 500 * 2);
        let why = refusal(cells, 1_000_000).unwrap();
        assert!(why.contains("at most 200000 resamples"), "{why}");
        assert_eq!(
            refusal(period_cells(MethodChoice::Auto, 10_000, &sparse), 10_000),
            None
        );
        // Large counts: Cochran holds, the chi-square test needs no resampling.
        let large: Vec<GroupCounts> = (0..500)
            .map(|i| group(i, 100_000, 1_000 + i as u64))
            .collect();
        assert_eq!(period_cells(MethodChoice::Auto, 1_000_000, &large), 0);
        // Unless exact is asked for.
        assert_eq!(
            period_cells(MethodChoice::Exact, 1_000_000, &large),
            1_000_000 * 500 * 2
        );
        assert_eq!(period_cells(MethodChoice::Pearson, 1_000_000, &sparse), 0);
        // Two groups: Fisher's exact test, never resampled.
        assert_eq!(
            period_cells(MethodChoice::Exact, 1_000_000, &sparse[..2]),
            0
        );
    }
}
