//! Each kind of bad input: its status, its problem type and fields, and that nothing
//! was written.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, json};

const DAY: &str = "/v1/sites/S1/lines/L1/days/2026-03-02";

fn plant(extra: &[&str]) -> Server {
    let s = Server::start_with(extra);
    s.site("S1", &["L1"]);
    s.as_admin(
        "PUT",
        DAY,
        Body::Json(json!({"inspected": 100, "defective": 1})),
    );
    s
}

#[test]
fn malformed_json_is_400_with_the_position() {
    let s = plant(&[]);
    let before = s.snapshot();
    for (path, method) in [
        (DAY, "PUT"),
        ("/v1/counts", "POST"),
        ("/v1/sites/S2", "PUT"),
    ] {
        let r = s.as_admin(
            method,
            path,
            Body::Raw {
                content_type: Some("application/json"),
                bytes: b"{\"inspected\": 10,\n \"defective\": }".to_vec(),
            },
        );
        let p = r.problem(400, "malformed-body");
        assert_eq!(p["errors"][0]["reason"], "invalid-json", "{p}");
        assert!(
            p["errors"][0]["message"]
                .as_str()
                .unwrap()
                .contains("line 2"),
            "{p}"
        );
    }
    let empty = s.as_admin(
        "PUT",
        DAY,
        Body::Raw {
            content_type: Some("application/json"),
            bytes: Vec::new(),
        },
    );
    empty.problem(400, "malformed-body");
    assert_eq!(s.snapshot(), before);
}

#[test]
fn a_body_in_another_media_type_is_415() {
    let s = plant(&[]);
    let before = s.snapshot();
    let cases: Vec<(&str, &str, Option<&'static str>)> = vec![
        ("PUT", DAY, Some("text/plain")),
        ("PUT", DAY, None),
        ("PUT", DAY, Some("text/csv")),
        ("POST", "/v1/counts", Some("application/xml")),
        ("POST", "/v1/counts", None),
        ("POST", "/v1/counts", Some("text/csv; charset=latin1")),
        (
            "PUT",
            "/v1/sites/S2",
            Some("application/x-www-form-urlencoded"),
        ),
    ];
    for (method, path, content_type) in cases {
        let r = s.as_admin(
            method,
            path,
            Body::Raw {
                content_type,
                bytes: b"{}".to_vec(),
            },
        );
        let p = r.problem(415, "unsupported-media-type");
        assert_eq!(
            p["errors"][0]["header"], "content-type",
            "{method} {path} {content_type:?}: {p}"
        );
    }
    let r = s.as_admin(
        "POST",
        "/v1/counts",
        Body::Raw {
            content_type: Some("text/plain"),
            bytes: b"x".to_vec(),
        },
    );
    r.problem(415, "unsupported-media-type");
    assert_eq!(r.header("accept-post"), Some("application/json, text/csv"));
    let ok = s.as_admin(
        "PUT",
        DAY,
        Body::Raw {
            content_type: Some("application/json; charset=utf-8"),
            bytes: br#"{"inspected": 100, "defective": 1}"#.to_vec(),
        },
    );
    assert_eq!(
        ok.status, 200,
        "parameters of a JSON media type are fine: {}",
        ok.text
    );
    assert_eq!(s.snapshot(), before);
}

#[test]
fn a_body_above_the_limit_is_413() {
    let s = plant(&["--max-body-bytes", "2048"]);
    let before = s.snapshot();
    let mut csv = String::from("site,line,date,inspected,defective\n");
    while csv.len() <= 4096 {
        csv.push_str("S1,L1,2026-03-03,100,1\n");
    }
    let p = s
        .as_admin("POST", "/v1/counts", Body::Csv(csv))
        .problem(413, "payload-too-large");
    assert_eq!(p["errors"][0]["reason"], "too-large", "{p}");
    let big_json = json!({"inspected": 1, "defective": 0, "defects": {"x": "9".repeat(3000)}});
    s.as_admin("PUT", DAY, Body::Json(big_json))
        .problem(413, "payload-too-large");
    assert_eq!(s.snapshot(), before);
    let small = s.as_admin(
        "POST",
        "/v1/counts",
        Body::Csv("site,line,date,inspected,defective\nS1,L1,2026-03-03,100,1\n".into()),
    );
    assert_eq!(small.status, 201, "{}", small.text);
}

