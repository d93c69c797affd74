//! API keys.

use dispar_core::code::SiteCode;
use sqlx::QueryBuilder;
use sqlx::Sqlite;
use time::OffsetDateTime;

use super::db::{SqliteStore, parse_code};
use crate::decode::{KEY_COLUMNS, KeyRow, key_from_row, keys_from_rows};
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::timestamp::format_instant;

impl SqliteStore {
    pub(super) async fn create_key_impl(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        let mut tx = self.begin_write().await?;
        let created_at = format_instant(OffsetDateTime::now_utc())?;
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO api_keys (role, label, secret_hash, created_at) VALUES (?, ?, ?, ?) RETURNING id",
        )
        .bind(role.as_str())
        .bind(label)
        .bind(secret_hash)
        .bind(created_at)
        .fetch_one(&mut *tx)
        .await?;
        let mut unique: Vec<&str> = sites.iter().map(SiteCode::as_str).collect();
        unique.sort_unstable();
        unique.dedup();
        for chunk in unique.chunks(500) {
            let mut q: QueryBuilder<Sqlite> =
                QueryBuilder::new("INSERT INTO api_key_sites (key_id, site) ");
            q.push_values(chunk, |mut b, site| {
                b.push_bind(id).push_bind(*site);
            });
            q.build().execute(&mut *tx).await?;
        }
        tx.commit().await?;
        Ok(id)
    }

    pub(super) async fn find_key_impl(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let row: Option<KeyRow> = sqlx::query_as(
            "SELECT id, role, label, secret_hash, created_at, revoked_at FROM api_keys WHERE id = ?",
        )
        .bind(id)
        .fetch_optional(&mut *tx)
        .await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let sites: Vec<String> =
            sqlx::query_scalar("SELECT site FROM api_key_sites WHERE key_id = ? ORDER BY site")
                .bind(id)
                .fetch_all(&mut *tx)
                .await?;
        tx.rollback().await?;
        let sites = sites
            .iter()
            .map(|s| parse_code(s))
            .collect::<Result<_, _>>()?;
        key_from_row(row, sites).map(Some)
    }

    pub(super) async fn list_keys_impl(&self) -> Result<Vec<ApiKey>, StoreError> {
        let mut tx = self.reader.begin().await?;
        let rows: Vec<KeyRow> =
            sqlx::query_as(sqlx::AssertSqlSafe(format!("{KEY_COLUMNS} ORDER BY id")))
                .fetch_all(&mut *tx)
                .await?;
        let site_rows: Vec<(i64, String)> =
            sqlx::query_as("SELECT key_id, site FROM api_key_sites ORDER BY key_id, site")
                .fetch_all(&mut *tx)
                .await?;
        tx.rollback().await?;
        keys_from_rows(rows, site_rows)
    }

    pub(super) async fn revoke_key_impl(&self, id: KeyId) -> Result<(), StoreError> {
        let mut tx = self.begin_write().await?;
        let now = format_instant(OffsetDateTime::now_utc())?;
        let done =
            sqlx::query("UPDATE api_keys SET revoked_at = COALESCE(revoked_at, ?) WHERE id = ?")
                .bind(now)
                .bind(id)
                .execute(&mut *tx)
                .await?;
        if done.rows_affected() == 0 {
            return Err(StoreError::NotFound {
                what: "api key",
                key: id.to_string(),
            });
        }
        tx.commit().await?;
        Ok(())
    }
}
