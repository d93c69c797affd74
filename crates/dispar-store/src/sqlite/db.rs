//! The connection pools of an SQLite store, and what every table module shares.

use std::str::FromStr;

use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use sqlx::{Sqlite, Transaction};

pub(super) use crate::decode::to_u64;
use crate::error::StoreError;
use crate::options::OpenOptions;

/// The embedded SQLite migrations (this crate's `migrations/sqlite`).
pub static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("migrations/sqlite");

/// A dispar store in one SQLite file.
#[derive(Debug, Clone)]
pub struct SqliteStore {
    pub(super) writer: SqlitePool,
    pub(super) reader: SqlitePool,
}

pub(super) type WriteTx = Transaction<'static, Sqlite>;

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
            .max_connections(options.connections.unwrap_or(4).max(1))
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
    pub(super) async fn begin_write(&self) -> Result<WriteTx, StoreError> {
        Ok(self.writer.begin_with("BEGIN IMMEDIATE").await?)
    }
}
