//! The store trait: what the server needs from a database, independent of the backend.

use async_trait::async_trait;
use dispar_core::code::SiteCode;
use dispar_core::record::{CountRecord, RecordKey};
use dispar_core::site::{Line, Site};
use time::{Date, OffsetDateTime};

use crate::counts::{
    BatchResult, CountFilter, CountPage, Idempotency, StoredAnswer, StoredRecord, WriteOutcome,
};
use crate::error::StoreError;
use crate::keys::{ApiKey, KeyId, KeyRole};
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate, LineDays, VersionScope};
use crate::sessions::{NewPageSession, PageSession};
use crate::sites::{SiteWithLines, Upserted};

/// Row counts, for metrics and tests.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct StoreStats {
    /// Registered sites.
    pub sites: u64,
    /// Registered lines.
    pub lines: u64,
    /// Rows in the append-only history.
    pub revisions: u64,
    /// Natural keys with a current record.
    pub records: u64,
    /// API keys (including revoked ones).
    pub keys: u64,
}

/// Persistence for dispar. Used as `Arc<dyn Store>`; every implementation passes the
/// same story test (`tests/story.rs`).
///
/// Every write is one transaction: it is committed before the method returns `Ok`, and
/// on any error nothing of it is kept.
#[async_trait]
pub trait Store: Send + Sync + std::fmt::Debug {
    /// Checks that the database answers (for `/readyz`).
    async fn ping(&self) -> Result<(), StoreError>;

    /// Closes the connections, waiting for those in use to be returned.
    async fn close(&self);

    /// Creates or updates a site.
    async fn upsert_site(&self, site: &Site) -> Result<Upserted, StoreError>;

    /// Creates or updates a line; its site must be registered
    /// ([`StoreError::UnknownSite`] otherwise).
    async fn upsert_line(&self, line: &Line) -> Result<Upserted, StoreError>;

    /// All sites, ordered by code.
    async fn list_sites(&self) -> Result<Vec<Site>, StoreError>;

    /// One site with its lines ([`StoreError::NotFound`] if not registered).
    async fn get_site(&self, site: &SiteCode) -> Result<SiteWithLines, StoreError>;

    /// Writes one record (see the crate docs for the revision rules). A refusal is
    /// [`StoreError::Rejected`] with one [`crate::RecordError`] of index 0.
    async fn put_record(
        &self,
        record: &CountRecord,
        api_key_id: Option<KeyId>,
    ) -> Result<WriteOutcome, StoreError>;

    /// Writes a batch all-or-nothing in one transaction. Refusals are
    /// [`StoreError::Rejected`] listing every refused record by index. With an
    /// idempotency key, a stored answer for the same key and body is replayed, the same
    /// key with another body is [`StoreError::IdempotencyMismatch`], and otherwise the
    /// rendered answer is stored in the same transaction as the records.
    async fn put_batch(
        &self,
        records: &[CountRecord],
        api_key_id: Option<KeyId>,
        idempotency: Option<Idempotency<'_>>,
    ) -> Result<BatchResult, StoreError>;

    /// Looks up a stored batch answer without writing: `Ok(None)` if the key is unused,
    /// the answer if it was used with this body, [`StoreError::IdempotencyMismatch`] if
    /// with another. `put_batch` checks again inside its transaction.
    async fn find_idempotent(
        &self,
        api_key_id: Option<KeyId>,
        key: &str,
        body_sha256: &[u8; 32],
    ) -> Result<Option<StoredAnswer>, StoreError>;

    /// Deletes stored batch answers created before `before`; returns how many.
    async fn purge_idempotency(&self, before: OffsetDateTime) -> Result<u64, StoreError>;

    /// The current record at a natural key, if any.
    async fn get_record(&self, key: &RecordKey) -> Result<Option<StoredRecord>, StoreError>;

