//! Page sessions: the shared statements of [`crate::run`] in SQLite transactions.

use sqlx::Sqlite;
use time::OffsetDateTime;

use super::SqliteStore;
use crate::error::StoreError;
use crate::run::Run;
use crate::sessions::{NewPageSession, PageSession};

impl SqliteStore {
    pub(super) async fn create_page_session_impl(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        let mut tx = self.begin_write().await?;
        Run::<Sqlite>::start_session(&mut tx, session, max_per_key).await?;
        tx.commit().await?;
        Ok(())
    }

    pub(super) async fn find_page_session_impl(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        let mut conn = self.reader.acquire().await?;
        Run::<Sqlite>::session(&mut conn, id_hash, now).await
    }

    pub(super) async fn delete_page_session_impl(
        &self,
        id_hash: &[u8; 32],
    ) -> Result<bool, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = Run::<Sqlite>::end_session(&mut tx, id_hash).await?;
        tx.commit().await?;
        Ok(done)
    }
}
