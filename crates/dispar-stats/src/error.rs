//! The one error type of this crate.

use std::fmt;

/// Bad input to a statistics function, or a table on which no test is possible.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum StatsError {
    /// The work passed the caller's deadline ([`crate::analysis::Options::deadline`])
    /// and was abandoned; no partial result is given.
    #[error("the computation passed its deadline and was abandoned")]
    DeadlineExceeded,
    /// A table needs at least one row and one column.
    #[error("a table needs at least one row and one column")]
    EmptyTable,
    /// The number of counts does not equal rows x cols.
    #[error("a {rows} x {cols} table needs {expected} counts, got {len}")]
    ShapeMismatch {
        /// Rows asked for.
        rows: usize,
        /// Columns asked for.
        cols: usize,
        /// rows x cols.
        expected: usize,
        /// Counts given.
        len: usize,
    },
    /// A row of a table given row by row has another length than the first row.
    #[error("row {row} has {len} counts but row 0 has {expected}")]
    RaggedRows {
        /// Index of the offending row.
        row: usize,
        /// Its length.
        len: usize,
        /// Length of row 0.
        expected: usize,
    },
    /// A group reports more defective units than it inspected.
    #[error("group {index}: defective {defective} exceeds inspected {inspected}")]
    DefectiveExceedsInspected {
        /// Index of the group in the input.
        index: usize,
        /// Units inspected.
        inspected: u64,
        /// Units defective.
        defective: u64,
    },
    /// A count of successes exceeds its number of trials.
    #[error("{successes} successes exceed {trials} trials")]
    SuccessesExceedTrials {
        /// Successes given.
        successes: u64,
        /// Trials given.
        trials: u64,
    },
    /// Row and column totals given for a table do not add up to the same N.
    #[error("row totals add up to {row_sum} but column totals to {col_sum}")]
    MarginsDisagree {
        /// Sum of the row totals.
        row_sum: u64,
        /// Sum of the column totals.
        col_sum: u64,
    },
    /// A group in a rate comparison inspected no units.
    #[error("group {index} inspected no units")]
    EmptyGroup {
        /// Index of the group in the input.
        index: usize,
    },
    /// A proportion was asked for a sample of size 0.
    #[error("no trials: a proportion of 0 units has no estimate and no interval")]
    NoTrials,
    /// The grand total (or a margin) does not fit in a u64.
    #[error("the total of the counts overflows u64")]
    Overflow,
    /// A numeric parameter is outside its domain (alpha, confidence, df, fraction, ...).
    #[error("{name} = {value} is invalid: must be {requirement}")]
    InvalidParameter {
        /// Parameter name.
        name: &'static str,
        /// Value given.
        value: f64,
        /// What it must be, in words.
        requirement: &'static str,
    },
    /// No test is possible on this table (fewer than two usable rows or columns).
    #[error("not testable: {0}")]
    NotTestable(NotTestable),
}

/// Why a table cannot be tested, with what was dropped to find out.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NotTestable {
    /// The reason, typed.
    pub reason: NotTestableReason,
    /// Input rows dropped because their total is 0 (indices into the input).
    pub dropped_rows: Vec<usize>,
    /// Input columns dropped because their total is 0 (indices into the input).
    pub dropped_cols: Vec<usize>,
}

/// The reason a table cannot be tested.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NotTestableReason {
    /// Fewer than two rows (groups) have a non-zero total.
    TooFewRows {
        /// Rows with a non-zero total.
        usable: usize,
    },
    /// Fewer than two columns (outcomes) have a non-zero total; for a rate table this means
    /// no group had a defective unit, or every inspected unit was defective.
    TooFewColumns {
        /// Columns with a non-zero total.
        usable: usize,
    },
    /// A stratified comparison in which both groups (or several) and both outcomes occur,
    /// but no single stratum has two groups and both outcomes, so no stratum compares
    /// anything (for example each product made at one site only).
    NoInformativeStratum {
        /// Strata given.
        strata: usize,
    },
}

impl fmt::Display for NotTestableReason {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            NotTestableReason::TooFewRows { usable } => write!(
                f,
                "only {usable} group(s) have counts; a comparison needs at least 2"
            ),
            NotTestableReason::TooFewColumns { usable } => write!(
                f,
                "only {usable} outcome(s) occur (for rates: no defective units, or all units \
                 defective); a comparison needs at least 2"
            ),
            NotTestableReason::NoInformativeStratum { strata } => write!(
                f,
                "none of the {strata} strata has two groups with units and both outcomes; \
                 a stratified comparison needs at least one"
            ),
        }
    }
}

impl fmt::Display for NotTestable {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.reason)?;
        if !self.dropped_rows.is_empty() {
            write!(f, "; rows with no counts dropped: {:?}", self.dropped_rows)?;
        }
        if !self.dropped_cols.is_empty() {
            write!(
                f,
                "; columns with no counts dropped: {:?}",
                self.dropped_cols
            )?;
        }
        Ok(())
    }
}

/// Checks that `value` lies strictly between 0 and 1.
pub(crate) fn check_open_unit(name: &'static str, value: f64) -> Result<(), StatsError> {
    if value > 0.0 && value < 1.0 {
        Ok(())
    } else {
        Err(StatsError::InvalidParameter {
            name,
            value,
            requirement: "strictly between 0 and 1",
        })
    }
}
