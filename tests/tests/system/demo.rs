//! `dispar demo` end to end: start it on a free port, read the keys it prints, and
//! check through the JSON report API that the loaded scenario gives the verdicts
//! `demo-data/README.md` promises; then the keys' rights, ETag polling, and a
//! graceful stop that deletes the temporary database.
//!
//! The harness's `Server` starts `dispar serve`; the demo prints more than the
//! address, so this file starts its own process (with the harness's binary and
//! helpers) and reads standard output up to the `listening on` line.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::mpsc;
use std::time::Duration;

use dispar_system_tests::{Value, dispar_bin, send_sigterm, wait_for_exit};

/// A running `dispar demo` (also used by the baselines tests).
pub(crate) struct Demo {
    child: Option<Child>,
    /// Standard output up to and including the `listening on` line.
    banner: Vec<String>,
    base: String,
    http: reqwest::blocking::Client,
    log: PathBuf,
    _dir: tempfile::TempDir,
}

impl Demo {
    /// Starts `dispar demo --listen 127.0.0.1:0 EXTRA` and waits for its address.
    pub(crate) fn start(extra: &[&str]) -> Demo {
        let dir = tempfile::tempdir().unwrap();
        let log = dir.path().join("demo.log");
        let mut child = Command::new(dispar_bin())
            .args(["demo", "--listen", "127.0.0.1:0"])
            .args(extra)
            .env_remove("DATABASE_URL")
            .env_remove("DISPAR_LISTEN")
            .env("RUST_LOG", "info")
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(std::fs::File::create(&log).unwrap())
            .spawn()
            .expect("dispar demo starts");
        let stdout = child.stdout.take().unwrap();
        let (tx, rx) = mpsc::channel();
        std::thread::spawn(move || {
            let mut banner = Vec::new();
            let mut lines = BufReader::new(stdout).lines();
            for line in lines.by_ref() {
                let Ok(line) = line else { break };
                let done = line.starts_with("listening on ");
                banner.push(line);
                if done {
                    let _ = tx.send(banner);
                    break;
                }
            }
            // Keep draining so the demo never blocks on a full pipe.
            for _ in lines {}
        });
        // The debug build loads the 2,775 records in a few seconds.
        let banner = match rx.recv_timeout(Duration::from_secs(180)) {
            Ok(b) => b,
            Err(_) => {
                let _ = child.kill();
                let _ = child.wait();
                panic!(
                    "dispar demo did not print `listening on`; its log:\n{}",
                    std::fs::read_to_string(&log).unwrap_or_default()
                );
            }
        };
        let base = banner
            .last()
            .and_then(|l| l.strip_prefix("listening on "))
            .unwrap()
            .trim()
            .to_owned();
        Demo {
            child: Some(child),
            banner,
            base,
            http: reqwest::blocking::Client::builder()
                .timeout(Duration::from_secs(60))
                .build()
                .unwrap(),
            log,
            _dir: dir,
        }
    }

    fn log(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }

    /// The value of the one banner line `PREFIX VALUE`.
    pub(crate) fn line(&self, prefix: &str) -> String {
        let found: Vec<&String> = self
            .banner
            .iter()
            .filter(|l| l.starts_with(prefix))
            .collect();
        assert_eq!(
            found.len(),
            1,
            "one line starting {prefix:?} in:\n{}",
            self.banner.join("\n")
        );
        found[0][prefix.len()..].to_owned()
    }

    fn request(
        &self,
        method: &str,
        path: &str,
        token: &str,
        body: Option<(&str, String)>,
        headers: &[(&str, &str)],
    ) -> (u16, reqwest::header::HeaderMap, String) {
        let method = reqwest::Method::from_bytes(method.as_bytes()).unwrap();
        let mut req = self.http.request(method, format!("{}{path}", self.base));
        if !token.is_empty() {
            req = req.bearer_auth(token);
        }
        if let Some((content_type, text)) = body {
            req = req.header("content-type", content_type).body(text);
        }
        for (name, value) in headers {
            req = req.header(*name, *value);
        }
        let resp = req.send().unwrap();
        let status = resp.status().as_u16();
        let headers = resp.headers().clone();
        (status, headers, resp.text().unwrap())
    }

    /// `GET path` with `token`; must be 200 JSON.
    pub(crate) fn json(&self, path: &str, token: &str) -> Value {
        let (status, _, text) = self.request("GET", path, token, None, &[]);
        assert_eq!(status, 200, "GET {path}: {text}");
        serde_json::from_str(&text).unwrap_or_else(|e| panic!("GET {path}: not JSON ({e}): {text}"))
    }

