//! Sites, lines, API keys and page sessions on PostgreSQL: the shared statements of
//! [`crate::run`]. Registry writes take the write lock (see [`super::db`]) and every
//! write is retried on a collision.

use dispar_core::code::SiteCode;
use dispar_core::site::{Line, Site};
use sqlx::Postgres;
use time::OffsetDateTime;

use super::db::{PostgresStore, retrying};
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::run::Run;
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};

impl PostgresStore {
    pub(super) async fn upsert_site_impl(&self, site: &Site) -> Result<Upserted, StoreError> {
        retrying(|| async {
            let mut tx = self.begin_write().await?;
            let done = Run::<Postgres>::upsert_site(&mut tx, site).await?;
            tx.commit().await?;
            Ok(done)
        })
        .await
    }

    pub(super) async fn upsert_line_impl(&self, line: &Line) -> Result<Upserted, StoreError> {
        retrying(|| async {
            let mut tx = self.begin_write().await?;
            let done = Run::<Postgres>::upsert_line(&mut tx, line).await?;
            tx.commit().await?;
            Ok(done)
        })
        .await
    }

    pub(super) async fn list_sites_impl(&self) -> Result<Vec<Site>, StoreError> {
        let mut conn = self.pool.acquire().await?;
        Run::<Postgres>::sites(&mut conn).await
    }

    pub(super) async fn get_site_impl(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::site(&mut tx, site).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn create_key_impl(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        // Ids come from an identity column; no write lock is needed.
        retrying(|| async {
            let mut tx = self.pool.begin().await?;
            let id = Run::<Postgres>::create_key(&mut tx, role, sites, label, secret_hash).await?;
            tx.commit().await?;
            Ok(id)
        })
        .await
    }

    pub(super) async fn find_key_impl(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::key(&mut tx, id).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn list_keys_impl(&self) -> Result<Vec<ApiKey>, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::keys(&mut tx).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn revoke_key_impl(&self, id: KeyId) -> Result<(), StoreError> {
        let mut conn = self.pool.acquire().await?;
        Run::<Postgres>::revoke_key(&mut conn, id).await
    }

    pub(super) async fn create_page_session_impl(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        retrying(|| async {
            let mut tx = self.pool.begin().await?;
            // Sign-ins of one key are serialised by locking the key's row, so two
            // instances cannot both keep `max_per_key` sessions and add one each.
            sqlx::query("SELECT id FROM api_keys WHERE id = $1 FOR UPDATE")
                .bind(session.key_id)
                .execute(&mut *tx)
                .await?;
            Run::<Postgres>::start_session(&mut tx, session, max_per_key).await?;
            tx.commit().await?;
            Ok(())
        })
        .await
    }

    pub(super) async fn find_page_session_impl(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        let mut conn = self.pool.acquire().await?;
        Run::<Postgres>::session(&mut conn, id_hash, now).await
    }

    pub(super) async fn delete_page_session_impl(
        &self,
        id_hash: &[u8; 32],
    ) -> Result<bool, StoreError> {
        let mut conn = self.pool.acquire().await?;
        Run::<Postgres>::end_session(&mut conn, id_hash).await
    }
}
