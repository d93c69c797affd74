//! Sites and lines: the shared statements of [`crate::run`] in SQLite transactions.

use dispar_core::code::SiteCode;
use dispar_core::site::{Line, Site};
use sqlx::Sqlite;

use super::db::SqliteStore;
use crate::error::StoreError;
use crate::run::Run;
use crate::sites::{SiteWithLines, Upserted};

impl SqliteStore {
    pub(super) async fn upsert_site_impl(&self, site: &Site) -> Result<Upserted, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = Run::<Sqlite>::upsert_site(&mut tx, site).await?;
        tx.commit().await?;
        Ok(done)
    }

    pub(super) async fn upsert_line_impl(&self, line: &Line) -> Result<Upserted, StoreError> {
        let mut tx = self.begin_write().await?;
        let done = Run::<Sqlite>::upsert_line(&mut tx, line).await?;
        tx.commit().await?;
        Ok(done)
    }

    pub(super) async fn list_sites_impl(&self) -> Result<Vec<Site>, StoreError> {
        let mut conn = self.reader.acquire().await?;
        Run::<Sqlite>::sites(&mut conn).await
    }

    pub(super) async fn get_site_impl(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::site(&mut tx, site).await;
        tx.rollback().await?;
        out
    }
}
