//! Measures `aggregate` latency on the issue-4 volume: 200 sites x 3 lines x 365 days
//! (219,000 records, two defect categories each), month period, at the site and
//! all-lines levels, from the current data and `as_of` (from the history).
//!
//! Run: `cargo run --release -p dispar-store --example aggregate_latency`

use std::collections::BTreeMap;
use std::time::Instant;

use dispar_core::code::{CategoryCode, LineCode, SiteCode};
use dispar_core::record::{CountRecord, Counts, RecordKey};
use dispar_core::site::{Line, Site, SiteName};
use dispar_store::{AggregateQuery, Level, OpenOptions, SqliteStore, Store};
use time::macros::date;
use time::{Duration, OffsetDateTime};

const SITES: usize = 200;
const LINES: usize = 3;
const DAYS: i64 = 365;

type Error = Box<dyn std::error::Error>;

async fn load(store: &SqliteStore) -> Result<(), Error> {
    let scratch = CategoryCode::parse("scratch")?;
    let dent = CategoryCode::parse("dent")?;
    let start = date!(2025 - 01 - 01);
    for s in 0..SITES {
        let code = SiteCode::parse(&format!("S{s:03}"))?;
        store
            .upsert_site(&Site {
                code: code.clone(),
                name: SiteName::parse_field(&format!("Site {s}"), "name").map_err(|e| e.message)?,
                time_zone: None,
            })
            .await?;
        for l in 0..LINES {
            store
                .upsert_line(&Line {
                    site: code.clone(),
                    code: LineCode::parse(&format!("L{l}"))?,
                    name: None,
                })
                .await?;
        }
    }
    let mut batch = Vec::with_capacity(1000);
    let mut i: u64 = 0;
    for day in 0..DAYS {
        for s in 0..SITES {
            for l in 0..LINES {
                i += 1;
                let defects = BTreeMap::from([(scratch.clone(), i % 13), (dent.clone(), i % 7)]);
                batch.push(CountRecord {
                    key: RecordKey::new(
                        SiteCode::parse(&format!("S{s:03}"))?,
                        LineCode::parse(&format!("L{l}"))?,
                        None,
                        start + Duration::days(day),
                    )
                    .map_err(|e| e.message)?,
                    counts: Counts::new(20_000 + i % 1000, 100 + i % 50, defects)?,
                    revision: None,
                });
                if batch.len() == 1000 {
                    store.put_batch(&batch, None, None).await?;
                    batch.clear();
                }
            }
        }
    }
    store.put_batch(&batch, None, None).await?;
    Ok(())
}

#[tokio::main]
async fn main() -> Result<(), Error> {
    let dir = tempfile::tempdir()?;
    let store = SqliteStore::open(&OpenOptions::new(
        dir.path().join("bench.db").to_string_lossy(),
    ))
    .await?;
    let t = Instant::now();
    load(&store).await?;
    println!(
        "loaded {:?} in {:.1} s",
        store.stats().await?,
        t.elapsed().as_secs_f64()
    );

    let levels = [("site", Level::Site), ("all-lines", Level::AllLines)];
    for (name, level) in levels {
        for as_of in [None, Some(OffsetDateTime::now_utc())] {
            let q = AggregateQuery {
                from: date!(2025 - 06 - 01),
                to: date!(2025 - 06 - 30),
                level: level.clone(),
                site: None,
                product: None,
                as_of,
                by_product: false,
            };
            store.aggregate(&q).await?; // warm the page cache
            let runs = 20;
            let t = Instant::now();
            let mut groups = 0;
            for _ in 0..runs {
                groups = store.aggregate(&q).await?.groups.len();
            }
            let ms = t.elapsed().as_secs_f64() * 1000.0 / f64::from(runs);
            let source = if as_of.is_some() {
                "as_of (history)"
            } else {
                "current"
            };
            println!(
                "level {name:<9} month, {source:<15}: {groups} groups, {ms:.2} ms per aggregate"
            );
        }
    }
    store.close().await;
    Ok(())
}
