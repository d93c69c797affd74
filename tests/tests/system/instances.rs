//! Two `dispar serve` processes on one database: on PostgreSQL when
//! `DISPAR_TEST_POSTGRES` is set (the arrangement of several stateless instances), else
//! two processes on one SQLite file. Concurrent batches through both, of overlapping
//! natural keys with increasing plant revisions and Idempotency-Key retries through the
//! other instance; afterwards every acknowledged write is present exactly once, the
//! latest plant revision wins, and both instances give the same reports and ETags.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::collections::BTreeMap;
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

use dispar_system_tests::{Body, Reply, Server, Value, json};

const SITES: [&str; 2] = ["S1", "S2"];
const LINES: [&str; 2] = ["L1", "L2"];
const DAYS: [&str; 6] = [
    "2026-03-02",
    "2026-03-03",
    "2026-03-04",
    "2026-03-05",
    "2026-03-06",
    "2026-03-07",
];
const KEYS: usize = SITES.len() * LINES.len() * DAYS.len();

/// The natural key of key index `k`.
fn key(k: usize) -> (&'static str, &'static str, &'static str) {
    (SITES[k % 2], LINES[(k / 2) % 2], DAYS[k / 4])
}

/// Counts of key `k` at plant revision `r`: different for every revision, so no write
/// is "unchanged" and the current counts tell which revision won.
fn counts(k: usize, r: u64) -> (u64, u64) {
    (1_000 + r, (k as u64 * 7 + r) % 50)
}

fn record(k: usize, r: u64) -> Value {
    let (site, line, date) = key(k);
    let (inspected, defective) = counts(k, r);
    json!({"site": site, "line": line, "date": date, "inspected": inspected,
           "defective": defective, "revision": r})
}

fn post(s: &Server, token: &str, idem: &str, body: &Value) -> Reply {
    s.request_with(
        "POST",
        "/v1/counts",
        Some(token),
        Body::Json(body.clone()),
        &[("idempotency-key", idem)],
    )
}

fn day_path(k: usize) -> String {
    let (site, line, date) = key(k);
    format!("/v1/sites/{site}/lines/{line}/days/{date}")
}

#[test]
fn two_instances_share_one_database_without_losing_or_reordering_revisions() {
    let a = Server::start();
    for site in SITES {
        a.site(site, &LINES);
    }
    let b = a.another(&[]);
    let ingest = a.key("ingest", &SITES);
    let read = b.key("read", &[]);
    let instances = [&a, &b];

    // Plant revisions come from one counter, so they increase with the time a batch was
    // made; batches overtake each other on the way, and a batch with a revision older
    // than a key's current one is refused whole (409) — exactly what must happen.
    let next_revision = AtomicU64::new(1);
    let acknowledged: Mutex<BTreeMap<usize, Vec<u64>>> = Mutex::new(BTreeMap::new());
    let (threads, batches) = (6usize, 25usize);
    let tally = Mutex::new(BTreeMap::<u16, usize>::new());
    std::thread::scope(|scope| {
        for t in 0..threads {
            let (ingest, next_revision, acknowledged, tally) =
                (&ingest, &next_revision, &acknowledged, &tally);
            scope.spawn(move || {
                let mut state = 0x9e37_79b9_7f4a_7c15u64 ^ t as u64;
                for n in 0..batches {
                    // Three distinct keys of the 24, chosen by a small xorshift.
                    let mut ks = Vec::new();
                    while ks.len() < 3 {
                        state ^= state << 13;
                        state ^= state >> 7;
                        state ^= state << 17;
                        let k = (state % KEYS as u64) as usize;
                        if !ks.contains(&k) {
                            ks.push(k);
                        }
                    }
                    let r = next_revision.fetch_add(1, Ordering::SeqCst);
                    let body =
                        json!({"records": ks.iter().map(|&k| record(k, r)).collect::<Vec<_>>()});
                    let idem = format!("t{t}-n{n}");
                    let first_at = (t + n) % 2;
                    // Busy answers are retried with the same key, through either instance.
                    let mut reply = post(instances[first_at], ingest, &idem, &body);
                    let mut tries = 0;
                    while reply.status == 503 && tries < 40 {
                        std::thread::sleep(Duration::from_millis(25));
                        tries += 1;
                        reply = post(instances[(first_at + tries) % 2], ingest, &idem, &body);
                    }
                    assert!(
                        matches!(reply.status, 200 | 201 | 409),
                        "batch {idem}: {} {}",
                        reply.status,
                        reply.text
                    );
                    *tally.lock().unwrap().entry(reply.status).or_default() += 1;
                    // The client never saw the answer and retries through the other
                    // instance: a stored answer is replayed byte for byte, nothing is
                    // written twice; a refusal is not stored and is refused again.
                    let retry = post(instances[1 - first_at], ingest, &idem, &body);
                    assert_eq!(
                        retry.status, reply.status,
                        "retry of {idem}: {}",
                        retry.text
                    );
                    if reply.status != 409 {
                        assert_eq!(retry.text, reply.text, "retry of {idem}");
                        assert_eq!(retry.header("idempotent-replayed"), Some("true"));
                        let mut acked = acknowledged.lock().unwrap();
                        for &k in &ks {
                            acked.entry(k).or_default().push(r);
                        }
                    }
                }
            });
        }
    });
    let tally = tally.into_inner().unwrap();
    let acknowledged = acknowledged.into_inner().unwrap();
    let written: usize = tally.get(&200).unwrap_or(&0) + tally.get(&201).unwrap_or(&0);
    assert!(
        written >= threads * batches / 4,
        "too few batches written: {tally:?}"
    );

    for k in 0..KEYS {
        let Some(revs) = acknowledged.get(&k) else {
            let r = b.request("GET", &day_path(k), Some(&read), Body::None);
            assert_eq!(r.status, 404, "key {k} was never written: {}", r.text);
            continue;
        };
        let mut want = revs.clone();
        want.sort_unstable();
        let latest = *want.last().unwrap();
        // Accepted writes of one key can only go up: its history is exactly the
        // acknowledged revisions, in order, each once.
        let h = a
            .request(
                "GET",
                &format!("{}/revisions", day_path(k)),
                Some(&read),
                Body::None,
            )
            .json();
        let history: Vec<u64> = h["revisions"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r["revision"].as_u64().unwrap())
            .collect();
        assert_eq!(history, want, "key {k}: {h}");
        for s in instances {
            let current = s
                .request("GET", &day_path(k), Some(&read), Body::None)
                .json();
            assert_eq!(current["revision"], latest, "key {k}: {current}");
            let (inspected, defective) = counts(k, latest);
            assert_eq!(current["inspected"], inspected);
            assert_eq!(current["defective"], defective);
        }
    }

    // Both instances give the same reports, with the same ETags.
    for path in [
        "/v1/reports?period=2026-W10&level=site",
        "/v1/reports?period=2026-W10&level=line&site=S1",
        "/v1/reports?period=2026-03-02..2026-03-04&level=all-lines&baseline=off",
        "/v1/reports/series?from=2026-W09&to=2026-W11",
    ] {
        let ra = a.request("GET", path, Some(&read), Body::None);
        let rb = b.request("GET", path, Some(&read), Body::None);
        assert_eq!(ra.status, 200, "{path}: {}", ra.text);
        assert_eq!(rb.status, 200, "{path}: {}", rb.text);
        assert_eq!(ra.header("etag"), rb.header("etag"), "{path}");
        assert_eq!(ra.json(), rb.json(), "{path}");
        let tag = ra.header("etag").unwrap().to_owned();
        let again = b.request_with(
            "GET",
            path,
            Some(&read),
            Body::None,
            &[("if-none-match", &tag)],
        );
        assert_eq!(again.status, 304, "{path}: B honours A's ETag");
    }
}

