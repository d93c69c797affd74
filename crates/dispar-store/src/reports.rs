//! Types for report aggregation.

use std::collections::BTreeMap;

use dispar_core::code::{CategoryCode, LineCode, ProductCode, SiteCode};
use time::{Date, OffsetDateTime};

/// What the groups of a report are.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Level {
    /// Compare sites.
    Site,
    /// Compare the lines of one site.
    Line {
        /// The site.
        site: SiteCode,
    },
    /// Compare every line across sites.
    AllLines,
}

/// An aggregation request.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct AggregateQuery {
    /// First production date (inclusive).
    pub from: Date,
    /// Last production date (inclusive).
    pub to: Date,
    /// The grouping.
    pub level: Level,
    /// Only this site (for [`Level::Site`] and [`Level::AllLines`]).
    pub site: Option<SiteCode>,
    /// Only this product.
    pub product: Option<ProductCode>,
    /// Use the data as it stood at this instant (the latest revision per record with
    /// `recorded_at <= as_of`) instead of the current data.
    pub as_of: Option<OffsetDateTime>,
    /// Also split each group's sums by product ([`GroupTotals::products`]), in the same
    /// statement, so the split always adds up to the group's totals.
    pub by_product: bool,
}

/// The summed counts of one group.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct GroupTotals {
    /// The site.
    pub site: SiteCode,
    /// The line, at the line levels.
    pub line: Option<LineCode>,
    /// Units inspected.
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
    /// Defects by category (categories with a zero sum are left out).
    pub defects: BTreeMap<CategoryCode, u64>,
    /// With [`AggregateQuery::by_product`]: (inspected, defective) per product (`None`:
    /// records without a product), products with no units left out; empty otherwise.
    pub products: BTreeMap<Option<ProductCode>, (u64, u64)>,
}

/// The result of an aggregation.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Aggregate {
    /// The data version the sums were read at (same read snapshot).
    pub data_version: u64,
    /// Every registered group at the level (after the site filter), ordered by
    /// (site, line), including groups with no data in the range (all zeros), so the
    /// report can list them as excluded.
    pub groups: Vec<GroupTotals>,
}

/// The result of an aggregation bucketed by date ranges
/// ([`crate::Store::aggregate_buckets`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BucketedAggregate {
    /// The data version the sums were read at (same read snapshot).
    pub data_version: u64,
    /// One entry per bucket, in the order asked; each lists every registered group at
    /// the level as [`Aggregate::groups`] does (zeros without data). Defects by
    /// category are not read: `defects` is empty.
    pub buckets: Vec<Vec<GroupTotals>>,
}

/// One line's sums on one day ([`crate::Store::line_days`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineDay {
    /// The day.
    pub date: Date,
    /// The site.
    pub site: SiteCode,
    /// The line.
    pub line: LineCode,
    /// Units inspected (over the line's products that day).
    pub inspected: u64,
    /// Units defective.
    pub defective: u64,
}

/// Every line's posted days over a range ([`crate::Store::line_days`]).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LineDays {
    /// The data version the sums were read at (same read snapshot).
    pub data_version: u64,
    /// The line-days with a record, by date, then site and line.
    pub days: Vec<LineDay>,
}

/// What a report reads, for [`crate::Store::scoped_version`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VersionScope {
    /// First day read (a report's range, widened to its baseline window).
    pub from: Date,
    /// Last day read.
    pub to: Date,
    /// Only this site's records (line-level or site-filtered reports); None: every site.
    pub site: Option<SiteCode>,
}
