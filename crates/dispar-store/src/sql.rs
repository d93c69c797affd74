//! The SQL both backends run, built once for any sqlx database.
//!
//! SQLite and PostgreSQL store the same encoding (see the migrations), and every
//! statement here is written in the SQL both accept: multi-row `VALUES` lists, `WITH`
//! tables of bound keys, `INSERT ... ON CONFLICT ... DO UPDATE` with the target table
//! named, sums cast to `BIGINT` (PostgreSQL sums `bigint` into `numeric`), typed
//! `NULL`s. [`QueryBuilder`] writes each database's own placeholders. What differs
//! between the backends — how a write transaction starts and locks, how revision ids are
//! allocated, retries — stays in the backend modules, which run these statements.

use std::marker::PhantomData;

use sqlx::{Database, Encode, QueryBuilder, Type};
use time::Date;

use crate::aggregate::{Part, group_columns, split_range, whole_months};
use crate::error::StoreError;
use crate::keys::KeyId;
use crate::plan::{Plan, Row};
use crate::reports::{AggregateQuery, Level, VersionScope};
use crate::timestamp::{format_date, format_instant, format_month};

/// Distinct keys (5 binds each) or ids per lookup query.
pub(crate) const LOOKUP_CHUNK: usize = 500;
/// Rows per multi-row insert into `count_revisions` (10 binds each) and
/// `counts_current` (8 binds each); SQLite allows 32766 binds per statement and
/// PostgreSQL 65535.
const INSERT_CHUNK: usize = 1000;
/// Rows per multi-row insert of defect counts (3 or 6 binds each).
const DEFECT_CHUNK: usize = 2000;

/// Bumps the data version (inside a write transaction that changed report input).
pub(crate) const BUMP_DATA_VERSION: &str =
    "UPDATE store_state SET data_version = data_version + 1 WHERE id = 1";
/// [`BUMP_DATA_VERSION`], returning the new version.
pub(crate) const NEXT_DATA_VERSION: &str =
    "UPDATE store_state SET data_version = data_version + 1 WHERE id = 1 RETURNING data_version";
/// Marks the data version as the registry's (after [`BUMP_DATA_VERSION`], in a
/// transaction that changed a site or line).
pub(crate) const MARK_REGISTRY_VERSION: &str =
    "UPDATE store_state SET registry_version = data_version WHERE id = 1";
/// The data version.
pub(crate) const DATA_VERSION: &str = "SELECT data_version FROM store_state WHERE id = 1";
/// The `recorded_at` of the latest revision.
pub(crate) const LAST_RECORDED_AT: &str =
    "SELECT recorded_at FROM count_revisions ORDER BY id DESC LIMIT 1";
/// Row counts for [`crate::StoreStats`].
pub(crate) const STATS: &str = "SELECT (SELECT COUNT(*) FROM sites), (SELECT COUNT(*) FROM lines), \
     (SELECT COUNT(*) FROM count_revisions), (SELECT COUNT(*) FROM counts_current), \
     (SELECT COUNT(*) FROM api_keys)";

/// The totals query and the defects query of an aggregation.
pub(crate) type SumQueries<DB> = (QueryBuilder<DB>, QueryBuilder<DB>);

/// Statement builders for database `DB`.
pub(crate) struct Sql<DB>(PhantomData<DB>);

