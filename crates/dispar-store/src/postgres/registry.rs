//! Sites, lines, API keys and page sessions on PostgreSQL. Writes take the write lock
//! (see [`super::db`]) and are retried on a collision like every write.

use dispar_core::code::SiteCode;
use dispar_core::site::{Line, Site};
use sqlx::{Postgres, QueryBuilder};
use time::OffsetDateTime;

use super::db::{PostgresStore, bump_registry_version, retrying};
use crate::decode::{
    KEY_COLUMNS, KeyRow, key_from_row, keys_from_rows, line_from_row, parse_code, site_from_row,
};
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};
use crate::timestamp::{format_instant, parse_instant};

impl PostgresStore {
    pub(super) async fn upsert_site_impl(&self, site: &Site) -> Result<Upserted, StoreError> {
        retrying(|| async {
            let mut tx = self.begin_write().await?;
            let existing: Option<(String, Option<String>)> =
                sqlx::query_as("SELECT name, time_zone FROM sites WHERE code = $1")
                    .bind(site.code.as_str())
                    .fetch_optional(&mut *tx)
                    .await?;
            let name = site.name.as_str();
            let tz = site.time_zone.as_ref().map(|t| t.as_str());
            let done = match existing {
                None => {
                    sqlx::query("INSERT INTO sites (code, name, time_zone) VALUES ($1, $2, $3)")
                        .bind(site.code.as_str())
                        .bind(name)
                        .bind(tz)
                        .execute(&mut *tx)
                        .await?;
                    Upserted::Created
                }
                Some((n, t)) if n == name && t.as_deref() == tz => Upserted::Unchanged,
                Some(_) => {
                    sqlx::query("UPDATE sites SET name = $1, time_zone = $2 WHERE code = $3")
                        .bind(name)
                        .bind(tz)
                        .bind(site.code.as_str())
                        .execute(&mut *tx)
                        .await?;
                    Upserted::Updated
                }
            };
            if done != Upserted::Unchanged {
                bump_registry_version(&mut tx).await?;
            }
            tx.commit().await?;
            Ok(done)
        })
        .await
    }

    pub(super) async fn upsert_line_impl(&self, line: &Line) -> Result<Upserted, StoreError> {
        retrying(|| async {
            let mut tx = self.begin_write().await?;
            let site_known: Option<String> =
                sqlx::query_scalar("SELECT code FROM sites WHERE code = $1")
                    .bind(line.site.as_str())
                    .fetch_optional(&mut *tx)
                    .await?;
            if site_known.is_none() {
                return Err(StoreError::UnknownSite {
                    site: line.site.to_string(),
                });
            }
            let existing: Option<(Option<String>,)> =
                sqlx::query_as("SELECT name FROM lines WHERE site = $1 AND code = $2")
                    .bind(line.site.as_str())
                    .bind(line.code.as_str())
                    .fetch_optional(&mut *tx)
                    .await?;
            let name = line.name.as_ref().map(|n| n.as_str());
            let done = match existing {
                None => {
                    sqlx::query("INSERT INTO lines (site, code, name) VALUES ($1, $2, $3)")
                        .bind(line.site.as_str())
                        .bind(line.code.as_str())
                        .bind(name)
                        .execute(&mut *tx)
                        .await?;
                    Upserted::Created
                }
                Some((n,)) if n.as_deref() == name => Upserted::Unchanged,
                Some(_) => {
                    sqlx::query("UPDATE lines SET name = $1 WHERE site = $2 AND code = $3")
                        .bind(name)
                        .bind(line.site.as_str())
                        .bind(line.code.as_str())
                        .execute(&mut *tx)
                        .await?;
                    Upserted::Updated
                }
            };
            if done != Upserted::Unchanged {
                bump_registry_version(&mut tx).await?;
            }
            tx.commit().await?;
            Ok(done)
        })
        .await
    }

    pub(super) async fn list_sites_impl(&self) -> Result<Vec<Site>, StoreError> {
        let rows: Vec<(String, String, Option<String>)> =
            sqlx::query_as("SELECT code, name, time_zone FROM sites ORDER BY code")
                .fetch_all(&self.pool)
                .await?;
        rows.iter()
            .map(|(c, n, t)| site_from_row(c, n, t.as_deref()))
            .collect()
    }

    pub(super) async fn get_site_impl(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        let mut tx = self.begin_read().await?;
        let row: Option<(String, String, Option<String>)> =
            sqlx::query_as("SELECT code, name, time_zone FROM sites WHERE code = $1")
                .bind(site.as_str())
                .fetch_optional(&mut *tx)
                .await?;
        let lines: Vec<(String, String, Option<String>)> =
            sqlx::query_as("SELECT site, code, name FROM lines WHERE site = $1 ORDER BY code")
                .bind(site.as_str())
                .fetch_all(&mut *tx)
                .await?;
        tx.rollback().await?;
        let Some((c, n, t)) = row else {
            return Err(StoreError::NotFound {
                what: "site",
                key: site.to_string(),
            });
        };
        Ok(SiteWithLines {
            site: site_from_row(&c, &n, t.as_deref())?,
            lines: lines
                .iter()
                .map(|(s, c, n)| line_from_row(s, c, n.as_deref()))
                .collect::<Result<_, _>>()?,
        })
    }

