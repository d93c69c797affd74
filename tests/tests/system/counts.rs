//! One day's counts at its natural key, client revisions in and out of order, the
//! history, and the paginated listing.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, Value, json};

fn plant() -> Server {
    let s = Server::start();
    s.site("S1", &["L1", "L2"]);
    s.site("S2", &["L1"]);
    s
}

const DAY: &str = "/v1/sites/S1/lines/L1/days/2026-03-02";

#[test]
fn a_put_creates_a_record_then_reports_unchanged_and_corrected() {
    let s = plant();
    let ingest = s.key("ingest", &["S1"]);
    let body =
        json!({"inspected": 1200, "defective": 31, "defects": {"scratch": 20, "short-shot": 15}});
    let created = s.request("PUT", DAY, Some(&ingest), Body::Json(body.clone()));
    assert_eq!(created.status, 201, "{}", created.text);
    assert_eq!(created.header("location"), Some(DAY));
    let v = created.json();
    assert_eq!(v["outcome"], "created");
    assert_eq!(v["inspected"], 1200);
    assert_eq!(v["defects"]["short-shot"], 15);
    assert_eq!(v["revision"], Value::Null);

    let same = s.request("PUT", DAY, Some(&ingest), Body::Json(body));
    assert_eq!(same.status, 200, "{}", same.text);
    assert_eq!(same.json()["outcome"], "unchanged");
    assert!(v["sequence"].as_i64().is_some_and(|n| n >= 1), "{v}");
    assert!(v.get("revision_id").is_none(), "renamed to sequence: {v}");
    assert_eq!(same.json()["sequence"], v["sequence"], "no new revision");

    let fixed = s.request(
        "PUT",
        DAY,
        Some(&ingest),
        Body::Json(json!({"inspected": 1200, "defective": 30})),
    );
    assert_eq!(fixed.status, 200, "{}", fixed.text);
    assert_eq!(fixed.json()["outcome"], "corrected");
    let fixed_seq = fixed.json()["sequence"].as_i64().unwrap();
    assert!(
        fixed_seq > v["sequence"].as_i64().unwrap(),
        "a correction gets a later sequence"
    );

    let read = s.key("read", &[]);
    let current = s.request("GET", DAY, Some(&read), Body::None);
    assert_eq!(current.status, 200, "{}", current.text);
    let c = current.json();
    assert_eq!(c["defective"], 30);
    assert_eq!(c["defects"], json!({}));
    assert!(c["recorded_at"].as_str().unwrap().ends_with('Z'), "{c}");

    let history = s.request("GET", &format!("{DAY}/revisions"), Some(&read), Body::None);
    assert_eq!(history.status, 200, "{}", history.text);
    let h = history.json();
    let revs = h["revisions"].as_array().unwrap();
    assert_eq!(revs.len(), 2, "{h}");
    assert_eq!(revs[0]["number"], 1);
    assert_eq!(revs[0]["defective"], 31);
    assert_eq!(revs[1]["number"], 2);
    assert_eq!(revs[1]["defective"], 30);
    assert_eq!(revs[1]["sequence"], fixed_seq);
    assert_eq!(
        c["sequence"], fixed_seq,
        "the current record is the correction"
    );
}

#[test]
fn products_are_part_of_the_natural_key() {
    let s = plant();
    let a = s.as_admin(
        "PUT",
        &format!("{DAY}?product=CAP-28"),
        Body::Json(json!({"inspected": 10, "defective": 1})),
    );
    assert_eq!(a.status, 201, "{}", a.text);
    assert_eq!(
        a.header("location"),
        Some(format!("{DAY}?product=CAP-28").as_str())
    );
    let b = s.as_admin(
        "PUT",
        DAY,
        Body::Json(json!({"inspected": 20, "defective": 2})),
    );
    assert_eq!(
        b.status, 201,
        "a record without product is another record: {}",
        b.text
    );
    let got = s
        .as_admin("GET", &format!("{DAY}?product=CAP-28"), Body::None)
        .json();
    assert_eq!(got["inspected"], 10);
    assert_eq!(got["product"], "CAP-28");
    assert_eq!(s.snapshot().len(), 2);
    let bad = s.as_admin(
        "PUT",
        &format!("{DAY}?product=%20x"),
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    let p = bad.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "product", "{p}");
}

