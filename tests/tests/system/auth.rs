//! API keys: the command line, 401 with `WWW-Authenticate`, roles, and the
//! cross-plant write attempt.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, json, run_cli};

#[test]
fn a_request_without_a_valid_key_is_401_with_a_bearer_challenge() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    let admin = s.admin().to_owned();
    let (id, secret) = admin
        .strip_prefix("dsp_")
        .and_then(|r| r.split_once('_'))
        .expect("dsp_<id>_<secret>");
    let flipped = format!(
        "dsp_{id}_{}{}",
        if secret.starts_with('0') { '1' } else { '0' },
        &secret[1..]
    );
    let cases: Vec<(&str, Option<String>, Option<&str>)> = vec![
        ("no header", None, None),
        ("wrong scheme", None, Some("Basic dXNlcjpwYXNz")),
        ("malformed token", Some("not-a-key".to_owned()), None),
        ("unknown id", Some(format!("dsp_999_{secret}")), None),
        ("wrong secret", Some(flipped), None),
    ];
    for (name, token, raw_header) in cases {
        let headers: Vec<(&str, &str)> = raw_header
            .map(|h| ("authorization", h))
            .into_iter()
            .collect();
        let r = s.request_with("GET", "/v1/sites", token.as_deref(), Body::None, &headers);
        r.problem(401, "unauthorized");
        let challenge = r
            .header("www-authenticate")
            .unwrap_or_else(|| panic!("{name}: no challenge"));
        assert!(
            challenge.starts_with("Bearer realm=\"dispar\""),
            "{name}: {challenge}"
        );
        if name == "no header" {
            assert!(!challenge.contains("error="), "{name}: {challenge}");
        } else {
            assert!(
                challenge.contains("error=\"invalid_token\""),
                "{name}: {challenge}"
            );
        }
    }
    // Writes without a key are refused before the body is looked at.
    let r = s.request(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-02",
        None,
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    r.problem(401, "unauthorized");
    assert!(s.snapshot().is_empty());
}

#[test]
fn keys_are_listed_without_secrets_and_revoked_keys_are_refused() {
    let s = Server::start();
    let read = s.key("read", &[]);
    let ingest = s.key("ingest", &["S1", "S2"]);
    assert_eq!(
        s.request("GET", "/v1/sites", Some(&read), Body::None)
            .status,
        200
    );

    let list = s.cli(&["keys", "list"]);
    assert!(list.status.success());
    let text = String::from_utf8(list.stdout).unwrap();
    assert!(
        text.contains("ingest") && text.contains("S1,S2") && text.contains("read"),
        "{text}"
    );
    let secret = read.rsplit('_').next().unwrap();
    assert!(!text.contains(secret), "keys list never shows a secret");
    assert!(!text.contains("revoked"), "{text}");

    let id = read.split('_').nth(1).unwrap();
    let revoke = s.cli(&["keys", "revoke", id]);
    assert!(
        revoke.status.success(),
        "{}",
        String::from_utf8_lossy(&revoke.stderr)
    );
    // The server trusts a key it read for up to 2 s (the key cache).
    std::thread::sleep(std::time::Duration::from_millis(2_100));
    let r = s.request("GET", "/v1/sites", Some(&read), Body::None);
    let p = r.problem(401, "unauthorized");
    assert!(p["detail"].as_str().unwrap().contains("revoked"), "{p}");
    let text = String::from_utf8(s.cli(&["keys", "list"]).stdout).unwrap();
    assert!(text.contains("revoked"), "{text}");
    assert_eq!(
        s.request("GET", "/v1/sites/S1", Some(&ingest), Body::None)
            .status,
        404,
        "other keys still work"
    );

    let missing = s.cli(&["keys", "revoke", "999"]);
    assert!(!missing.status.success());
    assert!(String::from_utf8_lossy(&missing.stderr).contains("no key 999"));
}

