//! PostgreSQL specifics: several stores (instances) on one database, the write lock,
//! its timeout, retries after a deadlock, migrations run once. Skipped (passing) when
//! `DISPAR_TEST_POSTGRES` is not set; `.ci/run` sets it.

use std::sync::Arc;
use std::time::Duration;

use dispar_store::{OpenOptions, PostgresStore, Store, StoreError, WriteStatus};
use sqlx::Connection;

use crate::helpers::{D1, new_postgres_database, postgres_server, rec, registry, with_revision};

async fn two_instances() -> Option<(String, Arc<dyn Store>, Arc<dyn Store>)> {
    let server = postgres_server()?;
    let url = new_postgres_database(&server).await;
    // Opened together: the migrations must run once, under sqlx's advisory lock.
    let options = OpenOptions::new(url.clone());
    let (a, b) = tokio::join!(PostgresStore::open(&options), PostgresStore::open(&options));
    let a: Arc<dyn Store> = Arc::new(a.expect("instance a"));
    let b: Arc<dyn Store> = Arc::new(b.expect("instance b"));
    Some((url, a, b))
}

#[tokio::test]
async fn two_instances_writing_the_same_keys_lose_nothing_and_keep_the_newest_revision() {
    let Some((url, a, b)) = two_instances().await else {
        return;
    };
    registry(a.as_ref(), 2, 2).await;
    // 40 rounds: each instance writes revision r of the same 4 keys in one batch, the
    // two in parallel, with the revisions interleaved so either may be the newer.
    let keys = [("S1", "L1"), ("S1", "L2"), ("S2", "L1"), ("S2", "L2")];
    let mut acknowledged = 0;
    for round in 0..40u64 {
        let batch = |rev: u64| -> Vec<_> {
            keys.iter()
                .map(|(s, l)| with_revision(rec(s, l, D1, 100 + rev, rev % 7), rev))
                .collect()
        };
        let (ra, rb) = (2 * round + 1, 2 * round + 2);
        let (ba, bb) = (batch(ra), batch(rb));
        let (x, y) = tokio::join!(a.put_batch(&ba, None, None), b.put_batch(&bb, None, None));
        for result in [x, y] {
            match result {
                Ok(_) => acknowledged += 1,
                // The older revision may arrive second: refused as a conflict, whole.
                Err(StoreError::Rejected(errors)) => assert_eq!(errors.len(), keys.len()),
                Err(e) => panic!("unexpected error {e}"),
            }
        }
    }
    assert!(acknowledged >= 40, "at least one write per round is taken");
    for (s, l) in keys {
        let key = crate::helpers::key(s, l, None, D1);
        let current = a.get_record(&key).await.expect("read").expect("present");
        assert_eq!(
            current.record.revision,
            Some(80),
            "{s}/{l}: the newest revision wins"
        );
        let history = b.record_history(&key).await.expect("history");
        let revisions: Vec<_> = history.iter().map(|h| h.record.revision).collect();
        let mut sorted = revisions.clone();
        sorted.sort();
        sorted.dedup();
        assert_eq!(
            revisions, sorted,
            "{s}/{l}: history strictly increasing, no duplicates"
        );
        let ids: Vec<_> = history.iter().map(|h| h.revision_id).collect();
        assert!(ids.windows(2).all(|w| w[0] < w[1]));
        let times: Vec<_> = history.iter().map(|h| h.recorded_at).collect();
        assert!(
            times.windows(2).all(|w| w[0] < w[1]),
            "recorded_at grows with the id"
        );
    }
    let stats = a.stats().await.expect("stats");
    assert_eq!(stats.records, 4);
    let mut conn = sqlx::PgConnection::connect(&url).await.expect("connect");
    let migrations: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM _sqlx_migrations")
        .fetch_one(&mut conn)
        .await
        .expect("count");
    assert_eq!(migrations, 1, "the migration ran once");
}

#[tokio::test]
async fn a_write_waits_for_the_write_lock_at_most_the_write_wait_then_is_busy() {
    let Some(server) = postgres_server() else {
        return;
    };
    let url = new_postgres_database(&server).await;
    let mut options = OpenOptions::new(url.clone());
    options.write_wait = Duration::from_millis(300);
    let store = PostgresStore::open(&options).await.expect("open");
    registry(&store, 1, 1).await;
    // Another session holds a row lock every write needs (the data version's row).
    let mut other = sqlx::PgConnection::connect(&url).await.expect("connect");
    let mut held = other.begin().await.expect("begin");
    sqlx::query("SELECT * FROM store_state FOR UPDATE")
        .execute(&mut *held)
        .await
        .expect("lock");
    let started = std::time::Instant::now();
    let err = store
        .put_record(&rec("S1", "L1", D1, 10, 1), None)
        .await
        .expect_err("busy");
    assert!(matches!(err, StoreError::Busy), "{err:?}");
    assert!(err.is_retryable());
    assert!(started.elapsed() < Duration::from_secs(5));
    held.rollback().await.expect("release");
    let out = store
        .put_record(&rec("S1", "L1", D1, 10, 1), None)
        .await
        .expect("written once the lock is free");
    assert_eq!(out.status, WriteStatus::Created);
    assert_eq!(store.stats().await.expect("stats").revisions, 1);
}

#[tokio::test]
async fn a_write_chosen_as_a_deadlock_victim_is_retried_and_succeeds() {
    let Some(server) = postgres_server() else {
        return;
    };
    let url = new_postgres_database(&server).await;
    let store = Arc::new(
        PostgresStore::open(&OpenOptions::new(url.clone()))
            .await
            .expect("open"),
    );
    registry(store.as_ref(), 1, 1).await;
    // A foreign session locks the data version's row, then (while the store's write
    // holds the write lock and waits for that row) asks for the write lock: a cycle.
    // The store's write has waited longest, so its session runs the deadlock check
    // first (after deadlock_timeout, 1 s by default) and is the victim; the foreign
    // session then gets the lock, and the store's retry waits for it and succeeds.
    let mut other = sqlx::PgConnection::connect(&url).await.expect("connect");
    let mut held = other.begin().await.expect("begin");
    sqlx::query("SELECT * FROM store_state FOR UPDATE")
        .execute(&mut *held)
        .await
        .expect("lock");
    let writer = {
        let store = store.clone();
        tokio::spawn(async move { store.put_record(&rec("S1", "L1", D1, 10, 1), None).await })
    };
    tokio::time::sleep(Duration::from_millis(300)).await;
    let lock_id: i64 = 0x6469_7370_6172_2077;
    let foreign = sqlx::query("SELECT pg_advisory_xact_lock($1)")
        .bind(lock_id)
        .execute(&mut *held)
        .await;
    assert!(
        foreign.is_ok(),
        "the store's write was the deadlock victim, so the foreign session got the lock: {foreign:?}"
    );
    held.rollback().await.expect("release");
    let out = writer
        .await
        .expect("join")
        .expect("the retried write succeeds");
    assert_eq!(out.status, WriteStatus::Created);
    assert_eq!(store.stats().await.expect("stats").revisions, 1);
}