impl<DB> Sql<DB>
where
    DB: Database,
    for<'t> i64: Encode<'t, DB> + Type<DB>,
    for<'t> Option<i64>: Encode<'t, DB> + Type<DB>,
    for<'t> String: Encode<'t, DB> + Type<DB>,
    for<'t> &'t str: Encode<'t, DB> + Type<DB>,
    for<'t> &'t [u8]: Encode<'t, DB> + Type<DB>,
{
    /// The registered codes among `codes`.
    pub(crate) fn known_sites(codes: &[&str]) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new("SELECT code FROM sites WHERE code IN (");
        let mut sep = q.separated(", ");
        for s in codes {
            sep.push_bind(*s);
        }
        q.push(")");
        q
    }

    /// The registered (site, line) pairs among `lines`.
    pub(crate) fn known_lines(lines: &[(&str, &str)]) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new("WITH k(site, code) AS (");
        q.push_values(lines, |mut b, (s, l)| {
            b.push_bind(*s).push_bind(*l);
        });
        q.push(
            ") SELECT l.site, l.code FROM k JOIN lines l ON l.site = k.site AND l.code = k.code",
        );
        q
    }

    /// `WITH k(i, site, line, date, product) AS (VALUES ...)` for the keys of `rows`,
    /// numbered from `base`.
    fn keys_table(rows: &[&Row<'_>], base: usize, dates: &[String]) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new("WITH k(i, site, line, date, product) AS (");
        q.push_values(rows.iter().enumerate(), |mut b, (i, r)| {
            let id = i64::try_from(base + i).unwrap_or(i64::MAX);
            b.push_bind(id)
                .push_bind(r.key.site)
                .push_bind(r.key.line)
                .push_bind(dates[r.index].as_str())
                .push_bind(r.key.product);
        });
        q.push(")");
        q
    }

    /// `(i, revision_id, inspected, defective, plant_revision)` of the stored current
    /// value of each key of `rows` that has one (`i` counts from `base`).
    pub(crate) fn current_of(rows: &[&Row<'_>], base: usize, dates: &[String]) -> QueryBuilder<DB> {
        let mut q = Self::keys_table(rows, base, dates);
        q.push(
            " SELECT k.i, c.revision_id, c.inspected, c.defective, c.plant_revision \
             FROM k JOIN counts_current c \
             ON c.site = k.site AND c.line = k.line AND c.date = k.date AND c.product = k.product",
        );
        q
    }

    /// `(i, category, count)` of the stored current defects of the keys of `rows`.
    pub(crate) fn current_defects_of(
        rows: &[&Row<'_>],
        base: usize,
        dates: &[String],
    ) -> QueryBuilder<DB> {
        let mut q = Self::keys_table(rows, base, dates);
        q.push(
            " SELECT k.i, d.category, d.count FROM k JOIN current_defects d \
             ON d.date = k.date AND d.site = k.site AND d.line = k.line AND d.product = k.product \
             ORDER BY k.i, d.category",
        );
        q
    }

    /// `(body_sha256, status, response_body)` of a stored batch answer.
    pub(crate) fn find_answer(api_key_id: Option<KeyId>, key: &str) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new(
            "SELECT body_sha256, status, response_body FROM idempotency WHERE api_key_id = ",
        );
        q.push_bind(api_key_id.unwrap_or(0))
            .push(" AND key = ")
            .push_bind(key);
        q
    }

    /// Stores a batch answer.
    pub(crate) fn store_answer(
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
        status: u16,
        body: &[u8],
        created_at: String,
    ) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new(
            "INSERT INTO idempotency (api_key_id, key, body_sha256, status, response_body, created_at) VALUES (",
        );
        let mut sep = q.separated(", ");
        sep.push_bind(api_key_id.unwrap_or(0))
            .push_bind(key)
            .push_bind(body_sha256.as_slice())
            .push_bind(i64::from(status))
            .push_bind(body)
            .push_bind(created_at);
        q.push(")");
        q
    }

    /// The statements that write an accepted plan, in order: the new revisions and
    /// their defects, then [`Self::plan_updates`].
    pub(crate) fn plan_writes(
        plan: &Plan<'_>,
        dates: &[String],
        recorded_at: &str,
        api_key_id: Option<KeyId>,
        version: i64,
    ) -> Vec<QueryBuilder<DB>> {
        let mut out = Vec::new();
        for chunk in plan.revisions.chunks(INSERT_CHUNK) {
            let mut q = QueryBuilder::new(
                "INSERT INTO count_revisions (id, site, line, date, product, inspected, defective, \
                 plant_revision, recorded_at, api_key_id) ",
            );
            q.push_values(chunk, |mut b, rev| {
                let r = rev.row;
                b.push_bind(rev.id)
                    .push_bind(r.key.site)
                    .push_bind(r.key.line)
                    .push_bind(dates[r.index].as_str())
                    .push_bind(r.key.product)
                    .push_bind(r.inspected)
                    .push_bind(r.defective)
                    .push_bind(r.plant_revision)
                    .push_bind(recorded_at)
                    .push_bind(api_key_id);
            });
            out.push(q);
        }
        for chunk in revision_defects(plan).chunks(DEFECT_CHUNK) {
            let mut q =
                QueryBuilder::new("INSERT INTO revision_defects (revision_id, category, count) ");
            q.push_values(chunk, |mut b, &(id, c, n)| {
                b.push_bind(id).push_bind(c).push_bind(n);
            });
            out.push(q);
        }
        out.extend(Self::plan_updates(plan, dates, version));
        for chunk in current_defects(plan).chunks(DEFECT_CHUNK) {
            let mut q = QueryBuilder::new(
                "INSERT INTO current_defects (date, site, line, product, category, count) ",
            );
            q.push_values(chunk, |mut b, &(r, c, n)| {
                b.push_bind(dates[r.index].as_str())
                    .push_bind(r.key.site)
                    .push_bind(r.key.line)
                    .push_bind(r.key.product)
                    .push_bind(c)
                    .push_bind(n);
            });
            out.push(q);
        }
        out
    }

    /// The statements of a plan that change existing rows: the new current values (an
    /// upsert), the removal of the defects they replace, the changes of the monthly
    /// sums, and the scoped versions of the days written (set to `version`, the data
    /// version this transaction bumped to). The new current defects go in after them.
    pub(crate) fn plan_updates(
        plan: &Plan<'_>,
        dates: &[String],
        version: i64,
    ) -> Vec<QueryBuilder<DB>> {
        let mut out = Vec::new();
        for chunk in plan.current.chunks(INSERT_CHUNK) {
            let mut q = QueryBuilder::new(
                "INSERT INTO counts_current (date, site, line, product, revision_id, inspected, \
                 defective, plant_revision) ",
            );
            q.push_values(chunk, |mut b, c| {
                let r = c.row;
                b.push_bind(dates[r.index].as_str())
                    .push_bind(r.key.site)
                    .push_bind(r.key.line)
                    .push_bind(r.key.product)
                    .push_bind(c.revision_id)
                    .push_bind(r.inspected)
                    .push_bind(r.defective)
                    .push_bind(r.plant_revision);
            });
            q.push(
                " ON CONFLICT (date, site, line, product) DO UPDATE SET \
                 revision_id = excluded.revision_id, inspected = excluded.inspected, \
                 defective = excluded.defective, plant_revision = excluded.plant_revision",
            );
            out.push(q);
        }

        let replaced: Vec<_> = plan
            .current
            .iter()
            .filter(|c| c.replaces_defects)
            .map(|c| c.row)
            .collect();
        for chunk in replaced.chunks(INSERT_CHUNK) {
            let mut q = QueryBuilder::new("WITH k(date, site, line, product) AS (");
            q.push_values(chunk, |mut b, r| {
                b.push_bind(dates[r.index].as_str())
                    .push_bind(r.key.site)
                    .push_bind(r.key.line)
                    .push_bind(r.key.product);
            });
            q.push(
                ") DELETE FROM current_defects WHERE (date, site, line, product) IN \
                 (SELECT date, site, line, product FROM k)",
            );
            out.push(q);
        }

        for chunk in plan.month_totals.chunks(INSERT_CHUNK) {
            let mut q = QueryBuilder::new(
                "INSERT INTO month_totals (month, site, line, product, inspected, defective) ",
            );
            q.push_values(chunk, |mut b, t| {
                b.push_bind(format_month(t.key.month))
                    .push_bind(t.key.site)
                    .push_bind(t.key.line)
                    .push_bind(t.key.product)
                    .push_bind(t.inspected)
                    .push_bind(t.defective);
            });
            q.push(
                " ON CONFLICT (month, site, line, product) DO UPDATE SET \
                 inspected = month_totals.inspected + excluded.inspected, \
                 defective = month_totals.defective + excluded.defective",
            );
            out.push(q);
        }
        for chunk in plan.month_defects.chunks(DEFECT_CHUNK) {
            let mut q = QueryBuilder::new(
                "INSERT INTO month_defects (month, site, line, product, category, count) ",
            );
            q.push_values(chunk, |mut b, d| {
                b.push_bind(format_month(d.key.month))
                    .push_bind(d.key.site)
                    .push_bind(d.key.line)
                    .push_bind(d.key.product)
                    .push_bind(d.category.as_str())
                    .push_bind(d.count);
            });
            q.push(
                " ON CONFLICT (month, site, line, product, category) DO UPDATE SET \
                 count = month_defects.count + excluded.count",
            );
            out.push(q);
        }

        for chunk in plan.touched_days().chunks(DEFECT_CHUNK) {
            let mut q = QueryBuilder::new("INSERT INTO day_versions (date, site, version) ");
            q.push_values(chunk, |mut b, (site, date)| {
                b.push_bind(format_date(*date))
                    .push_bind(*site)
                    .push_bind(version);
            });
            q.push(" ON CONFLICT (date, site) DO UPDATE SET version = excluded.version");
            out.push(q);
        }
        let mut dates: Vec<Date> = plan.touched_days().iter().map(|(_, d)| *d).collect();
        dates.sort_unstable();
        dates.dedup();
        for chunk in dates.chunks(DEFECT_CHUNK) {
            let mut q = QueryBuilder::new("INSERT INTO date_versions (date, version) ");
            q.push_values(chunk, |mut b, date| {
                b.push_bind(format_date(*date)).push_bind(version);
            });
            q.push(" ON CONFLICT (date) DO UPDATE SET version = excluded.version");
            out.push(q);
        }
        out
    }

    /// `(largest day version in scope or 0, registry version)`: from one site's days
    /// (an index range) or from the per-date maxima of every site.
    pub(crate) fn scoped_version(scope: &VersionScope) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new("SELECT COALESCE((SELECT MAX(version) FROM ");
        if let Some(site) = &scope.site {
            q.push("day_versions WHERE site = ")
                .push_bind(site.as_str())
                .push(" AND date BETWEEN ");
        } else {
            q.push("date_versions WHERE date BETWEEN ");
        }
        q.push_bind(format_date(scope.from))
            .push(" AND ")
            .push_bind(format_date(scope.to));
        q.push("), 0), registry_version FROM store_state WHERE id = 1");
        q
    }

    /// `(site, line or NULL)` of every registered group at the query's level, and
    /// before it, when the query names a site, a query that finds it (no row: the site
    /// is not registered).
    pub(crate) fn registered_groups(
        query: &AggregateQuery,
    ) -> (Option<QueryBuilder<DB>>, QueryBuilder<DB>) {
        let site_filter = site_filter(query);
        let check = site_filter.map(|site| {
            let mut q = QueryBuilder::new("SELECT code FROM sites WHERE code = ");
            q.push_bind(site.as_str().to_owned());
            q
        });
        let mut registry = QueryBuilder::new(match query.level {
            Level::Site => "SELECT code, CAST(NULL AS TEXT) FROM sites",
            Level::Line { .. } | Level::AllLines => "SELECT site, code FROM lines",
        });
        if let Some(site) = site_filter {
            registry.push(match query.level {
                Level::Site => " WHERE code = ",
                _ => " WHERE site = ",
            });
            registry.push_bind(site.as_str().to_owned());
        }
        (check, registry)
    }

    /// The sums of a query: `(site, line, inspected, defective)` per group and
    /// `(site, line, category, count)` per group and category. `None` when the range
    /// is empty.
    pub(crate) fn sums(query: &AggregateQuery) -> Result<Option<SumQueries<DB>>, StoreError> {
        let Some(as_of) = query.as_of.map(format_instant).transpose()? else {
            let parts = split_range(query.from, query.to);
            if parts.is_empty() {
                return Ok(None);
            }
            let (cols, group) = group_columns(&query.level, "");
            let union = |q: &mut QueryBuilder<DB>, daily: &str, monthly: &str, values: &str| {
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
                    push_filters(q, query, column, a, b);
                }
            };
            let (product, by) = product_columns(query, "");
            let mut totals = QueryBuilder::new(format!(
                "SELECT {cols}, {product}, CAST(SUM(inspected) AS BIGINT), CAST(SUM(defective) AS BIGINT) FROM ("
            ));
            union(
                &mut totals,
                "counts_current",
                "month_totals",
                "product, inspected, defective",
            );
            totals.push(format!(") AS u GROUP BY {group}{by}"));
            let mut defects = QueryBuilder::new(format!(
                "SELECT {cols}, category, CAST(SUM(count) AS BIGINT) FROM ("
            ));
            union(
                &mut defects,
                "current_defects",
                "month_defects",
                "category, count",
            );
            defects.push(format!(") AS u GROUP BY {group}, category"));
            return Ok(Some((totals, defects)));
        };
        let (cols, group) = group_columns(&query.level, "latest.");
        let latest = |q: &mut QueryBuilder<DB>| {
            q.push("WITH latest AS (SELECT site, line, MAX(id) AS id FROM count_revisions");
            push_filters(
                q,
                query,
                "date",
                format_date(query.from),
                format_date(query.to),
            );
            q.push(" AND recorded_at <= ")
                .push_bind(as_of.clone())
                .push(" GROUP BY date, site, line, product) ");
        };
        let mut totals = QueryBuilder::new("");
        latest(&mut totals);
        let (product, by) = product_columns(query, "r.");
        totals.push(format!(
            "SELECT {cols}, {product}, CAST(SUM(r.inspected) AS BIGINT), CAST(SUM(r.defective) AS BIGINT) \
             FROM latest JOIN count_revisions r ON r.id = latest.id GROUP BY {group}{by}"
        ));
        let mut defects = QueryBuilder::new("");
        latest(&mut defects);
        defects.push(format!(
            "SELECT {cols}, d.category, CAST(SUM(d.count) AS BIGINT) \
             FROM latest JOIN revision_defects d ON d.revision_id = latest.id \
             GROUP BY {group}, d.category"
        ));
        Ok(Some((totals, defects)))
    }

    /// `(date, lines)` per day of the current data from `from` to `to`, `lines` packed
    /// as `SITE,LINE,INSPECTED,DEFECTIVE` joined by `;` (codes hold neither; see
    /// [`crate::Store::line_days`]): one row a day, not one a line and day, because
    /// handing rows over from SQLite costs microseconds each, and packed by day so that
    /// both groupings follow the table's key order and nothing is sorted.
    pub(crate) fn packed_line_days(
        query: &AggregateQuery,
        from: Date,
        to: Date,
    ) -> QueryBuilder<DB> {
        let mut q = QueryBuilder::new(
            "SELECT date, string_agg(site || ',' || line || ',' || CAST(i AS TEXT) || ',' || \
             CAST(d AS TEXT), ';') FROM (SELECT date, site, line, SUM(inspected) AS i, \
             SUM(defective) AS d FROM counts_current",
        );
        push_filters(&mut q, query, "date", format_date(from), format_date(to));
        q.push(" GROUP BY date, site, line) AS days GROUP BY date ORDER BY date");
        q
    }

    /// `(bucket, site, line, inspected, defective)` per bucket and group, in one
    /// statement that joins the rows of the range to a table of the buckets (from the
    /// monthly sums when every bucket is whole months and the data are current). `None`
    /// when no bucket overlaps the query's range.
    pub(crate) fn bucket_sums(
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<Option<QueryBuilder<DB>>, StoreError> {
        let lo = buckets.iter().map(|b| b.0).min().map(|d| d.max(query.from));
        let hi = buckets.iter().map(|b| b.1).max().map(|d| d.min(query.to));
        let (Some(lo), Some(hi)) = (lo, hi) else {
            return Ok(None);
        };
        if lo > hi {
            return Ok(None);
        }
        let (cols, group) = group_columns(&query.level, "t.");
        let mut q = QueryBuilder::new("WITH ");
        match query.as_of.map(format_instant).transpose()? {
            None => {
                let months = whole_months(buckets)
                    && lo.day() == 1
                    && hi.day() == hi.month().length(hi.year());
                push_buckets(&mut q, buckets, months);
                let (table, column, a, b) = if months {
                    ("month_totals", "month", format_month(lo), format_month(hi))
                } else {
                    ("counts_current", "date", format_date(lo), format_date(hi))
                };
                // The buckets drive the join: each is a range of the table's primary key
                // (which starts with the date or month), so both databases read each
                // bucket's rows by the key instead of testing every row of the range
                // against every bucket.
                q.push(format!(
                    " SELECT buckets.b, {cols}, CAST(SUM(t.inspected) AS BIGINT), \
                     CAST(SUM(t.defective) AS BIGINT) \
                     FROM buckets JOIN {table} AS t ON t.{column} BETWEEN buckets.lo AND buckets.hi"
                ));
                push_filters(&mut q, query, column, a, b);
                q.push(format!(" GROUP BY buckets.b, {group}"));
            }
            Some(as_of) => {
                push_buckets(&mut q, buckets, false);
                q.push(", latest AS (SELECT MAX(id) AS id FROM count_revisions");
                push_filters(&mut q, query, "date", format_date(lo), format_date(hi));
                q.push(" AND recorded_at <= ")
                    .push_bind(as_of)
                    .push(" GROUP BY date, site, line, product)");
                q.push(
                    ", t AS (SELECT r.site, r.line, r.date AS at, r.inspected, r.defective \
                     FROM latest JOIN count_revisions r ON r.id = latest.id)",
                );
                q.push(format!(
                    " SELECT buckets.b, {cols}, CAST(SUM(t.inspected) AS BIGINT), \
                     CAST(SUM(t.defective) AS BIGINT) \
                     FROM t JOIN buckets ON t.at BETWEEN buckets.lo AND buckets.hi \
                     GROUP BY buckets.b, {group}"
                ));
            }
        }
        Ok(Some(q))
    }
}

