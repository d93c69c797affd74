//! Cochran's rule for the validity of the asymptotic chi-square test.
//!
//! Cochran (1954), "Some methods for strengthening the common chi-square tests",
//! Biometrics 10(4): no expected count below 1 and at most 20% of the expected counts
//! below 5.

use crate::table::Table;

/// The expected-count summary behind Cochran's rule.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Validity {
    /// Smallest expected count (0 when there are no usable cells).
    pub min_expected: f64,
    /// Number of cells considered (rows x columns with non-zero totals).
    pub cells: usize,
    /// Cells with an expected count below 1.
    pub cells_below_1: usize,
    /// Cells with an expected count below 5.
    pub cells_below_5: usize,
    /// `cells_below_5 / cells` (0 when there are no cells).
    pub share_below_5: f64,
    /// Whether Cochran's rule holds (and there is at least one cell).
    pub holds: bool,
}

/// Cochran's rule over the cells whose row and column totals are both non-zero (all-zero
/// rows and columns are dropped before any test, so their cells do not count).
///
/// ```
/// use dispar_stats::{table::Table, validity::cochran};
/// let t = Table::from_rows(&[vec![3, 1], vec![1, 3]])?;
/// let v = cochran(&t);
/// assert_eq!(v.min_expected, 2.0);
/// assert_eq!(v.cells_below_5, 4);
/// assert!(!v.holds);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn cochran(table: &Table) -> Validity {
    let mut min_expected = f64::INFINITY;
    let (mut cells, mut below_1, mut below_5) = (0usize, 0usize, 0usize);
    for r in 0..table.rows() {
        if table.row_totals()[r] == 0 {
            continue;
        }
        for c in 0..table.cols() {
            if table.col_totals()[c] == 0 {
                continue;
            }
            let e = table.expected(r, c);
            cells += 1;
            min_expected = min_expected.min(e);
            if e < 1.0 {
                below_1 += 1;
            }
            if e < 5.0 {
                below_5 += 1;
            }
        }
    }
    if cells == 0 {
        return Validity {
            min_expected: 0.0,
            cells: 0,
            cells_below_1: 0,
            cells_below_5: 0,
            share_below_5: 0.0,
            holds: false,
        };
    }
    let share_below_5 = below_5 as f64 / cells as f64;
    Validity {
        min_expected,
        cells,
        cells_below_1: below_1,
        cells_below_5: below_5,
        share_below_5,
        // "At most 20%": compare counts exactly, 5 * below_5 <= cells.
        holds: below_1 == 0 && 5 * below_5 <= cells,
    }
}

/// Cochran's rule for the 2 x 2 table [[a, b], [c, d]] without building a table: with four
/// cells, one cell below 5 is already 25% > 20%, so the rule is min expected >= 5.
pub(crate) fn cochran_2x2_holds(a: u64, b: u64, c: u64, d: u64) -> bool {
    let r1 = a + b;
    let r2 = c + d;
    let c1 = a + c;
    let c2 = b + d;
    let n = r1 + r2;
    if n == 0 {
        return false;
    }
    let rmin = r1.min(r2) as f64;
    let cmin = c1.min(c2) as f64;
    rmin * cmin / n as f64 >= 5.0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn twenty_percent_below_five_still_holds() {
        // 5 x 2 table, 10 cells; expected counts computed by hand: row 0 has total 8 of
        // N = 808 with columns 404/404, so E = 4 in both its cells: 2 of 10 cells = 20%.
        let t = Table::from_rows(&[
            vec![4, 4],
            vec![100, 100],
            vec![100, 100],
            vec![100, 100],
            vec![100, 100],
        ])
        .expect("valid");
        let v = cochran(&t);
        assert_eq!(v.cells, 10);
        assert_eq!(v.cells_below_5, 2);
        assert!((v.share_below_5 - 0.2).abs() < 1e-15);
        assert!(v.holds);
    }

    #[test]
    fn an_expected_count_below_one_fails() {
        // Row 0 has total 1 of N = 301: E = 101/301 and 200/301, both below 1.
        let t = Table::from_rows(&[vec![1, 0], vec![50, 100], vec![50, 100]]).expect("valid");
        let v = cochran(&t);
        assert_eq!(v.cells_below_1, 2);
        assert!(!v.holds);
    }

    #[test]
    fn zero_rows_and_columns_are_ignored() {
        let t =
            Table::from_rows(&[vec![10, 0, 10], vec![0, 0, 0], vec![10, 0, 10]]).expect("valid");
        let v = cochran(&t);
        assert_eq!(v.cells, 4);
        assert_eq!(v.min_expected, 10.0);
        assert!(v.holds);
    }

    #[test]
    fn the_2x2_shortcut_agrees_with_the_general_rule() {
        for (a, b, c, d) in [(5, 5, 5, 5), (4, 6, 6, 4), (10, 90, 20, 80), (1, 99, 3, 97)] {
            let t = Table::new(2, 2, vec![a, b, c, d]).expect("valid");
            assert_eq!(
                cochran_2x2_holds(a, b, c, d),
                cochran(&t).holds,
                "{a} {b} {c} {d}"
            );
        }
    }
}
