//! Count records on PostgreSQL: batch writes under the write lock (see [`super::db`])
//! with the statements of [`crate::sql`] and the rules of [`crate::plan`], and the reads
//! of current records and histories.

use std::collections::{BTreeMap, HashMap, HashSet};

use dispar_core::code::CategoryCode;
use dispar_core::record::{CountRecord, RecordKey};
use sqlx::{PgConnection, Postgres, QueryBuilder};
use time::OffsetDateTime;

use super::db::{PostgresStore, WriteTx, retrying};
use crate::counts::{
    BatchResult, CountFilter, CountPage, Idempotency, MAX_PAGE, StoredAnswer, StoredRecord,
    stored_answer,
};
use crate::decode::{
    CURRENT_SELECT, CurrentRow, HISTORY_SELECT, HistoryRow, decode_cursor, defects_by_revision,
    encode_cursor, history_from_rows, stored_from_current,
};
use crate::error::{RecordError, StoreError};
use crate::keys::KeyId;
use crate::plan::{Batch, Current, fill_current, plan_batch};
use crate::sql::{BUMP_DATA_VERSION, LAST_RECORDED_AT, LOOKUP_CHUNK, Sql};
use crate::timestamp::{format_date, format_instant, next_instant, parse_instant};

type PgSql = Sql<Postgres>;

impl PostgresStore {
    pub(super) async fn put_batch_impl(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<&Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        let batch = Batch::new(records).map_err(StoreError::Rejected)?;
        let dates: Vec<String> = batch
            .rows()
            .iter()
            .map(|r| format_date(r.key.date))
            .collect();
        retrying(|| self.put_batch_once(&batch, &dates, api_key_id, idempotency)).await
    }

    async fn put_batch_once(
        &self,
        batch: &Batch<'_>,
        dates: &[String],
        api_key_id: Option<KeyId>,
        idempotency: Option<&Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        let mut tx = self.begin_write().await?;
        if let Some(idem) = idempotency
            && let Some(answer) =
                find_idempotent(&mut tx, api_key_id, idem.key, &idem.body_sha256).await?
        {
            tx.rollback().await?;
            return Ok(BatchResult::Replayed(answer));
        }
        let unregistered = check_registry(&mut tx, batch).await?;
        if !unregistered.is_empty() {
            return Err(StoreError::Rejected(unregistered));
        }
        let current = load_current(&mut tx, batch, dates).await?;
        // Under the write lock no other transaction appends revisions, so the next id
        // is one above the largest, and ids follow commit order.
        let first_id: i64 =
            sqlx::query_scalar("SELECT COALESCE(MAX(id), 0) + 1 FROM count_revisions")
                .fetch_one(&mut *tx)
                .await?;
        let plan = plan_batch(batch, current, first_id).map_err(StoreError::Rejected)?;
        if !plan.revisions.is_empty() {
            sqlx::query(BUMP_DATA_VERSION).execute(&mut *tx).await?;
            let last: Option<String> = sqlx::query_scalar(LAST_RECORDED_AT)
                .fetch_optional(&mut *tx)
                .await?;
            let last = last.as_deref().map(parse_instant).transpose()?;
            let recorded_at = format_instant(next_instant(last))?;
            for mut q in PgSql::plan_writes(&plan, dates, &recorded_at, api_key_id) {
                q.build().execute(&mut *tx).await?;
            }
        }
        let outcome = plan.outcome;
        let answer = match idempotency {
            Some(idem) => {
                let answer = (idem.render)(&outcome);
                PgSql::store_answer(
                    api_key_id,
                    idem.key,
                    &idem.body_sha256,
                    answer.status,
                    &answer.body,
                    format_instant(OffsetDateTime::now_utc())?,
                )
                .build()
                .execute(&mut *tx)
                .await?;
                Some(answer)
            }
            None => None,
        };
        tx.commit().await?;
        Ok(BatchResult::Written { outcome, answer })
    }

    pub(super) async fn find_idempotent_impl(
        &self,
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
    ) -> Result<Option<StoredAnswer>, StoreError> {
        let mut conn = self.pool.acquire().await?;
        find_idempotent(&mut conn, api_key_id, key, body_sha256).await
    }

    pub(super) async fn purge_idempotency_impl(
        &self,
        before: OffsetDateTime,
    ) -> Result<u64, StoreError> {
        // One statement needs no write lock: it touches nothing a batch decides on
        // except answers too old to be replayed.
        let done = sqlx::query("DELETE FROM idempotency WHERE created_at < $1")
            .bind(format_instant(before)?)
            .execute(&self.pool)
            .await?;
        Ok(done.rows_affected())
    }

