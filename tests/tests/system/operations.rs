//! Probes, metrics, request ids, logs, and stopping: SIGTERM finishes in-flight
//! requests, and a restart on the same file finds everything.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::io::Read;
use std::sync::mpsc;
use std::time::{Duration, Instant};

use dispar_system_tests::{Body, Server, json};

#[test]
fn probes_answer_without_a_key() {
    let s = Server::start();
    let live = s.request("GET", "/livez", None, Body::None);
    assert_eq!(live.status, 200);
    assert_eq!(live.json()["status"], "ok");
    let ready = s.request("GET", "/readyz", None, Body::None);
    assert_eq!(ready.status, 200, "{}", ready.text);
    assert_eq!(ready.json()["status"], "ready");
    assert!(
        ready
            .header("x-request-id")
            .is_some_and(|id| id.len() >= 32),
        "{:?}",
        ready.headers
    );
    let echoed = s.request_with(
        "GET",
        "/livez",
        None,
        Body::None,
        &[("x-request-id", "trace-me-42")],
    );
    assert_eq!(echoed.header("x-request-id"), Some("trace-me-42"));
}

#[test]
fn metrics_count_requests_by_route_template_and_records_written() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    let csv = "site,line,date,inspected,defective\nS1,L1,2026-03-02,10,1\nS1,L1,2026-03-03,10,1\n";
    assert_eq!(
        s.as_admin("POST", "/v1/counts", Body::Csv(csv.into()))
            .status,
        201
    );
    assert_eq!(
        s.as_admin("POST", "/v1/counts", Body::Csv(csv.into()))
            .status,
        200
    );
    s.as_admin("GET", "/v1/sites/S1/lines/L1/days/2026-03-09", Body::None);
    s.request("GET", "/v1/sites", None, Body::None);
    let m = s.request("GET", "/metrics", None, Body::None);
    assert_eq!(m.status, 200);
    assert!(
        m.header("content-type").unwrap().starts_with("text/plain"),
        "{:?}",
        m.headers
    );
    let text = m.text;
    for needle in [
        r#"dispar_http_requests_total{method="POST",route="/v1/counts",status="201"} 1"#,
        r#"dispar_http_requests_total{method="POST",route="/v1/counts",status="200"} 1"#,
        r#"dispar_http_requests_total{method="PUT",route="/v1/sites/{site}",status="201"} 1"#,
        r#"dispar_http_requests_total{method="GET",route="/v1/sites/{site}/lines/{line}/days/{date}",status="404"} 1"#,
        r#"dispar_http_requests_total{method="GET",route="/v1/sites",status="401"} 1"#,
        r#"dispar_records_written_total{outcome="created"} 2"#,
        r#"dispar_records_written_total{outcome="unchanged"} 2"#,
        r#"dispar_http_request_duration_seconds_bucket{method="POST",route="/v1/counts",le="+Inf"} 2"#,
        "# TYPE dispar_http_request_duration_seconds histogram",
    ] {
        assert!(text.contains(needle), "missing {needle} in\n{text}");
    }
}

#[test]
fn json_logs_are_one_object_per_line() {
    let s = Server::start_with(&["--log-format", "json"]);
    s.request("GET", "/livez", None, Body::None);
    let log = s.log();
    let lines: Vec<&str> = log.lines().filter(|l| !l.trim().is_empty()).collect();
    assert!(!lines.is_empty());
    for line in &lines {
        let v: serde_json::Value =
            serde_json::from_str(line).unwrap_or_else(|e| panic!("{e}: {line}"));
        assert!(
            v["level"].is_string() && v["timestamp"].is_string(),
            "{line}"
        );
    }
    assert!(log.contains("/livez"), "{log}");
}

