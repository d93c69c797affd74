//! Store tests: each test opens a fresh, migrated store — an SQLite file in its own temp
//! dir, or with `DISPAR_TEST_POSTGRES=postgres://...` (a server the tests may create
//! databases on) a new PostgreSQL database. Every test but those of `sqlite` (the file
//! itself) and `postgres` (the server's own behaviour) runs on both.

mod helpers;

mod batch;
mod counts;
mod idempotency;
mod keys;
mod postgres;
mod reports;
mod sessions;
mod sites;
mod sqlite;
mod story;
