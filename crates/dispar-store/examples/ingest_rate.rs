//! Measures `put_batch` throughput: 100,000 records in batches of 1,000 into a fresh
//! SQLite file (WAL, synchronous=FULL), once without and once with two defect
//! categories per record, then a full correction pass (every record corrected).
//!
//! Run: `cargo run --release -p dispar-store --example ingest_rate [-- RECORDS BATCH]`

use std::collections::BTreeMap;
use std::time::Instant;

use dispar_core::code::{CategoryCode, LineCode, SiteCode};
use dispar_core::record::{CountRecord, Counts, RecordKey};
use dispar_core::site::{Line, Site, SiteName};
use dispar_store::{OpenOptions, SqliteStore, Store};
use time::Duration;
use time::macros::date;

const SITES: usize = 100;
const LINES: usize = 3;

fn records(
    n: usize,
    with_defects: bool,
    shift: u64,
) -> Result<Vec<CountRecord>, Box<dyn std::error::Error>> {
    let scratch = CategoryCode::parse("scratch")?;
    let dent = CategoryCode::parse("dent")?;
    let mut out = Vec::with_capacity(n);
    let start = date!(2025 - 01 - 01);
    'outer: for day in 0.. {
        for s in 0..SITES {
            for l in 0..LINES {
                if out.len() == n {
                    break 'outer;
                }
                let i = out.len() as u64;
                let mut defects = BTreeMap::new();
                if with_defects {
                    defects.insert(scratch.clone(), (i + shift) % 17);
                    defects.insert(dent.clone(), (i + shift) % 5);
                }
                out.push(CountRecord {
                    key: RecordKey::new(
                        SiteCode::parse(&format!("S{s:03}"))?,
                        LineCode::parse(&format!("L{l}"))?,
                        None,
                        start + Duration::days(day),
                    )
                    .map_err(|e| e.message)?,
                    counts: Counts::new(10_000 + i % 1000, (i + shift) % 97, defects)?,
                    revision: None,
                });
            }
        }
    }
    Ok(out)
}

async fn run(
    label: &str,
    n: usize,
    batch: usize,
    with_defects: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    let dir = tempfile::tempdir()?;
    let store = SqliteStore::open(&OpenOptions::new(
        dir.path().join("bench.db").to_string_lossy(),
    ))
    .await?;
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
    for (pass, shift) in [("insert", 0), ("correct", 1)] {
        let data = records(n, with_defects, shift)?;
        let cpu = cpu_seconds();
        let t = Instant::now();
        for chunk in data.chunks(batch) {
            store.put_batch(chunk, Some(1), None).await?;
        }
        let secs = t.elapsed().as_secs_f64();
        let cpu = cpu_seconds().zip(cpu).map(|(b, a)| b - a);
        println!(
            "{label:<22} {pass:<8} {n} records in batches of {batch}: {secs:.3} s wall, {:.0} records/s; \
             process CPU {}",
            n as f64 / secs,
            cpu.map_or("n/a".to_owned(), |c| format!(
                "{c:.2} s ({:.0} records per CPU-second)",
                n as f64 / c
            )),
        );
    }
    let stats = store.stats().await?;
    println!(
        "{label:<22} stored: {} current records, {} revisions",
        stats.records, stats.revisions
    );
    store.close().await;
    Ok(())
}

/// User + system CPU time of the whole process (all threads), from /proc (Linux).
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    let rest = stat.rsplit_once(')')?.1;
    let fields: Vec<&str> = rest.split_whitespace().collect();
    // After the command name: state is field 3, utime 14, stime 15 (1-based, man proc).
    let utime: f64 = fields.get(11)?.parse().ok()?;
    let stime: f64 = fields.get(12)?.parse().ok()?;
    Some((utime + stime) / 100.0)
}

#[tokio::main]
async fn main() -> Result<(), Box<dyn std::error::Error>> {
    let mut args = std::env::args().skip(1);
    let n: usize = args
        .next()
        .map(|a| a.parse())
        .transpose()?
        .unwrap_or(100_000);
    let batch: usize = args.next().map(|a| a.parse()).transpose()?.unwrap_or(1_000);
    run("no categories", n, batch, false).await?;
    run("2 defect categories", n, batch, true).await?;
    Ok(())
}