#[test]
fn client_revisions_out_of_order_are_refused_with_the_current_revision() {
    let s = plant();
    let ingest = s.key("ingest", &["S1"]);
    let put = |body: Value| s.request("PUT", DAY, Some(&ingest), Body::Json(body));

    let r = put(json!({"inspected": 100, "defective": 5, "revision": 2}));
    assert_eq!(r.status, 201, "{}", r.text);
    assert_eq!(r.json()["revision"], 2);
    let before = s.snapshot();

    // An older revision with other counts arrives late: refused, nothing written.
    let late = put(json!({"inspected": 100, "defective": 9, "revision": 1}));
    let p = late.problem(409, "stale-revision");
    assert_eq!(p["current_revision"], 2, "{p}");
    assert_eq!(p["errors"][0]["pointer"], "/revision", "{p}");
    assert_eq!(p["errors"][0]["reason"], "stale-revision", "{p}");
    assert_eq!(s.snapshot(), before, "a refused write changes nothing");

    // The same revision again with other counts: refused too.
    put(json!({"inspected": 100, "defective": 6, "revision": 2})).problem(409, "stale-revision");
    assert_eq!(s.snapshot(), before);

    // The same revision with the same counts: an idempotent repeat.
    let again = put(json!({"inspected": 100, "defective": 5, "revision": 2}));
    assert_eq!(again.status, 200);
    assert_eq!(again.json()["outcome"], "unchanged");

    // A newer revision corrects.
    let newer = put(json!({"inspected": 100, "defective": 4, "revision": 3}));
    assert_eq!(newer.status, 200, "{}", newer.text);
    assert_eq!(newer.json()["outcome"], "corrected");
    assert_eq!(newer.json()["revision"], 3);

    // An old revision that happens to carry the current counts changes nothing.
    let stale_same = put(json!({"inspected": 100, "defective": 4, "revision": 1}));
    assert_eq!(stale_same.status, 200, "{}", stale_same.text);
    assert_eq!(stale_same.json()["outcome"], "unchanged");

    // Without a revision the write is last-writer-wins.
    let plain = put(json!({"inspected": 100, "defective": 7}));
    assert_eq!(plain.status, 200);
    assert_eq!(plain.json()["outcome"], "corrected");

    let h = s
        .as_admin("GET", &format!("{DAY}/revisions"), Body::None)
        .json();
    let plant_revisions: Vec<Value> = h["revisions"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["revision"].clone())
        .collect();
    assert_eq!(
        plant_revisions,
        vec![json!(2), json!(3), Value::Null],
        "{h}"
    );
}

#[test]
fn a_record_for_an_unregistered_site_or_line_is_refused_naming_it() {
    let s = plant();
    let before = s.snapshot();
    let r = s.as_admin(
        "PUT",
        "/v1/sites/S9/lines/L1/days/2026-03-02",
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    let p = r.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "site", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-site", "{p}");
    assert!(
        p["errors"][0]["message"].as_str().unwrap().contains("S9"),
        "{p}"
    );
    let r = s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L7/days/2026-03-02",
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    let p = r.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "line", "{p}");
    assert_eq!(p["errors"][0]["reason"], "unknown-line", "{p}");
    assert!(
        p["errors"][0]["message"].as_str().unwrap().contains("L7"),
        "{p}"
    );
    assert_eq!(s.snapshot(), before);
}

#[test]
fn bad_counts_are_refused_naming_every_field() {
    let s = plant();
    let before = s.snapshot();
    // (case, body, expected (pointer, reason) pairs)
    type Case<'a> = (&'a str, Value, Vec<(&'a str, &'a str)>);
    let cases: Vec<Case<'_>> = vec![
        (
            "defective above inspected",
            json!({"inspected": 10, "defective": 11}),
            vec![("/defective", "exceeds-inspected")],
        ),
        (
            "negative and missing",
            json!({"inspected": -1}),
            vec![("/inspected", "negative"), ("/defective", "required")],
        ),
        (
            "fraction",
            json!({"inspected": 10.5, "defective": 1}),
            vec![("/inspected", "not-an-integer")],
        ),
        (
            "bad category count",
            json!({"inspected": 10, "defective": 1, "defects": {"scratch": -2}}),
            vec![("/defects/scratch", "negative")],
        ),
        (
            "wrong type",
            json!({"inspected": [1], "defective": 1}),
            vec![("/inspected", "invalid-type")],
        ),
        (
            "unknown field",
            json!({"inspected": 10, "defective": 1, "shift": "night"}),
            vec![("/shift", "unknown-field")],
        ),
    ];
    for (name, body, expected) in cases {
        let r = s.as_admin("PUT", DAY, Body::Json(body));
        let p = r.problem(422, "validation");
        let got: Vec<(String, String)> = p["errors"]
            .as_array()
            .unwrap()
            .iter()
            .map(|e| {
                (
                    e["pointer"].as_str().unwrap_or("").to_owned(),
                    e["reason"].as_str().unwrap_or("").to_owned(),
                )
            })
            .collect();
        let expected: Vec<(String, String)> = expected
            .into_iter()
            .map(|(a, b)| (a.to_owned(), b.to_owned()))
            .collect();
        assert_eq!(got, expected, "case {name}: {p}");
        assert_eq!(s.snapshot(), before, "case {name} wrote nothing");
    }
    let bad_date = s.as_admin(
        "PUT",
        "/v1/sites/S1/lines/L1/days/2026-02-30",
        Body::Json(json!({"inspected": 1, "defective": 0})),
    );
    let p = bad_date.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "date", "{p}");
    assert_eq!(p["errors"][0]["reason"], "invalid-date", "{p}");
    assert_eq!(s.snapshot(), before);
}

