//! Crash safety under load: client workers post batches of new records with
//! Idempotency-Keys while the server is killed with SIGKILL at random moments (at least
//! ten times) and restarted on the same SQLite file. A batch counts as acknowledged only
//! when a 2xx answer arrived; a worker retries a batch (same key, same body) until one
//! does. Afterwards every acknowledged record is stored exactly once with its exact
//! counts, nothing unacknowledged appears that was never sent, and SQLite's
//! `PRAGMA integrity_check` says ok. Prints sent / acknowledged / stored / lost.
//! SQLite only: the kill tests the file's durability, which a PostgreSQL server owns.

#![allow(clippy::unwrap_used, clippy::print_stderr)] // tests: a panic is the failure report

use std::collections::BTreeMap;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, RwLock};
use std::time::Duration;

use dispar_system_tests::{Server, Value, json};

const WORKERS: usize = 3;
const LINES: [&str; 3] = ["L1", "L2", "L3"];
const KILLS: usize = 10;

/// Counts of worker `w`'s batch `b`, record `r`: unique per record.
fn counts(w: usize, b: usize, r: usize) -> (u64, u64) {
    let n = (w * 1_000_000 + b * 100 + r) as u64;
    (1_000 + n % 9_000, n % 17)
}

/// Worker `w`'s batch `b`: 20 records on distinct days of its own line.
fn batch(w: usize, b: usize) -> Value {
    let start = time::Date::from_calendar_date(2021, time::Month::January, 1).unwrap();
    let records: Vec<Value> = (0..20)
        .map(|r| {
            let day = start + time::Duration::days((b * 20 + r) as i64);
            let (inspected, defective) = counts(w, b, r);
            json!({"site": "S1", "line": LINES[w], "date": day.to_string(),
                   "inspected": inspected, "defective": defective})
        })
        .collect();
    json!({ "records": records })
}