    pub(super) async fn create_key_impl(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        let mut unique: Vec<&str> = sites.iter().map(SiteCode::as_str).collect();
        unique.sort_unstable();
        unique.dedup();
        retrying(|| async {
            let mut tx = self.pool.begin().await?;
            let id: i64 = sqlx::query_scalar(
                "INSERT INTO api_keys (role, label, secret_hash, created_at) \
                 VALUES ($1, $2, $3, $4) RETURNING id",
            )
            .bind(role.as_str())
            .bind(label)
            .bind(secret_hash)
            .bind(format_instant(OffsetDateTime::now_utc())?)
            .fetch_one(&mut *tx)
            .await?;
            for chunk in unique.chunks(500) {
                let mut q: QueryBuilder<Postgres> =
                    QueryBuilder::new("INSERT INTO api_key_sites (key_id, site) ");
                q.push_values(chunk, |mut b, site| {
                    b.push_bind(id).push_bind(*site);
                });
                q.build().execute(&mut *tx).await?;
            }
            tx.commit().await?;
            Ok(id)
        })
        .await
    }

    pub(super) async fn find_key_impl(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        let mut tx = self.begin_read().await?;
        let row: Option<KeyRow> =
            sqlx::query_as(sqlx::AssertSqlSafe(format!("{KEY_COLUMNS} WHERE id = $1")))
                .bind(id)
                .fetch_optional(&mut *tx)
                .await?;
        let sites: Vec<String> =
            sqlx::query_scalar("SELECT site FROM api_key_sites WHERE key_id = $1 ORDER BY site")
                .bind(id)
                .fetch_all(&mut *tx)
                .await?;
        tx.rollback().await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let sites = sites
            .iter()
            .map(|s| parse_code(s))
            .collect::<Result<_, _>>()?;
        key_from_row(row, sites).map(Some)
    }

    pub(super) async fn list_keys_impl(&self) -> Result<Vec<ApiKey>, StoreError> {
        let mut tx = self.begin_read().await?;
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
        let done =
            sqlx::query("UPDATE api_keys SET revoked_at = COALESCE(revoked_at, $1) WHERE id = $2")
                .bind(format_instant(OffsetDateTime::now_utc())?)
                .bind(id)
                .execute(&self.pool)
                .await?;
        if done.rows_affected() == 0 {
            return Err(StoreError::NotFound {
                what: "api key",
                key: id.to_string(),
            });
        }
        Ok(())
    }

    pub(super) async fn create_page_session_impl(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        let created_at = format_instant(session.created_at)?;
        let expires_at = format_instant(session.expires_at)?;
        let keep = i64::try_from(max_per_key.saturating_sub(1)).unwrap_or(i64::MAX);
        retrying(|| async {
            let mut tx = self.pool.begin().await?;
            // Sign-ins of one key are serialised by locking the key's row, so two
            // instances cannot both keep `max_per_key` sessions and add one each.
            sqlx::query("SELECT id FROM api_keys WHERE id = $1 FOR UPDATE")
                .bind(session.key_id)
                .execute(&mut *tx)
                .await?;
            sqlx::query("DELETE FROM page_sessions WHERE expires_at <= $1")
                .bind(&created_at)
                .execute(&mut *tx)
                .await?;
            sqlx::query(
                "DELETE FROM page_sessions WHERE id_hash IN (SELECT id_hash FROM page_sessions \
                 WHERE key_id = $1 ORDER BY created_at DESC, id_hash DESC OFFSET $2)",
            )
            .bind(session.key_id)
            .bind(keep)
            .execute(&mut *tx)
            .await?;
            sqlx::query(
                "INSERT INTO page_sessions (id_hash, key_id, created_at, expires_at) \
                 VALUES ($1, $2, $3, $4)",
            )
            .bind(session.id_hash.as_slice())
            .bind(session.key_id)
            .bind(&created_at)
            .bind(&expires_at)
            .execute(&mut *tx)
            .await?;
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
        let row: Option<(i64, String, String)> = sqlx::query_as(
            "SELECT key_id, created_at, expires_at FROM page_sessions \
             WHERE id_hash = $1 AND expires_at > $2",
        )
        .bind(id_hash.as_slice())
        .bind(format_instant(now)?)
        .fetch_optional(&self.pool)
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
        let done = sqlx::query("DELETE FROM page_sessions WHERE id_hash = $1")
            .bind(id_hash.as_slice())
            .execute(&self.pool)
            .await?;
        Ok(done.rows_affected() > 0)
    }
}