    fn pid(&self) -> u32 {
        self.child.as_ref().unwrap().id()
    }

    /// SIGTERM, then wait up to 30 s.
    fn terminate(&mut self) -> ExitStatus {
        send_sigterm(self.pid());
        let child = self.child.take().unwrap();
        wait_for_exit(child, &|| self.log())
    }
}

impl Drop for Demo {
    fn drop(&mut self) {
        if let Some(mut child) = self.child.take() {
            let _ = child.kill();
            let _ = child.wait();
        }
        if std::thread::panicking() {
            eprintln!(
                "---- dispar demo stdout ----\n{}\n---- dispar demo log ----\n{}",
                self.banner.join("\n"),
                self.log()
            );
        }
    }
}

/// The group with this `code` in a report.
fn group<'a>(report: &'a Value, code: &str) -> &'a Value {
    report["groups"]
        .as_array()
        .unwrap()
        .iter()
        .find(|g| g["code"] == code)
        .unwrap_or_else(|| panic!("no group {code} in {report}"))
}

fn flag(report: &Value, name: &str) -> Option<String> {
    group(report, name)["flag"].as_str().map(str::to_owned)
}

/// The 25 ISO weeks of the scenario.
fn weeks() -> impl Iterator<Item = String> {
    (2..=26).map(|w| format!("2026-W{w:02}"))
}

