//! Count records in SQLite: batch writes (with the idempotency answers stored beside
//! them) in [`write`], reads of current records and history in [`read`].

mod read;
mod write;
