//! API keys: the shared statements of [`crate::run`] in SQLite transactions.

use dispar_core::code::SiteCode;
use sqlx::Sqlite;

use super::db::SqliteStore;
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::run::Run;

impl SqliteStore {
    pub(super) async fn create_key_impl(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        let mut tx = self.begin_write().await?;
        let id = Run::<Sqlite>::create_key(&mut tx, role, sites, label, secret_hash).await?;
        tx.commit().await?;
        Ok(id)
    }

    pub(super) async fn find_key_impl(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::key(&mut tx, id).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn list_keys_impl(&self) -> Result<Vec<ApiKey>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::keys(&mut tx).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn revoke_key_impl(&self, id: KeyId) -> Result<(), StoreError> {
        let mut tx = self.begin_write().await?;
        Run::<Sqlite>::revoke_key(&mut tx, id).await?;
        tx.commit().await?;
        Ok(())
    }
}