#[test]
fn the_demo_loads_the_scenario_and_gives_the_readme_verdicts() {
    let mut demo = Demo::start(&[]);

    // What it prints: the three keys, each once, the page URL, the address.
    let read = demo.line("read key: ");
    let ingest = demo.line("ingest key: ");
    let admin = demo.line("admin key: ");
    for token in [&read, &ingest, &admin] {
        assert!(
            token.starts_with("dsp_") && !token.contains(' '),
            "{token:?}"
        );
    }
    assert!(
        demo.base.starts_with("http://127.0.0.1:") && !demo.base.ends_with(":0"),
        "{}",
        demo.base
    );
    let page = demo.line("report page: ");
    assert!(
        page.starts_with(&format!("{}/report?", demo.base)),
        "{page}"
    );
    let banner = demo.banner.join("\n");
    for needle in [
        "curl",
        "/v1/counts",
        "/days/",
        "text/csv",
        "If-None-Match",
        "/v1/reports?period=2026-W16",
    ] {
        assert!(
            banner.contains(needle),
            "{needle:?} missing from:\n{banner}"
        );
    }
    // Progress of the load on standard error (plain lines when it is not a terminal).
    let log = demo.log();
    assert!(
        log.contains("loading counts: week 25/25 (2026-W26), 2775/2775 records"),
        "no final progress line in:\n{log}"
    );
    let database = PathBuf::from(demo.line("database: ").split(" (").next().unwrap());
    assert!(database.is_file(), "{}", database.display());
    assert_ne!(database.file_name().unwrap(), "dispar.db");

    // The report page answers (its content is the web helper's test).
    let (status, _, _) = demo.request("GET", "/sign-in", "", None, &[]);
    assert_eq!(status, 200, "GET /sign-in");

    // KES, the drifting plant: above in 2026-W15..W18 and in no other week.
    let mut above = Vec::new();
    for week in weeks() {
        let r = demo.json(&format!("/v1/reports?period={week}&level=site"), &read);
        assert_eq!(r["groups"].as_array().unwrap().len(), 6, "{week}: {r}");
        assert_eq!(
            r["test"]["significant"], true,
            "{week}: the sites differ: {r}"
        );
        if flag(&r, "KES").as_deref() == Some("above") {
            above.push(week.clone());
            assert!(
                r["flagged"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .any(|f| f["code"] == "KES" && f["flag"] == "above"),
                "{week}: KES in flagged[]: {r}"
            );
        }
        if week == "2026-W13" {
            let kes = group(&r, "KES");
            assert!(
                kes["adjusted_residual"].as_f64().unwrap() < -8.0,
                "W13: KES well below the pool (README: -8.9): {kes}"
            );
        }
        if week == "2026-W16" {
            let kes = group(&r, "KES");
            assert_eq!(kes["inspected"], 97_809, "README's W16 table: {kes}");
            assert_eq!(kes["defective"], 1_977, "README's W16 table: {kes}");
        }
    }
    assert_eq!(
        above,
        ["2026-W15", "2026-W16", "2026-W17", "2026-W18"],
        "weeks with KES flagged above"
    );

    // The spike: MRQ's L2 above among MRQ's lines in W09 only.
    for week in weeks() {
        let r = demo.json(
            &format!("/v1/reports?period={week}&level=line&site=MRQ"),
            &read,
        );
        assert_eq!(r["groups"].as_array().unwrap().len(), 4, "{week}: {r}");
        let l2 = flag(&r, "MRQ/L2");
        if week == "2026-W09" {
            assert_eq!(l2.as_deref(), Some("above"), "W09: {r}");
        } else {
            assert_ne!(l2.as_deref(), Some("above"), "{week}: {r}");
        }
    }
    let day = demo.json("/v1/reports?period=2026-02-25&level=line&site=MRQ", &read);
    assert_eq!(flag(&day, "MRQ/L2").as_deref(), Some("above"), "{day}");

    // The small plant: SEM's two lines need an exact test in every week.
    for week in weeks() {
        let r = demo.json(
            &format!("/v1/reports?period={week}&level=line&site=SEM"),
            &read,
        );
        let method = r["test"]["method"].as_str().unwrap_or("none");
        assert!(
            method == "fisher" || method == "monte-carlo",
            "{week}: SEM's lines use {method}: {r}"
        );
        assert_eq!(r["validity"]["cochran_holds"], false, "{week}: {r}");
    }

    // ETag polling: 304 while nothing changed.
    let path = "/v1/reports?period=2026-W16&level=site";
    let (status, headers, _) = demo.request("GET", path, &read, None, &[]);
    assert_eq!(status, 200);
    let etag = headers
        .get("etag")
        .and_then(|v| v.to_str().ok())
        .expect("an ETag")
        .to_owned();
    let (status, _, text) = demo.request("GET", path, &read, None, &[("if-none-match", &etag)]);
    assert_eq!(status, 304, "{text}");

    // The read key cannot write; the ingest key can, for the demo's sites.
    let day_path = "/v1/sites/KES/lines/L1/days/2026-06-29";
    let day_body = r#"{"inspected": 9120, "defective": 61, "defects": {"seal-leak": 12}}"#;
    let (status, _, text) = demo.request(
        "PUT",
        day_path,
        &read,
        Some(("application/json", day_body.to_owned())),
        &[],
    );
    assert_eq!(status, 403, "read key PUT: {text}");
    let csv = "site,line,date,inspected,defective,defect:seal-leak\n\
               KES,L1,2026-06-30,9050,58,9\nKES,L2,2026-06-30,8600,49,8\n";
    let (status, _, text) = demo.request(
        "POST",
        "/v1/counts",
        &read,
        Some(("text/csv", csv.to_owned())),
        &[],
    );
    assert_eq!(status, 403, "read key batch: {text}");
    let (status, _, text) = demo.request(
        "PUT",
        day_path,
        &ingest,
        Some(("application/json", day_body.to_owned())),
        &[],
    );
    assert_eq!(status, 201, "ingest key PUT: {text}");
    let (status, _, text) = demo.request(
        "POST",
        "/v1/counts",
        &ingest,
        Some(("text/csv", csv.to_owned())),
        &[],
    );
    assert_eq!(status, 201, "ingest key batch: {text}");
    // The ingest key may not register sites (that is the admin key's job).
    let (status, _, text) = demo.request(
        "PUT",
        "/v1/sites/NHV",
        &ingest,
        Some(("application/json", r#"{"name": "Northaven"}"#.to_owned())),
        &[],
    );
    assert_eq!(status, 403, "ingest key PUT site: {text}");
    let (status, _, text) = demo.request(
        "PUT",
        "/v1/sites/NHV",
        &admin,
        Some(("application/json", r#"{"name": "Northaven"}"#.to_owned())),
        &[],
    );
    assert_eq!(status, 201, "admin key PUT site: {text}");

    // The writes changed the data version: the old tag no longer matches.
    let (status, _, text) = demo.request("GET", path, &read, None, &[("if-none-match", &etag)]);
    assert_eq!(status, 200, "{text}");

    // A graceful stop deletes the temporary database.
    let status = demo.terminate();
    assert!(
        status.success(),
        "exit status {status}; log:\n{}",
        demo.log()
    );
    assert!(
        !database.exists() && !database.parent().unwrap().exists(),
        "{} is left",
        database.display()
    );
}

#[test]
fn the_demo_refuses_an_existing_database_file() {
    let dir = tempfile::tempdir().unwrap();
    let file: &Path = &dir.path().join("dispar.db");
    std::fs::write(file, b"someone's data").unwrap();
    let out = Command::new(dispar_bin())
        .args(["demo", "--listen", "127.0.0.1:0", "--database"])
        .arg(file)
        .env_remove("DATABASE_URL")
        .output()
        .unwrap();
    assert!(!out.status.success());
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("already exists"), "{stderr}");
    assert!(
        out.stdout.is_empty(),
        "{}",
        String::from_utf8_lossy(&out.stdout)
    );
    assert_eq!(std::fs::read(file).unwrap(), b"someone's data");
}

#[test]
fn demo_generate_rewrites_the_committed_files_byte_for_byte() {
    // demo-data/README.md: `dispar demo generate --seed 7 --out demo-data/` rewrites
    // sites.csv, lines.csv and counts.csv byte for byte; another seed keeps the
    // calendar, plants and lines but draws other counts.
    let committed = Path::new(env!("CARGO_MANIFEST_DIR")).join("../demo-data");
    let dir = tempfile::tempdir().unwrap();
    let generate = |seed: &str, out: &Path| {
        let o = dispar_system_tests::run_cli(&[
            "demo",
            "generate",
            "--seed",
            seed,
            "--out",
            out.to_str().unwrap(),
        ]);
        assert!(
            o.status.success(),
            "demo generate --seed {seed}: {}",
            String::from_utf8_lossy(&o.stderr)
        );
    };
    let seven = dir.path().join("seven");
    generate("7", &seven);
    for file in ["sites.csv", "lines.csv", "counts.csv"] {
        let made = std::fs::read(seven.join(file)).unwrap();
        let kept = std::fs::read(committed.join(file)).unwrap();
        assert!(made == kept, "{file} differs from demo-data/{file}");
    }
    assert!(
        !seven.join("README.md").exists(),
        "generate writes no README"
    );

    let eight = dir.path().join("eight");
    generate("8", &eight);
    let read = |d: &Path, f: &str| std::fs::read_to_string(d.join(f)).unwrap();
    assert_eq!(read(&eight, "sites.csv"), read(&seven, "sites.csv"));
    assert_eq!(read(&eight, "lines.csv"), read(&seven, "lines.csv"));
    let (c7, c8) = (read(&seven, "counts.csv"), read(&eight, "counts.csv"));
    assert_ne!(c7, c8, "another seed draws other counts");
    // Same calendar: the same (site, line, date) keys in the same order.
    let keys = |c: &str| -> Vec<String> {
        c.lines()
            .map(|l| l.splitn(4, ',').take(3).collect::<Vec<_>>().join(","))
            .collect()
    };
    assert_eq!(keys(&c7), keys(&c8), "another seed keeps the calendar");
}

/// With `DISPAR_TEST_POSTGRES`: the demo loaded into PostgreSQL gives the same report JSON
/// as the demo on SQLite (reports carry no timestamps unless `as_of` is given).
#[test]
fn the_demo_on_postgresql_gives_the_same_reports_as_on_sqlite() {
    let Some(server) = dispar_system_tests::postgres_server() else {
        return;
    };
    let pg = dispar_system_tests::PgDatabase::create(&server);
    let on_pg = Demo::start(&["--database", &pg.url]);
    let on_sqlite = Demo::start(&[]);
    let (kp, ks) = (on_pg.line("read key: "), on_sqlite.line("read key: "));
    for path in [
        "/v1/reports?period=2026-W16&level=site",
        "/v1/reports?period=2026-W09&level=line&site=MRQ",
        "/v1/reports?period=2026-W20&level=line&site=SEM",
        "/v1/reports?period=2026-04&level=all-lines",
        "/v1/reports?period=2026-03-02..2026-03-20&level=site",
        "/v1/reports?period=2026-03-18&level=line&site=MRQ",
        "/v1/reports/series?from=2026-W02&to=2026-W26&level=site",
        "/v1/reports/series?from=2026-01&to=2026-06&level=line&site=KES",
    ] {
        assert_eq!(on_pg.json(path, &kp), on_sqlite.json(path, &ks), "{path}");
    }
    // A demo never loads into a database that already holds sites.
    let out = std::process::Command::new(dispar_bin())
        .args(["demo", "--listen", "127.0.0.1:0", "--database", &pg.url])
        .output()
        .unwrap();
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("already holds 6 site(s)"), "{err}");
    assert!(
        !err.contains("dispar:dispar@"),
        "no password in messages: {err}"
    );
}
