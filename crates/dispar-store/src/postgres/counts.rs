//! Count records on PostgreSQL: batch writes under the write lock (see [`super::db`])
//! with the statements of [`crate::sql`] and the rules of [`crate::plan`], and the reads
//! of current records and histories.

use dispar_core::record::{CountRecord, RecordKey};
use sqlx::Postgres;
use time::OffsetDateTime;

use super::db::{PostgresStore, retrying};
use crate::counts::{BatchResult, CountFilter, CountPage, Idempotency, StoredAnswer, StoredRecord};
use crate::error::StoreError;
use crate::keys::KeyId;
use crate::plan::{Batch, plan_batch};
use crate::run::Run;
use crate::sql::{LAST_RECORDED_AT, NEXT_DATA_VERSION, Sql, current_defects, revision_defects};
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
                Run::<Postgres>::answer(&mut tx, api_key_id, idem.key, &idem.body_sha256).await?
        {
            tx.rollback().await?;
            return Ok(BatchResult::Replayed(answer));
        }
        let unregistered = Run::<Postgres>::unregistered(&mut tx, batch).await?;
        if !unregistered.is_empty() {
            return Err(StoreError::Rejected(unregistered));
        }
        let current = Run::<Postgres>::current_values(&mut tx, batch, dates).await?;
        // Under the write lock no other transaction appends revisions, so the next id
        // is one above the largest, and ids follow commit order.
        let first_id: i64 =
            sqlx::query_scalar("SELECT COALESCE(MAX(id), 0) + 1 FROM count_revisions")
                .fetch_one(&mut *tx)
                .await?;
        let plan = plan_batch(batch, current, first_id).map_err(StoreError::Rejected)?;
        if !plan.revisions.is_empty() {
            let version: i64 = sqlx::query_scalar(NEXT_DATA_VERSION)
                .fetch_one(&mut *tx)
                .await?;
            let last: Option<String> = sqlx::query_scalar(LAST_RECORDED_AT)
                .fetch_optional(&mut *tx)
                .await?;
            let last = last.as_deref().map(parse_instant).transpose()?;
            let recorded_at = format_instant(next_instant(last))?;
            write_plan(&mut tx, &plan, dates, &recorded_at, api_key_id, version).await?;
        }
        let outcome = plan.outcome;
        let answer =
            Run::<Postgres>::keep_answer(&mut tx, api_key_id, idempotency, &outcome).await?;
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
        Run::<Postgres>::answer(&mut conn, api_key_id, key, body_sha256).await
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
        let out = Run::<Postgres>::record(&mut tx, key).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn list_counts_impl(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::records(&mut tx, filter, cursor, limit).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn record_history_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let mut conn = self.pool.acquire().await?;
        Run::<Postgres>::history(&mut conn, key).await
    }
}

/// Writes an accepted plan. The rows that are only appended — revisions, their defects,
/// the new current defects — go in with `COPY ... FROM STDIN` (text format), several
/// times faster than multi-row INSERTs of the same rows on PostgreSQL; the rest are the
/// shared statements of [`Sql::plan_updates`].
async fn write_plan(
    tx: &mut super::db::WriteTx,
    plan: &crate::plan::Plan<'_>,
    dates: &[String],
    recorded_at: &str,
    api_key_id: Option<KeyId>,
    version: i64,
) -> Result<(), StoreError> {
    let mut rows = String::new();
    for rev in &plan.revisions {
        let r = rev.row;
        copy_row(
            &mut rows,
            &[
                &rev.id.to_string(),
                r.key.site,
                r.key.line,
                &dates[r.index],
                r.key.product,
                &r.inspected.to_string(),
                &r.defective.to_string(),
                &r.plant_revision.map_or(NULL.to_owned(), |v| v.to_string()),
                recorded_at,
                &api_key_id.map_or(NULL.to_owned(), |v| v.to_string()),
            ],
        );
    }
    copy(
        tx,
        "COPY count_revisions (id, site, line, date, product, inspected, defective, \
         plant_revision, recorded_at, api_key_id) FROM STDIN",
        rows,
    )
    .await?;

    let mut rows = String::new();
    for (id, category, count) in revision_defects(plan) {
        copy_row(&mut rows, &[&id.to_string(), category, &count.to_string()]);
    }
    copy(
        tx,
        "COPY revision_defects (revision_id, category, count) FROM STDIN",
        rows,
    )
    .await?;

    for mut q in PgSql::plan_updates(plan, dates, version) {
        q.build().execute(&mut **tx).await?;
    }

    let mut rows = String::new();
    for (r, category, count) in current_defects(plan) {
        copy_row(
            &mut rows,
            &[
                &dates[r.index],
                r.key.site,
                r.key.line,
                r.key.product,
                category,
                &count.to_string(),
            ],
        );
    }
    copy(
        tx,
        "COPY current_defects (date, site, line, product, category, count) FROM STDIN",
        rows,
    )
    .await
}

/// COPY's text-format NULL.
const NULL: &str = "\\N";

/// Appends one row in COPY's text format: tab-separated, with backslash, tab, newline
/// and carriage return escaped (codes cannot hold them, but nothing here relies on
/// that), and [`NULL`] passed through.
fn copy_row(out: &mut String, fields: &[&str]) {
    for (i, field) in fields.iter().enumerate() {
        if i > 0 {
            out.push('\t');
        }
        if *field == NULL {
            out.push_str(NULL);
            continue;
        }
        for ch in field.chars() {
            match ch {
                '\\' => out.push_str("\\\\"),
                '\t' => out.push_str("\\t"),
                '\n' => out.push_str("\\n"),
                '\r' => out.push_str("\\r"),
                c => out.push(c),
            }
        }
    }
    out.push('\n');
}

/// Runs one `COPY ... FROM STDIN` with `rows` (nothing when empty).
async fn copy(
    tx: &mut super::db::WriteTx,
    statement: &str,
    rows: String,
) -> Result<(), StoreError> {
    if rows.is_empty() {
        return Ok(());
    }
    let mut sink = tx.copy_in_raw(statement).await?;
    sink.send(rows.into_bytes()).await?;
    sink.finish().await?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn copy_rows_escape_what_the_text_format_reserves() {
        let mut out = String::new();
        copy_row(&mut out, &["a\tb", "c\\d", NULL, "e\nf\rg", "plain"]);
        assert_eq!(out, "a\\tb\tc\\\\d\t\\N\te\\nf\\rg\tplain\n");
    }
}
