//! Aggregation for reports: the shared reads of [`crate::run`] in one read transaction
//! (so the data version, the registry and the sums are one snapshot).

use sqlx::Sqlite;
use time::Date;

use super::db::SqliteStore;
use crate::error::StoreError;
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate, LineDays};
use crate::run::Run;

impl SqliteStore {
    pub(super) async fn aggregate_buckets_impl(
        &self,
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::aggregate_buckets(&mut tx, query, buckets).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn line_days_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<LineDays, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::line_days(&mut tx, query).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn aggregate_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let mut tx = self.reader.begin().await?;
        let out = Run::<Sqlite>::aggregate(&mut tx, query).await;
        tx.rollback().await?;
        out
    }
}