#[test]
fn a_restart_on_the_same_file_finds_everything() {
    let dir = tempfile::tempdir().unwrap();
    let mut first = Server::start_in(dir.path(), &[]);
    first.site("S1", &["L1", "L2"]);
    let ingest = first.key("ingest", &["S1"]);
    let csv = "site,line,date,inspected,defective,defect:flash\n\
               S1,L1,2026-03-02,100,3,2\nS1,L2,2026-03-02,80,1,\n";
    assert_eq!(
        first
            .request("POST", "/v1/counts", Some(&ingest), Body::Csv(csv.into()))
            .status,
        201
    );
    let day = "/v1/sites/S1/lines/L1/days/2026-03-02";
    let fixed = first.request(
        "PUT",
        day,
        Some(&ingest),
        Body::Json(json!({"inspected": 100, "defective": 2, "revision": 7})),
    );
    assert_eq!(fixed.status, 200);
    let idem = first.request_with(
        "POST",
        "/v1/counts",
        Some(&ingest),
        Body::Csv("site,line,date,inspected,defective\nS1,L1,2026-03-03,5,0\n".into()),
        &[("idempotency-key", "restart-1")],
    );
    assert_eq!(idem.status, 201);
    let before = first.snapshot();
    let history = first
        .as_admin("GET", &format!("{day}/revisions"), Body::None)
        .text;
    let admin = first.admin().to_owned();

    let status = first.terminate();
    assert!(status.success(), "SIGTERM gives a clean exit: {status}");
    let log = first.log();
    assert!(
        log.contains("received SIGTERM") && log.contains("server stopped"),
        "{log}"
    );
    drop(first);

    let second = Server::start_in(dir.path(), &[]);
    let after = second.request("GET", "/v1/counts", Some(&admin), Body::None);
    assert_eq!(after.status, 200, "keys survive: {}", after.text);
    let same = second.request("GET", &format!("{day}/revisions"), Some(&admin), Body::None);
    assert_eq!(same.text, history, "the history survives");
    let replay = second.request_with(
        "POST",
        "/v1/counts",
        Some(&ingest),
        Body::Csv("site,line,date,inspected,defective\nS1,L1,2026-03-03,5,0\n".into()),
        &[("idempotency-key", "restart-1")],
    );
    assert_eq!(replay.text, idem.text, "stored answers survive");
    assert_eq!(replay.header("idempotent-replayed"), Some("true"));
    // `snapshot` uses the second server's own admin key; compare the data.
    assert_eq!(second.snapshot(), before);
}

/// A request body that sends its first part at once and the rest when told.
struct Gated {
    head: Vec<u8>,
    tail: Vec<u8>,
    release: mpsc::Receiver<()>,
    stage: u8,
}

impl Read for Gated {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let part = match self.stage {
            0 => &mut self.head,
            1 => {
                let _ = self.release.recv();
                &mut self.tail
            }
            _ => return Ok(0),
        };
        self.stage += 1;
        let n = part.len().min(buf.len());
        assert_eq!(n, part.len(), "test chunks fit the buffer");
        buf[..n].copy_from_slice(part);
        Ok(n)
    }
}

#[test]
fn sigterm_lets_an_in_flight_batch_finish_and_commit() {
    let dir = tempfile::tempdir().unwrap();
    let mut s = Server::start_in(dir.path(), &[]);
    s.site("S1", &["L1"]);
    let admin = s.admin().to_owned();
    let mut csv = String::from("site,line,date,inspected,defective\n");
    for day in 1..=28 {
        csv.push_str(&format!("S1,L1,2026-02-{day:02},100,{}\n", day % 5));
    }
    let (head, tail) = csv.split_at(60);
    let (release, gate) = mpsc::channel();
    let body = Gated {
        head: head.as_bytes().to_vec(),
        tail: tail.as_bytes().to_vec(),
        release: gate,
        stage: 0,
    };
    let url = format!("{}/v1/counts", s.base);
    let client = std::thread::spawn(move || {
        let resp = reqwest::blocking::Client::new()
            .post(url)
            .bearer_auth(admin)
            .header("content-type", "text/csv")
            .body(reqwest::blocking::Body::new(body))
            .send()
            .expect("the in-flight request gets an answer");
        (resp.status().as_u16(), resp.text().unwrap_or_default())
    });

    // Wait until the server is inside the request (it waits for the rest of the body).
    let deadline = Instant::now() + Duration::from_secs(20);
    loop {
        let m = s.request("GET", "/metrics", None, Body::None).text;
        let in_flight = m
            .lines()
            .find_map(|l| l.strip_prefix("dispar_http_requests_in_flight "))
            .and_then(|v| v.trim().parse::<f64>().ok())
            .unwrap_or(0.0);
        if in_flight >= 2.0 {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "the batch never became in-flight"
        );
        std::thread::sleep(Duration::from_millis(10));
    }
    let pid = s.pid();
    let kill = std::process::Command::new("kill")
        .args(["-TERM", &pid.to_string()])
        .status()
        .unwrap();
    assert!(kill.success());
    // The server has begun shutting down; now let the body finish.
    std::thread::sleep(Duration::from_millis(200));
    release.send(()).unwrap();
    let (status, text) = client.join().unwrap();
    assert_eq!(status, 201, "{text}");
    assert_eq!(
        serde_json::from_str::<serde_json::Value>(&text).unwrap()["created"],
        28
    );
    let exit = s.wait_exit();
    assert!(exit.success(), "{exit}");
    drop(s);

    let again = Server::start_in(dir.path(), &[]);
    assert_eq!(
        again.snapshot().len(),
        28,
        "the answered batch was committed"
    );
}

