//! The one error type of the store, and the single place where database errors are
//! mapped to it.

use std::fmt;

/// Everything a store operation can refuse or fail with.
///
/// Database errors are mapped once, inside this crate: busy/locked becomes [`Busy`],
/// a named constraint becomes [`Constraint`], everything unexpected becomes
/// [`Internal`] (whose text is for logs, never for clients).
///
/// [`Busy`]: StoreError::Busy
/// [`Constraint`]: StoreError::Constraint
/// [`Internal`]: StoreError::Internal
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    /// The thing asked for does not exist.
    #[error("{what} {key} not found")]
    NotFound {
        /// What kind of thing (`"site"`, `"api key"`, ...).
        what: &'static str,
        /// Its key as text.
        key: String,
    },
    /// A site code used where a registered site is required (registering a line,
    /// reporting on the lines of a site) is not registered.
    #[error("site {site} is not registered")]
    UnknownSite {
        /// The site code.
        site: String,
    },
    /// One or more records were refused; nothing was written. `put_record` gives one
    /// error with index 0; `put_batch` gives every refused record in input order.
    #[error("{} record(s) refused, first: {}", .0.len(), first_problem(.0))]
    Rejected(Vec<RecordError>),
    /// The Idempotency-Key was used before with a different body.
    #[error("the idempotency key was already used with a different request body")]
    IdempotencyMismatch,
    /// A named database constraint refused a value (the domain should have caught it).
    #[error("constraint {name} refused the value")]
    Constraint {
        /// The constraint's name as written in the migration.
        name: String,
    },
    /// The pagination cursor is not one this store produced.
    #[error("the cursor is not valid")]
    BadCursor,
    /// The database was busy (locked by another writer) beyond the busy timeout; the
    /// request may be retried.
    #[error("the database is busy; try again")]
    Busy,
    /// Two transactions collided (a serialization failure or a deadlock, PostgreSQL
    /// SQLSTATE 40001 or 40P01). The PostgreSQL store retries such a write a few times
    /// itself; callers see this only when the retries ran out, and may retry later.
    #[error("the write collided with another transaction; try again")]
    WriteConflict,
    /// The URL names a backend this build does not have.
    #[error("{0}")]
    Unsupported(String),
    /// Anything else: I/O, corrupt data, a bug. Log it; never show it to clients.
    #[error("internal store error: {0}")]
    Internal(#[source] Box<dyn std::error::Error + Send + Sync>),
}

fn first_problem(errors: &[RecordError]) -> String {
    errors.first().map_or_else(String::new, ToString::to_string)
}

impl StoreError {
    /// True when the same request may succeed if retried later ([`StoreError::Busy`]).
    pub fn is_retryable(&self) -> bool {
        matches!(self, StoreError::Busy | StoreError::WriteConflict)
    }

    pub(crate) fn internal(message: impl Into<String>) -> Self {
        StoreError::Internal(message.into().into())
    }
}

/// One refused record of a write.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RecordError {
    /// 0-based position of the record in the batch (0 for `put_record`).
    pub index: usize,
    /// Why it was refused.
    pub problem: RecordProblem,
}

impl fmt::Display for RecordError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "record {}: {}", self.index, self.problem)
    }
}

/// Why a record was refused.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum RecordProblem {
    /// The record's site is not registered (field `site`).
    #[error("site {site} is not registered")]
    UnknownSite {
        /// The site code.
        site: String,
    },
    /// The site exists but the line is not registered in it (field `line`).
    #[error("line {line} is not registered at site {site}")]
    UnknownLine {
        /// The site code.
        site: String,
        /// The line code.
        line: String,
    },
    /// The record carries a plant revision older than or equal to the current one,
    /// with different counts (field `revision`; HTTP 409).
    #[error("revision is not newer than the current revision {current_revision}")]
    Conflict {
        /// The plant revision of the record as currently stored.
        current_revision: u64,
        /// The store's id of the current revision.
        revision_id: i64,
    },
    /// A number does not fit the database's 64-bit signed integers (the domain caps
    /// counts far below this, so this means a caller bypassed it).
    #[error("{field} is out of range")]
    OutOfRange {
        /// The field (`inspected`, `defective`, `revision`, `defects/<category>`).
        field: String,
    },
}

