//! Store tests: each test opens a fresh, migrated SQLite file in its own temp dir.
//!
//! `story::story` is backend-agnostic (it takes an `Arc<dyn Store>`) so the
//! PostgreSQL backend can run the same story when it exists.

mod helpers;

mod batch;
mod counts;
mod idempotency;
mod keys;
mod reports;
mod sessions;
mod sites;
mod sqlite;
mod story;
