//! Persistence for dispar: the [`Store`] trait and its SQLite and PostgreSQL
//! implementations.
//!
//! [`open`] chooses the backend from the database URL (`sqlite:` URLs and plain paths
//! open SQLite; `postgres://` and `postgresql://` open PostgreSQL), runs the
//! embedded migrations and returns an `Arc<dyn Store>`.
//!
//! # Records and revisions
//!
//! A count record is identified by its natural key (site, line, date, product). Every
//! accepted write appends a revision to an append-only history; the latest revision
//! is the record's current value, kept in a denormalised table so that reports are one
//! indexed `GROUP BY`. With `C` the current revision and `N` the record being written:
//!
//! - no `C`: the write is [`WriteStatus::Created`];
//! - `N` carries plant revision `r`, `C` has plant revision `c` and `r <= c`: the same
//!   counts as `C` are [`WriteStatus::Unchanged`], other counts are refused with
//!   [`RecordProblem::Conflict`] naming `c`;
//! - otherwise the same counts with no plant revision (or the same one) are
//!   `Unchanged`, and anything else is [`WriteStatus::Corrected`] (a new revision).
//!   A write without a plant revision is last-writer-wins.
//!
//! `Unchanged` writes nothing. Within one batch a key may appear more than once; each
//! record is checked against the state the earlier ones left.
//!
//! These rules belong to no backend: a private planner applies them to a batch and the
//! current values a backend loaded, and the backend writes the plan with statements
//! both backends share (built once for any sqlx database, in each one's placeholders).
//!
//! # PostgreSQL
//!
//! Several instances share one database. Writes run at READ COMMITTED under one
//! transaction-scoped advisory lock, so they are serialised across instances as SQLite
//! serialises them in one file, and ids follow commit order; a collision with a foreign
//! session is retried a bounded number of times. See [`PostgresStore`]. The schema
//! (`migrations/postgres`) stores the same encoding as SQLite's, with byte-order
//! (`COLLATE "C"`) keys.
//!
//! # SQLite
//!
//! WAL journal, `synchronous=FULL`, foreign keys on, a busy timeout, statement
//! journals in memory; one writer connection (a pool of one) whose transactions all
//! begin with `BEGIN IMMEDIATE`, and a pool of `query_only` readers. Batches are
//! written with multi-row `INSERT`s, and the current values needed for the revision
//! checks are read with one query per 500 keys. Busy or locked databases give
//! [`StoreError::Busy`], which is retryable.
//!
//! Reports over the current data read monthly sums (kept up to date by every write)
//! for the whole months of a range and the daily rows for the days at its edges;
//! `as_of` reports read the history. The schema is in this crate's `migrations/sqlite`.
//!
//! # Page sessions
//!
//! The HTML pages' browser sessions live in the database (`page_sessions`), so they
//! survive a restart and every instance on one database knows them. The store only
//! sees the SHA-256 of a session id; the id is in the person's cookie.

mod aggregate;
mod counts;
mod decode;
mod error;
mod keys;
mod options;
mod plan;
mod postgres;
mod reports;
mod run;
mod sessions;
mod sites;
mod sql;
mod sqlite;
mod store;
mod timestamp;

use std::sync::Arc;

pub use crate::counts::{
    BatchOutcome, BatchResult, CountFilter, CountPage, Idempotency, MAX_PAGE, RenderAnswer,
    StoredAnswer, StoredRecord, WriteOutcome, WriteStatus,
};
pub use crate::error::{RecordError, RecordProblem, StoreError};
pub use crate::keys::{ApiKey, KeyId, KeyRole, UnknownRole};
pub use crate::options::{Backend, OpenOptions, backend_of};
pub use crate::postgres::PostgresStore;
pub use crate::reports::{
    Aggregate, AggregateQuery, BucketedAggregate, GroupTotals, Level, LineDay, LineDays,
    VersionScope,
};
pub use crate::sessions::{NewPageSession, PageSession};
pub use crate::sites::{SiteWithLines, Upserted};
pub use crate::sqlite::SqliteStore;
pub use crate::store::{Store, StoreStats};

/// Opens (creating and migrating if needed) the store named by `url` with default
/// options. See [`open_with`].
pub async fn open(url: &str) -> Result<Arc<dyn Store>, StoreError> {
    open_with(&OpenOptions::new(url)).await
}

/// Opens the store named by `options.url`, chosen by scheme: `sqlite:` or a plain path
/// is SQLite (the file is created if missing); `postgres://` and `postgresql://` are
/// PostgreSQL ([`PostgresStore`]). Migrations run
/// every time (they are idempotent), so `open` is also "migrate".
pub async fn open_with(options: &OpenOptions) -> Result<Arc<dyn Store>, StoreError> {
    match backend_of(&options.url)? {
        Backend::Sqlite => Ok(Arc::new(SqliteStore::open(options).await?)),
        Backend::Postgres => Ok(Arc::new(PostgresStore::open(options).await?)),
    }
}