/// `(revision_id, category, count)` of every defect count of the plan's new revisions.
pub(crate) fn revision_defects<'p>(plan: &'p Plan<'_>) -> Vec<(i64, &'p str, i64)> {
    plan.revisions
        .iter()
        .flat_map(|rev| rev.row.defects.iter().map(move |&(c, n)| (rev.id, c, n)))
        .collect()
}

/// `(row, category, count)` of every defect count of the plan's new current values.
pub(crate) fn current_defects<'p, 'a>(plan: &'p Plan<'a>) -> Vec<(&'p Row<'a>, &'a str, i64)> {
    plan.current
        .iter()
        .flat_map(|c| c.row.defects.iter().map(move |&(cat, n)| (c.row, cat, n)))
        .collect()
}

/// The site a query is limited to: the site of a line-level query, or its filter.
fn site_filter(query: &AggregateQuery) -> Option<&dispar_core::code::SiteCode> {
    match &query.level {
        Level::Line { site } => Some(site),
        _ => query.site.as_ref(),
    }
}

/// Pushes the WHERE conditions shared by every query of a request (column names
/// unqualified, so they apply to `counts_current`, `current_defects` and
/// `count_revisions` alike).
fn push_filters<DB>(
    q: &mut QueryBuilder<DB>,
    query: &AggregateQuery,
    column: &str,
    from: String,
    to: String,
) where
    DB: Database,
    for<'t> String: Encode<'t, DB> + Type<DB>,
{
    q.push(format!(" WHERE {column} BETWEEN "))
        .push_bind(from)
        .push(" AND ")
        .push_bind(to);
    if let Some(s) = site_filter(query) {
        q.push(" AND site = ").push_bind(s.as_str().to_owned());
    }
    if let Some(p) = &query.product {
        q.push(" AND product = ").push_bind(p.as_str().to_owned());
    }
}

