//! `POST /v1/counts`: JSON and CSV batches, all-or-nothing, idempotency keys.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, Value, json};

fn plant() -> Server {
    let s = Server::start();
    s.site("S1", &["L1", "L2"]);
    s.site("S2", &["L1"]);
    s
}

fn record(site: &str, line: &str, date: &str, inspected: u64, defective: u64) -> Value {
    json!({"site": site, "line": line, "date": date, "inspected": inspected, "defective": defective})
}

#[test]
fn a_json_batch_is_written_and_reports_each_outcome() {
    let s = plant();
    let ingest = s.key("ingest", &["S1", "S2"]);
    let batch = json!({"records": [
        record("S1", "L1", "2026-03-02", 100, 2),
        record("S1", "L2", "2026-03-02", 90, 1),
        {"site": "S2", "line": "L1", "date": "2026-03-02", "product": "P-7", "inspected": 40,
         "defective": 3, "defects": {"flash": 4}, "revision": 1},
    ]});
    let r = s.request(
        "POST",
        "/v1/counts",
        Some(&ingest),
        Body::Json(batch.clone()),
    );
    assert_eq!(r.status, 201, "{}", r.text);
    let v = r.json();
    assert_eq!(v["received"], 3);
    assert_eq!(v["created"], 3);
    assert_eq!(v["outcomes"], json!(["created", "created", "created"]));

    let again = s.request("POST", "/v1/counts", Some(&ingest), Body::Json(batch));
    assert_eq!(
        again.status, 200,
        "nothing created the second time: {}",
        again.text
    );
    assert_eq!(again.json()["unchanged"], 3);
    assert_eq!(again.header("idempotent-replayed"), None);

    let mixed = json!({"records": [
        record("S1", "L1", "2026-03-02", 100, 3),
        record("S1", "L1", "2026-03-03", 100, 0),
        record("S1", "L2", "2026-03-02", 90, 1),
    ]});
    let r = s.request("POST", "/v1/counts", Some(&ingest), Body::Json(mixed));
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(
        r.json()["outcomes"],
        json!(["corrected", "created", "unchanged"])
    );
    let got = s
        .as_admin(
            "GET",
            "/v1/sites/S2/lines/L1/days/2026-03-02?product=P-7",
            Body::None,
        )
        .json();
    assert_eq!(got["defects"]["flash"], 4);
    assert_eq!(got["revision"], 1);
}

#[test]
fn one_bad_row_rolls_back_the_whole_batch() {
    let s = plant();
    s.as_admin(
        "POST",
        "/v1/counts",
        Body::Json(json!({"records": [record("S1", "L1", "2026-03-01", 5, 0)]})),
    );
    let before = s.snapshot();

    // A domain error in record 1 and an unregistered line in record 3.
    let bad = json!({"records": [
        record("S1", "L1", "2026-03-02", 100, 2),
        record("S1", "L1", "2026-03-03", 10, 11),
        record("S1", "L2", "2026-03-02", 90, 1),
        record("S1", "L1", "2026-03-01", 6, 0),
    ]});
    let r = s.as_admin("POST", "/v1/counts", Body::Json(bad));
    let p = r.problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/records/1/defective", "{p}");
    assert_eq!(p["errors"][0]["reason"], "exceeds-inspected", "{p}");
    assert_eq!(s.snapshot(), before, "no record of the batch was written");

    // Every record valid, but one names a line that is not registered.
    let unknown = json!({"records": [
        record("S1", "L1", "2026-03-02", 100, 2),
        record("S1", "L1", "2026-03-01", 6, 0),
        record("S2", "L9", "2026-03-02", 90, 1),
        record("S9", "L1", "2026-03-02", 90, 1),
    ]});
    let r = s.as_admin("POST", "/v1/counts", Body::Json(unknown));
    let p = r.problem(422, "validation");
    let errors: Vec<(String, String)> = p["errors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            (
                e["pointer"].as_str().unwrap().to_owned(),
                e["reason"].as_str().unwrap().to_owned(),
            )
        })
        .collect();
    assert_eq!(
        errors,
        vec![
            ("/records/2/line".to_owned(), "unknown-line".to_owned()),
            ("/records/3/site".to_owned(), "unknown-site".to_owned())
        ],
        "{p}"
    );
    assert_eq!(
        s.snapshot(),
        before,
        "the corrected record 1 was rolled back too"
    );

    // A stale plant revision in the middle of a batch: 409, nothing written.
    s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L2/days/2026-03-05",
        Body::Json(json!({"inspected": 10, "defective": 1, "revision": 5})),
    );
    let before = s.snapshot();
    let stale = json!({"records": [
        record("S1", "L1", "2026-03-06", 100, 2),
        {"site": "S1", "line": "L2", "date": "2026-03-05", "inspected": 10, "defective": 2, "revision": 4},
    ]});
    let p = s
        .as_admin("POST", "/v1/counts", Body::Json(stale))
        .problem(409, "stale-revision");
    assert_eq!(p["current_revision"], 5, "{p}");
    assert_eq!(p["errors"][0]["pointer"], "/records/1/revision", "{p}");
    assert_eq!(s.snapshot(), before);

    // Two records with the same natural key in one batch are ambiguous.
    let dup = json!({"records": [record("S1", "L1", "2026-03-07", 1, 0), record("S1", "L1", "2026-03-07", 2, 0)]});
    let p = s
        .as_admin("POST", "/v1/counts", Body::Json(dup))
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/records/1", "{p}");
    assert_eq!(p["errors"][0]["reason"], "duplicate", "{p}");
    assert_eq!(s.snapshot(), before);
}

