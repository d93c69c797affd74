//! Reads of count records: one current record, a page of them, a key's history — the
//! shared reads of [`crate::run`], each in one read transaction.

use dispar_core::record::RecordKey;
use sqlx::Sqlite;

use crate::counts::{CountFilter, CountPage, StoredRecord};
use crate::error::StoreError;
use crate::run::Run;
use crate::sqlite::db::SqliteStore;

impl SqliteStore {
    pub(in crate::sqlite) async fn get_record_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Option<StoredRecord>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::record(&mut tx, key).await;
        tx.rollback().await?;
        out
    }

    pub(in crate::sqlite) async fn list_counts_impl(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::records(&mut tx, filter, cursor, limit).await;
        tx.rollback().await?;
        out
    }

    pub(in crate::sqlite) async fn record_history_impl(
        &self,
        key: &RecordKey,
    ) -> Result<Vec<StoredRecord>, StoreError> {
        let mut conn = self.reader.acquire().await?;
        Run::<Sqlite>::history(&mut conn, key).await
    }
}
