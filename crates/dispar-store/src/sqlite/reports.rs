//! Aggregation for reports: sums per group over a date range, in SQL.
//!
//! The current data comes from the monthly sums (`month_totals`, `month_defects`) for
//! the whole months of the range and from the daily tables (`counts_current`,
//! `current_defects`) for the days at its edges; each is a range scan of a primary
//! key. Data "as of" an instant comes from the history: the latest revision of each
//! key with `recorded_at <= as_of` (ids grow with `recorded_at`, so that is the largest
//! such id).

use std::collections::BTreeMap;

use dispar_core::code::{CategoryCode, LineCode, SiteCode};
use sqlx::{QueryBuilder, Sqlite};

use super::db::{SqliteStore, parse_code, to_u64};
use crate::error::StoreError;
use crate::reports::{Aggregate, AggregateQuery, GroupTotals, Level};
use crate::timestamp::{format_date, format_instant, format_month};
use time::{Date, Duration};

/// Where one part of a date range is summed from.
#[derive(Debug, Clone, PartialEq, Eq)]
enum Part {
    /// Days `from ..= to` from the daily tables.
    Days(Date, Date),
    /// Whole months `from ..= to` (first days) from the monthly sums.
    Months(Date, Date),
}

/// Splits `from ..= to` into whole months and the days before and after them.
fn split_range(from: Date, to: Date) -> Vec<Part> {
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
fn group_columns(level: &Level, table: &str) -> (String, String) {
    match level {
        Level::Site => (format!("{table}site, NULL"), format!("{table}site")),
        Level::Line { .. } | Level::AllLines => {
            let cols = format!("{table}site, {table}line");
            (cols.clone(), cols)
        }
    }
}

/// Pushes the WHERE conditions shared by every query of a request (column names
/// unqualified, so they apply to `counts_current`, `current_defects` and
/// `count_revisions` alike).
fn push_filters(
    q: &mut QueryBuilder<Sqlite>,
    query: &AggregateQuery,
    column: &str,
    from: &str,
    to: &str,
) {
    q.push(format!(" WHERE {column} BETWEEN "))
        .push_bind(from.to_owned())
        .push(" AND ")
        .push_bind(to.to_owned());
    let site = match &query.level {
        Level::Line { site } => Some(site),
        _ => query.site.as_ref(),
    };
    if let Some(s) = site {
        q.push(" AND site = ").push_bind(s.as_str().to_owned());
    }
    if let Some(p) = &query.product {
        q.push(" AND product = ").push_bind(p.as_str().to_owned());
    }
}

type GroupKey = (String, Option<String>);

impl SqliteStore {
    pub(super) async fn aggregate_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let from = format_date(query.from);
        let to = format_date(query.to);
        let as_of = query.as_of.map(format_instant).transpose()?;

        // One read transaction: the version, the registry and the sums are one snapshot.
        let mut tx = self.reader.begin().await?;
        let version: i64 = sqlx::query_scalar("SELECT data_version FROM store_state WHERE id = 1")
            .fetch_one(&mut *tx)
            .await?;

        // The registered groups.
        let site_filter = match &query.level {
            Level::Line { site } => Some(site),
            _ => query.site.as_ref(),
        };
        if let Some(site) = site_filter {
            let known: Option<i64> = sqlx::query_scalar("SELECT 1 FROM sites WHERE code = ?")
                .bind(site.as_str())
                .fetch_optional(&mut *tx)
                .await?;
            if known.is_none() {
                return Err(StoreError::UnknownSite {
                    site: site.to_string(),
                });
            }
        }
        let mut registry: QueryBuilder<Sqlite> = QueryBuilder::new(match query.level {
            Level::Site => "SELECT code, NULL FROM sites",
            Level::Line { .. } | Level::AllLines => "SELECT site, code FROM lines",
        });
        if let Some(site) = site_filter {
            registry.push(match query.level {
                Level::Site => " WHERE code = ",
                _ => " WHERE site = ",
            });
            registry.push_bind(site.as_str().to_owned());
        }
        let registered: Vec<(String, Option<String>)> =
            registry.build_query_as().fetch_all(&mut *tx).await?;

        // The sums.
        let (totals_sql, defects_sql) = match &as_of {
            None => {
                let parts = split_range(query.from, query.to);
                if parts.is_empty() {
                    tx.rollback().await?;
                    return finish(version, registered, Vec::new(), Vec::new());
                }
                let (cols, group) = group_columns(&query.level, "");
                let union = |q: &mut QueryBuilder<Sqlite>,
                             daily: &str,
                             monthly: &str,
                             values: &str| {
                    for (n, part) in parts.iter().enumerate() {
                        if n > 0 {
                            q.push(" UNION ALL ");
                        }
                        let (table, column, a, b) = match part {
                            Part::Days(a, b) => (daily, "date", format_date(*a), format_date(*b)),
                            Part::Months(a, b) => {
                                (monthly, "month", format_month(*a), format_month(*b))
                            }
                        };
                        q.push(format!("SELECT site, line, {values} FROM {table}"));
                        push_filters(q, query, column, &a, &b);
                    }
                };
                let mut totals: QueryBuilder<Sqlite> = QueryBuilder::new(format!(
                    "SELECT {cols}, SUM(inspected), SUM(defective) FROM ("
                ));
                union(
                    &mut totals,
                    "counts_current",
                    "month_totals",
                    "inspected, defective",
                );
                totals.push(format!(") GROUP BY {group}"));
                let mut defects: QueryBuilder<Sqlite> =
                    QueryBuilder::new(format!("SELECT {cols}, category, SUM(count) FROM ("));
                union(
                    &mut defects,
                    "current_defects",
                    "month_defects",
                    "category, count",
                );
                defects.push(format!(") GROUP BY {group}, category"));
                (totals, defects)
            }
            Some(as_of) => {
                let (cols, group) = group_columns(&query.level, "latest.");
                let latest = |q: &mut QueryBuilder<Sqlite>| {
                    q.push("WITH latest AS (SELECT site, line, MAX(id) AS id FROM count_revisions");
                    push_filters(q, query, "date", &from, &to);
                    q.push(" AND recorded_at <= ")
                        .push_bind(as_of.clone())
                        .push(" GROUP BY date, site, line, product) ");
                };
                let mut totals: QueryBuilder<Sqlite> = QueryBuilder::new("");
                latest(&mut totals);
                totals.push(format!(
                    "SELECT {cols}, SUM(r.inspected), SUM(r.defective) \
                     FROM latest JOIN count_revisions r ON r.id = latest.id GROUP BY {group}"
                ));
                let mut defects: QueryBuilder<Sqlite> = QueryBuilder::new("");
                latest(&mut defects);
                defects.push(format!(
                    "SELECT {cols}, d.category, SUM(d.count) \
                     FROM latest JOIN revision_defects d ON d.revision_id = latest.id \
                     GROUP BY {group}, d.category"
                ));
                (totals, defects)
            }
        };
        let (mut totals_sql, mut defects_sql) = (totals_sql, defects_sql);
        let totals: Vec<(String, Option<String>, i64, i64)> =
            totals_sql.build_query_as().fetch_all(&mut *tx).await?;
        let defects: Vec<(String, Option<String>, String, i64)> =
            defects_sql.build_query_as().fetch_all(&mut *tx).await?;
        tx.rollback().await?;

        finish(version, registered, totals, defects)
    }
}

/// Merges the registered groups with the sums (groups without data get zeros).
fn finish(
    version: i64,
    registered: Vec<GroupKey>,
    totals: Vec<(String, Option<String>, i64, i64)>,
    defects: Vec<(String, Option<String>, String, i64)>,
) -> Result<Aggregate, StoreError> {
    let mut groups: BTreeMap<GroupKey, (u64, u64, BTreeMap<CategoryCode, u64>)> = BTreeMap::new();
    for key in registered {
        groups.entry(key).or_default();
    }
    for (site, line, inspected, defective) in totals {
        let g = groups.entry((site, line)).or_default();
        g.0 = to_u64(inspected, "sum")?;
        g.1 = to_u64(defective, "sum")?;
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
        .map(|((site, line), (inspected, defective, defects))| {
            Ok(GroupTotals {
                site: parse_code::<SiteCode>(&site)?,
                line: line.as_deref().map(parse_code::<LineCode>).transpose()?,
                inspected,
                defective,
                defects,
            })
        })
        .collect::<Result<_, StoreError>>()?;
    Ok(Aggregate {
        data_version: to_u64(version, "data version")?,
        groups,
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