#[test]
fn shape_errors_name_every_bad_record() {
    let s = plant();
    let before = s.snapshot();
    let body = json!({"records": [
        record("S1", "L1", "2026-03-02", 1, 0),
        {"site": "S1", "line": "L1", "date": "2026-03-03", "inspected": 1, "defective": 0, "colour": "red"},
        {"site": 7, "line": "L1", "date": "2026-03-04", "inspected": 1, "defective": 0},
    ]});
    let p = s
        .as_admin("POST", "/v1/counts", Body::Json(body))
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/records/1/colour", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-field", "{p}");
    assert_eq!(p["errors"][1]["pointer"], "/records/2/site", "{p}");
    assert_eq!(p["errors"][1]["reason"], "invalid-type", "{p}");

    let top = s.as_admin(
        "POST",
        "/v1/counts",
        Body::Json(json!({"records": [], "source": "mes"})),
    );
    let p = top.problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/source", "{p}");
    let empty = s.as_admin("POST", "/v1/counts", Body::Json(json!({"records": []})));
    let p = empty.problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/records", "{p}");
    assert_eq!(p["errors"][0]["reason"], "empty", "{p}");
    let missing = s.as_admin("POST", "/v1/counts", Body::Json(json!({})));
    let p = missing.problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/records", "{p}");
    assert_eq!(p["errors"][0]["reason"], "required", "{p}");
    assert_eq!(s.snapshot(), before);
}

#[test]
fn a_csv_batch_with_quoted_fields_crlf_and_defect_columns_is_read() {
    let s = plant();
    let csv = "product,site,line,date,inspected,defective,defect:scratch,defect:short-shot,revision\r\n\
               CAP-28,S1,L1,2026-03-02,1000,12,7,6,3\r\n\
               ,\"S1\",\"L2\",2026-03-02,\"500\",4,,2,\r\n\
               \"PUMP.XL\",S2,L1,2026-03-02,80,0,0,,\r\n";
    let r = s.as_admin("POST", "/v1/counts", Body::Csv(csv.to_owned()));
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(r.json()["created"], 3);
    assert_eq!(s.snapshot().len(), 3);

    let cap = s
        .as_admin(
            "GET",
            "/v1/sites/S1/lines/L1/days/2026-03-02?product=CAP-28",
            Body::None,
        )
        .json();
    assert_eq!(cap["defects"], json!({"scratch": 7, "short-shot": 6}));
    assert_eq!(cap["revision"], 3);
    let l2 = s
        .as_admin("GET", "/v1/sites/S1/lines/L2/days/2026-03-02", Body::None)
        .json();
    assert_eq!(l2["inspected"], 500);
    assert_eq!(
        l2["defects"],
        json!({"short-shot": 2}),
        "an empty defect cell records nothing"
    );
    assert_eq!(l2["revision"], Value::Null);
    assert_eq!(l2["product"], Value::Null);
    let pump = s
        .as_admin(
            "GET",
            "/v1/sites/S2/lines/L1/days/2026-03-02?product=PUMP.XL",
            Body::None,
        )
        .json();
    assert_eq!(
        pump["defects"],
        json!({"scratch": 0}),
        "a 0 cell records zero"
    );

    // A quoted comma or quote stays inside its field: the code rule refuses the value
    // in the right column instead of the row falling apart into too many fields.
    let before = s.snapshot();
    let quoted = "site,line,date,inspected,defective,product\r\n\
                  S1,L1,2026-03-03,10,1,\"CAP,28\"\r\n\
                  S1,L1,2026-03-04,10,1,\"PUMP \"\"XL\"\"\"\r\n";
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(quoted.to_owned()))
        .problem(422, "validation");
    for (i, line) in [(0, 2), (1, 3)] {
        assert_eq!(p["errors"][i]["line"], line, "{p}");
        assert_eq!(p["errors"][i]["column"], "product", "{p}");
        assert_eq!(p["errors"][i]["reason"], "invalid-character", "{p}");
    }
    assert_eq!(s.snapshot(), before);
}