#[test]
fn unknown_fields_are_refused_naming_the_field() {
    let s = plant(&[]);
    let before = s.snapshot();
    let cases = [
        (
            "PUT",
            DAY,
            json!({"inspected": 1, "defective": 0, "operator": "ana"}),
            "/operator",
        ),
        (
            "PUT",
            "/v1/sites/S1",
            json!({"name": "x", "country": "CZ"}),
            "/country",
        ),
        (
            "PUT",
            "/v1/sites/S1/lines/L1",
            json!({"speed": 3}),
            "/speed",
        ),
        (
            "POST",
            "/v1/counts",
            json!({"records": [{"site": "S1", "line": "L1", "date": "2026-03-05", "inspected": 1, "defective": 0, "shift": 2}]}),
            "/records/0/shift",
        ),
    ];
    for (method, path, body, pointer) in cases {
        let p = s
            .as_admin(method, path, Body::Json(body))
            .problem(422, "validation");
        assert_eq!(p["errors"][0]["pointer"], pointer, "{method} {path}: {p}");
        assert_eq!(
            p["errors"][0]["reason"], "unknown-field",
            "{method} {path}: {p}"
        );
    }
    assert_eq!(s.snapshot(), before);
    let site = s.as_admin("GET", "/v1/sites/S1", Body::None).json();
    assert_eq!(site["name"], "Plant S1", "the site was not changed");
}

#[test]
fn unknown_paths_and_methods_are_problems_too() {
    let s = plant(&[]);
    let p = s
        .as_admin("GET", "/v1/nothing-here", Body::None)
        .problem(404, "not-found");
    assert!(
        p["detail"].as_str().unwrap().contains("/v1/nothing-here"),
        "{p}"
    );
    let r = s.as_admin("DELETE", DAY, Body::None);
    r.problem(405, "method-not-allowed");
    let allow = r.header("allow").expect("Allow header");
    assert!(allow.contains("GET") && allow.contains("PUT"), "{allow}");
    let r = s.as_admin("PATCH", "/v1/counts", Body::None);
    r.problem(405, "method-not-allowed");
}

#[test]
fn every_problem_type_has_a_page() {
    let s = Server::start();
    for slug in [
        "validation",
        "malformed-body",
        "unsupported-media-type",
        "payload-too-large",
        "unauthorized",
        "forbidden",
        "not-found",
        "stale-revision",
        "idempotency-key-reused",
        "unavailable",
        "timeout",
        "internal",
    ] {
        let r = s.request("GET", &format!("/problems/{slug}"), None, Body::None);
        assert_eq!(r.status, 200, "{slug}");
        assert!(
            r.header("content-type").unwrap().starts_with("text/html"),
            "{slug}"
        );
        assert!(
            r.text.contains(&format!("/problems/{slug}")),
            "{slug}: {}",
            r.text
        );
    }
    s.request("GET", "/problems/nope", None, Body::None)
        .problem(404, "not-found");
}

#[test]
fn a_member_named_twice_is_refused_where_it_is() {
    let s = plant(&[]);
    let before = s.snapshot();
    let raw = |bytes: &str| Body::Raw {
        content_type: Some("application/json"),
        bytes: bytes.as_bytes().to_vec(),
    };
    for (method, path, body, pointer) in [
        (
            "PUT",
            DAY,
            r#"{"inspected": 10, "defective": 1, "defects": {"flash": 1, "flash": 2}}"#,
            "/defects/flash",
        ),
        (
            "PUT",
            DAY,
            r#"{"inspected": 10, "inspected": 11, "defective": 1}"#,
            "/inspected",
        ),
        (
            "POST",
            "/v1/counts",
            r#"{"records": [{"site": "S1", "line": "L1", "date": "2026-03-03", "inspected": 10,
                "defective": 1, "defects": {"seal-leak": 1, "seal-leak": 1}}]}"#,
            "/records/0/defects/seal-leak",
        ),
        (
            "PUT",
            "/v1/sites/S2",
            r#"{"name": "a", "name": "b"}"#,
            "/name",
        ),
    ] {
        let p = s
            .as_admin(method, path, raw(body))
            .problem(422, "validation");
        assert_eq!(p["errors"][0]["pointer"], pointer, "{p}");
        assert_eq!(p["errors"][0]["reason"], "duplicate", "{p}");
    }
    assert_eq!(s.snapshot(), before, "nothing was written");
}