#[test]
fn a_write_through_one_instance_changes_the_etag_the_other_serves_only_where_it_reads() {
    let a = Server::start();
    for site in SITES {
        a.site(site, &LINES);
    }
    let b = a.another(&[]);
    let read = a.key("read", &[]);
    let seed: Vec<Value> = (0..KEYS).map(|k| record(k, 1)).collect();
    let r = a.as_admin("POST", "/v1/counts", Body::Json(json!({ "records": seed })));
    assert!(r.status == 200 || r.status == 201, "{}", r.text);
    // A week far from March (its baseline window too), and S2's lines in March's week.
    let covering = "/v1/reports?period=2026-W10&level=site";
    let other_site = "/v1/reports?period=2026-W10&level=line&site=S2";
    let elsewhere = "/v1/reports?period=2026-W40&level=site";
    let etag = |path: &str| {
        let r = b.request("GET", path, Some(&read), Body::None);
        assert_eq!(r.status, 200, "{path}: {}", r.text);
        r.header("etag").unwrap().to_owned()
    };
    let before: Vec<String> = [covering, other_site, elsewhere].map(etag).to_vec();
    // A correction of S1 L1 on 2026-03-03, through A.
    let fix = a.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-03",
        Body::Json(json!({"inspected": 2_000, "defective": 99})),
    );
    assert_eq!(fix.status, 200, "{}", fix.text);
    let after: Vec<String> = [covering, other_site, elsewhere].map(etag).to_vec();
    assert_ne!(
        after[0], before[0],
        "B's report over the corrected day changes"
    );
    assert_eq!(after[1], before[1], "S2's line report does not read S1");
    assert_eq!(
        after[2], before[2],
        "W40 (with its baseline) does not read March"
    );
    let stale = b.request_with(
        "GET",
        covering,
        Some(&read),
        Body::None,
        &[("if-none-match", &before[0])],
    );
    assert_eq!(stale.status, 200, "B never answers 304 to a stale ETag");
}

#[test]
fn migrate_on_a_served_database_is_a_no_op_and_never_prints_the_password() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    let out = s.cli(&["migrate"]);
    assert!(out.status.success(), "{out:?}");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("is migrated"), "{err}");
    if s.database.contains("://") && s.database.contains('@') {
        assert!(!err.contains(":dispar@"), "the password is redacted: {err}");
        assert!(err.contains(":***@"), "{err}");
    }
    // The data are untouched and the running instance still answers.
    let sites = s.as_admin("GET", "/v1/sites", Body::None);
    assert_eq!(sites.status, 200);
    assert!(sites.text.contains("\"S1\""), "{}", sites.text);
}