#[test]
fn keys_create_prints_only_the_token_on_stdout_and_checks_its_arguments() {
    let dir = tempfile::tempdir().unwrap();
    let db = format!("sqlite:{}", dir.path().join("k.db").display());
    let out = run_cli(&[
        "keys",
        "create",
        "--role",
        "ingest",
        "--site",
        "S1",
        "--site",
        "S2",
        "--label",
        "line PLC",
        "--database",
        &db,
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let stdout = String::from_utf8(out.stdout).unwrap();
    let lines: Vec<&str> = stdout.lines().collect();
    assert_eq!(lines.len(), 1, "{stdout:?}");
    assert!(
        lines[0].starts_with("dsp_1_") && lines[0].len() == "dsp_1_".len() + 64,
        "{stdout:?}"
    );
    let stderr = String::from_utf8(out.stderr).unwrap();
    assert!(
        stderr.contains("ingest") && stderr.contains("S1, S2") && stderr.contains("line PLC"),
        "{stderr}"
    );

    for (args, needle) in [
        (vec!["--role", "ingest"], "at least one --site"),
        (vec!["--role", "read", "--site", "S1"], "ingest keys only"),
        (vec!["--role", "boss"], "unknown role"),
        (vec!["--role", "ingest", "--site", "bad code"], "--site"),
    ] {
        let mut all = vec!["keys", "create"];
        all.extend(args.iter().copied());
        all.extend(["--database", &db]);
        let out = run_cli(&all);
        assert!(!out.status.success(), "{all:?} should fail");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{all:?}: {err}");
        assert!(out.stdout.is_empty(), "{all:?} printed a token");
    }
}

#[test]
fn each_role_may_do_what_its_table_says() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    s.site("S2", &["L1"]);
    s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-01",
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    s.as_admin(
        "PUT",
        "/v1/sites/S2/lines/L1/days/2026-03-01",
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    let admin = s.admin().to_owned();
    let read = s.key("read", &[]);
    let ingest = s.key("ingest", &["S1"]);
    let day = json!({"inspected": 5, "defective": 1});
    let batch = |site: &str| json!({"records": [{"site": site, "line": "L1", "date": "2026-03-03", "inspected": 2, "defective": 0}]});
    // (method, path, body, [admin, read, ingest of S1] expected statuses)
    let cases: Vec<(&str, &str, Option<serde_json::Value>, [u16; 3])> = vec![
        ("GET", "/v1/sites", None, [200, 200, 403]),
        ("GET", "/v1/sites/S1", None, [200, 200, 200]),
        ("GET", "/v1/sites/S2", None, [200, 200, 403]),
        (
            "PUT",
            "/v1/sites/S3",
            Some(json!({"name": "Three"})),
            [201, 403, 403],
        ),
        (
            "PUT",
            "/v1/sites/S1/lines/L5",
            Some(json!({})),
            [201, 403, 403],
        ),
        (
            "PUT",
            "/v1/sites/S1/lines/L1/days/2026-03-02",
            Some(day.clone()),
            [201, 403, 200],
        ),
        (
            "PUT",
            "/v1/sites/S2/lines/L1/days/2026-03-02",
            Some(day.clone()),
            [201, 403, 403],
        ),
        ("POST", "/v1/counts", Some(batch("S1")), [201, 403, 200]),
        ("POST", "/v1/counts", Some(batch("S2")), [201, 403, 403]),
        ("GET", "/v1/counts", None, [200, 200, 403]),
        ("GET", "/v1/counts?site=S1", None, [200, 200, 200]),
        ("GET", "/v1/counts?site=S2", None, [200, 200, 403]),
        (
            "GET",
            "/v1/sites/S1/lines/L1/days/2026-03-01",
            None,
            [200, 200, 200],
        ),
        (
            "GET",
            "/v1/sites/S2/lines/L1/days/2026-03-01",
            None,
            [200, 200, 403],
        ),
        (
            "GET",
            "/v1/sites/S1/lines/L1/days/2026-03-01/revisions",
            None,
            [200, 200, 200],
        ),
        (
            "GET",
            "/v1/sites/S2/lines/L1/days/2026-03-01/revisions",
            None,
            [200, 200, 403],
        ),
    ];
    for (method, path, body, expected) in cases {
        // Admin goes first so that later roles find the same state (writes by admin
        // create; an ingest write of the same record is then a correction).
        for (who, token, want) in [
            ("admin", &admin, expected[0]),
            ("read", &read, expected[1]),
            ("ingest", &ingest, expected[2]),
        ] {
            let b = match &body {
                Some(v) => Body::Json(v.clone()),
                None => Body::None,
            };
            let before = s.snapshot();
            let r = s.request(method, path, Some(token), b);
            assert_eq!(r.status, want, "{who} {method} {path}: {}", r.text);
            if want == 403 {
                r.problem(403, "forbidden");
                assert_eq!(s.snapshot(), before, "{who} {method} {path} wrote nothing");
            }
        }
    }
}

#[test]
fn a_plant_key_writing_another_plant_gets_403_and_nothing_is_written() {
    let s = Server::start();
    s.site("BRNO", &["L1"]);
    s.site("LYON", &["L1"]);
    let brno = s.key("ingest", &["BRNO"]);
    s.request(
        "PUT",
        "/v1/sites/BRNO/lines/L1/days/2026-03-02",
        Some(&brno),
        Body::Json(json!({"inspected": 10, "defective": 1})),
    );
    let before = s.snapshot();
    assert_eq!(before.len(), 1);

    let r = s.request(
        "PUT",
        "/v1/sites/LYON/lines/L1/days/2026-03-02",
        Some(&brno),
        Body::Json(json!({"inspected": 10, "defective": 1})),
    );
    let p = r.problem(403, "forbidden");
    assert!(p["detail"].as_str().unwrap().contains("LYON"), "{p}");
    assert_eq!(s.snapshot(), before);

    // A batch mixing its own plant with another: refused whole, its own rows included.
    let mixed = json!({"records": [
        {"site": "BRNO", "line": "L1", "date": "2026-03-03", "inspected": 10, "defective": 1},
        {"site": "LYON", "line": "L1", "date": "2026-03-03", "inspected": 10, "defective": 1},
    ]});
    let p = s
        .request("POST", "/v1/counts", Some(&brno), Body::Json(mixed))
        .problem(403, "forbidden");
    assert_eq!(p["refused_sites"], json!(["LYON"]), "{p}");
    assert_eq!(s.snapshot(), before);

    let csv =
        "site,line,date,inspected,defective\nBRNO,L1,2026-03-04,1,0\nLYON,L1,2026-03-04,1,0\n";
    s.request("POST", "/v1/counts", Some(&brno), Body::Csv(csv.to_owned()))
        .problem(403, "forbidden");
    assert_eq!(s.snapshot(), before);
    // Even for a site that does not exist yet.
    let r = s.request(
        "PUT",
        "/v1/sites/OSLO/lines/L1/days/2026-03-02",
        Some(&brno),
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    r.problem(403, "forbidden");
    assert_eq!(s.snapshot(), before);
}

#[test]
fn the_database_keeps_only_a_hash_of_each_secret() {
    // Issue #3: keys are 128+ random bits, stored as a hash. The token is
    // `dsp_<id>_<64 hex digits>` (256 bits); neither the hex text nor the raw secret bytes
    // may appear in the database file or its WAL.
    let s = Server::start();
    let token = s.key("read", &[]);
    let hex = token.rsplit('_').next().unwrap();
    assert_eq!(hex.len(), 64, "256-bit secret: {token}");
    assert!(hex.bytes().all(|b| b.is_ascii_hexdigit()), "{token}");
    let raw: Vec<u8> = (0..32)
        .map(|i| u8::from_str_radix(&hex[2 * i..2 * i + 2], 16).unwrap())
        .collect();
    // The key works, so it was stored before we look.
    assert_eq!(
        s.request("GET", "/v1/sites", Some(&token), Body::None)
            .status,
        200
    );
    if dispar_system_tests::postgres_server().is_some() {
        eprintln!("SKIPPED on PostgreSQL: this reads the SQLite file and its WAL");
        return;
    }
    let db = s.database.trim_start_matches("sqlite:").to_owned();
    let mut seen = 0;
    for file in [db.clone(), format!("{db}-wal")] {
        let Ok(bytes) = std::fs::read(&file) else {
            continue;
        };
        seen += bytes.len();
        assert!(
            !bytes.windows(hex.len()).any(|w| w == hex.as_bytes()),
            "{file} holds the secret in hex"
        );
        assert!(
            !bytes.windows(raw.len()).any(|w| w == raw.as_slice()),
            "{file} holds the raw secret"
        );
    }
    assert!(seen > 0, "the database files were read");
}

#[test]
fn a_key_over_its_rate_gets_429_with_retry_after_and_other_keys_do_not() {
    let s = Server::start_with(&["--rate-limit", "5"]);
    let busy = s.key("read", &[]);
    let calm = s.key("read", &[]);
    // A burst of twice the rate passes, then the bucket is empty.
    let statuses: Vec<u16> = (0..15)
        .map(|_| {
            s.request("GET", "/v1/sites", Some(&busy), Body::None)
                .status
        })
        .collect();
    assert!(statuses[..10].iter().all(|&c| c == 200), "{statuses:?}");
    let refused = s.request("GET", "/v1/sites", Some(&busy), Body::None);
    let p = refused.problem(429, "rate-limited");
    assert!(
        p["detail"]
            .as_str()
            .unwrap()
            .contains("5 requests a second"),
        "{p}"
    );
    assert_eq!(refused.header("retry-after"), Some("1"));
    assert_eq!(
        s.request("GET", "/v1/sites", Some(&calm), Body::None)
            .status,
        200,
        "each key has its own bucket"
    );
    // A second later five more tokens are back.
    std::thread::sleep(std::time::Duration::from_millis(1100));
    assert_eq!(
        s.request("GET", "/v1/sites", Some(&busy), Body::None)
            .status,
        200
    );
}

#[test]
fn a_revoked_key_stops_working_within_two_seconds() {
    let s = Server::start();
    let key = s.key("read", &[]);
    assert_eq!(
        s.request("GET", "/v1/sites", Some(&key), Body::None).status,
        200
    );
    let id = key.split('_').nth(1).unwrap().to_owned();
    let out = s.cli(&["keys", "revoke", &id]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let revoked = std::time::Instant::now();
    loop {
        let r = s.request("GET", "/v1/sites", Some(&key), Body::None);
        if r.status == 401 {
            break;
        }
        assert_eq!(r.status, 200);
        assert!(
            revoked.elapsed() < std::time::Duration::from_millis(2_500),
            "still accepted {:?} after the revocation",
            revoked.elapsed()
        );
        std::thread::sleep(std::time::Duration::from_millis(50));
    }
}
