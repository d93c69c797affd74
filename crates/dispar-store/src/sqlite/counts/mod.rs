//! Count records in SQLite: batch writes (with the idempotency answers stored beside
//! them) in [`write`], reads of current records and history in [`read`].

mod read;
mod write;

pub(super) use write::find_idempotent;

/// Distinct keys (5 binds each) or ids per lookup query.
const LOOKUP_CHUNK: usize = 500;