/// Pushes `buckets(b, lo, hi) AS (VALUES ...)`: the bucket index and its bounds in the
/// form of the column read (days, or months for the monthly sums).
fn push_buckets<DB>(q: &mut QueryBuilder<DB>, buckets: &[(Date, Date)], months: bool)
where
    DB: Database,
    for<'t> i64: Encode<'t, DB> + Type<DB>,
    for<'t> String: Encode<'t, DB> + Type<DB>,
{
    q.push("buckets(b, lo, hi) AS (VALUES ");
    for (i, (a, b)) in buckets.iter().enumerate() {
        if i > 0 {
            q.push(", ");
        }
        let (lo, hi) = if months {
            (format_month(*a), format_month(*b))
        } else {
            (format_date(*a), format_date(*b))
        };
        q.push("(")
            .push_bind(i64::try_from(i).unwrap_or(i64::MAX))
            .push(", ")
            .push_bind(lo)
            .push(", ")
            .push_bind(hi)
            .push(")");
    }
    q.push(")");
}

/// The product column of a totals statement and its GROUP BY addition: the product
/// (qualified by `table`) when the query splits by product, else one empty product.
fn product_columns(query: &AggregateQuery, table: &str) -> (String, String) {
    if query.by_product {
        (format!("{table}product"), format!(", {table}product"))
    } else {
        ("CAST('' AS TEXT)".to_owned(), String::new())
    }
}
