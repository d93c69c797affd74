//! Where a report's time goes (not a test): the store's sums, the statistics and the
//! JSON, timed separately, in process, on an existing database, e.g. the one
//! `tests/examples/report_bench.rs --out DIR` leaves behind.
//!
//! ```text
//! cargo run --release -p dispar --example report_profile -- DATABASE_URL [PERIOD] [ROUNDS]
//! ```

#![allow(clippy::unwrap_used, clippy::print_stderr)] // a benchmark driver: panics report failures

use std::time::{Duration, Instant};

use dispar::reports::compute::{self, Detail};
use dispar::reports::{ReportParams, ReportSpec};

fn median(mut v: Vec<Duration>) -> f64 {
    v.sort();
    v[v.len() / 2].as_secs_f64() * 1e3
}

#[tokio::main]
async fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let url = args.first().expect("DATABASE_URL").clone();
    let period = args.get(1).cloned().unwrap_or_else(|| "2025-06".to_owned());
    let rounds: usize = args.get(2).map_or(20, |r| r.parse().unwrap());
    let store = dispar_store::open(&url).await.unwrap();
    let raw = ReportParams {
        period: Some(period),
        ..ReportParams::default()
    };
    let (spec, period) = ReportSpec::parse_report(&raw).unwrap();
    let mut gaps_t = Vec::new();
    let mut window_t = Vec::new();
    let (mut version, mut sums, mut load, mut build, mut json, mut json_plain) = (
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
        Vec::new(),
    );
    let mut bytes = 0;
    for _ in 0..rounds {
        let t = Instant::now();
        store.data_version().await.unwrap();
        version.push(t.elapsed());
        let t = Instant::now();
        store
            .aggregate(&spec.aggregate_query(&period))
            .await
            .unwrap();
        sums.push(t.elapsed());
        let t = Instant::now();
        let loaded = compute::load(store.as_ref(), &spec, &period, Detail::Report)
            .await
            .unwrap();
        let window = compute::load_window(store.as_ref(), &spec, &period)
            .await
            .unwrap()
            .map(|w| w.0);
        load.push(t.elapsed());
        let t = Instant::now();
        let _ = compute::load_window(store.as_ref(), &spec, &period)
            .await
            .unwrap();
        window_t.push(t.elapsed());
        let t = Instant::now();
        let gaps = compute::load_gaps(store.as_ref(), &spec, &period)
            .await
            .unwrap();
        gaps_t.push(t.elapsed());
        let t = Instant::now();
        let report = compute::build(&spec, period, &loaded.groups, window, gaps, None);
        build.push(t.elapsed());
        let t = Instant::now();
        bytes = compute::to_json(&report).unwrap().len();
        json.push(t.elapsed());
        let t = Instant::now();
        let _ = serde_json::to_vec(&report).unwrap().len();
        json_plain.push(t.elapsed());
    }
    println!(
        "period {period}, {rounds} rounds, medians: baseline window {:.1} ms, gaps in the data (line-days read and data_gaps) {:.1} ms",
        median(window_t),
        median(gaps_t)
    );
    println!(
        "period {period}, {rounds} rounds, medians: data_version {:.2} ms, aggregate {:.1} ms, load (aggregate + names + baseline window) {:.1} ms, build_report {:.1} ms, JSON {:.1} ms ({:.1} MB; serde_json::to_vec without a size hint {:.1} ms)",
        median(version),
        median(sums),
        median(load),
        median(build),
        median(json),
        bytes as f64 / 1e6,
        median(json_plain)
    );
    store.close().await;
}
