//! Fresh databases and small builders of domain values.

use std::collections::BTreeMap;
use std::sync::Arc;

use dispar_core::code::{CategoryCode, LineCode, ProductCode, SiteCode};
use dispar_core::record::{CountRecord, Counts, RecordKey};
use dispar_core::site::{Line, LineName, Site, SiteName};
use dispar_store::{OpenOptions, PostgresStore, SqliteStore, Store};
use sqlx::Connection;
use tempfile::TempDir;
use time::Date;
use time::macros::date;

/// A fresh migrated database: an SQLite file in a temp dir (removed on drop), or, with
/// `DISPAR_TEST_POSTGRES` set to a server URL, a new database on that server (left for
/// the throwaway server to discard).
pub struct TestDb {
    pub store: Arc<dyn Store>,
    backing: Backing,
}

enum Backing {
    Sqlite(SqliteDb),
    Postgres(PostgresStore),
}

/// A fresh SQLite store with its file.
pub struct SqliteDb {
    pub store: Arc<dyn Store>,
    pub sqlite: SqliteStore,
    pub path: std::path::PathBuf,
    _dir: TempDir,
}

/// The PostgreSQL server of the store tests, if any.
pub fn postgres_server() -> Option<String> {
    std::env::var("DISPAR_TEST_POSTGRES")
        .ok()
        .filter(|u| !u.trim().is_empty())
}

/// A fresh store on the backend the environment chooses (see [`TestDb`]).
pub async fn fresh() -> TestDb {
    match postgres_server() {
        Some(server) => {
            let url = new_postgres_database(&server).await;
            let store = PostgresStore::open(&OpenOptions::new(url))
                .await
                .expect("open a fresh PostgreSQL store");
            TestDb {
                store: Arc::new(store.clone()),
                backing: Backing::Postgres(store),
            }
        }
        None => {
            let db = fresh_sqlite().await;
            TestDb {
                store: db.store.clone(),
                backing: Backing::Sqlite(db),
            }
        }
    }
}

/// A fresh SQLite store, whatever the environment (for tests of the file itself).
pub async fn fresh_sqlite() -> SqliteDb {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("dispar.db");
    let sqlite = SqliteStore::open(&OpenOptions::new(path.to_string_lossy()))
        .await
        .expect("open a fresh store");
    SqliteDb {
        store: Arc::new(sqlite.clone()),
        sqlite,
        path,
        _dir: dir,
    }
}

/// Creates a new empty database on `server` and returns its URL.
pub async fn new_postgres_database(server: &str) -> String {
    static NEXT: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
    let n = NEXT.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
    let nanos = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.subsec_nanos());
    let name = format!("dispar_store_{}_{n}_{nanos}", std::process::id());
    let mut admin = sqlx::PgConnection::connect(server)
        .await
        .expect("connect to DISPAR_TEST_POSTGRES");
    sqlx::query(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
        .execute(&mut admin)
        .await
        .expect("create a test database");
    admin.close().await.ok();
    let (head, query) = server
        .split_once('?')
        .map_or((server, None), |(h, q)| (h, Some(q)));
    let base = head.rsplit_once('/').map_or(head, |(b, _)| b);
    match query {
        Some(q) => format!("{base}/{name}?{q}"),
        None => format!("{base}/{name}"),
    }
}

impl TestDb {
    /// One integer from `sql`, read on whichever backend the store is.
    pub async fn scalar(&self, sql: &'static str) -> i64 {
        match &self.backing {
            Backing::Sqlite(db) => sqlx::query_scalar(sql)
                .fetch_one(db.sqlite.read_pool())
                .await
                .expect("query"),
            Backing::Postgres(pg) => sqlx::query_scalar(sql)
                .fetch_one(pg.pool())
                .await
                .expect("query"),
        }
    }
}

pub fn site_code(s: &str) -> SiteCode {
    SiteCode::parse(s).expect("site code")
}

pub fn line_code(s: &str) -> LineCode {
    LineCode::parse(s).expect("line code")
}

pub fn category(s: &str) -> CategoryCode {
    CategoryCode::parse(s).expect("category code")
}

pub fn site(code: &str, name: &str) -> Site {
    Site {
        code: site_code(code),
        name: SiteName::parse_field(name, "name").expect("site name"),
        time_zone: None,
    }
}

pub fn line(site: &str, code: &str) -> Line {
    Line {
        site: site_code(site),
        code: line_code(code),
        name: Some(LineName::parse_field(&format!("Line {code}"), "name").expect("line name")),
    }
}

pub fn key(site: &str, line: &str, product: Option<&str>, d: Date) -> RecordKey {
    RecordKey::new(
        site_code(site),
        line_code(line),
        product.map(|p| ProductCode::parse(p).expect("product code")),
        d,
    )
    .expect("record key")
}

/// A record without product or categories.
pub fn rec(site: &str, line: &str, d: Date, inspected: u64, defective: u64) -> CountRecord {
    rec_full(site, line, None, d, inspected, defective, &[], None)
}

#[allow(clippy::too_many_arguments)]
pub fn rec_full(
    site: &str,
    line: &str,
    product: Option<&str>,
    d: Date,
    inspected: u64,
    defective: u64,
    defects: &[(&str, u64)],
    revision: Option<u64>,
) -> CountRecord {
    let defects: BTreeMap<CategoryCode, u64> =
        defects.iter().map(|(c, n)| (category(c), *n)).collect();
    CountRecord {
        key: key(site, line, product, d),
        counts: Counts::new(inspected, defective, defects).expect("counts"),
        revision,
    }
}

pub fn with_revision(mut r: CountRecord, revision: u64) -> CountRecord {
    r.revision = Some(revision);
    r
}

/// Registers sites S1..S{n} with lines L1..L{lines} each.
pub async fn registry(store: &dyn Store, sites: usize, lines: usize) {
    for s in 1..=sites {
        let code = format!("S{s}");
        store
            .upsert_site(&site(&code, &format!("Site {s}")))
            .await
            .expect("site");
        for l in 1..=lines {
            store
                .upsert_line(&line(&code, &format!("L{l}")))
                .await
                .expect("line");
        }
    }
}

pub const D1: Date = date!(2026 - 03 - 02);
pub const D2: Date = date!(2026 - 03 - 03);
pub const D3: Date = date!(2026 - 03 - 04);
