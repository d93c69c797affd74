//! Ingest benchmark (not a test): the release `dispar` server, a fresh SQLite file (or a
//! fresh PostgreSQL database with `DISPAR_TEST_POSTGRES`, see the harness docs),
//! and N records posted as CSV batches over HTTP; prints records per second.
//!
//! ```text
//! cargo run --release -p dispar-system-tests --example ingest_load -- \
//!     [--records 200000] [--batch 5000] [--clients 1] [--sql-out rows.sql] [--csv-out rows.csv]
//! ```
//!
//! Built with `--release`, the harness builds and runs the release server (or the
//! binary in `DISPAR_BIN`). The data: 50 sites x 4 lines, one record per line and day
//! from 2021-01-01, 3 defect categories per record, no product, no revision. Batches
//! are made before the clock starts; the clock covers the first request to the last
//! answer. `--sql-out` also writes the same rows as SQL for the `sqlite3` CLI ceiling
//! (see `tools/bench/ingest.sh`): the registry, then one transaction of multi-row
//! `INSERT`s into exactly the tables the store writes (`count_revisions`,
//! `revision_defects`, `counts_current`, `current_defects`, `store_state`).

#![allow(clippy::unwrap_used, clippy::print_stderr)] // a benchmark driver: panics report failures

use std::fmt::Write as _;
use std::time::Instant;

use dispar_system_tests::{Body, Server, json};

const SITES: usize = 50;
const LINES: usize = 4;
const CATEGORIES: [&str; 3] = ["flash", "short-shot", "seal-leak"];

struct Options {
    records: usize,
    batch: usize,
    clients: usize,
    sql_out: Option<String>,
    csv_out: Option<String>,
}

fn options() -> Options {
    let mut o = Options {
        records: 200_000,
        batch: 5_000,
        clients: 1,
        sql_out: None,
        csv_out: None,
    };
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut i = 0;
    while i < args.len() {
        let value = args.get(i + 1).cloned().unwrap_or_default();
        match args[i].as_str() {
            "--records" => o.records = value.parse().expect("--records N"),
            "--batch" => o.batch = value.parse().expect("--batch N"),
            "--clients" => o.clients = value.parse().expect("--clients N"),
            "--sql-out" => o.sql_out = Some(value),
            "--csv-out" => o.csv_out = Some(value),
            other => panic!("unknown argument {other}"),
        }
        i += 2;
    }
    assert!(o.batch >= 1 && o.clients >= 1);
    o
}

/// One record: (site, line, date, inspected, defective, defects).
struct Rec {
    site: usize,
    line: usize,
    date: String,
    inspected: u64,
    defective: u64,
    defects: [u64; 3],
}