#[test]
fn csv_errors_name_the_file_line_and_column() {
    let s = plant();
    let before = s.snapshot();
    // Line 2 holds a quoted field with a line break, so the third record starts on line 5.
    let csv = "site,line,date,inspected,defective,product\r\n\
               S1,L1,2026-03-02,10,1,\"A\r\nB\"\r\n\
               S1,L1,2026-03-03,10,1,\r\n\
               S1,L1,2026-03-04,10,11,\r\n\
               S1,L1,2026-03-05,ten,1,\r\n";
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(csv.to_owned()))
        .problem(422, "validation");
    let errors: Vec<(u64, String, String)> = p["errors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            (
                e["line"].as_u64().unwrap(),
                e["column"].as_str().unwrap_or("").to_owned(),
                e["reason"].as_str().unwrap().to_owned(),
            )
        })
        .collect();
    assert_eq!(
        errors,
        vec![
            (2, "product".to_owned(), "invalid-character".to_owned()),
            (5, "defective".to_owned(), "exceeds-inspected".to_owned()),
            (6, "inspected".to_owned(), "not-a-number".to_owned()),
        ],
        "{p}"
    );
    assert!(
        p["errors"][0].get("pointer").is_none(),
        "CSV errors have line and column: {p}"
    );

    let unknown_line =
        "site,line,date,inspected,defective\nS1,L1,2026-03-02,1,0\nS1,L7,2026-03-02,1,0\n";
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(unknown_line.to_owned()))
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["line"], 3, "{p}");
    assert_eq!(p["errors"][0]["column"], "line", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-line", "{p}");

    let ragged = "site,line,date,inspected,defective\nS1,L1,2026-03-02,1\n";
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(ragged.to_owned()))
        .problem(400, "malformed-body");
    assert_eq!(p["errors"][0]["line"], 2, "{p}");
    assert_eq!(p["errors"][0]["reason"], "wrong-field-count", "{p}");

    let header = "site,line,day,inspected,defective\nS1,L1,2026-03-02,1,0\n";
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(header.to_owned()))
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["line"], 1, "{p}");
    assert_eq!(p["errors"][0]["column"], "day", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-column", "{p}");
    assert_eq!(p["errors"][1]["column"], "date", "{p}");
    assert_eq!(p["errors"][1]["reason"], "required", "{p}");

    let not_utf8 = Body::Raw {
        content_type: Some("text/csv"),
        bytes: b"site,line,date,inspected,defective\nS\xff,L1,2026-03-02,1,0\n".to_vec(),
    };
    let p = s
        .as_admin("POST", "/v1/counts", not_utf8)
        .problem(400, "malformed-body");
    assert_eq!(p["errors"][0]["reason"], "invalid-utf8", "{p}");
    assert_eq!(
        s.snapshot(),
        before,
        "nothing was written by any refused batch"
    );
}

