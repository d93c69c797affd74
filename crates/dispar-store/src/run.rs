//! Reads that both backends run the same way: the statements of [`crate::sql`] executed
//! on any sqlx connection, with the results merged. What differs between the backends
//! (how a transaction starts, locks and retries) stays in the backend modules, which
//! hand these functions a connection inside their transaction.

use std::collections::{BTreeMap, HashMap, HashSet};

use dispar_core::code::CategoryCode;
use dispar_core::record::RecordKey;
use sqlx::{Database, Decode, Encode, Executor, FromRow, IntoArguments, QueryBuilder, Type};

use crate::aggregate::{DefectsRow, GroupKey, TotalsRow, finish, finish_buckets, named_site};
use crate::counts::{CountFilter, CountPage, MAX_PAGE, StoredRecord};
use crate::decode::{
    CURRENT_SELECT, CurrentRow, HISTORY_SELECT, HistoryRow, decode_cursor, defects_by_revision,
    encode_cursor, history_from_rows, stored_from_current,
};
use crate::error::{RecordError, StoreError};
use crate::plan::{Batch, Current, fill_current};
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate};
use crate::sql::{DATA_VERSION, LOOKUP_CHUNK, Sql};
use crate::timestamp::format_date;

/// Shared reads for database `DB`.
pub(crate) struct Run<DB>(std::marker::PhantomData<DB>);

