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
use crate::sql::{BUMP_DATA_VERSION, LAST_RECORDED_AT, Sql};
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
