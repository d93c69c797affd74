//! The site and line registry over HTTP, with every role.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, json};

#[test]
fn an_admin_registers_a_site_and_its_lines_and_readers_see_them() {
    let s = Server::start();
    let r = s.as_admin(
        "PUT",
        "/v1/sites/BRNO-2",
        Body::Json(json!({"name": "Brno plant 2", "time_zone": "Europe/Prague"})),
    );
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(r.header("location"), Some("/v1/sites/BRNO-2"));
    let v = r.json();
    assert_eq!(v["outcome"], "created");
    assert_eq!(v["code"], "BRNO-2");
    assert_eq!(v["time_zone"], "Europe/Prague");

    let again = s.as_admin(
        "PUT",
        "/v1/sites/BRNO-2",
        Body::Json(json!({"name": "Brno plant 2", "time_zone": "Europe/Prague"})),
    );
    assert_eq!(again.status, 200, "{}", again.text);
    assert_eq!(again.json()["outcome"], "unchanged");

    let renamed = s.as_admin(
        "PUT",
        "/v1/sites/BRNO-2",
        Body::Json(json!({"name": "Brno 2"})),
    );
    assert_eq!(renamed.status, 200);
    assert_eq!(renamed.json()["outcome"], "updated");

    let line = s.as_admin(
        "PUT",
        "/v1/sites/BRNO-2/lines/L1",
        Body::Json(json!({"name": "Injection moulding 1"})),
    );
    assert_eq!(line.status, 201, "{}", line.text);
    assert_eq!(line.json()["outcome"], "created");
    let line_again = s.as_admin(
        "PUT",
        "/v1/sites/BRNO-2/lines/L1",
        Body::Json(json!({"name": "Injection moulding 1"})),
    );
    assert_eq!(line_again.status, 200);
    assert_eq!(line_again.json()["outcome"], "unchanged");
    s.as_admin("PUT", "/v1/sites/BRNO-2/lines/L2", Body::Json(json!({})));
    s.as_admin("PUT", "/v1/sites/A1", Body::Json(json!({"name": "Alpha"})));

    let read = s.key("read", &[]);
    let list = s.request("GET", "/v1/sites", Some(&read), Body::None);
    assert_eq!(list.status, 200, "{}", list.text);
    let codes: Vec<String> = list.json()["sites"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["code"].as_str().unwrap().to_owned())
        .collect();
    assert_eq!(codes, ["A1", "BRNO-2"], "sites are ordered by code");

    let one = s.request("GET", "/v1/sites/BRNO-2", Some(&read), Body::None);
    assert_eq!(one.status, 200, "{}", one.text);
    let v = one.json();
    assert_eq!(v["name"], "Brno 2");
    assert_eq!(v["time_zone"], serde_json::Value::Null);
    assert_eq!(v["lines"][0]["code"], "L1");
    assert_eq!(v["lines"][0]["name"], "Injection moulding 1");
    assert_eq!(v["lines"][1]["code"], "L2");
}

#[test]
fn only_admin_keys_change_the_registry() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    let read = s.key("read", &[]);
    let ingest = s.key("ingest", &["S1"]);
    for key in [&read, &ingest] {
        let r = s.request(
            "PUT",
            "/v1/sites/S9",
            Some(key),
            Body::Json(json!({"name": "x"})),
        );
        let p = r.problem(403, "forbidden");
        assert!(p["detail"].as_str().unwrap().contains("admin"), "{p}");
        assert!(
            r.header("www-authenticate")
                .unwrap()
                .contains("insufficient_scope"),
            "{:?}",
            r.headers
        );
        let r = s.request(
            "PUT",
            "/v1/sites/S1/lines/L9",
            Some(key),
            Body::Json(json!({})),
        );
        r.problem(403, "forbidden");
    }
    let list = s.as_admin("GET", "/v1/sites", Body::None).json();
    assert_eq!(
        list["sites"].as_array().unwrap().len(),
        1,
        "nothing was registered: {list}"
    );
    let site = s.as_admin("GET", "/v1/sites/S1", Body::None).json();
    assert_eq!(site["lines"].as_array().unwrap().len(), 1, "{site}");
}

#[test]
fn an_ingest_key_reads_its_own_site_but_not_the_list_or_other_sites() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    s.site("S2", &["L1"]);
    let ingest = s.key("ingest", &["S1"]);
    assert_eq!(
        s.request("GET", "/v1/sites/S1", Some(&ingest), Body::None)
            .status,
        200
    );
    s.request("GET", "/v1/sites/S2", Some(&ingest), Body::None)
        .problem(403, "forbidden");
    s.request("GET", "/v1/sites", Some(&ingest), Body::None)
        .problem(403, "forbidden");
}

#[test]
fn registry_input_errors_name_the_field_or_parameter() {
    let s = Server::start();
    let missing_name = s.as_admin(
        "PUT",
        "/v1/sites/S1",
        Body::Json(json!({"time_zone": "Mars/Base"})),
    );
    let p = missing_name.problem(422, "validation");
    let pointers: Vec<&str> = p["errors"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| e["pointer"].as_str().unwrap_or(""))
        .collect();
    assert_eq!(pointers, ["/name", "/time_zone"], "{p}");

    let bad_code = s.as_admin("PUT", "/v1/sites/-bad", Body::Json(json!({"name": "x"})));
    let p = bad_code.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "site", "{p}");
    assert_eq!(p["errors"][0]["reason"], "invalid-character", "{p}");

    let unknown_site = s.as_admin("PUT", "/v1/sites/NOPE/lines/L1", Body::Json(json!({})));
    let p = unknown_site.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "site", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-site", "{p}");

    let unknown_field = s.as_admin(
        "PUT",
        "/v1/sites/S1",
        Body::Json(json!({"name": "x", "city": "Brno"})),
    );
    let p = unknown_field.problem(422, "validation");
    assert_eq!(p["errors"][0]["pointer"], "/city", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-field", "{p}");

    s.as_admin("GET", "/v1/sites/NOPE", Body::None)
        .problem(404, "not-found");
    let list = s.as_admin("GET", "/v1/sites", Body::None).json();
    assert_eq!(list["sites"], json!([]), "nothing was registered");
}
