//! Batch writes of count records, and the idempotency answers stored with them.
//!
//! A write runs in one `BEGIN IMMEDIATE` transaction: the stored answer is replayed
//! if the Idempotency-Key was seen with this body; every site and line of the batch
//! must exist (two queries per chunk of distinct codes); the current value of every
//! distinct natural key is read (one query per chunk of keys); [`plan_batch`] applies
//! the write rules; and the plan is written with multi-row `INSERT`s (the new
//! revisions and their defects, the new current values as an upsert and their
//! defects, the monthly sums), then the data version and the idempotency answer.
//!
//! Any refusal rolls the whole transaction back.

use dispar_core::record::CountRecord;
use sqlx::Sqlite;
use time::OffsetDateTime;

use crate::counts::{BatchResult, Idempotency};
use crate::error::StoreError;
use crate::keys::KeyId;
use crate::plan::{Batch, plan_batch};
use crate::run::Run;
use crate::sql::{LAST_RECORDED_AT, NEXT_DATA_VERSION, Sql};
use crate::sqlite::db::{SqliteStore, WriteTx};
use crate::timestamp::{format_date, format_instant, next_instant, parse_instant};

impl SqliteStore {
    pub(in crate::sqlite) async fn put_batch_impl(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        let batch = Batch::new(records).map_err(StoreError::Rejected)?;
        // Stored dates by row index: each is bound in several statements.
        let dates: Vec<String> = batch
            .rows()
            .iter()
            .map(|r| format_date(r.key.date))
            .collect();

        let mut tx = self.begin_write().await?;
        if let Some(idem) = &idempotency
            && let Some(answer) =
                Run::<Sqlite>::answer(&mut tx, api_key_id, idem.key, &idem.body_sha256).await?
        {
            tx.rollback().await?;
            return Ok(BatchResult::Replayed(answer));
        }

        let unregistered = Run::<Sqlite>::unregistered(&mut tx, &batch).await?;
        if !unregistered.is_empty() {
            return Err(StoreError::Rejected(unregistered));
        }
        let current = Run::<Sqlite>::current_values(&mut tx, &batch, &dates).await?;
        let first_id = next_revision_id(&mut tx).await?;
        let plan = plan_batch(&batch, current, first_id).map_err(StoreError::Rejected)?;
        if !plan.revisions.is_empty() {
            let version: i64 = sqlx::query_scalar(NEXT_DATA_VERSION)
                .fetch_one(&mut *tx)
                .await?;
            let recorded_at = format_instant(next_instant(last_recorded_at(&mut tx).await?))?;
            for mut q in
                Sql::<Sqlite>::plan_writes(&plan, &dates, &recorded_at, api_key_id, version)
            {
                q.build().execute(&mut *tx).await?;
            }
        }

        let outcome = plan.outcome;
        let answer =
            Run::<Sqlite>::keep_answer(&mut tx, api_key_id, idempotency.as_ref(), &outcome).await?;
        tx.commit().await?;
        Ok(BatchResult::Written { outcome, answer })
    }

    pub(in crate::sqlite) async fn purge_idempotency_impl(
        &self,
        before: OffsetDateTime,
    ) -> Result<u64, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = sqlx::query("DELETE FROM idempotency WHERE created_at < ?")
            .bind(format_instant(before)?)
            .execute(&mut *tx)
            .await?;
        tx.commit().await?;
        Ok(done.rows_affected())
    }
}

/// The id the next revision gets: one above any id ever used.
async fn next_revision_id(tx: &mut WriteTx) -> Result<i64, StoreError> {
    let max: i64 = sqlx::query_scalar(
        "SELECT MAX(COALESCE((SELECT MAX(id) FROM count_revisions), 0), \
                    COALESCE((SELECT seq FROM sqlite_sequence WHERE name = 'count_revisions'), 0))",
    )
    .fetch_one(&mut **tx)
    .await?;
    Ok(max + 1)
}

async fn last_recorded_at(tx: &mut WriteTx) -> Result<Option<OffsetDateTime>, StoreError> {
    let last: Option<String> = sqlx::query_scalar(LAST_RECORDED_AT)
        .fetch_optional(&mut **tx)
        .await?;
    last.as_deref().map(parse_instant).transpose()
}
