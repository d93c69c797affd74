//! Page sessions.

use time::OffsetDateTime;

use super::SqliteStore;
use crate::error::StoreError;
use crate::sessions::{NewPageSession, PageSession};
use crate::timestamp::{format_instant, parse_instant};

impl SqliteStore {
    pub(super) async fn create_page_session_impl(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        let created_at = format_instant(session.created_at)?;
        let expires_at = format_instant(session.expires_at)?;
        // The new session is one of the key's `max_per_key`: keep the newest
        // `max_per_key - 1` of the others (at least none).
        let keep = i64::try_from(max_per_key.saturating_sub(1)).unwrap_or(i64::MAX);
        let mut tx = self.begin_write().await?;
        sqlx::query("DELETE FROM page_sessions WHERE expires_at <= ?")
            .bind(&created_at)
            .execute(&mut *tx)
            .await?;
        sqlx::query(
            "DELETE FROM page_sessions WHERE id_hash IN (SELECT id_hash FROM page_sessions \
             WHERE key_id = ? ORDER BY created_at DESC, id_hash DESC LIMIT -1 OFFSET ?)",
        )
        .bind(session.key_id)
        .bind(keep)
        .execute(&mut *tx)
        .await?;
        sqlx::query(
            "INSERT INTO page_sessions (id_hash, key_id, created_at, expires_at) VALUES (?, ?, ?, ?)",
        )
        .bind(session.id_hash.as_slice())
        .bind(session.key_id)
        .bind(&created_at)
        .bind(&expires_at)
        .execute(&mut *tx)
        .await?;
        tx.commit().await?;
        Ok(())
    }

    pub(super) async fn find_page_session_impl(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        let row: Option<(i64, String, String)> = sqlx::query_as(
            "SELECT key_id, created_at, expires_at FROM page_sessions \
             WHERE id_hash = ? AND expires_at > ?",
        )
        .bind(id_hash.as_slice())
        .bind(format_instant(now)?)
        .fetch_optional(&self.reader)
        .await?;
        row.map(|(key_id, created_at, expires_at)| {
            Ok(PageSession {
                key_id,
                created_at: parse_instant(&created_at)?,
                expires_at: parse_instant(&expires_at)?,
            })
        })
        .transpose()
    }

    pub(super) async fn delete_page_session_impl(
        &self,
        id_hash: &[u8; 32],
    ) -> Result<bool, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = sqlx::query("DELETE FROM page_sessions WHERE id_hash = ?")
            .bind(id_hash.as_slice())
            .execute(&mut *tx)
            .await?;
        tx.commit().await?;
        Ok(done.rows_affected() > 0)
    }
}
