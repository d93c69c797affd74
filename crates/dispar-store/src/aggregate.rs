//! The arithmetic of report aggregation that is the same on every backend: where a
//! date range is summed from (whole months from the monthly sums, edge days from the
//! daily rows), the group columns of a level, and the merge of the registered groups
//! with the sums read.

use std::collections::BTreeMap;

use dispar_core::code::{CategoryCode, LineCode, ProductCode, SiteCode};
use time::{Date, Duration};

use crate::decode::{parse_code, to_u64};
use crate::error::StoreError;
use crate::reports::{Aggregate, GroupTotals, Level};

/// Where one part of a date range is summed from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) enum Part {
    /// Days `from ..= to` from the daily tables.
    Days(Date, Date),
    /// Whole months `from ..= to` (first days) from the monthly sums.
    Months(Date, Date),
}

/// Splits `from ..= to` into whole months and the days before and after them.
pub(crate) fn split_range(from: Date, to: Date) -> Vec<Part> {
    if from > to {
        return Vec::new();
    }
    let first_of = |d: Date| d.replace_day(1).unwrap_or(d);
    let last_of = |d: Date| d.replace_day(d.month().length(d.year())).unwrap_or(d);
    // First day of the first whole month, and last day of the last whole month.
    let start = if from.day() == 1 {
        from
    } else {
        last_of(from) + Duration::days(1)
    };
    let end = if to == last_of(to) {
        to
    } else {
        first_of(to) - Duration::days(1)
    };
    if start > end {
        return vec![Part::Days(from, to)];
    }
    let mut parts = Vec::with_capacity(3);
    if from < start {
        parts.push(Part::Days(from, start - Duration::days(1)));
    }
    parts.push(Part::Months(start, first_of(end)));
    if end < to {
        parts.push(Part::Days(end + Duration::days(1), to));
    }
    parts
}

/// The selected group columns and the GROUP BY columns of a level, qualified by
/// `table` (empty for none).
pub(crate) fn group_columns(level: &Level, table: &str) -> (String, String) {
    match level {
        Level::Site => (
            format!("{table}site, CAST(NULL AS TEXT)"),
            format!("{table}site"),
        ),
        Level::Line { .. } | Level::AllLines => {
            let cols = format!("{table}site, {table}line");
            (cols.clone(), cols)
        }
    }
}

/// True when every bucket is whole calendar months, so the monthly sums answer it.
pub(crate) fn whole_months(buckets: &[(Date, Date)]) -> bool {
    buckets
        .iter()
        .all(|(a, b)| a.day() == 1 && b.day() == b.month().length(b.year()) && a <= b)
}

/// A group: site code, and line code at the line levels.
pub(crate) type GroupKey = (String, Option<String>);
/// A group's summed (inspected, defective) as read, per product ('' for records
/// without one) when the query splits by product, else with an empty product.
pub(crate) type TotalsRow = (String, Option<String>, String, i64, i64);
/// A group's summed count of one defect category as read.
pub(crate) type DefectsRow = (String, Option<String>, String, i64);

/// A group's sums while merging: inspected, defective, defects, and per product.
type Sums = (
    u64,
    u64,
    BTreeMap<CategoryCode, u64>,
    BTreeMap<Option<ProductCode>, (u64, u64)>,
);

/// Merges the rows of one read into groups: every registered group (zeros when it has
/// no data), with the per-product split when `by_product`.
pub(crate) fn finish(
    version: i64,
    by_product: bool,
    registered: Vec<GroupKey>,
    totals: Vec<TotalsRow>,
    defects: Vec<DefectsRow>,
) -> Result<Aggregate, StoreError> {
    let mut groups: BTreeMap<GroupKey, Sums> = BTreeMap::new();
    for key in registered {
        groups.entry(key).or_default();
    }
    for (site, line, product, inspected, defective) in totals {
        let g = groups.entry((site, line)).or_default();
        let inspected = to_u64(inspected, "sum")?;
        let defective = to_u64(defective, "sum")?;
        g.0 = g.0.saturating_add(inspected);
        g.1 = g.1.saturating_add(defective);
        if by_product && inspected > 0 {
            let product = match product.as_str() {
                "" => None,
                code => Some(parse_code::<ProductCode>(code)?),
            };
            g.3.insert(product, (inspected, defective));
        }
    }
    for (site, line, category, count) in defects {
        let count = to_u64(count, "sum")?;
        if count > 0 {
            groups
                .entry((site, line))
                .or_default()
                .2
                .insert(parse_code(&category)?, count);
        }
    }
    let groups = groups
        .into_iter()
        .map(
            |((site, line), (inspected, defective, defects, products))| {
                Ok(GroupTotals {
                    site: parse_code::<SiteCode>(&site)?,
                    line: line.as_deref().map(parse_code::<LineCode>).transpose()?,
                    inspected,
                    defective,
                    defects,
                    products,
                })
            },
        )
        .collect::<Result<_, StoreError>>()?;
    Ok(Aggregate {
        data_version: to_u64(version, "data version")?,
        groups,
    })
}