/// Starts `dispar serve` in `cwd` with only the given environment (no `--listen`, no
/// `--database`), waits for its address, checks both probes, then stops it with SIGTERM.
fn serve_from_env(cwd: &std::path::Path, env: &[(&str, String)]) {
    use std::io::BufRead;
    use std::process::{Command, Stdio};
    let mut cmd = Command::new(dispar_system_tests::dispar_bin());
    cmd.arg("serve")
        .current_dir(cwd)
        .env_remove("DATABASE_URL")
        .env_remove("DISPAR_LISTEN")
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::null());
    for (k, v) in env {
        cmd.env(k, v);
    }
    let mut child = cmd.spawn().unwrap();
    let stdout = child.stdout.take().unwrap();
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        for line in std::io::BufReader::new(stdout).lines() {
            let Ok(line) = line else { break };
            if let Some(addr) = line.strip_prefix("listening on ") {
                let _ = tx.send(addr.trim().to_owned());
            }
        }
    });
    let base = match rx.recv_timeout(Duration::from_secs(60)) {
        Ok(base) => base,
        Err(e) => {
            let _ = child.kill();
            let _ = child.wait();
            panic!("no address reported: {e}");
        }
    };
    let http = reqwest::blocking::Client::new();
    for probe in ["/livez", "/readyz"] {
        let r = http.get(format!("{base}{probe}")).send().unwrap();
        assert_eq!(r.status().as_u16(), 200, "{probe}");
    }
    let killed = Command::new("kill")
        .args(["-TERM", &child.id().to_string()])
        .status()
        .unwrap();
    assert!(killed.success());
    let status = child.wait().unwrap();
    assert!(status.success(), "SIGTERM gives a clean exit: {status}");
}

#[test]
fn serve_reads_its_address_and_database_from_the_environment_or_defaults() {
    // Issue #3: `DISPAR_LISTEN` and `DATABASE_URL` configure `serve`; without a database
    // the server creates and migrates `dispar.db` in the working directory; the lead's
    // request: `sqlite:///abs/path` (three slashes) opens that absolute path.
    let cwd = tempfile::tempdir().unwrap();
    let elsewhere = tempfile::tempdir().unwrap();
    let listen = ("DISPAR_LISTEN", "127.0.0.1:0".to_owned());

    let absolute = elsewhere.path().join("env.db");
    let url = format!("sqlite://{}", absolute.display());
    assert!(url.starts_with("sqlite:///"), "{url}");
    serve_from_env(cwd.path(), &[listen.clone(), ("DATABASE_URL", url)]);
    assert!(absolute.exists(), "DATABASE_URL names the file it opens");
    assert!(
        !cwd.path().join("dispar.db").exists(),
        "no default file when DATABASE_URL is set"
    );

    serve_from_env(cwd.path(), &[listen]);
    assert!(
        cwd.path().join("dispar.db").exists(),
        "the default database is dispar.db in the working directory"
    );
}