#[test]
fn the_listing_pages_with_a_cursor_and_filters() {
    let s = plant();
    let mut csv = String::from("site,line,date,inspected,defective\n");
    for day in 1..=9 {
        csv.push_str(&format!("S1,L1,2026-03-0{day},100,{day}\n"));
        csv.push_str(&format!("S1,L2,2026-03-0{day},50,1\n"));
        csv.push_str(&format!("S2,L1,2026-03-0{day},70,2\n"));
    }
    let r = s.as_admin("POST", "/v1/counts", Body::Csv(csv));
    assert_eq!(r.status, 201, "{}", r.text);
    let read = s.key("read", &[]);

    let mut seen = Vec::new();
    let mut path = "/v1/counts?site=S1&from=2026-03-02&to=2026-03-08&limit=4".to_owned();
    let mut pages = 0;
    loop {
        let r = s.request("GET", &path, Some(&read), Body::None);
        assert_eq!(r.status, 200, "{}", r.text);
        pages += 1;
        let v = r.json();
        for rec in v["records"].as_array().unwrap() {
            assert_eq!(rec["site"], "S1");
            seen.push(format!(
                "{}/{}",
                rec["date"].as_str().unwrap(),
                rec["line"].as_str().unwrap()
            ));
        }
        match v["next_cursor"].as_str() {
            Some(_) => {
                let link = r
                    .header("link")
                    .expect("Link header on a page with a next page");
                let next = link.trim_start_matches('<').split('>').next().unwrap();
                assert!(link.ends_with("rel=\"next\""), "{link}");
                path = next.to_owned();
            }
            None => break,
        }
    }
    assert_eq!(pages, 4, "14 records in pages of 4");
    assert_eq!(seen.len(), 14, "{seen:?}");
    let mut sorted = seen.clone();
    sorted.sort();
    assert_eq!(seen, sorted, "ordered by date, then site and line");
    assert_eq!(seen[0], "2026-03-02/L1");
    assert_eq!(seen[13], "2026-03-08/L2");

    let one_line = s
        .request("GET", "/v1/counts?site=S1&line=L2", Some(&read), Body::None)
        .json();
    assert_eq!(one_line["records"].as_array().unwrap().len(), 9);
    let default_limit = s
        .request("GET", "/v1/counts", Some(&read), Body::None)
        .json();
    assert_eq!(default_limit["records"].as_array().unwrap().len(), 27);
    assert_eq!(default_limit["next_cursor"], Value::Null);
}

#[test]
fn listing_parameters_are_checked() {
    let s = plant();
    let read = s.key("read", &[]);
    let cases = [
        ("/v1/counts?limit=0", "limit", "out-of-range"),
        ("/v1/counts?limit=1001", "limit", "out-of-range"),
        ("/v1/counts?limit=ten", "limit", "out-of-range"),
        ("/v1/counts?from=2026-13-01", "from", "invalid-date"),
        (
            "/v1/counts?from=2026-03-05&to=2026-03-01",
            "to",
            "before-from",
        ),
        ("/v1/counts?cursor=not-a-cursor", "cursor", "invalid-cursor"),
        (
            "/v1/counts?site=S1&colour=red",
            "colour",
            "unknown-parameter",
        ),
    ];
    for (path, parameter, reason) in cases {
        let r = s.request("GET", path, Some(&read), Body::None);
        let p = r.problem(422, "validation");
        assert_eq!(p["errors"][0]["parameter"], parameter, "{path}: {p}");
        assert_eq!(p["errors"][0]["reason"], reason, "{path}: {p}");
    }
}

#[test]
fn the_history_of_a_key_never_written_is_404() {
    let s = plant();
    s.as_admin("GET", &format!("{DAY}/revisions"), Body::None)
        .problem(404, "not-found");
    s.as_admin("GET", DAY, Body::None).problem(404, "not-found");
}