    pub(super) async fn get_record_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Option<StoredRecord>, StoreError> {
        let mut tx = self.begin_read().await?;
        let row: Option<CurrentRow> = sqlx::query_as(sqlx::AssertSqlSafe(format!(
            "{CURRENT_SELECT} WHERE c.site = $1 AND c.line = $2 AND c.date = $3 AND c.product = $4"
        )))
        .bind(key.site().as_str())
        .bind(key.line().as_str())
        .bind(format_date(key.date()))
        .bind(key.product().map_or("", |p| p.as_str()))
        .fetch_optional(&mut *tx)
        .await?;
        let Some(row) = row else {
            tx.rollback().await?;
            return Ok(None);
        };
        let mut defects = load_revision_defects(&mut tx, &[row.4]).await?;
        tx.rollback().await?;
        let d = defects.remove(&row.4).unwrap_or_default();
        stored_from_current(row, d).map(Some)
    }

    pub(super) async fn list_counts_impl(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let limit = limit.clamp(1, MAX_PAGE);
        let after = cursor.map(decode_cursor).transpose()?;
        let mut q: QueryBuilder<Postgres> = QueryBuilder::new(CURRENT_SELECT);
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

        let mut tx = self.begin_read().await?;
        let mut rows: Vec<CurrentRow> = q.build_query_as().fetch_all(&mut *tx).await?;
        let more = rows.len() > limit as usize;
        rows.truncate(limit as usize);
        let ids: Vec<i64> = rows.iter().map(|r| r.4).collect();
        let mut defects = load_revision_defects(&mut tx, &ids).await?;
        tx.rollback().await?;

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

    pub(super) async fn record_history_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let rows: Vec<HistoryRow> = sqlx::query_as(sqlx::AssertSqlSafe(format!(
            "{HISTORY_SELECT} WHERE r.date = $1 AND r.site = $2 AND r.line = $3 AND r.product = $4 \
             ORDER BY r.id, d.category"
        )))
        .bind(format_date(key.date()))
        .bind(key.site().as_str())
        .bind(key.line().as_str())
        .bind(key.product().map_or("", |p| p.as_str()))
        .fetch_all(&self.pool)
        .await?;
        history_from_rows(key, rows)
    }
}

async fn find_idempotent(
    conn: &mut PgConnection,
    api_key_id: Option<KeyId>,
    key: &str,
    body_sha256: &[u8; 32],
) -> Result<Option<StoredAnswer>, StoreError> {
    let row = PgSql::find_answer(api_key_id, key)
        .build_query_as()
        .fetch_optional(&mut *conn)
        .await?;
    stored_answer(row, body_sha256)
}

/// The records whose site or line is not registered.
async fn check_registry(
    tx: &mut WriteTx,
    batch: &Batch<'_>,
) -> Result<Vec<RecordError>, StoreError> {
    let mut known_sites: HashSet<String> = HashSet::new();
    for chunk in batch.sites().chunks(LOOKUP_CHUNK) {
        let found: Vec<String> = PgSql::known_sites(chunk)
            .build_query_scalar()
            .fetch_all(&mut **tx)
            .await?;
        known_sites.extend(found);
    }
    let mut known_lines: HashSet<(String, String)> = HashSet::new();
    for chunk in batch.lines().chunks(LOOKUP_CHUNK) {
        let found: Vec<(String, String)> = PgSql::known_lines(chunk)
            .build_query_as()
            .fetch_all(&mut **tx)
            .await?;
        known_lines.extend(found);
    }
    Ok(batch.unregistered(
        |site| known_sites.contains(site),
        |site, line| known_lines.contains(&(site.to_owned(), line.to_owned())),
    ))
}

/// The current value of every distinct key of the batch, in the order of
/// [`Batch::key_rows`].
async fn load_current(
    tx: &mut WriteTx,
    batch: &Batch<'_>,
    dates: &[String],
) -> Result<Vec<Option<Current>>, StoreError> {
    let keys: Vec<_> = batch.key_rows().collect();
    let mut current: Vec<Option<Current>> = vec![None; keys.len()];
    for (chunk_no, chunk) in keys.chunks(LOOKUP_CHUNK).enumerate() {
        let base = chunk_no * LOOKUP_CHUNK;
        let found: Vec<(i64, i64, i64, i64, Option<i64>)> = PgSql::current_of(chunk, base, dates)
            .build_query_as()
            .fetch_all(&mut **tx)
            .await?;
        if found.is_empty() {
            continue;
        }
        let defects: Vec<(i64, String, i64)> = PgSql::current_defects_of(chunk, base, dates)
            .build_query_as()
            .fetch_all(&mut **tx)
            .await?;
        fill_current(&mut current, found, defects)?;
    }
    Ok(current)
}

async fn load_revision_defects(
    conn: &mut PgConnection,
    ids: &[i64],
) -> Result<HashMap<i64, BTreeMap<CategoryCode, u64>>, StoreError> {
    let mut out = HashMap::new();
    if ids.is_empty() {
        return Ok(out);
    }
    // One array parameter instead of a list of binds.
    let rows: Vec<(i64, String, i64)> = sqlx::query_as(
        "SELECT revision_id, category, count FROM revision_defects WHERE revision_id = ANY($1)",
    )
    .bind(ids)
    .fetch_all(&mut *conn)
    .await?;
    defects_by_revision(rows, &mut out)?;
    Ok(out)
}
