//! The SQLite implementation of [`Store`].
//!
//! One writer connection (a pool of one) and a pool of `query_only` readers over one
//! WAL file. Every write transaction begins with `BEGIN IMMEDIATE`, so it takes the
//! write lock before reading what it will decide on; another process holding the lock
//! longer than the busy timeout gives [`StoreError::Busy`].

mod counts;
mod keys;
mod reports;
mod sessions;
mod sites;

use std::str::FromStr;

use async_trait::async_trait;
use dispar_core::code::SiteCode;
use dispar_core::record::{CountRecord, RecordKey};
use dispar_core::site::{Line, Site};
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use sqlx::{Sqlite, Transaction};
use time::OffsetDateTime;

use crate::OpenOptions;
use crate::counts::{
    BatchResult, CountFilter, CountPage, Idempotency, StoredAnswer, StoredRecord, WriteOutcome,
};
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::reports::{Aggregate, AggregateQuery};
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};
use crate::store::{Backend, Store, StoreStats};

/// The embedded SQLite migrations (`migrations/sqlite`).
pub static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../../migrations/sqlite");

/// A dispar store in one SQLite file.
#[derive(Debug, Clone)]
pub struct SqliteStore {
    writer: SqlitePool,
    reader: SqlitePool,
}

type WriteTx = Transaction<'static, Sqlite>;

impl SqliteStore {
    /// Opens (creating if missing) and migrates the database at `options.url` (a
    /// `sqlite:` URL or a plain path). In-memory databases are refused: the writer and
    /// the readers must share one file.
    pub async fn open(options: &OpenOptions) -> Result<Self, StoreError> {
        let url = options.url.trim();
        if url.contains(":memory:") || url.contains("mode=memory") {
            return Err(StoreError::Unsupported(
                "in-memory SQLite is not supported (the writer and readers share one file); use a file path"
                    .to_owned(),
            ));
        }
        let base = if url.to_ascii_lowercase().starts_with("sqlite:") {
            SqliteConnectOptions::from_str(url)?
        } else {
            SqliteConnectOptions::new().filename(url)
        };
        let base = base
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Full)
            .foreign_keys(true)
            .busy_timeout(options.busy_timeout)
            .pragma("temp_store", "MEMORY");
        let writer = SqlitePoolOptions::new()
            .max_connections(1)
            .min_connections(1)
            .acquire_timeout(options.write_wait)
            .connect_with(base.clone().create_if_missing(true))
            .await?;
        MIGRATOR.run(&writer).await?;

        let reader = SqlitePoolOptions::new()
            .max_connections(options.read_connections.max(1))
            .acquire_timeout(options.write_wait)
            .connect_with(base.create_if_missing(false).pragma("query_only", "ON"))
            .await?;
        Ok(Self { writer, reader })
    }

    /// The read pool, for tests and diagnostics (`EXPLAIN QUERY PLAN`). Its
    /// connections are `query_only`.
    pub fn read_pool(&self) -> &SqlitePool {
        &self.reader
    }

    /// Starts a write transaction with `BEGIN IMMEDIATE` on the single writer
    /// connection.
    async fn begin_write(&self) -> Result<WriteTx, StoreError> {
        Ok(self.writer.begin_with("BEGIN IMMEDIATE").await?)
    }
}

/// Bumps the data version (inside a write transaction that changed report input).
async fn bump_data_version(tx: &mut WriteTx) -> Result<(), StoreError> {
    sqlx::query("UPDATE store_state SET data_version = data_version + 1 WHERE id = 1")
        .execute(&mut **tx)
        .await?;
    Ok(())
}

/// Converts a stored non-negative integer.
fn to_u64(v: i64, what: &str) -> Result<u64, StoreError> {
    u64::try_from(v).map_err(|_| StoreError::internal(format!("stored {what} {v} is negative")))
}

/// Parses a stored code of type `T`.
fn parse_code<T>(s: &str) -> Result<T, StoreError>
where
    T: FromStr,
    T::Err: std::fmt::Display,
{
    T::from_str(s)
        .map_err(|e| StoreError::internal(format!("stored code {s:?} is unreadable: {e}")))
}