    /// A page of current records matching `filter`, after `cursor` (from a previous
    /// page). `limit` is clamped to 1 ..= [`crate::MAX_PAGE`].
    async fn list_counts(
        &self,
        filter: &CountFilter,
        cursor: Option<&str>,
        limit: u32,
    ) -> Result<CountPage, StoreError>;

    /// Every revision of a natural key, oldest first (empty if never written).
    async fn record_history(&self, key: &RecordKey) -> Result<Vec<StoredRecord>, StoreError>;

    /// Stores a new API key and returns its id. `sites` matter for ingest keys.
    async fn create_key(
        &self,
        role: KeyRole,
        sites: &[SiteCode],
        label: Option<&str>,
        secret_hash: &[u8],
    ) -> Result<KeyId, StoreError>;

    /// One key by id (revoked keys included; check [`ApiKey::is_revoked`]).
    async fn find_key(&self, id: KeyId) -> Result<Option<ApiKey>, StoreError>;

    /// All keys, ordered by id.
    async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError>;

    /// Revokes a key ([`StoreError::NotFound`] if there is none; revoking again keeps
    /// the first revocation time).
    async fn revoke_key(&self, id: KeyId) -> Result<(), StoreError>;

    /// Starts a page session, in one transaction: sessions that expired by
    /// `session.created_at` are purged, the oldest sessions of the same key are ended so
    /// that at most `max_per_key` stay live with the new one, and the new one is stored.
    async fn create_page_session(
        &self,
        session: &NewPageSession,
        max_per_key: usize,
    ) -> Result<(), StoreError>;

    /// The session with this id hash, if it is still live at `now`.
    async fn find_page_session(
        &self,
        id_hash: &[u8; 32],
        now: OffsetDateTime,
    ) -> Result<Option<PageSession>, StoreError>;

    /// Ends a session (signing out); true when there was one.
    async fn delete_page_session(&self, id_hash: &[u8; 32]) -> Result<bool, StoreError>;

    /// Sums counts per group over a date range, from the current data or as of an
    /// instant.
    async fn aggregate(&self, query: &AggregateQuery) -> Result<Aggregate, StoreError>;

    /// Sums inspected and defective units per group and per bucket (inclusive date
    /// ranges) in one read: the earlier periods of a report's baselines, or every
    /// period of a series with its baseline window. Only days within `query.from ..=
    /// query.to` count; a day in two buckets counts in both.
    async fn aggregate_buckets(
        &self,
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<BucketedAggregate, StoreError>;

    /// Each line's sums per day from `query.from` to `query.to` (its level is ignored:
    /// always per line; site and product filters and `as_of` apply), only the line-days
    /// with a record: what the gaps in the data are judged from. One read, grouped in
    /// the table's key order, without the registry: cheaper than one-day buckets.
    async fn line_days(&self, query: &AggregateQuery) -> Result<LineDays, StoreError>;

    /// The data version: grows with every write that can change a report.
    async fn data_version(&self) -> Result<u64, StoreError>;

    /// The data version of what a report over `scope` reads: the largest data version
    /// of any write that changed a count record of a site in scope on a day in
    /// `scope.from ..= scope.to`, or that changed the registry (a site or line created or
    /// changed); 0 when there is none. At most [`Store::data_version`].
    async fn scoped_version(&self, scope: &VersionScope) -> Result<u64, StoreError>;

    /// Row counts. Counting takes time proportional to the rows (fine for tests and
    /// occasional metrics, not for every request).
    async fn stats(&self) -> Result<StoreStats, StoreError>;
}

/// [`StoreStats`] from the row of the shared statistics query.
pub(crate) fn stats_from_row(row: (i64, i64, i64, i64, i64)) -> Result<StoreStats, StoreError> {
    use crate::decode::to_u64;
    Ok(StoreStats {
        sites: to_u64(row.0, "count")?,
        lines: to_u64(row.1, "count")?,
        revisions: to_u64(row.2, "count")?,
        records: to_u64(row.3, "count")?,
        keys: to_u64(row.4, "count")?,
    })
}