/// The site a query names (a line-level query's site, or its filter), for
/// [`StoreError::UnknownSite`].
pub(crate) fn named_site(query: &crate::reports::AggregateQuery) -> String {
    match &query.level {
        Level::Line { site } => site.to_string(),
        _ => query
            .site
            .as_ref()
            .map(ToString::to_string)
            .unwrap_or_default(),
    }
}

/// Per bucket, every registered group with its sums, from `(bucket, site, line,
/// inspected, defective)` rows.
pub(crate) fn finish_buckets(
    version: i64,
    registered: &[GroupKey],
    buckets: usize,
    rows: Vec<(i64, String, Option<String>, i64, i64)>,
) -> Result<crate::reports::BucketedAggregate, StoreError> {
    let mut per_bucket: Vec<Vec<TotalsRow>> = vec![Vec::new(); buckets];
    for (b, site, line, inspected, defective) in rows {
        if let Some(v) = usize::try_from(b).ok().and_then(|b| per_bucket.get_mut(b)) {
            v.push((site, line, String::new(), inspected, defective));
        }
    }
    let mut out = Vec::with_capacity(buckets);
    for totals in per_bucket {
        out.push(finish(version, false, registered.to_vec(), totals, Vec::new())?.groups);
    }
    Ok(crate::reports::BucketedAggregate {
        data_version: to_u64(version, "data version")?,
        buckets: out,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use time::macros::date;

    #[test]
    fn ranges_split_into_whole_months_and_edge_days() {
        let cases = [
            (
                date!(2026 - 03 - 01),
                date!(2026 - 03 - 31),
                vec![Part::Months(date!(2026 - 03 - 01), date!(2026 - 03 - 01))],
            ),
            (
                date!(2026 - 02 - 15),
                date!(2026 - 04 - 10),
                vec![
                    Part::Days(date!(2026 - 02 - 15), date!(2026 - 02 - 28)),
                    Part::Months(date!(2026 - 03 - 01), date!(2026 - 03 - 01)),
                    Part::Days(date!(2026 - 04 - 01), date!(2026 - 04 - 10)),
                ],
            ),
            (
                date!(2024 - 01 - 01),
                date!(2024 - 12 - 31),
                vec![Part::Months(date!(2024 - 01 - 01), date!(2024 - 12 - 01))],
            ),
            (
                date!(2024 - 02 - 01),
                date!(2024 - 02 - 29),
                vec![Part::Months(date!(2024 - 02 - 01), date!(2024 - 02 - 01))],
            ),
            (
                date!(2026 - 03 - 02),
                date!(2026 - 03 - 31),
                vec![Part::Days(date!(2026 - 03 - 02), date!(2026 - 03 - 31))],
            ),
            (
                date!(2026 - 03 - 09),
                date!(2026 - 03 - 15),
                vec![Part::Days(date!(2026 - 03 - 09), date!(2026 - 03 - 15))],
            ),
            (
                date!(2026 - 01 - 31),
                date!(2026 - 03 - 01),
                vec![
                    Part::Days(date!(2026 - 01 - 31), date!(2026 - 01 - 31)),
                    Part::Months(date!(2026 - 02 - 01), date!(2026 - 02 - 01)),
                    Part::Days(date!(2026 - 03 - 01), date!(2026 - 03 - 01)),
                ],
            ),
            (date!(2026 - 03 - 02), date!(2026 - 03 - 01), vec![]),
        ];
        for (from, to, want) in cases {
            assert_eq!(split_range(from, to), want, "{from} ..= {to}");
        }
    }
}