/// Maps a sqlx error to a [`StoreError`]; the one place this happens.
impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        match &e {
            sqlx::Error::PoolTimedOut => return StoreError::Busy,
            sqlx::Error::Database(db) => {
                if let Some(pg) = db.try_downcast_ref::<sqlx::postgres::PgDatabaseError>() {
                    return from_postgres(pg).unwrap_or_else(|| StoreError::Internal(Box::new(e)));
                }
                // SQLite extended result codes: the primary code is the low byte.
                // SQLITE_BUSY = 5 (and BUSY_RECOVERY/SNAPSHOT/TIMEOUT), SQLITE_LOCKED = 6.
                if let Some(code) = db.code().and_then(|c| c.parse::<i64>().ok()) {
                    let primary = code & 0xff;
                    if primary == 5 || primary == 6 {
                        return StoreError::Busy;
                    }
                }
                if let Some(name) = constraint_name(db.message()) {
                    return StoreError::Constraint { name };
                }
            }
            _ => {}
        }
        StoreError::Internal(Box::new(e))
    }
}

/// PostgreSQL's SQLSTATE codes that mean something to callers; `None`: internal.
fn from_postgres(e: &sqlx::postgres::PgDatabaseError) -> Option<StoreError> {
    match e.code() {
        // serialization_failure, deadlock_detected
        "40001" | "40P01" => Some(StoreError::WriteConflict),
        // lock_not_available (lock_timeout), query_canceled (statement_timeout),
        // too_many_connections, cannot_connect_now (starting up or shutting down)
        "55P03" | "57014" | "53300" | "57P03" => Some(StoreError::Busy),
        _ => e.constraint().map(|name| StoreError::Constraint {
            name: name.to_owned(),
        }),
    }
}

impl From<sqlx::migrate::MigrateError> for StoreError {
    fn from(e: sqlx::migrate::MigrateError) -> Self {
        match e {
            sqlx::migrate::MigrateError::Execute(inner) => StoreError::from(inner),
            other => StoreError::Internal(Box::new(other)),
        }
    }
}

/// Extracts the constraint name from SQLite's messages, which read
/// `CHECK constraint failed: name`; `UNIQUE constraint failed: table.col, ...` and
/// `FOREIGN KEY constraint failed` (SQLite does not name foreign keys) are returned as
/// `unique:table.col,...` and `foreign_key`.
fn constraint_name(message: &str) -> Option<String> {
    if let Some(rest) = message.strip_prefix("CHECK constraint failed: ") {
        return Some(rest.trim().to_owned());
    }
    if let Some(rest) = message.strip_prefix("UNIQUE constraint failed: ") {
        return Some(format!("unique:{}", rest.replace(' ', "")));
    }
    if message.starts_with("FOREIGN KEY constraint failed") {
        return Some("foreign_key".to_owned());
    }
    if let Some(rest) = message.strip_prefix("NOT NULL constraint failed: ") {
        return Some(format!("not_null:{}", rest.trim()));
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constraint_names_are_read_from_sqlite_messages() {
        assert_eq!(
            constraint_name("CHECK constraint failed: count_revisions_defective_range").as_deref(),
            Some("count_revisions_defective_range")
        );
        assert_eq!(
            constraint_name("UNIQUE constraint failed: sites.code").as_deref(),
            Some("unique:sites.code")
        );
        assert_eq!(
            constraint_name("FOREIGN KEY constraint failed").as_deref(),
            Some("foreign_key")
        );
        assert_eq!(constraint_name("no such table: x"), None);
    }
}