#[test]
fn an_idempotency_key_replays_the_first_answer_and_refuses_another_body() {
    let s = plant();
    let ingest = s.key("ingest", &["S1"]);
    let body = json!({"records": [record("S1", "L1", "2026-03-02", 100, 2), record("S1", "L2", "2026-03-02", 50, 0)]});
    let post = |key: &str, token: &str, body: &Value| {
        s.request_with(
            "POST",
            "/v1/counts",
            Some(token),
            Body::Json(body.clone()),
            &[("idempotency-key", key)],
        )
    };
    let first = post("batch-0001", &ingest, &body);
    assert_eq!(first.status, 201, "{}", first.text);
    assert_eq!(first.header("idempotent-replayed"), None);
    let after_first = s.snapshot();

    let replay = post("batch-0001", &ingest, &body);
    assert_eq!(
        replay.status, 201,
        "the stored status is replayed: {}",
        replay.text
    );
    assert_eq!(
        replay.text, first.text,
        "the stored body is replayed byte for byte"
    );
    assert_eq!(replay.header("idempotent-replayed"), Some("true"));
    assert_eq!(s.snapshot(), after_first);

    let other = json!({"records": [record("S1", "L1", "2026-03-02", 100, 3)]});
    let mismatch = post("batch-0001", &ingest, &other);
    let p = mismatch.problem(422, "idempotency-key-reused");
    assert_eq!(p["errors"][0]["header"], "idempotency-key", "{p}");
    assert_eq!(
        s.snapshot(),
        after_first,
        "a reused key with another body writes nothing"
    );

    // Keys are scoped to the API key: another key may use the same text.
    let other_key = s.key("ingest", &["S1"]);
    let r = post("batch-0001", &other_key, &other);
    assert_eq!(r.status, 200, "{}", r.text);
    assert_eq!(r.json()["corrected"], 1);

    // A refused batch stores no answer, so the fixed batch can reuse its key.
    let bad = json!({"records": [record("S1", "L9", "2026-03-09", 1, 0)]});
    post("batch-0002", &ingest, &bad).problem(422, "validation");
    let fixed = json!({"records": [record("S1", "L1", "2026-03-09", 1, 0)]});
    let r = post("batch-0002", &ingest, &fixed);
    assert_eq!(r.status, 201, "{}", r.text);

    let p = post("has space", &ingest, &fixed).problem(422, "validation");
    assert_eq!(p["errors"][0]["header"], "idempotency-key", "{p}");
}

#[test]
fn csv_and_json_batches_with_one_idempotency_key_are_different_bodies() {
    let s = plant();
    let admin = s.admin().to_owned();
    let csv = "site,line,date,inspected,defective\nS1,L1,2026-03-02,1,0\n";
    let r = s.request_with(
        "POST",
        "/v1/counts",
        Some(&admin),
        Body::Csv(csv.to_owned()),
        &[("idempotency-key", "k1")],
    );
    assert_eq!(r.status, 201, "{}", r.text);
    let r = s.request_with(
        "POST",
        "/v1/counts",
        Some(&admin),
        Body::Csv(csv.to_owned()),
        &[("idempotency-key", "k1")],
    );
    assert_eq!(r.header("idempotent-replayed"), Some("true"));
    let json_body = Body::Raw {
        content_type: Some("application/json"),
        bytes: csv.as_bytes().to_vec(),
    };
    let r = s.request_with(
        "POST",
        "/v1/counts",
        Some(&admin),
        json_body,
        &[("idempotency-key", "k1")],
    );
    r.problem(422, "idempotency-key-reused");
}

#[test]
fn a_batch_above_the_record_limit_is_refused() {
    let s = Server::start_with(&["--max-batch-records", "3"]);
    s.site("S1", &["L1"]);
    let records: Vec<Value> = (1..=4)
        .map(|d| record("S1", "L1", &format!("2026-03-0{d}"), 1, 0))
        .collect();
    let p = s
        .as_admin(
            "POST",
            "/v1/counts",
            Body::Json(json!({"records": records})),
        )
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["reason"], "too-many", "{p}");
    assert_eq!(p["errors"][0]["pointer"], "/records", "{p}");
    assert!(s.snapshot().is_empty());
}

#[test]
fn a_body_of_millions_of_tiny_records_is_counted_not_held() {
    // 1,500,000 records of one byte each fit in the body limit; they are counted past
    // the hard cap of 100,000 and refused with their number, nothing written.
    let s = Server::start();
    s.site("S1", &["L1"]);
    let mut body = String::with_capacity(3_000_020);
    body.push_str("{\"records\":[0");
    for _ in 1..1_500_000 {
        body.push_str(",0");
    }
    body.push_str("]}");
    let p = s
        .as_admin(
            "POST",
            "/v1/counts",
            Body::Raw {
                content_type: Some("application/json"),
                bytes: body.into_bytes(),
            },
        )
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["reason"], "too-many", "{p}");
    assert!(
        p["errors"][0]["message"]
            .as_str()
            .is_some_and(|m| m.contains("1500000")),
        "{p}"
    );
    assert!(s.snapshot().is_empty());
}

#[test]
fn the_batch_limit_cannot_be_configured_above_the_hard_cap() {
    let out = dispar_system_tests::run_cli(&["serve", "--max-batch-records", "100001"]);
    assert!(!out.status.success());
    assert!(String::from_utf8_lossy(&out.stderr).contains("100000"));
}
