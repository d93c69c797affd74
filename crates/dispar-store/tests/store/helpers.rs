//! Fresh databases and small builders of domain values.

use std::collections::BTreeMap;
use std::sync::Arc;

use dispar_core::code::{CategoryCode, LineCode, ProductCode, SiteCode};
use dispar_core::record::{CountRecord, Counts, RecordKey};
use dispar_core::site::{Line, LineName, Site, SiteName};
use dispar_store::{OpenOptions, SqliteStore, Store};
use tempfile::TempDir;
use time::Date;
use time::macros::date;

/// A fresh migrated database in a temp dir (removed on drop).
pub struct TestDb {
    pub store: Arc<dyn Store>,
    pub sqlite: SqliteStore,
    pub path: std::path::PathBuf,
    _dir: TempDir,
}

pub async fn fresh() -> TestDb {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("dispar.db");
    let sqlite = SqliteStore::open(&OpenOptions::new(path.to_string_lossy()))
        .await
        .expect("open a fresh store");
    TestDb {
        store: Arc::new(sqlite.clone()),
        sqlite,
        path,
        _dir: dir,
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
