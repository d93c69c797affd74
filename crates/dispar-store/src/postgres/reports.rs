//! Aggregation for reports on PostgreSQL: the shared reads of [`crate::run`] in one
//! REPEATABLE READ, READ ONLY transaction (the data version, the registry and the sums
//! are one snapshot).

use sqlx::Postgres;
use time::Date;

use super::db::PostgresStore;
use crate::error::StoreError;
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate, LineDays};
use crate::run::Run;

impl PostgresStore {
    pub(super) async fn aggregate_buckets_impl(
        &self,
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::aggregate_buckets(&mut tx, query, buckets).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn line_days_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<LineDays, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::line_days(&mut tx, query).await;
        tx.rollback().await?;
        out
    }

    pub(super) async fn aggregate_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let mut tx = self.begin_read().await?;
        let out = Run::<Postgres>::aggregate(&mut tx, query).await;
        tx.rollback().await?;
        out
    }
}
