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
