//! SQLite specifics: pragmas, plans, busy mapping, persistence, URL handling.

use std::time::Duration;

use dispar_store::{OpenOptions, SqliteStore, Store, StoreError};
use sqlx::Connection;

use crate::helpers::{D1, fresh_sqlite, rec, registry};

#[tokio::test]
async fn connections_use_wal_full_sync_and_foreign_keys() {
    let db = fresh_sqlite().await;
    let pool = db.sqlite.read_pool();
    let mode: String = sqlx::query_scalar("PRAGMA journal_mode")
        .fetch_one(pool)
        .await
        .expect("journal");
    let sync: i64 = sqlx::query_scalar("PRAGMA synchronous")
        .fetch_one(pool)
        .await
        .expect("sync");
    let fk: i64 = sqlx::query_scalar("PRAGMA foreign_keys")
        .fetch_one(pool)
        .await
        .expect("fk");
    let ro: i64 = sqlx::query_scalar("PRAGMA query_only")
        .fetch_one(pool)
        .await
        .expect("query_only");
    assert_eq!((mode.as_str(), sync, fk, ro), ("wal", 2, 1, 1));
}

async fn plan(db: &crate::helpers::SqliteDb, sql: &str) -> String {
    let rows: Vec<(i64, i64, i64, String)> =
        sqlx::query_as(sqlx::AssertSqlSafe(format!("EXPLAIN QUERY PLAN {sql}")))
            .fetch_all(db.sqlite.read_pool())
            .await
            .expect("plan");
    rows.into_iter()
        .map(|r| r.3)
        .collect::<Vec<_>>()
        .join(" | ")
}

#[tokio::test]
async fn report_sums_history_and_pages_read_index_ranges() {
    let db = fresh_sqlite().await;
    let by_site = plan(
        &db,
        "SELECT site, NULL, SUM(inspected), SUM(defective) FROM counts_current \
         WHERE date BETWEEN '2026-03-01' AND '2026-03-31' GROUP BY site",
    )
    .await;
    assert!(
        by_site.contains("USING PRIMARY KEY (date>? AND date<?)"),
        "{by_site}"
    );
    let defects = plan(
        &db,
        "SELECT site, line, category, SUM(count) FROM current_defects \
         WHERE date BETWEEN '2026-03-01' AND '2026-03-31' GROUP BY site, line, category",
    )
    .await;
    assert!(
        defects.contains("USING PRIMARY KEY (date>? AND date<?)"),
        "{defects}"
    );
    let history = plan(
        &db,
        "SELECT id FROM count_revisions WHERE date = '2026-03-01' AND site = 'S1' AND line = 'L1' AND product = '' ORDER BY id",
    )
    .await;
    assert!(
        history
            .contains("count_revisions_by_date_key (date=? AND site=? AND line=? AND product=?)"),
        "{history}"
    );
    let as_of = plan(
        &db,
        "SELECT site, line, MAX(id) FROM count_revisions WHERE date BETWEEN '2026-03-01' AND '2026-03-31' \
         AND recorded_at <= 'x' GROUP BY date, site, line, product",
    )
    .await;
    assert!(
        as_of.contains("count_revisions_by_date_key (date>? AND date<?)"),
        "{as_of}"
    );
    assert!(
        !as_of.contains("TEMP B-TREE"),
        "grouping follows the index: {as_of}"
    );
    let page = plan(
        &db,
        "SELECT c.site FROM counts_current c JOIN count_revisions r ON r.id = c.revision_id \
         WHERE c.site = 'S1' AND (c.date, c.site, c.line, c.product) > ('2026-03-01', 'S1', 'L1', '') \
         ORDER BY c.date, c.site, c.line, c.product LIMIT 101",
    )
    .await;
    assert!(
        page.contains("SEARCH c USING PRIMARY KEY ((date,site,line,product)>(?,?,?,?))"),
        "{page}"
    );
    // With a site filter SQLite may sort within one (date, site) group ("LAST 2 TERMS"),
    // never the whole range.
    assert!(
        !page.contains("TEMP B-TREE FOR ORDER BY"),
        "pages follow the key: {page}"
    );
}

#[tokio::test]
async fn a_write_blocked_by_another_writer_is_busy_and_retryable() {
    let dir = tempfile::tempdir().expect("dir");
    let path = dir.path().join("busy.db");
    let mut options = OpenOptions::new(path.to_string_lossy());
    options.busy_timeout = Duration::from_millis(100);
    let store = SqliteStore::open(&options).await.expect("open");

    let mut other = sqlx::sqlite::SqliteConnection::connect(&format!("sqlite:{}", path.display()))
        .await
        .expect("second connection");
    sqlx::raw_sql("BEGIN IMMEDIATE")
        .execute(&mut other)
        .await
        .expect("lock");
    let err = store
        .upsert_site(&crate::helpers::site("S1", "x"))
        .await
        .expect_err("must be busy");
    assert!(matches!(err, StoreError::Busy), "{err:?}");
    assert!(err.is_retryable());
    sqlx::raw_sql("ROLLBACK")
        .execute(&mut other)
        .await
        .expect("unlock");
    store
        .upsert_site(&crate::helpers::site("S1", "x"))
        .await
        .expect("free again");
}