fn records(n: usize) -> Vec<Rec> {
    let start = time::Date::from_calendar_date(2021, time::Month::January, 1).unwrap();
    let per_day = SITES * LINES;
    (0..n)
        .map(|i| {
            let day = start + time::Duration::days((i / per_day) as i64);
            let site = (i % per_day) / LINES;
            let line = i % LINES;
            // Deterministic, varied counts (a cheap integer hash).
            let h = (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 33;
            let inspected = 500 + h % 20_000;
            let defective = h % (inspected / 50 + 1);
            Rec {
                site,
                line,
                date: format!(
                    "{:04}-{:02}-{:02}",
                    day.year(),
                    u8::from(day.month()),
                    day.day()
                ),
                inspected,
                defective,
                defects: [defective / 2, defective / 3, h % 7],
            }
        })
        .collect()
}

fn site_code(i: usize) -> String {
    format!("S{i:03}")
}

fn line_code(i: usize) -> String {
    format!("L{}", i + 1)
}

fn csv_batches(recs: &[Rec], size: usize) -> Vec<String> {
    recs.chunks(size)
        .map(|chunk| {
            let mut s = String::with_capacity(chunk.len() * 48);
            s.push_str("site,line,date,inspected,defective,defect:flash,defect:short-shot,defect:seal-leak\r\n");
            for r in chunk {
                let _ = write!(
                    s,
                    "{},{},{},{},{},{},{},{}\r\n",
                    site_code(r.site),
                    line_code(r.line),
                    r.date,
                    r.inspected,
                    r.defective,
                    r.defects[0],
                    r.defects[1],
                    r.defects[2]
                );
            }
            s
        })
        .collect()
}

/// The same rows as SQL, as the store would write them into a fresh database.
fn sql(recs: &[Rec]) -> String {
    let mut s = String::with_capacity(recs.len() * 400);
    s.push_str("-- registry (not timed separately; tiny)\n");
    for site in 0..SITES {
        let _ = writeln!(
            s,
            "INSERT INTO sites (code, name) VALUES ('{0}', 'Plant {0}');",
            site_code(site)
        );
        for line in 0..LINES {
            let _ = writeln!(
                s,
                "INSERT INTO lines (site, code) VALUES ('{}', '{}');",
                site_code(site),
                line_code(line)
            );
        }
    }
    s.push_str("BEGIN IMMEDIATE;\n");
    let at = "2026-01-01T00:00:00.000000Z";
    for (c, chunk) in recs.chunks(1000).enumerate() {
        let base = c * 1000;
        s.push_str("INSERT INTO count_revisions (id, site, line, date, product, inspected, defective, plant_revision, recorded_at, api_key_id) VALUES\n");
        for (j, r) in chunk.iter().enumerate() {
            let sep = if j + 1 == chunk.len() { ";\n" } else { ",\n" };
            let _ = write!(
                s,
                "({},'{}','{}','{}','',{},{},NULL,'{at}',1){sep}",
                base + j + 1,
                site_code(r.site),
                line_code(r.line),
                r.date,
                r.inspected,
                r.defective
            );
        }
        s.push_str("INSERT INTO revision_defects (revision_id, category, count) VALUES\n");
        for (j, r) in chunk.iter().enumerate() {
            for (k, cat) in CATEGORIES.iter().enumerate() {
                let last = j + 1 == chunk.len() && k + 1 == CATEGORIES.len();
                let _ = write!(
                    s,
                    "({},'{cat}',{}){}",
                    base + j + 1,
                    r.defects[k],
                    if last { ";\n" } else { ",\n" }
                );
            }
        }
        s.push_str("INSERT INTO counts_current (site, line, date, product, revision_id, inspected, defective, plant_revision) VALUES\n");
        for (j, r) in chunk.iter().enumerate() {
            let sep = if j + 1 == chunk.len() { ";\n" } else { ",\n" };
            let _ = write!(
                s,
                "('{}','{}','{}','',{},{},{},NULL){sep}",
                site_code(r.site),
                line_code(r.line),
                r.date,
                base + j + 1,
                r.inspected,
                r.defective
            );
        }
        s.push_str(
            "INSERT INTO current_defects (date, site, line, product, category, count) VALUES\n",
        );
        for (j, r) in chunk.iter().enumerate() {
            for (k, cat) in CATEGORIES.iter().enumerate() {
                let last = j + 1 == chunk.len() && k + 1 == CATEGORIES.len();
                let _ = write!(
                    s,
                    "('{}','{}','{}','','{cat}',{}){}",
                    r.date,
                    site_code(r.site),
                    line_code(r.line),
                    r.defects[k],
                    if last { ";\n" } else { ",\n" }
                );
            }
        }
        s.push_str("UPDATE store_state SET data_version = data_version + 1 WHERE id = 1;\n");
    }
    s.push_str("COMMIT;\n");
    s
}

fn main() {
    let o = options();
    let recs = records(o.records);
    if let Some(path) = &o.csv_out {
        // Plain rows for a PostgreSQL COPY into one bare table (tools/bench/ingest_pg.sh).
        let mut out = String::with_capacity(recs.len() * 48);
        for r in &recs {
            let _ = writeln!(
                out,
                "{},{},{},{},{},{},{},{}",
                site_code(r.site),
                line_code(r.line),
                r.date,
                r.inspected,
                r.defective,
                r.defects[0],
                r.defects[1],
                r.defects[2]
            );
        }
        std::fs::write(path, out).unwrap();
    }
    if let Some(path) = &o.sql_out {
        std::fs::write(path, sql(&recs)).expect("write the SQL file");
        eprintln!("wrote {} rows as SQL to {path}", recs.len());
    }
    let batches = csv_batches(&recs, o.batch);
    let dir = tempfile::tempdir().expect("temporary directory");
    let server = Server::start_in(dir.path(), &[]);
    for site in 0..SITES {
        let code = site_code(site);
        let r = server.as_admin(
            "PUT",
            &format!("/v1/sites/{code}"),
            Body::Json(json!({"name": format!("Plant {code}")})),
        );
        assert_eq!(r.status, 201, "{}", r.text);
        for line in 0..LINES {
            let r = server.as_admin(
                "PUT",
                &format!("/v1/sites/{code}/lines/{}", line_code(line)),
                Body::Json(json!({})),
            );
            assert_eq!(r.status, 201, "{}", r.text);
        }
    }
    let token = server.admin().to_owned();
    let bytes: usize = batches.iter().map(String::len).sum();

    let start = Instant::now();
    let mut latencies: Vec<f64> = std::thread::scope(|scope| {
        let handles: Vec<_> = (0..o.clients)
            .map(|c| {
                let batches = &batches;
                let server = &server;
                let token = &token;
                scope.spawn(move || {
                    let mut lat = Vec::new();
                    for b in batches.iter().skip(c).step_by(o.clients) {
                        let t = Instant::now();
                        let r =
                            server.request("POST", "/v1/counts", Some(token), Body::Csv(b.clone()));
                        lat.push(t.elapsed().as_secs_f64());
                        assert_eq!(r.status, 201, "{}", r.text);
                    }
                    lat
                })
            })
            .collect();
        handles
            .into_iter()
            .flat_map(|h| h.join().unwrap())
            .collect()
    });
    let elapsed = start.elapsed().as_secs_f64();
    latencies.sort_by(f64::total_cmp);
    let pct = |p: f64| latencies[((latencies.len() - 1) as f64 * p).round() as usize] * 1000.0;
    let metrics = server.request("GET", "/metrics", None, Body::None).text;
    let created = metrics
        .lines()
        .find_map(|l| l.strip_prefix("dispar_records_written_total{outcome=\"created\"} "))
        .and_then(|v| v.trim().parse::<f64>().ok())
        .unwrap_or(0.0);
    assert_eq!(created as usize, o.records, "every record was created");
    if std::env::var_os("INGEST_LOAD_LOG").is_some() {
        eprintln!("{}", server.log());
    }
    println!(
        "ingest over HTTP: {} records in {} CSV batches of {} ({:.1} MB), {} client(s): {:.3} s = {:.0} records/s; batch latency p50 {:.1} ms, p99 {:.1} ms",
        o.records,
        batches.len(),
        o.batch,
        bytes as f64 / 1e6,
        o.clients,
        elapsed,
        o.records as f64 / elapsed,
        pct(0.5),
        pct(0.99)
    );
}
