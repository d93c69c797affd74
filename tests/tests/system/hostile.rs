//! The committed hostile-input corpus (`tests/fixtures/hostile.json`): every case gets
//! its status and, for a refusal, a problem+json whose errors name the field, and the
//! stored data are unchanged after each.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, Value, json};

/// `[prefix, unit, count, unit2, count2, suffix]` as one string.
fn repeated(spec: &Value) -> String {
    let p = spec.as_array().unwrap();
    let s = |i: usize| p[i].as_str().unwrap();
    let n = |i: usize| usize::try_from(p[i].as_u64().unwrap()).unwrap();
    format!("{}{}{}{}", s(0), s(1).repeat(n(2)), s(3).repeat(n(4)), s(5))
}

fn hex(text: &str) -> Vec<u8> {
    let digits: Vec<u8> = text.bytes().filter(u8::is_ascii_hexdigit).collect();
    digits
        .chunks(2)
        .map(|pair| u8::from_str_radix(std::str::from_utf8(pair).unwrap(), 16).unwrap())
        .collect()
}

#[test]
fn every_hostile_input_is_refused_cleanly_and_changes_nothing() {
    let corpus: Value = serde_json::from_str(include_str!("../../fixtures/hostile.json")).unwrap();
    let s = Server::start();
    s.site("S1", &["L1"]);
    s.site("S2", &["L1"]);
    let seeded = s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-03-02",
        Body::Json(json!({"inspected": 100, "defective": 1})),
    );
    assert_eq!(seeded.status, 201, "{}", seeded.text);
    let admin = s.admin().to_owned();
    let read = s.key("read", &[]);
    let ingest = s.key("ingest", &["S1"]);
    let revoked = s.key("admin", &[]);
    let id = revoked.split('_').nth(1).unwrap().to_owned();
    assert!(s.cli(&["keys", "revoke", &id]).status.success());
    // Past the key cache's 2 s, the revoked key is refused from the first request.
    std::thread::sleep(std::time::Duration::from_millis(2_100));
    let before = s.snapshot();
    let cases = corpus["cases"].as_array().unwrap();
    assert!(cases.len() >= 40, "the corpus has {} cases", cases.len());
    let mut names = std::collections::BTreeSet::new();
    for case in cases {
        let name = case["name"].as_str().unwrap();
        assert!(names.insert(name), "case {name} twice");
        assert!(
            case["attacks"].as_str().is_some_and(|a| !a.is_empty()),
            "{name}"
        );
        let token = match case["key"].as_str().unwrap() {
            "admin" => Some(admin.as_str()),
            "read" => Some(read.as_str()),
            "ingest" => Some(ingest.as_str()),
            "revoked" => Some(revoked.as_str()),
            "none" => None,
            other => panic!("{name}: unknown key {other}"),
        };
        let path = match case.get("path_repeat") {
            Some(spec) => repeated(spec),
            None => case["path"].as_str().unwrap().to_owned(),
        };
        let bytes = if let Some(b) = case.get("body") {
            Some(b.as_str().unwrap().as_bytes().to_vec())
        } else if let Some(h) = case.get("body_hex") {
            Some(hex(h.as_str().unwrap()))
        } else {
            case.get("body_repeat")
                .map(|spec| repeated(spec).into_bytes())
        };
        let body = match bytes {
            Some(bytes) => Body::Raw {
                content_type: Some(match case["content_type"].as_str().unwrap() {
                    "text/csv" => "text/csv",
                    _ => "application/json",
                }),
                bytes,
            },
            None => Body::None,
        };
        let method = case["method"].as_str().unwrap();
        let r = s.request(method, &path, token, body);
        let status = u16::try_from(case["status"].as_u64().unwrap()).unwrap();
        assert_eq!(r.status, status, "{name}: {}", r.text);
        if let Some(slug) = case["problem"].as_str() {
            let p = r.problem(status, slug);
            if let Some(field) = case["field"].as_object() {
                let (place, value) = field.iter().next().unwrap();
                assert!(
                    p["errors"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .any(|e| e[place.as_str()] == *value),
                    "{name}: no error names {place} {value}: {p}"
                );
            }
        }
        assert_eq!(s.snapshot(), before, "{name} changed the stored data");
    }
}
