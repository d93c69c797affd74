//! Per-cell statistics: expected count, contribution to X^2, Pearson residual and
//! Haberman's adjusted standardized residual.
//!
//! Haberman (1973), "The analysis of residuals in cross-classified tables", Biometrics 29:
//! d_ij = (O - E) / sqrt(E (1 - R_i/N) (1 - C_j/N)), asymptotically standard normal.
//! For a k x 2 table the adjusted residual of a group's defective cell is its
//! analysis-of-means z-score.

use crate::chisq::deviation;
use crate::table::Table;

/// Statistics of one cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cell {
    /// Expected count R_i C_j / N.
    pub expected: f64,
    /// (O - E)^2 / E, the cell's share of Pearson's X^2.
    pub contribution: f64,
    /// (O - E) / sqrt(E).
    pub pearson_residual: f64,
    /// (O - E) / sqrt(E (1 - R_i/N) (1 - C_j/N)).
    pub adjusted_residual: f64,
}

/// Statistics of every cell, row-major.
///
/// Where a quantity is undefined (E = 0 in an all-zero row or column, or a row or column
/// holding all of N so the adjusted variance is 0) it is reported as 0.0, never NaN; the
/// analysis functions only call this on reduced, testable tables where that cannot happen.
///
/// ```
/// use dispar_stats::{residuals::cells, table::Table};
/// let t = Table::from_rows(&[vec![10, 20], vec![30, 40]])?;
/// let c = cells(&t);
/// assert_eq!(c[0].expected, 12.0);
/// assert!((c[0].contribution - 4.0 / 12.0).abs() < 1e-15);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn cells(table: &Table) -> Vec<Cell> {
    let total = table.total();
    let mut out = Vec::with_capacity(table.rows() * table.cols());
    if total == 0 {
        out.resize(
            table.rows() * table.cols(),
            Cell {
                expected: 0.0,
                contribution: 0.0,
                pearson_residual: 0.0,
                adjusted_residual: 0.0,
            },
        );
        return out;
    }
    let inv_n = 1.0 / total as f64;
    // 1 / sqrt(1 - share) for each row and column (0 when it holds all of N).
    let factor = |t: u64| -> f64 {
        let rest = 1.0 - t as f64 * inv_n;
        if rest > 0.0 { 1.0 / rest.sqrt() } else { 0.0 }
    };
    let col_factors: Vec<f64> = table.col_totals().iter().map(|&c| factor(c)).collect();
    for r in 0..table.rows() {
        let rt = table.row_totals()[r];
        let row_factor = factor(rt);
        for ((&o, &col_factor), &ct) in table
            .row(r)
            .iter()
            .zip(&col_factors)
            .zip(table.col_totals())
        {
            let (d, e) = if rt > 0 && ct > 0 {
                deviation(o, rt, ct, total)
            } else {
                (0.0, 0.0)
            };
            let cell = if e > 0.0 {
                let inv_e = 1.0 / e;
                let pearson_residual = d * inv_e.sqrt();
                Cell {
                    expected: e,
                    contribution: d * d * inv_e,
                    pearson_residual,
                    adjusted_residual: pearson_residual * row_factor * col_factor,
                }
            } else {
                Cell {
                    expected: e,
                    contribution: 0.0,
                    pearson_residual: 0.0,
                    adjusted_residual: 0.0,
                }
            };
            out.push(cell);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::chisq::pearson;
    use crate::testutil::assert_rel;

    #[test]
    fn contributions_sum_to_pearson_x2() {
        let t = Table::from_rows(&[vec![12, 5, 9], vec![7, 22, 3], vec![1, 8, 30]]).expect("valid");
        let total: f64 = cells(&t).iter().map(|c| c.contribution).sum();
        assert_rel(total, pearson(&t), 1e-13, "sum of contributions");
    }

    #[test]
    fn adjusted_residuals_of_a_2x2_are_plus_or_minus_sqrt_x2() {
        // For a 2 x 2 table every |adjusted residual| equals sqrt(X^2) (Agresti,
        // Categorical Data Analysis, 3rd ed., section 2.4.5; from memory).
        let t = Table::from_rows(&[vec![10, 20], vec![30, 40]]).expect("valid");
        let x = pearson(&t).sqrt();
        for c in cells(&t) {
            assert_rel(c.adjusted_residual.abs(), x, 1e-13, "2x2 adjusted residual");
        }
    }

    #[test]
    fn degenerate_cells_are_zero_not_nan() {
        let t = Table::from_rows(&[vec![0, 0], vec![3, 4]]).expect("valid");
        for c in cells(&t) {
            assert!(c.adjusted_residual.is_finite() && c.contribution.is_finite());
        }
    }
}
