//! Types for the pages' browser sessions. The server makes the random session id,
//! puts it in the cookie and hands the store only its hash; the store keeps the hash,
//! the key it stands for and its lifetime, so sessions survive a restart and are
//! shared by every instance on one database.

use time::OffsetDateTime;

use crate::keys::KeyId;

/// A session to start.
#[derive(Clone, PartialEq, Eq)]
pub struct NewPageSession {
    /// SHA-256 of the session id (32 bytes).
    pub id_hash: [u8; 32],
    /// The API key signed in with.
    pub key_id: KeyId,
    /// When it starts (now, as the server sees it).
    pub created_at: OffsetDateTime,
    /// When it ends.
    pub expires_at: OffsetDateTime,
}

/// The hash is left out so it never reaches a log.
impl std::fmt::Debug for NewPageSession {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("NewPageSession")
            .field("key_id", &self.key_id)
            .field("created_at", &self.created_at)
            .field("expires_at", &self.expires_at)
            .finish_non_exhaustive()
    }
}

/// A stored, live session.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PageSession {
    /// The API key signed in with.
    pub key_id: KeyId,
    /// When it started.
    pub created_at: OffsetDateTime,
    /// When it ends.
    pub expires_at: OffsetDateTime,
}
