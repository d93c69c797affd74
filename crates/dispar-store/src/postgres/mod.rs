//! The PostgreSQL implementation of [`Store`], for several instances on one database.
//!
//! [`db`] holds the pool, the write lock and the retries (its docs say which isolation
//! level and locks are used, and why); [`counts`], [`registry`] and [`reports`] add the
//! methods of their subjects to [`PostgresStore`], and this module puts them behind the
//! [`Store`] trait. The SQL they share with SQLite is in [`crate::sql`], the write rules
//! in [`crate::plan`].

mod counts;
mod db;
mod registry;
mod reports;

use async_trait::async_trait;
use dispar_core::code::SiteCode;
use dispar_core::record::{CountRecord, RecordKey};
use dispar_core::site::{Line, Site};
use sqlx::Postgres;
use time::{Date, OffsetDateTime};

pub use self::db::PostgresStore;
use crate::counts::{
    BatchResult, CountFilter, CountPage, Idempotency, StoredAnswer, StoredRecord, WriteOutcome,
};
use crate::decode::to_u64;
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate, LineDays, VersionScope};
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};
use crate::sql::{DATA_VERSION, STATS, Sql};
use crate::store::{Store, StoreStats, stats_from_row};

#[async_trait]
impl Store for PostgresStore {
    async fn ping(&self) -> Result<(), StoreError> {
        sqlx::query("SELECT 1").fetch_one(&self.pool).await?;
        Ok(())
    }

    async fn close(&self) {
        self.pool.close().await;
    }

    async fn upsert_site(&self, site: &Site) -> Result<Upserted, StoreError> {
        self.upsert_site_impl(site).await
    }

    async fn upsert_line(&self, line: &Line) -> Result<Upserted, StoreError> {
        self.upsert_line_impl(line).await
    }

    async fn list_sites(&self) -> Result<Vec<Site>, StoreError> {
        self.list_sites_impl().await
    }

    async fn get_site(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError> {
        self.get_site_impl(site).await
    }

    async fn put_record(
        &self,
        record: &CountRecord,
        api_key_id: Option<KeyId>,
    ) -> Result<WriteOutcome, StoreError> {
        let result = self
            .put_batch_impl(std::slice::from_ref(record), api_key_id, None)
            .await?;
        match result {
            BatchResult::Written { outcome, .. } => outcome
                .outcomes
                .first()
                .copied()
                .ok_or_else(|| StoreError::internal("a one-record write gave no outcome")),
            BatchResult::Replayed(_) => Err(StoreError::internal(
                "a write without idempotency key was replayed",
            )),
        }
    }

    async fn put_batch(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError> {
        self.put_batch_impl(records, api_key_id, idempotency.as_ref())
            .await
    }

    async fn find_idempotent(
        &self,
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
    ) -> Result<Option<StoredAnswer>, StoreError> {
        self.find_idempotent_impl(api_key_id, key, body_sha256)
            .await
    }

    async fn purge_idempotency(&self, before: OffsetDateTime) -> Result<u64, StoreError> {
        self.purge_idempotency_impl(before).await
    }

    async fn get_record(&self, key: &RecordKey) -> Result<Option<StoredRecord>, StoreError> {
        self.get_record_impl(key).await
    }

    async fn list_counts(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError> {
        self.list_counts_impl(filter, cursor, limit).await
    }

    async fn record_history(&self, key: &RecordKey) -> Result<Vec<StoredRecord>, StoreError> {
        self.record_history_impl(key).await
    }

    async fn create_key(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError> {
        self.create_key_impl(role, sites, label, secret_hash).await
    }

    async fn find_key(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError> {
        self.find_key_impl(id).await
    }

    async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError> {
        self.list_keys_impl().await
    }

    async fn revoke_key(&self, id: KeyId) -> Result<(), StoreError> {
        self.revoke_key_impl(id).await
    }

    async fn create_page_session(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError> {
        self.create_page_session_impl(session, max_per_key).await
    }

    async fn find_page_session(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError> {
        self.find_page_session_impl(id_hash, now).await
    }

    async fn delete_page_session(&self, id_hash: &[u8; 32]) -> Result<bool, StoreError> {
        self.delete_page_session_impl(id_hash).await
    }

    async fn aggregate(&self, query: &AggregateQuery) -> Result<Aggregate, StoreError> {
        self.aggregate_impl(query).await
    }

    async fn aggregate_buckets(
        &self,
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        self.aggregate_buckets_impl(query, buckets).await
    }

    async fn line_days(&self, query: &AggregateQuery) -> Result<LineDays, StoreError> {
        self.line_days_impl(query).await
    }

    async fn data_version(&self) -> Result<u64, StoreError> {
        let v: i64 = sqlx::query_scalar(DATA_VERSION)
            .fetch_one(&self.pool)
            .await?;
        to_u64(v, "data version")
    }

    async fn scoped_version(&self, scope: &VersionScope) -> Result<u64, StoreError> {
        let (days, registry): (i64, i64) = Sql::<Postgres>::scoped_version(scope)
            .build_query_as()
            .fetch_one(&self.pool)
            .await?;
        to_u64(days.max(registry), "scoped version")
    }

    async fn stats(&self) -> Result<StoreStats, StoreError> {
        let row = sqlx::query_as(STATS).fetch_one(&self.pool).await?;
        stats_from_row(row)
    }
}