/// The sqlite3 shell holding the write lock of `file` (BEGIN IMMEDIATE) until the
/// returned stdin is dropped; `None` when the shell is not installed.
fn hold_write_lock(file: &str) -> Option<(std::process::Child, std::process::ChildStdin)> {
    use std::io::Write;
    use std::process::{Command, Stdio};
    if Command::new("sqlite3").arg("-version").output().is_err() {
        eprintln!("SKIPPED: the sqlite3 shell is not installed");
        return None;
    }
    let mut holder = Command::new("sqlite3")
        .arg(file)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut stdin = holder.stdin.take().unwrap();
    // The SELECT after BEGIN IMMEDIATE prints once the lock is held.
    stdin
        .write_all(b"BEGIN IMMEDIATE;\nSELECT 'locked';\n")
        .unwrap();
    stdin.flush().unwrap();
    let mut out = holder.stdout.take().unwrap();
    let mut buf = [0u8; 6];
    out.read_exact(&mut buf).unwrap();
    assert_eq!(&buf, b"locked");
    Some((holder, stdin))
}

const LOCKED_DAY: &str = "/v1/sites/S1/lines/L1/days/2026-03-02";

#[test]
fn a_write_while_another_process_holds_the_database_is_503_retryable_and_writes_nothing() {
    // Issue #3: busy is mapped to a retryable error. Another process (the sqlite3 shell)
    // holds the write lock past the store's 5 s busy timeout; the PUT gets 503
    // `unavailable` with Retry-After, and nothing is written.
    let s = Server::start();
    s.site("S1", &["L1"]);
    let ingest = s.key("ingest", &["S1"]);
    let before = s.snapshot();
    let Some((mut holder, stdin)) = hold_write_lock(s.database.trim_start_matches("sqlite:"))
    else {
        return;
    };
    let body = || Body::Json(json!({"inspected": 10, "defective": 1}));
    let r = s.request("PUT", LOCKED_DAY, Some(&ingest), body());
    drop(stdin); // the shell exits and its transaction rolls back
    let _ = holder.wait();
    r.problem(503, "unavailable");
    assert!(
        r.header("retry-after")
            .is_some_and(|v| v.parse::<u32>().is_ok()),
        "Retry-After in seconds: {:?}",
        r.header("retry-after")
    );
    assert_eq!(s.snapshot(), before, "the refused write left nothing");
    // Once the lock is gone the same request goes through.
    let again = s.request("PUT", LOCKED_DAY, Some(&ingest), body());
    assert_eq!(again.status, 201, "{}", again.text);
}

#[test]
fn the_concurrency_limit_queues_v1_requests_but_not_the_probes() {
    // `--max-concurrency 1`: while one /v1 write waits for the database lock (about 5 s,
    // the busy timeout), a /v1 read waits its turn, and /livez (outside the limit) does not.
    let s = Server::start_with(&["--max-concurrency", "1"]);
    s.site("S1", &["L1"]);
    let ingest = s.key("ingest", &["S1"]);
    let reader = s.key("read", &[]);
    let Some((mut holder, stdin)) = hold_write_lock(s.database.trim_start_matches("sqlite:"))
    else {
        return;
    };
    let started = Instant::now();
    let (tx, rx) = mpsc::channel();
    std::thread::scope(|scope| {
        scope.spawn(|| {
            let r = s.request(
                "PUT",
                LOCKED_DAY,
                Some(&ingest),
                Body::Json(json!({"inspected": 10, "defective": 1})),
            );
            tx.send(r.status).unwrap();
        });
        std::thread::sleep(Duration::from_millis(500));
        let probe = s.request("GET", "/livez", None, Body::None);
        assert_eq!(probe.status, 200);
        let probe_done = started.elapsed();
        let read = s.request("GET", "/v1/sites", Some(&reader), Body::None);
        let read_done = started.elapsed();
        assert_eq!(read.status, 200, "{}", read.text);
        assert_eq!(
            rx.recv().unwrap(),
            503,
            "the blocked write times out as busy"
        );
        assert!(
            read_done >= Duration::from_secs(4),
            "the read waited for the write's slot: {read_done:?}"
        );
        // Waiting for the slot would take until the write gives up (>= 5 s).
        assert!(
            probe_done < Duration::from_secs(4),
            "the probe did not wait: {probe_done:?}"
        );
    });
    drop(stdin);
    let _ = holder.wait();
}
