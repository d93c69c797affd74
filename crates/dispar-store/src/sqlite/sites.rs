//! Sites and lines.

use dispar_core::code::SiteCode;
use dispar_core::site::{Line, Site};

use super::db::{SqliteStore, bump_registry_version};
use crate::decode::{line_from_row, site_from_row};
use crate::error::StoreError;
use crate::sites::{SiteWithLines, Upserted};

impl SqliteStore {
    pub(super) async fn upsert_site_impl(&self, site: &Site) -> Result<Upserted, StoreError> {
        let mut tx = self.begin_write().await?;
        let existing: Option<(String, Option<String>)> =
            sqlx::query_as("SELECT name, time_zone FROM sites WHERE code = ?")
                .bind(site.code.as_str())
                .fetch_optional(&mut *tx)
                .await?;
        let name = site.name.as_str();
        let tz = site.time_zone.as_ref().map(|t| t.as_str());
        let done = match existing {
            None => {
                sqlx::query("INSERT INTO sites (code, name, time_zone) VALUES (?, ?, ?)")
                    .bind(site.code.as_str())
                    .bind(name)
                    .bind(tz)
                    .execute(&mut *tx)
                    .await?;
                Upserted::Created
            }
            Some((n, t)) if n == name && t.as_deref() == tz => Upserted::Unchanged,
            Some(_) => {
                sqlx::query("UPDATE sites SET name = ?, time_zone = ? WHERE code = ?")
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
    }

    pub(super) async fn upsert_line_impl(&self, line: &Line) -> Result<Upserted, StoreError> {
        let mut tx = self.begin_write().await?;
        let site_known: Option<i64> = sqlx::query_scalar("SELECT 1 FROM sites WHERE code = ?")
            .bind(line.site.as_str())
            .fetch_optional(&mut *tx)
            .await?;
        if site_known.is_none() {
            return Err(StoreError::UnknownSite {
                site: line.site.to_string(),
            });
        }
        let existing: Option<(Option<String>,)> =
            sqlx::query_as("SELECT name FROM lines WHERE site = ? AND code = ?")
                .bind(line.site.as_str())
                .bind(line.code.as_str())
                .fetch_optional(&mut *tx)
                .await?;
        let name = line.name.as_ref().map(|n| n.as_str());
        let done = match existing {
            None => {
                sqlx::query("INSERT INTO lines (site, code, name) VALUES (?, ?, ?)")
                    .bind(line.site.as_str())
                    .bind(line.code.as_str())
                    .bind(name)
                    .execute(&mut *tx)
                    .await?;
                Upserted::Created
            }
            Some((n,)) if n.as_deref() == name => Upserted::Unchanged,
            Some(_) => {
                sqlx::query("UPDATE lines SET name = ? WHERE site = ? AND code = ?")
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
    }

    pub(super) async fn list_sites_impl(&self) -> Result<Vec<Site>, StoreError> {
        let rows: Vec<(String, String, Option<String>)> =
            sqlx::query_as("SELECT code, name, time_zone FROM sites ORDER BY code")
                .fetch_all(&self.reader)
                .await?;
        rows.iter()
            .map(|(c, n, t)| site_from_row(c, n, t.as_deref()))
            .collect()
    }

    pub(super) async fn get_site_impl(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        let mut tx = self.reader.begin().await?;
        let row: Option<(String, String, Option<String>)> =
            sqlx::query_as("SELECT code, name, time_zone FROM sites WHERE code = ?")
                .bind(site.as_str())
                .fetch_optional(&mut *tx)
                .await?;
        let Some((c, n, t)) = row else {
            return Err(StoreError::NotFound {
                what: "site",
                key: site.to_string(),
            });
        };
        let lines: Vec<(String, String, Option<String>)> =
            sqlx::query_as("SELECT site, code, name FROM lines WHERE site = ? ORDER BY code")
                .bind(site.as_str())
                .fetch_all(&mut *tx)
                .await?;
        tx.rollback().await?;
        Ok(SiteWithLines {
            site: site_from_row(&c, &n, t.as_deref())?,
            lines: lines
                .iter()
                .map(|(s, c, n)| line_from_row(s, c, n.as_deref()))
                .collect::<Result<_, _>>()?,
        })
    }
}
