//! Aggregation for reports on PostgreSQL: the shared statements of [`crate::sql`] in one
//! REPEATABLE READ, READ ONLY transaction (the data version, the registry and the sums
//! are one snapshot).

use sqlx::Postgres;
use time::Date;

use super::db::{PostgresStore, WriteTx};
use crate::aggregate::{GroupKey, TotalsRow, finish, finish_buckets, named_site};
use crate::error::StoreError;
use crate::reports::{Aggregate, AggregateQuery, BucketedAggregate};
use crate::sql::{DATA_VERSION, Sql};

/// The registered groups at the query's level; refuses an unknown site.
async fn registered_groups(
    tx: &mut WriteTx,
    query: &AggregateQuery,
) -> Result<Vec<GroupKey>, StoreError> {
    let (check, mut registry) = Sql::<Postgres>::registered_groups(query);
    if let Some(mut check) = check {
        let found: Option<String> = check.build_query_scalar().fetch_optional(&mut **tx).await?;
        if found.is_none() {
            return Err(StoreError::UnknownSite {
                site: named_site(query),
            });
        }
    }
    Ok(registry.build_query_as().fetch_all(&mut **tx).await?)
}

impl PostgresStore {
    pub(super) async fn aggregate_buckets_impl(
        &self,
        query: &AggregateQuery,
        buckets: &[(Date, Date)],
    ) -> Result<BucketedAggregate, StoreError> {
        let mut tx = self.begin_read().await?;
        let version: i64 = sqlx::query_scalar(DATA_VERSION).fetch_one(&mut *tx).await?;
        let registered = registered_groups(&mut tx, query).await?;
        let rows: Vec<(i64, String, Option<String>, i64, i64)> =
            match Sql::<Postgres>::bucket_sums(query, buckets)? {
                Some(mut q) => q.build_query_as().fetch_all(&mut *tx).await?,
                None => Vec::new(),
            };
        tx.rollback().await?;
        finish_buckets(version, &registered, buckets.len(), rows)
    }

    pub(super) async fn aggregate_impl(
        &self,
        query: &AggregateQuery,
    ) -> Result<Aggregate, StoreError> {
        let mut tx = self.begin_read().await?;
        let version: i64 = sqlx::query_scalar(DATA_VERSION).fetch_one(&mut *tx).await?;
        let registered = registered_groups(&mut tx, query).await?;
        let Some((mut totals, mut defects)) = Sql::<Postgres>::sums(query)? else {
            tx.rollback().await?;
            return finish(version, registered, Vec::new(), Vec::new());
        };
        let totals: Vec<TotalsRow> = totals.build_query_as().fetch_all(&mut *tx).await?;
        let defects = defects.build_query_as().fetch_all(&mut *tx).await?;
        tx.rollback().await?;
        finish(version, registered, totals, defects)
    }
}