#[test]
fn counts_are_json_numbers_and_csv_digits() {
    let s = plant(&[]);
    let before = s.snapshot();
    // A quoted count is digits only.
    for v in [json!(" 100 "), json!("1e2"), json!("100.0"), json!("")] {
        let p = s
            .as_admin(
                "PUT",
                DAY,
                Body::Json(json!({"inspected": v, "defective": 1})),
            )
            .problem(422, "validation");
        assert_eq!(p["errors"][0]["pointer"], "/inspected", "{p}");
        assert_eq!(p["errors"][0]["reason"], "not-a-number", "{p}");
    }
    // In CSV a count is digits: an exponent or a decimal point is refused.
    for cell in ["1e2", "100.0", "+5"] {
        let csv = format!("site,line,date,inspected,defective\nS1,L1,2026-03-04,{cell},1\n");
        let p = s
            .as_admin("POST", "/v1/counts", Body::Csv(csv))
            .problem(422, "validation");
        assert_eq!(p["errors"][0]["column"], "inspected", "{cell}: {p}");
    }
    assert_eq!(s.snapshot(), before, "nothing was written");
    // JSON numbers with a whole value are counts (JSON Schema's integer): 1e2 is 100.
    let r = s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-05",
        Body::Raw {
            content_type: Some("application/json"),
            bytes: br#"{"inspected": 1e2, "defective": 1.0}"#.to_vec(),
        },
    );
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(r.json()["inspected"], 100);
    let r = s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-06",
        Body::Json(json!({"inspected": "8216", "defective": "42"})),
    );
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(r.json()["inspected"], 8216);
}

#[test]
fn defects_of_one_category_are_bounded_by_the_units_inspected() {
    let s = plant(&[]);
    let before = s.snapshot();
    let p = s
        .as_admin(
            "PUT",
            DAY,
            Body::Json(json!({"inspected": 10, "defective": 1, "defects": {"flash": 1_000_000_000_000u64}})),
        )
        .problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/defects/flash", "{p}");
    assert_eq!(p["errors"][0]["reason"], "too-many-defects", "{p}");
    assert_eq!(s.snapshot(), before);
    // 100 per unit is the bound: 1,000 on 10 units is accepted.
    let r = s.as_admin(
        "PUT",
        DAY,
        Body::Json(json!({"inspected": 10, "defective": 1, "defects": {"flash": 1_000}})),
    );
    assert_eq!(r.status, 200, "{}", r.text);
}

#[test]
fn a_path_segment_that_is_not_utf8_is_a_problem_naming_it() {
    let s = plant(&[]);
    for (path, parameter) in [
        ("/v1/sites/S%FF1", "site"),
        ("/v1/sites/S1/lines/L%C0/days/2026-03-02", "line"),
        ("/v1/sites/S1/lines/L1/days/2026-03-0%FE", "date"),
    ] {
        let p = s
            .as_admin("GET", path, Body::None)
            .problem(400, "bad-request");
        assert_eq!(p["errors"][0]["parameter"], parameter, "{path}: {p}");
        assert_eq!(p["errors"][0]["reason"], "invalid-utf8", "{path}: {p}");
    }
}

#[test]
fn a_uri_longer_than_the_server_reads_is_a_414_problem() {
    let s = plant(&[]);
    let long = format!("/v1/reports?period=2026-W10&site={}", "S".repeat(20_000));
    let p = s
        .as_admin("GET", &long, Body::None)
        .problem(414, "uri-too-long");
    assert!(p["detail"].as_str().unwrap().contains("16384"), "{p}");
    // Just under the limit is read as usual (and refused for what it says).
    let under = format!("/v1/reports?period=2026-W10&site={}", "S".repeat(16_000));
    assert_eq!(s.as_admin("GET", &under, Body::None).status, 422);
}
