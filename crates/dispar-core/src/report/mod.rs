//! Reports: parameters in, per-group counts in, a serializable [`Report`] out, and its
//! plain-text layout.
//!
//! - [`params`]: the words callers use (`method=auto|pearson|g|exact`,
//!   `pairwise=auto|pearson|pearson-yates|fisher`, `adjust=holm|bonferroni|hochberg|bh`,
//!   `level=site|line|all-lines`, `overdispersion=estimate|widen`,
//!   `stratify=product|none`) and [`Parameters`];
//! - [`build`]: the pure builder ([`build_report`], [`analyze_rates`], [`analyze_table`]);
//! - [`mix`]: the comparison adjusted for product mix, and the power of the test;
//! - [`gaps`]: gaps in the data (lines that stopped posting, missing and implausible days);
//! - [`baseline`]: each group against its own earlier periods, changes, usual spread;
//! - [`model`]: the report's fields (what the JSON holds);
//! - [`text`]: `Report::to_text()` and `TableReport::to_text()`.

pub mod baseline;
pub mod build;
pub mod gaps;
pub mod mix;
pub mod model;
pub mod params;
pub mod text;
pub mod trend;

pub use baseline::BaselineWindow;
pub use build::{
    GroupCounts, ReportRequest, analyze_rates, analyze_table, build_report, build_summary,
};
pub use model::{Report, SeriesPoint, TableReport};
pub use params::{
    AdjustChoice, DispersionChoice, Filters, Level, LevelKind, MethodChoice, PairwiseChoice,
    Parameters, StratifyChoice,
};

#[cfg(test)]
mod tests;
