//! The connection pool of a PostgreSQL store, its write transactions and their retries.
//!
//! # Isolation and locks
//!
//! Every write transaction runs at READ COMMITTED and first takes one
//! transaction-scoped advisory lock ([`WRITE_LOCK`]), so the writes of every instance on
//! one database are serialised, as SQLite's `BEGIN IMMEDIATE` serialises them in one
//! file. The reason is the history's order: revision ids are assigned in commit order
//! and `recorded_at` never decreases with the id, which `as_of` reports need to read a
//! consistent past (the latest revision of each key recorded by an instant). Holding the
//! lock, a transaction reads the current values it decides on, and nothing can change
//! them before it commits: no lost revision, no duplicate, no older plant revision
//! winning, whichever instance takes the write. Idempotency answers are checked under
//! the same lock, so a retry through another instance replays the stored answer. A batch
//! of thousands of records is a handful of multi-row statements, so the lock is held for
//! milliseconds.
//!
//! Waiting for the lock is bounded by `lock_timeout` (the store's write wait); beyond it
//! the write is [`StoreError::Busy`]. A serialization failure or deadlock (possible only
//! against transactions that are not dispar's, such as a person's session in `psql`) is
//! retried [`ATTEMPTS`] times in all, then given as [`StoreError::WriteConflict`]. Both
//! become 503 with Retry-After at the API.
//!
//! Reads of more than one statement (a report's registry and sums, a page of records and
//! their defects) run in one REPEATABLE READ, READ ONLY transaction: one snapshot.

use std::future::Future;
use std::time::Duration;

use sqlx::postgres::{PgConnectOptions, PgPool, PgPoolOptions};
use sqlx::{Postgres, Transaction};

use crate::error::StoreError;
use crate::options::OpenOptions;

/// The embedded PostgreSQL migrations (this crate's `migrations/postgres`).
pub static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("migrations/postgres");

/// The advisory lock key of dispar's write transactions (the bytes of "dispar w" as a
/// big-endian integer; any fixed number works, this one is unlikely to collide with
/// another application's on the same database).
pub(super) const WRITE_LOCK: i64 = 0x6469_7370_6172_2077;

/// Attempts of a write that collided with another transaction, the first included.
pub(super) const ATTEMPTS: u32 = 4;

/// A dispar store on a PostgreSQL database, shared by any number of instances.
#[derive(Debug, Clone)]
pub struct PostgresStore {
    pub(super) pool: PgPool,
    /// `lock_timeout` of write transactions, in milliseconds.
    lock_wait_ms: u64,
}

pub(super) type WriteTx = Transaction<'static, Postgres>;

impl PostgresStore {
    /// Connects to `options.url` (`postgres://` or `postgresql://`) with a pool of
    /// `options.connections` (default 10) and runs the migrations (sqlx takes an
    /// advisory lock for them, so instances starting together migrate once).
    pub async fn open(options: &OpenOptions) -> Result<Self, StoreError> {
        let connect: PgConnectOptions = options.url.trim().parse()?;
        let connect = connect.application_name("dispar");
        let pool = PgPoolOptions::new()
            .max_connections(options.connections.unwrap_or(10).max(2))
            .acquire_timeout(options.write_wait)
            .connect_with(connect)
            .await?;
        MIGRATOR.run(&pool).await?;
        Ok(Self {
            pool,
            lock_wait_ms: u64::try_from(options.write_wait.as_millis()).unwrap_or(u64::MAX),
        })
    }

    /// The pool, for tests and diagnostics.
    pub fn pool(&self) -> &PgPool {
        &self.pool
    }

    /// Starts a write transaction holding [`WRITE_LOCK`], waiting at most the write
    /// wait for it.
    pub(super) async fn begin_write(&self) -> Result<WriteTx, StoreError> {
        let mut tx = self.pool.begin().await?;
        // A write looks its keys up with a VALUES list joined to the current values.
        // While a table grows faster than its statistics, the planner takes the list
        // for a hash join over a scan of the whole table (measured: 25 ms per lookup of
        // 500 keys at 150,000 records, against under 1 ms by the primary key). A write
        // transaction never needs a hash or merge join, so it turns them off.
        sqlx::query(
            "SELECT set_config('lock_timeout', $1, true), \
             set_config('enable_hashjoin', 'off', true), \
             set_config('enable_mergejoin', 'off', true)",
        )
        .bind(format!("{}ms", self.lock_wait_ms.max(1)))
        .execute(&mut *tx)
        .await?;
        sqlx::query("SELECT pg_advisory_xact_lock($1)")
            .bind(WRITE_LOCK)
            .execute(&mut *tx)
            .await?;
        Ok(tx)
    }

    /// Starts a read-only transaction on one snapshot.
    pub(super) async fn begin_read(&self) -> Result<WriteTx, StoreError> {
        Ok(self
            .pool
            .begin_with("BEGIN ISOLATION LEVEL REPEATABLE READ, READ ONLY")
            .await?)
    }
}

/// Runs `attempt` until it does not end in [`StoreError::WriteConflict`], at most
/// [`ATTEMPTS`] times, waiting a little longer before each retry.
pub(super) async fn retrying<T, F, Fut>(mut attempt: F) -> Result<T, StoreError>
where
    F: FnMut() -> Fut,
    Fut: Future<Output = Result<T, StoreError>>,
{
    let mut tries = 0;
    loop {
        tries += 1;
        match attempt().await {
            Err(StoreError::WriteConflict) if tries < ATTEMPTS => {
                tokio::time::sleep(Duration::from_millis(20 << tries)).await;
            }
            other => return other,
        }
    }
}

#[cfg(test)]
mod tests {
    use std::sync::atomic::{AtomicU32, Ordering};

    use super::*;

    #[tokio::test]
    async fn collisions_are_retried_a_bounded_number_of_times_then_given_up() {
        let calls = AtomicU32::new(0);
        let out: Result<(), StoreError> = retrying(|| async {
            calls.fetch_add(1, Ordering::SeqCst);
            Err(StoreError::WriteConflict)
        })
        .await;
        assert!(matches!(out, Err(StoreError::WriteConflict)));
        assert_eq!(calls.load(Ordering::SeqCst), ATTEMPTS);

        let calls = AtomicU32::new(0);
        let out = retrying(|| async {
            if calls.fetch_add(1, Ordering::SeqCst) < 2 {
                Err(StoreError::WriteConflict)
            } else {
                Ok(7)
            }
        })
        .await;
        assert_eq!(out.ok(), Some(7));
        assert_eq!(calls.load(Ordering::SeqCst), 3);

        // Other errors are not retried.
        let calls = AtomicU32::new(0);
        let out: Result<(), StoreError> = retrying(|| async {
            calls.fetch_add(1, Ordering::SeqCst);
            Err(StoreError::Busy)
        })
        .await;
        assert!(matches!(out, Err(StoreError::Busy)));
        assert_eq!(calls.load(Ordering::SeqCst), 1);
    }
}
