//! How to open a store: the options, and which backend a database URL names.

use std::time::Duration;

use crate::error::StoreError;

/// Which database a URL names (see [`backend_of`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    /// An SQLite file.
    Sqlite,
    /// A PostgreSQL server.
    Postgres,
}

/// How to open a store.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct OpenOptions {
    /// `sqlite:PATH`, `sqlite://PATH`, a plain file path, or `postgres://...`.
    pub url: String,
    /// Database connections: on SQLite the readers (the one writer comes on top), on
    /// PostgreSQL the whole pool. `None`: 4 on SQLite, 10 on PostgreSQL.
    pub connections: Option<u32>,
    /// How long a statement waits for a lock held by another process before
    /// [`StoreError::Busy`].
    pub busy_timeout: Duration,
    /// How long a write waits for the single writer connection (SQLite) or the write
    /// lock (PostgreSQL) before [`StoreError::Busy`].
    pub write_wait: Duration,
}

impl OpenOptions {
    /// Defaults for `url`: the backend's default connections, 5 s busy timeout, 30 s
    /// wait for the writer (on PostgreSQL: for the write lock).
    pub fn new(url: impl Into<String>) -> Self {
        Self {
            url: url.into(),
            connections: None,
            busy_timeout: Duration::from_secs(5),
            write_wait: Duration::from_secs(30),
        }
    }
}

/// Which backend a database URL names.
pub fn backend_of(url: &str) -> Result<Backend, StoreError> {
    let lower = url.to_ascii_lowercase();
    if lower.starts_with("postgres://") || lower.starts_with("postgresql://") {
        return Ok(Backend::Postgres);
    }
    if lower.starts_with("sqlite:") {
        return Ok(Backend::Sqlite);
    }
    if let Some((scheme, _)) = lower.split_once("://") {
        return Err(StoreError::Unsupported(format!(
            "unknown database scheme {scheme:?}; use an SQLite path, sqlite: or postgres:// URL"
        )));
    }
    if url.trim().is_empty() {
        return Err(StoreError::Unsupported(
            "the database URL is empty".to_owned(),
        ));
    }
    Ok(Backend::Sqlite)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_backend_is_chosen_by_url_scheme() {
        let cases = [
            ("dispar.db", Some(Backend::Sqlite)),
            ("/var/lib/dispar/dispar.db", Some(Backend::Sqlite)),
            ("sqlite:dispar.db", Some(Backend::Sqlite)),
            ("sqlite:///tmp/x.db", Some(Backend::Sqlite)),
            ("postgres://u@h/db", Some(Backend::Postgres)),
            ("postgresql://u@h/db", Some(Backend::Postgres)),
            ("mysql://u@h/db", None),
            ("", None),
        ];
        for (url, want) in cases {
            assert_eq!(backend_of(url).ok(), want, "{url}");
        }
    }
}