#[tokio::test]
async fn data_survive_closing_and_reopening_and_migrations_run_once() {
    let db = fresh_sqlite().await;
    registry(db.store.as_ref(), 1, 1).await;
    db.store
        .put_record(&rec("S1", "L1", D1, 10, 1), None)
        .await
        .expect("write");
    db.store.close().await;
    let url = format!("sqlite:{}", db.path.display());
    let again = dispar_store::open(&url).await.expect("reopen");
    let stats = again.stats().await.expect("stats");
    assert_eq!((stats.sites, stats.lines, stats.records), (1, 1, 1));
    let migrations: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM _sqlx_migrations")
        .fetch_one(&sqlx::SqlitePool::connect(&url).await.expect("pool"))
        .await
        .expect("count");
    // 0001_initial, 0002_page_sessions and 0003_day_versions, each applied once.
    assert_eq!(migrations, 3);
}

#[tokio::test]
async fn memory_and_unknown_urls_are_refused_with_a_clear_message() {
    for url in ["sqlite::memory:", "mysql://x/y"] {
        match dispar_store::open(url).await {
            Err(StoreError::Unsupported(msg)) => assert!(!msg.is_empty()),
            other => panic!("{url}: expected Unsupported, got {other:?}"),
        }
    }
}

#[tokio::test]
async fn the_scoped_version_migration_covers_data_written_before_it() {
    use dispar_store::VersionScope;
    use time::macros::date;
    // A database at migration 0002 (before scoped versions) with data in it.
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("old.db");
    let old = dir.path().join("migrations");
    std::fs::create_dir(&old).expect("dir");
    let here = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("migrations/sqlite");
    for name in ["0001_initial.sql", "0002_page_sessions.sql"] {
        std::fs::copy(here.join(name), old.join(name)).expect("copy migration");
    }
    let url = format!("sqlite:{}", path.display());
    let options = sqlx::sqlite::SqliteConnectOptions::new()
        .filename(&path)
        .create_if_missing(true);
    let mut conn = sqlx::SqliteConnection::connect_with(&options)
        .await
        .expect("connect");
    sqlx::migrate::Migrator::new(old.as_path())
        .await
        .expect("old migrations")
        .run(&mut conn)
        .await
        .expect("migrate to 0002");
    for sql in [
        "INSERT INTO sites (code, name) VALUES ('S1', 'Site 1'), ('S2', 'Site 2')",
        "INSERT INTO lines (site, code) VALUES ('S1', 'L1'), ('S2', 'L1')",
        "INSERT INTO count_revisions (id, site, line, date, inspected, defective, recorded_at) \
         VALUES (1, 'S1', 'L1', '2026-03-02', 10, 1, '2026-03-02T08:00:00.000000Z')",
        "INSERT INTO counts_current VALUES ('2026-03-02', 'S1', 'L1', '', 1, 10, 1, NULL)",
        "UPDATE store_state SET data_version = 5",
    ] {
        sqlx::query(sql).execute(&mut conn).await.expect(sql);
    }
    conn.close().await.expect("close");

    // Opening runs 0003: the existing day and the registry take the current version.
    let store = dispar_store::open(&url).await.expect("open and migrate");
    let scope = |site: Option<&str>, from, to| VersionScope {
        from,
        to,
        site: site.map(crate::helpers::site_code),
    };
    let march = |site| scope(site, date!(2026 - 03 - 01), date!(2026 - 03 - 31));
    assert_eq!(store.scoped_version(&march(None)).await.expect("v"), 5);
    assert_eq!(
        store.scoped_version(&march(Some("S1"))).await.expect("v"),
        5
    );
    // S2 has no day of its own, but the registry was at 5 too.
    assert_eq!(
        store.scoped_version(&march(Some("S2"))).await.expect("v"),
        5
    );
    // A new write to S2 moves S2's and the all-site scope, not S1's.
    store
        .put_record(&rec("S2", "L1", D1, 20, 2), None)
        .await
        .expect("write");
    assert_eq!(store.scoped_version(&march(None)).await.expect("v"), 6);
    assert_eq!(
        store.scoped_version(&march(Some("S2"))).await.expect("v"),
        6
    );
    assert_eq!(
        store.scoped_version(&march(Some("S1"))).await.expect("v"),
        5
    );
}
