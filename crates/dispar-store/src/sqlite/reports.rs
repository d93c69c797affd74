//! Aggregation for reports: sums per group over a date range, in SQL.
//!
//! The current data comes from `counts_current` / `current_defects` (one range scan
//! of a covering index). Data "as of" an instant comes from the history: the latest
//! revision of each key with `recorded_at <= as_of` (ids grow with `recorded_at`, so
//! that is the largest such id).

use std::collections::BTreeMap;

use dispar_core::code::{CategoryCode, LineCode, SiteCode};
use sqlx::{QueryBuilder, Sqlite};

use super::{SqliteStore, parse_code, to_u64};
use crate::error::StoreError;
use crate::reports::{Aggregate, AggregateQuery, GroupTotals, Level};
use crate::timestamp::{format_date, format_instant};

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
fn push_filters(q: &mut QueryBuilder<Sqlite>, query: &AggregateQuery, from: &str, to: &str) {
    q.push(" WHERE date BETWEEN ")
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
                let (cols, group) = group_columns(&query.level, "");
                let mut totals: QueryBuilder<Sqlite> = QueryBuilder::new(format!(
                    "SELECT {cols}, SUM(inspected), SUM(defective) FROM counts_current"
                ));
                push_filters(&mut totals, query, &from, &to);
                totals.push(format!(" GROUP BY {group}"));
                let mut defects: QueryBuilder<Sqlite> = QueryBuilder::new(format!(
                    "SELECT {cols}, category, SUM(count) FROM current_defects"
                ));
                push_filters(&mut defects, query, &from, &to);
                defects.push(format!(" GROUP BY {group}, category"));
                (totals, defects)
            }
            Some(as_of) => {
                let (cols, group) = group_columns(&query.level, "latest.");
                let latest = |q: &mut QueryBuilder<Sqlite>| {
                    q.push("WITH latest AS (SELECT site, line, MAX(id) AS id FROM count_revisions");
                    push_filters(q, query, &from, &to);
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

        let mut groups: BTreeMap<GroupKey, (u64, u64, BTreeMap<CategoryCode, u64>)> =
            BTreeMap::new();
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
}