#[async_trait]
impl Store for SqliteStore {
    fn backend(&self) -> Backend {
        Backend::Sqlite
    }

    async fn ping(&self) -> Result<(), StoreError> {
        sqlx::query("SELECT 1").fetch_one(&self.reader).await?;
        Ok(())
    }

    async fn close(&self) {
        self.writer.close().await;
        self.reader.close().await;
    }

    async fn upsert_site(&self, site: &Site) -> Result<Upserted, StoreError> {
        self.upsert_site_impl(site).await
    }

    async fn upsert_line(&self, line: &Line) -> Result<Upserted, StoreError> {
        self.upsert_line_impl(line).await
    }

    async fn list_sites(&self) -> Result<Vec<Site>, StoreError> {
        self.list_sites_impl().await
    }

    async fn get_site(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        self.get_site_impl(site).await
    }

    async fn put_record(
        &self,
        record: &CountRecord,
        api_key_id: Option<KeyId>,
    ) -> Result<WriteOutcome, StoreError> {
        let result = self
            .put_batch_impl(std::slice::from_ref(record), api_key_id, None)
            .await?;
        match result {
            BatchResult::Written { outcome, .. } => outcome
                .outcomes
                .first()
                .copied()
                .ok_or_else(|| StoreError::internal("a one-record write gave no outcome")),
            BatchResult::Replayed(_) => Err(StoreError::internal(
                "a write without idempotency key was replayed",
            )),
        }
    }

    async fn put_batch(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        self.put_batch_impl(records, api_key_id, idempotency).await
    }

    async fn find_idempotent(
        &self,
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
    ) -> Result<Option<StoredAnswer>, StoreError> {
        let mut conn = self.reader.acquire().await?;
        counts::find_idempotent(&mut conn, api_key_id, key, body_sha256).await
    }

    async fn purge_idempotency(&self, before: OffsetDateTime) -> Result<u64, StoreError> {
        self.purge_idempotency_impl(before).await
    }

    async fn get_record(&self, key: &RecordKey) -> Result<Option<StoredRecord>, StoreError> {
        self.get_record_impl(key).await
    }

    async fn list_counts(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        self.list_counts_impl(filter, cursor, limit).await
    }

    async fn record_history(&self, key: &RecordKey) -> Result<Vec<StoredRecord>, StoreError> {
        self.record_history_impl(key).await
    }

    async fn create_key(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        self.create_key_impl(role, sites, label, secret_hash).await
    }

    async fn find_key(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        self.find_key_impl(id).await
    }

    async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError> {
        self.list_keys_impl().await
    }

    async fn revoke_key(&self, id: KeyId) -> Result<(), StoreError> {
        self.revoke_key_impl(id).await
    }

    async fn create_page_session(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        self.create_page_session_impl(session, max_per_key).await
    }

    async fn find_page_session(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        self.find_page_session_impl(id_hash, now).await
    }

    async fn delete_page_session(&self, id_hash: &[u8; 32]) -> Result<bool, StoreError> {
        self.delete_page_session_impl(id_hash).await
    }

    async fn aggregate(&self, query: &AggregateQuery) -> Result<Aggregate, StoreError> {
        self.aggregate_impl(query).await
    }

    async fn data_version(&self) -> Result<u64, StoreError> {
        let v: i64 = sqlx::query_scalar("SELECT data_version FROM store_state WHERE id = 1")
            .fetch_one(&self.reader)
            .await?;
        to_u64(v, "data version")
    }

    async fn stats(&self) -> Result<StoreStats, StoreError> {
        let row: (i64, i64, i64, i64, i64) = sqlx::query_as(
            "SELECT (SELECT COUNT(*) FROM sites), (SELECT COUNT(*) FROM lines), \
             (SELECT COUNT(*) FROM count_revisions), (SELECT COUNT(*) FROM counts_current), \
             (SELECT COUNT(*) FROM api_keys)",
        )
        .fetch_one(&self.reader)
        .await?;
        Ok(StoreStats {
            sites: to_u64(row.0, "count")?,
            lines: to_u64(row.1, "count")?,
            revisions: to_u64(row.2, "count")?,
            records: to_u64(row.3, "count")?,
            keys: to_u64(row.4, "count")?,
        })
    }
}
