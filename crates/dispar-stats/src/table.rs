//! The r x c table of counts, its margins, expected counts, and the removal of empty rows
//! and columns.

use crate::error::{NotTestable, NotTestableReason, StatsError};

/// An r x c table of non-negative counts, stored row-major, with its margins.
///
/// Rows are groups (sites, lines); columns are outcomes. The grand total and every margin
/// fit in a `u64` (checked on construction).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Table {
    rows: usize,
    cols: usize,
    counts: Vec<u64>,
    row_totals: Vec<u64>,
    col_totals: Vec<u64>,
    total: u64,
}

/// A table with its all-zero rows and columns removed, and the map back to the input.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Reduced {
    /// The table of the kept rows and columns (every margin > 0). When nothing is kept in
    /// one direction this is the original table (see [`Reduced::testable`]).
    pub table: Table,
    /// Input indices of the kept rows, in order.
    pub kept_rows: Vec<usize>,
    /// Input indices of the kept columns, in order.
    pub kept_cols: Vec<usize>,
    /// Input indices of the rows dropped because their total is 0.
    pub dropped_rows: Vec<usize>,
    /// Input indices of the columns dropped because their total is 0.
    pub dropped_cols: Vec<usize>,
}

impl Reduced {
    /// The reduced table when it has at least 2 rows and 2 columns; otherwise why not.
    pub fn testable(&self) -> Result<&Table, StatsError> {
        let reason = if self.kept_rows.len() < 2 {
            NotTestableReason::TooFewRows {
                usable: self.kept_rows.len(),
            }
        } else if self.kept_cols.len() < 2 {
            NotTestableReason::TooFewColumns {
                usable: self.kept_cols.len(),
            }
        } else {
            return Ok(&self.table);
        };
        Err(StatsError::NotTestable(NotTestable {
            reason,
            dropped_rows: self.dropped_rows.clone(),
            dropped_cols: self.dropped_cols.clone(),
        }))
    }
}