#[test]
fn every_acknowledged_record_survives_repeated_sigkills() {
    let dir = tempfile::tempdir().unwrap();
    let first = Server::start_in(dir.path(), &[]);
    let served = first.served();
    first.site("S1", &LINES);
    let ingest = first.key("ingest", &["S1"]);
    let server = Arc::new(RwLock::new(first));
    let stop = Arc::new(AtomicBool::new(false));
    let sent = Arc::new(AtomicUsize::new(0));
    let unanswered = Arc::new(AtomicUsize::new(0));
    let acked: Arc<Mutex<BTreeMap<(usize, usize), ()>>> = Arc::default();
    let http = reqwest::blocking::Client::builder()
        .timeout(Duration::from_secs(10))
        .build()
        .unwrap();

    let workers: Vec<_> = (0..WORKERS)
        .map(|w| {
            let (server, stop, sent, unanswered, acked, http, ingest) = (
                server.clone(),
                stop.clone(),
                sent.clone(),
                unanswered.clone(),
                acked.clone(),
                http.clone(),
                ingest.clone(),
            );
            std::thread::spawn(move || {
                let mut b = 0;
                while !stop.load(Ordering::SeqCst) {
                    let body = batch(w, b);
                    let key = format!("w{w}-b{b}");
                    // Until a 2xx arrives: the server may be dead or restarting.
                    loop {
                        sent.fetch_add(20, Ordering::SeqCst);
                        let base = server.read().unwrap().base.clone();
                        let answer = http
                            .post(format!("{base}/v1/counts"))
                            .bearer_auth(&ingest)
                            .header("idempotency-key", &key)
                            .json(&body)
                            .send();
                        match answer {
                            Ok(r) if r.status().is_success() => break,
                            Ok(r) if r.status().as_u16() == 503 => {
                                unanswered.fetch_add(20, Ordering::SeqCst);
                            }
                            Ok(r) => panic!("batch {key}: {} {:?}", r.status(), r.text()),
                            Err(_) => {
                                unanswered.fetch_add(20, Ordering::SeqCst);
                            }
                        }
                        std::thread::sleep(Duration::from_millis(20));
                    }
                    acked.lock().unwrap().insert((w, b), ());
                    b += 1;
                }
            })
        })
        .collect();

    // Kill at pseudo-random moments, 150..650 ms apart, and restart on the same file.
    let mut state = 0x2545_f491_4f6c_dd1du64;
    for _ in 0..KILLS {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        std::thread::sleep(Duration::from_millis(150 + state % 500));
        let mut s = server.write().unwrap();
        s.kill();
        *s = Server::start_on(dir.path(), &served, &[]);
    }
    std::thread::sleep(Duration::from_millis(300));
    stop.store(true, Ordering::SeqCst);
    for w in workers {
        w.join().unwrap();
    }

    let s = server.read().unwrap();
    let read = s.key("read", &[]);
    let acked = acked.lock().unwrap();
    let mut stored = 0usize;
    let mut lost = 0usize;
    for (w, line) in LINES.iter().enumerate() {
        let mut cursor: Option<String> = None;
        let mut rows: BTreeMap<String, (u64, u64)> = BTreeMap::new();
        loop {
            let path = match &cursor {
                Some(c) => format!(
                    "/v1/counts?site=S1&line={line}&limit=1000&cursor={}",
                    dispar_system_tests::urlencode(c)
                ),
                None => format!("/v1/counts?site=S1&line={line}&limit=1000"),
            };
            let page = s.request("GET", &path, Some(&read), dispar_system_tests::Body::None);
            assert_eq!(page.status, 200, "{}", page.text);
            let v = page.json();
            for r in v["records"].as_array().unwrap() {
                let date = r["date"].as_str().unwrap().to_owned();
                let c = (
                    r["inspected"].as_u64().unwrap(),
                    r["defective"].as_u64().unwrap(),
                );
                assert!(
                    rows.insert(date.clone(), c).is_none(),
                    "{line} {date} twice"
                );
                assert!(r["sequence"].as_u64().is_some());
            }
            match v["next_cursor"].as_str() {
                Some(c) => cursor = Some(c.to_owned()),
                None => break,
            }
        }
        stored += rows.len();
        let start = time::Date::from_calendar_date(2021, time::Month::January, 1).unwrap();
        for (&(bw, b), ()) in acked.iter() {
            if bw != w {
                continue;
            }
            for r in 0..20 {
                let day = (start + time::Duration::days((b * 20 + r) as i64)).to_string();
                match rows.get(&day) {
                    Some(&c) => assert_eq!(c, counts(w, b, r), "{line} {day}"),
                    None => lost += 1,
                }
            }
        }
        // Whatever is stored was sent: exact counts of some batch of this worker.
        for (day, &c) in &rows {
            let d = time::Date::parse(day, &time::format_description::well_known::Iso8601::DATE)
                .unwrap();
            let index = (d - start).whole_days() as usize;
            assert_eq!(c, counts(w, index / 20, index % 20), "{line} {day}");
        }
    }
    let acknowledged = acked.len() * 20;
    eprintln!(
        "crash test: {KILLS} SIGKILLs; records sent {} (of which {} in attempts that got no answer or 503, then retried under the same Idempotency-Key), acknowledged {acknowledged}, stored {stored}, lost {lost}",
        sent.load(Ordering::SeqCst),
        unanswered.load(Ordering::SeqCst)
    );
    assert_eq!(
        stored, acknowledged,
        "stored exactly the acknowledged records"
    );
    assert_eq!(lost, 0, "acknowledged records lost");
    assert!(
        acknowledged >= 200,
        "too little was written to test: {acknowledged}"
    );
    // The file itself (on PostgreSQL, the server's own checks are its business).
    if dispar_system_tests::postgres_server().is_some() {
        return;
    }
    let check = std::process::Command::new("sqlite3")
        .arg(dir.path().join("dispar.db"))
        .arg("PRAGMA integrity_check;")
        .output();
    match check {
        Ok(out) => assert_eq!(String::from_utf8_lossy(&out.stdout).trim(), "ok"),
        Err(e) => eprintln!("sqlite3 not found ({e}); integrity_check skipped"),
    }
}