impl<DB> Run<DB>
where
    DB: Database,
    DB::Arguments: IntoArguments<DB>,
    for<'c> &'c mut DB::Connection: Executor<'c, Database = DB>,
    for<'t> i64: Encode<'t, DB> + Decode<'t, DB> + Type<DB>,
    for<'t> Option<i64>: Encode<'t, DB> + Type<DB>,
    for<'t> String: Encode<'t, DB> + Decode<'t, DB> + Type<DB>,
    for<'t> &'t str: Encode<'t, DB> + Type<DB>,
    for<'t> &'t [u8]: Encode<'t, DB> + Type<DB>,
    for<'r> (String,): FromRow<'r, DB::Row>,
    for<'r> (i64,): FromRow<'r, DB::Row>,
    for<'r> (String, String): FromRow<'r, DB::Row>,
    for<'r> (i64, i64, i64, i64, Option<i64>): FromRow<'r, DB::Row>,
    for<'r> (i64, String, i64): FromRow<'r, DB::Row>,
    for<'r> GroupKey: FromRow<'r, DB::Row>,
    for<'r> TotalsRow: FromRow<'r, DB::Row>,
    for<'r> DefectsRow: FromRow<'r, DB::Row>,
    for<'r> (i64, String, Option<String>, i64, i64): FromRow<'r, DB::Row>,
    for<'r> CurrentRow: FromRow<'r, DB::Row>,
    for<'r> HistoryRow: FromRow<'r, DB::Row>,
{
    /// The current record at `key`, if any (call inside one read snapshot).
    pub(crate) async fn record(
        conn: &mut DB::Connection,
        key: &RecordKey,
    ) -> Result<Option<StoredRecord>, StoreError> {
        let mut q = QueryBuilder::new(CURRENT_SELECT);
        q.push(" WHERE c.site = ")
            .push_bind(key.site().as_str())
            .push(" AND c.line = ")
            .push_bind(key.line().as_str())
            .push(" AND c.date = ")
            .push_bind(format_date(key.date()))
            .push(" AND c.product = ")
            .push_bind(key.product().map_or("", |p| p.as_str()));
        let row: Option<CurrentRow> = q.build_query_as().fetch_optional(&mut *conn).await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let mut defects = Self::revision_defects(conn, &[row.4]).await?;
        let d = defects.remove(&row.4).unwrap_or_default();
        stored_from_current(row, d).map(Some)
    }

    /// A page of current records (call inside one read snapshot).
    pub(crate) async fn records(
        conn: &mut DB::Connection,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let limit = limit.clamp(1, MAX_PAGE);
        let after = cursor.map(decode_cursor).transpose()?;
        let mut q = QueryBuilder::new(CURRENT_SELECT);
        q.push(" WHERE 1 = 1");
        if let Some(s) = &filter.site {
            q.push(" AND c.site = ").push_bind(s.as_str());
        }
        if let Some(l) = &filter.line {
            q.push(" AND c.line = ").push_bind(l.as_str());
        }
        if let Some(p) = &filter.product {
            q.push(" AND c.product = ").push_bind(p.as_str());
        }
        if let Some(d) = filter.from {
            q.push(" AND c.date >= ").push_bind(format_date(d));
        }
        if let Some(d) = filter.to {
            q.push(" AND c.date <= ").push_bind(format_date(d));
        }
        if let Some([date, site, line, product]) = after {
            q.push(" AND (c.date, c.site, c.line, c.product) > (")
                .push_bind(date)
                .push(", ")
                .push_bind(site)
                .push(", ")
                .push_bind(line)
                .push(", ")
                .push_bind(product)
                .push(")");
        }
        q.push(" ORDER BY c.date, c.site, c.line, c.product LIMIT ")
            .push_bind(i64::from(limit) + 1);
        let mut rows: Vec<CurrentRow> = q.build_query_as().fetch_all(&mut *conn).await?;
        let more = rows.len() > limit as usize;
        rows.truncate(limit as usize);
        let ids: Vec<i64> = rows.iter().map(|r| r.4).collect();
        let mut defects = Self::revision_defects(conn, &ids).await?;
        let next_cursor = match (more, rows.last()) {
            (true, Some(last)) => Some(encode_cursor([&last.2, &last.0, &last.1, &last.3])),
            _ => None,
        };
        let records = rows
            .into_iter()
            .map(|row| {
                let d = defects.remove(&row.4).unwrap_or_default();
                stored_from_current(row, d)
            })
            .collect::<Result<_, _>>()?;
        Ok(CountPage {
            records,
            next_cursor,
        })
    }

    /// Every revision of `key`, oldest first.
    pub(crate) async fn history(
        conn: &mut DB::Connection,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let mut q = QueryBuilder::new(HISTORY_SELECT);
        q.push(" WHERE r.date = ")
            .push_bind(format_date(key.date()))
            .push(" AND r.site = ")
            .push_bind(key.site().as_str())
            .push(" AND r.line = ")
            .push_bind(key.line().as_str())
            .push(" AND r.product = ")
            .push_bind(key.product().map_or("", |p| p.as_str()))
            .push(" ORDER BY r.id, d.category");
        let rows: Vec<HistoryRow> = q.build_query_as().fetch_all(&mut *conn).await?;
        history_from_rows(key, rows)
    }

    /// The defect counts of the revisions `ids`.
    async fn revision_defects(
        conn: &mut DB::Connection,
        ids: &[i64],
    ) -> Result<HashMap<i64, BTreeMap<CategoryCode, u64>>, StoreError> {
        let mut out = HashMap::new();
        for chunk in ids.chunks(LOOKUP_CHUNK) {
            let mut q = QueryBuilder::new(
                "SELECT revision_id, category, count FROM revision_defects WHERE revision_id IN (",
            );
            let mut sep = q.separated(", ");
            for id in chunk {
                sep.push_bind(*id);
            }
            q.push(")");
            let rows: Vec<(i64, String, i64)> = q.build_query_as().fetch_all(&mut *conn).await?;
            defects_by_revision(rows, &mut out)?;
        }
        Ok(out)
    }

    /// The records of `batch` whose site or line is not registered.
    pub(crate) async fn unregistered(
        conn: &mut DB::Connection,
        batch: &Batch<'_>,
    ) -> Result<Vec<RecordError>, StoreError> {
        let mut known_sites: HashSet<String> = HashSet::new();
        for chunk in batch.sites().chunks(LOOKUP_CHUNK) {
            let found: Vec<String> = Sql::<DB>::known_sites(chunk)
                .build_query_scalar()
                .fetch_all(&mut *conn)
                .await?;
            known_sites.extend(found);
        }
        let mut known_lines: HashSet<(String, String)> = HashSet::new();
        for chunk in batch.lines().chunks(LOOKUP_CHUNK) {
            let found: Vec<(String, String)> = Sql::<DB>::known_lines(chunk)
                .build_query_as()
                .fetch_all(&mut *conn)
                .await?;
            known_lines.extend(found);
        }
        Ok(batch.unregistered(
            |site| known_sites.contains(site),
            |site, line| known_lines.contains(&(site.to_owned(), line.to_owned())),
        ))
    }

    /// The stored current value of every distinct key of `batch`, in the order of
    /// [`Batch::key_rows`].
    pub(crate) async fn current_values(
        conn: &mut DB::Connection,
        batch: &Batch<'_>,
        dates: &[String],
    ) -> Result<Vec<Option<Current>>, StoreError> {
        let keys: Vec<_> = batch.key_rows().collect();
        let mut current: Vec<Option<Current>> = vec![None; keys.len()];
        for (chunk_no, chunk) in keys.chunks(LOOKUP_CHUNK).enumerate() {
            let base = chunk_no * LOOKUP_CHUNK;
            let found: Vec<(i64, i64, i64, i64, Option<i64>)> =
                Sql::<DB>::current_of(chunk, base, dates)
                    .build_query_as()
                    .fetch_all(&mut *conn)
                    .await?;
            if found.is_empty() {
                continue;
            }
            let defects: Vec<(i64, String, i64)> =
                Sql::<DB>::current_defects_of(chunk, base, dates)
                    .build_query_as()
                    .fetch_all(&mut *conn)
                    .await?;
            fill_current(&mut current, found, defects)?;
        }
        Ok(current)
    }

    /// The registered groups at the query's level; refuses an unknown site.
    async fn registered_groups(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
    ) -> Result<Vec<GroupKey>, StoreError> {
        let (check, mut registry) = Sql::<DB>::registered_groups(query);
        if let Some(mut check) = check {
            let found: Option<String> = check
                .build_query_scalar()
                .fetch_optional(&mut *conn)
                .await?;
            if found.is_none() {
                return Err(StoreError::UnknownSite {
                    site: named_site(query),
                });
            }
        }
        Ok(registry.build_query_as().fetch_all(&mut *conn).await?)
    }

    /// [`crate::Store::aggregate`] on a connection inside one read snapshot.
    pub(crate) async fn aggregate(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let version: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&mut *conn)
            .await?;
        let registered = Self::registered_groups(conn, query).await?;
        let Some((mut totals, mut defects)) = Sql::<DB>::sums(query)? else {
            return finish(version, registered, Vec::new(), Vec::new());
        };
        let totals: Vec<TotalsRow> = totals.build_query_as().fetch_all(&mut *conn).await?;
        let defects: Vec<DefectsRow> = defects.build_query_as().fetch_all(&mut *conn).await?;
        finish(version, registered, totals, defects)
    }

    /// [`crate::Store::aggregate_buckets`] on a connection inside one read snapshot.
    pub(crate) async fn aggregate_buckets(
        conn: &mut DB::Connection,
        query: &AggregateQuery,
        buckets: &[(time::Date, time::Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        let version: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&mut *conn)
            .await?;
        let registered = Self::registered_groups(conn, query).await?;
        let rows: Vec<(i64, String, Option<String>, i64, i64)> =
            match Sql::<DB>::bucket_sums(query, buckets)? {
                Some(mut q) => q.build_query_as().fetch_all(&mut *conn).await?,
                None => Vec::new(),
            };
        finish_buckets(version, &registered, buckets.len(), rows)
    }
}