impl Table {
    /// A `rows` x `cols` table from counts in row-major order.
    ///
    /// ```
    /// use dispar_stats::table::Table;
    /// let t = Table::new(2, 2, vec![3, 1, 1, 3])?;
    /// assert_eq!(t.row_totals(), &[4, 4]);
    /// assert_eq!(t.total(), 8);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn new(rows: usize, cols: usize, counts: Vec<u64>) -> Result<Table, StatsError> {
        if rows == 0 || cols == 0 {
            return Err(StatsError::EmptyTable);
        }
        let expected = rows.checked_mul(cols).ok_or(StatsError::Overflow)?;
        if counts.len() != expected {
            return Err(StatsError::ShapeMismatch {
                rows,
                cols,
                expected,
                len: counts.len(),
            });
        }
        let mut row_totals = vec![0u64; rows];
        let mut col_totals = vec![0u64; cols];
        let mut total = 0u64;
        for (r, row) in counts.chunks_exact(cols).enumerate() {
            let mut sum = 0u64;
            for (c, &x) in row.iter().enumerate() {
                sum = sum.checked_add(x).ok_or(StatsError::Overflow)?;
                col_totals[c] = col_totals[c].checked_add(x).ok_or(StatsError::Overflow)?;
            }
            row_totals[r] = sum;
            total = total.checked_add(sum).ok_or(StatsError::Overflow)?;
        }
        Ok(Table {
            rows,
            cols,
            counts,
            row_totals,
            col_totals,
            total,
        })
    }

    /// A table from its rows; every row must have the same length.
    pub fn from_rows(rows: &[Vec<u64>]) -> Result<Table, StatsError> {
        let first = rows.first().ok_or(StatsError::EmptyTable)?;
        let cols = first.len();
        let mut counts = Vec::with_capacity(rows.len() * cols);
        for (row, values) in rows.iter().enumerate() {
            if values.len() != cols {
                return Err(StatsError::RaggedRows {
                    row,
                    len: values.len(),
                    expected: cols,
                });
            }
            counts.extend_from_slice(values);
        }
        Table::new(rows.len(), cols, counts)
    }

    /// The k x 2 table of a rate comparison from `(inspected, defective)` per group:
    /// column 0 is defective, column 1 conforming (`inspected - defective`).
    ///
    /// ```
    /// use dispar_stats::table::Table;
    /// let t = Table::from_rates(&[(300, 36), (300, 46)])?;
    /// assert_eq!(t.get(1, 0), 46);
    /// assert_eq!(t.get(1, 1), 254);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn from_rates(groups: &[(u64, u64)]) -> Result<Table, StatsError> {
        let mut counts = Vec::with_capacity(groups.len() * 2);
        for (index, &(inspected, defective)) in groups.iter().enumerate() {
            if defective > inspected {
                return Err(StatsError::DefectiveExceedsInspected {
                    index,
                    inspected,
                    defective,
                });
            }
            counts.push(defective);
            counts.push(inspected - defective);
        }
        Table::new(groups.len(), 2, counts)
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Number of columns.
    pub fn cols(&self) -> usize {
        self.cols
    }

    /// The count in row `r`, column `c`.
    ///
    /// # Panics
    /// When `r` or `c` is out of range.
    pub fn get(&self, r: usize, c: usize) -> u64 {
        assert!(
            r < self.rows && c < self.cols,
            "cell ({r}, {c}) out of range"
        );
        self.counts[r * self.cols + c]
    }

    /// All counts, row-major.
    pub fn counts(&self) -> &[u64] {
        &self.counts
    }

    /// The counts of row `r`.
    ///
    /// # Panics
    /// When `r` is out of range.
    pub fn row(&self, r: usize) -> &[u64] {
        &self.counts[r * self.cols..(r + 1) * self.cols]
    }

    /// Row totals.
    pub fn row_totals(&self) -> &[u64] {
        &self.row_totals
    }

    /// Column totals.
    pub fn col_totals(&self) -> &[u64] {
        &self.col_totals
    }

    /// Grand total N.
    pub fn total(&self) -> u64 {
        self.total
    }

    /// Expected count under independence, `R_r C_c / N` (0 when N is 0).
    pub fn expected(&self, r: usize, c: usize) -> f64 {
        if self.total == 0 {
            return 0.0;
        }
        self.row_totals[r] as f64 * (self.col_totals[c] as f64 / self.total as f64)
    }

    /// Number of rows with a non-zero total.
    pub fn nonzero_rows(&self) -> usize {
        self.row_totals.iter().filter(|&&t| t > 0).count()
    }

    /// Number of columns with a non-zero total.
    pub fn nonzero_cols(&self) -> usize {
        self.col_totals.iter().filter(|&&t| t > 0).count()
    }

    /// Drops all-zero rows and columns, reporting which.
    ///
    /// ```
    /// use dispar_stats::table::Table;
    /// let t = Table::from_rows(&[vec![1, 0, 2], vec![0, 0, 0], vec![3, 0, 4]])?;
    /// let r = t.reduce();
    /// assert_eq!(r.dropped_rows, vec![1]);
    /// assert_eq!(r.dropped_cols, vec![1]);
    /// assert_eq!(r.table.counts(), &[1, 2, 3, 4]);
    /// # Ok::<(), dispar_stats::StatsError>(())
    /// ```
    pub fn reduce(&self) -> Reduced {
        let split = |totals: &[u64]| -> (Vec<usize>, Vec<usize>) {
            (0..totals.len()).partition(|&i| totals[i] > 0)
        };
        let (kept_rows, dropped_rows) = split(&self.row_totals);
        let (kept_cols, dropped_cols) = split(&self.col_totals);
        let nothing_dropped = dropped_rows.is_empty() && dropped_cols.is_empty();
        let nothing_kept = kept_rows.is_empty() || kept_cols.is_empty();
        let table = if nothing_dropped || nothing_kept {
            self.clone()
        } else {
            let mut counts = Vec::with_capacity(kept_rows.len() * kept_cols.len());
            for &r in &kept_rows {
                for &c in &kept_cols {
                    counts.push(self.counts[r * self.cols + c]);
                }
            }
            Table {
                rows: kept_rows.len(),
                cols: kept_cols.len(),
                counts,
                row_totals: kept_rows.iter().map(|&r| self.row_totals[r]).collect(),
                col_totals: kept_cols.iter().map(|&c| self.col_totals[c]).collect(),
                total: self.total,
            }
        };
        Reduced {
            table,
            kept_rows,
            kept_cols,
            dropped_rows,
            dropped_cols,
        }
    }

    /// Whether this is a 2 x 2 table.
    pub fn is_2x2(&self) -> bool {
        self.rows == 2 && self.cols == 2
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn construction_rejects_bad_shapes() {
        assert_eq!(Table::new(0, 2, vec![]), Err(StatsError::EmptyTable));
        assert!(matches!(
            Table::new(2, 2, vec![1, 2, 3]),
            Err(StatsError::ShapeMismatch { len: 3, .. })
        ));
        assert!(matches!(
            Table::from_rows(&[vec![1, 2], vec![3]]),
            Err(StatsError::RaggedRows { row: 1, .. })
        ));
        assert_eq!(Table::from_rows(&[]), Err(StatsError::EmptyTable));
        assert!(matches!(
            Table::from_rates(&[(5, 6)]),
            Err(StatsError::DefectiveExceedsInspected { index: 0, .. })
        ));
    }

    #[test]
    fn totals_that_overflow_are_an_error() {
        assert_eq!(
            Table::new(1, 2, vec![u64::MAX, 1]),
            Err(StatsError::Overflow)
        );
        assert_eq!(
            Table::new(2, 1, vec![u64::MAX, 1]),
            Err(StatsError::Overflow)
        );
    }

    #[test]
    fn margins_and_expected_counts_follow_the_definition() {
        let t = Table::from_rows(&[vec![10, 20], vec![30, 40]]).expect("valid");
        assert_eq!(t.row_totals(), &[30, 70]);
        assert_eq!(t.col_totals(), &[40, 60]);
        assert_eq!(t.total(), 100);
        assert!((t.expected(0, 0) - 12.0).abs() < 1e-12);
        assert!((t.expected(1, 1) - 42.0).abs() < 1e-12);
        assert_eq!(t.row(1), &[30, 40]);
    }

    #[test]
    fn a_table_with_one_usable_row_is_not_testable() {
        let t = Table::from_rows(&[vec![0, 0], vec![3, 4]]).expect("valid");
        let r = t.reduce();
        match r.testable() {
            Err(StatsError::NotTestable(nt)) => {
                assert_eq!(nt.reason, NotTestableReason::TooFewRows { usable: 1 });
                assert_eq!(nt.dropped_rows, vec![0]);
            }
            other => panic!("expected NotTestable, got {other:?}"),
        }
        let all_zero = Table::new(2, 2, vec![0; 4]).expect("valid").reduce();
        assert!(all_zero.testable().is_err());
    }
}
