//! Types for API keys. The server creates the secret, hashes it and compares hashes in
//! constant time; the store only keeps the hash.

use std::fmt;
use std::str::FromStr;

use dispar_core::code::SiteCode;
use time::OffsetDateTime;

/// An API key's id (the store assigns them: 1, 2, 3, ...).
pub type KeyId = i64;

/// What a key may do.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum KeyRole {
    /// Write counts for the key's sites.
    Ingest,
    /// Read everything.
    Read,
    /// Everything, including the registry.
    Admin,
}

impl KeyRole {
    /// The role as stored and shown: `ingest`, `read` or `admin`.
    pub fn as_str(self) -> &'static str {
        match self {
            KeyRole::Ingest => "ingest",
            KeyRole::Read => "read",
            KeyRole::Admin => "admin",
        }
    }
}

impl fmt::Display for KeyRole {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// The text is not one of `ingest`, `read`, `admin`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown role {0:?}; expected ingest, read or admin")]
pub struct UnknownRole(pub String);

impl FromStr for KeyRole {
    type Err = UnknownRole;
    fn from_str(s: &str) -> Result<Self, UnknownRole> {
        match s {
            "ingest" => Ok(KeyRole::Ingest),
            "read" => Ok(KeyRole::Read),
            "admin" => Ok(KeyRole::Admin),
            other => Err(UnknownRole(other.to_owned())),
        }
    }
}

/// A stored API key.
#[derive(Clone, PartialEq, Eq)]
pub struct ApiKey {
    /// Its id.
    pub id: KeyId,
    /// Its role.
    pub role: KeyRole,
    /// The sites an ingest key may write (ordered; empty for other roles).
    pub sites: Vec<SiteCode>,
    /// A free-text label, if given.
    pub label: Option<String>,
    /// The hash of the secret, as the server computed it.
    pub secret_hash: Vec<u8>,
    /// When it was created.
    pub created_at: OffsetDateTime,
    /// When it was revoked, if it was.
    pub revoked_at: Option<OffsetDateTime>,
}

impl ApiKey {
    /// True once the key has been revoked.
    pub fn is_revoked(&self) -> bool {
        self.revoked_at.is_some()
    }
}

/// The hash is left out so it never reaches a log.
impl fmt::Debug for ApiKey {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("ApiKey")
            .field("id", &self.id)
            .field("role", &self.role)
            .field("sites", &self.sites)
            .field("label", &self.label)
            .field("secret_hash", &"<redacted>")
            .field("created_at", &self.created_at)
            .field("revoked_at", &self.revoked_at)
            .finish()
    }
}
