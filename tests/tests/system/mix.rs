//! Fairer comparisons through `GET /v1/reports`, on crafted data: a Simpson's-paradox
//! case where the crude and product-adjusted verdicts disagree and the report says so,
//! `stratify=none` and a bad `stratify`, the power note, and the gaps in the data (a
//! line that stops posting, an implausible day).

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, Value, json};
use time::{Date, Duration, Weekday, macros::date};

fn post(s: &Server, records: Vec<Value>) {
    let r = s.as_admin(
        "POST",
        "/v1/counts",
        Body::Json(json!({ "records": records })),
    );
    assert!(r.status == 200 || r.status == 201, "{}", r.text);
}

fn report(s: &Server, query: &str) -> Value {
    let r = s.request(
        "GET",
        &format!("/v1/reports?{query}"),
        Some(s.admin()),
        Body::None,
    );
    assert_eq!(r.status, 200, "{query}: {}", r.text);
    r.json()
}

/// The weekdays (Monday to Friday) from `from` to `to`.
fn weekdays(from: Date, to: Date) -> Vec<Date> {
    std::iter::successors(Some(from), |d| Some(*d + Duration::days(1)))
        .take_while(|d| *d <= to)
        .filter(|d| !matches!(d.weekday(), Weekday::Saturday | Weekday::Sunday))
        .collect()
}

/// Invented: over the 20 weekdays of 2026-03-02..27 both sites make each product at the
/// same rate (EASY 1%, HARD 4%), but S1 makes mostly HARD and S2 mostly EASY.
/// Totals: S1 EASY 1000/10, HARD 9000/360; S2 EASY 9000/90, HARD 1000/40.
fn simpson() -> Server {
    let s = Server::start();
    s.site("S1", &["L1"]);
    s.site("S2", &["L1"]);
    let mut records = Vec::new();
    for (i, d) in weekdays(date!(2026 - 03 - 02), date!(2026 - 03 - 27))
        .into_iter()
        .enumerate()
    {
        let date = d.to_string();
        let odd = u64::from(i % 2 == 1);
        for (site, product, inspected, defective) in [
            ("S1", "EASY", 50, odd),
            ("S1", "HARD", 450, 18),
            ("S2", "EASY", 450, 4 + odd),
            ("S2", "HARD", 50, 2),
        ] {
            records.push(
                json!({"site": site, "line": "L1", "date": date, "product": product,
                                "inspected": inspected, "defective": defective}),
            );
        }
    }
    post(&s, records);
    s
}

#[test]
fn a_site_that_looks_worse_only_for_its_product_mix_is_said_to_in_words() {
    let s = simpson();
    let r = report(&s, "period=2026-03&baseline=off");
    assert_eq!(r["parameters"]["stratify"], "product");
    assert_eq!(r["test"]["significant"], true, "{}", r["test"]);
    let s1 = &r["groups"][0];
    assert_eq!(
        (s1["code"].as_str(), s1["flag"].as_str()),
        (Some("S1"), Some("above"))
    );
    let mix = &r["product_mix"];
    assert_eq!(mix["test"]["method"], "cmh");
    assert_eq!(mix["test"]["significant"], false, "{}", mix["test"]);
    // Within each product the two sites have the same rate: the common odds ratio is 1
    // and each site's defectives are exactly those expected from its product mix.
    assert!((mix["common_odds_ratio"]["odds_ratio"].as_f64().unwrap() - 1.0).abs() < 1e-9);
    assert_eq!(mix["groups"][0]["observed"], 370);
    assert!((mix["groups"][0]["expected"].as_f64().unwrap() - 370.0).abs() < 1e-9);
    assert!(mix["groups"][0]["flag"].is_null());
    let notes: Vec<&str> = mix["disagreements"]
        .as_array()
        .unwrap()
        .iter()
        .map(|d| d["note"].as_str().unwrap())
        .collect();
    assert!(
        notes
            .iter()
            .any(|n| n.contains("comes from which products each makes")),
        "{notes:?}"
    );
    assert!(
        notes
            .iter()
            .any(|n| n.starts_with("S1 looks worse") && n.contains("HARD")),
        "{notes:?}"
    );
    // The per-product table behind it.
    let products: Vec<(&str, u64, u64)> = mix["products"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            (
                p["product"].as_str().unwrap(),
                p["inspected"].as_u64().unwrap(),
                p["defective"].as_u64().unwrap(),
            )
        })
        .collect();
    assert_eq!(products, [("EASY", 10_000, 100), ("HARD", 10_000, 400)]);
    // The crude verdict's caution says the same, for readers of the cautions only.
    assert!(
        r["cautions"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c.as_str().unwrap().contains("which products each makes"))
    );
    // The text output of the CLI shows the section.
    let out = s.cli(&["report", "--period", "2026-03", "--baseline", "off"]);
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(out.status.success(), "{text}");
    assert!(
        text.contains("Product mix (each group against the pooled rate of each product)"),
        "{text}"
    );
    assert!(text.contains("S1 looks worse"), "{text}");

    let crude = report(&s, "period=2026-03&baseline=off&stratify=none");
    assert!(crude["product_mix"].is_null());
    assert_eq!(crude["parameters"]["stratify"], "none");
    let bad = s.request(
        "GET",
        "/v1/reports?period=2026-03&stratify=yes",
        Some(s.admin()),
        Body::None,
    );
    let p = bad.problem(422, "validation");
    assert_eq!(p["errors"][0]["parameter"], "stratify", "{p}");
}

#[test]
fn records_without_products_give_no_product_mix_and_few_units_an_uninformative_verdict() {
    let s = Server::start();
    s.site("S1", &["L1"]);
    s.site("S2", &["L1"]);
    post(
        &s,
        vec![
            json!({"site": "S1", "line": "L1", "date": "2026-03-02", "inspected": 40, "defective": 1}),
            json!({"site": "S2", "line": "L1", "date": "2026-03-02", "inspected": 40, "defective": 2}),
        ],
    );
    let r = report(&s, "period=2026-03&baseline=off");
    assert!(r["product_mix"].is_null(), "{}", r["product_mix"]);
    assert_eq!(r["test"]["significant"], false);
    assert_eq!(r["power"]["uninformative"], true, "{}", r["power"]);
    assert!(
        r["test"]["verdict"]
            .as_str()
            .unwrap()
            .contains("uninformative")
    );
    assert!(r["groups"][0]["detectable_difference"].as_f64().unwrap() > 0.04);
    assert!(r["pairs"][0]["detectable_difference"].as_f64().unwrap() > 0.04);
    let r = report(&s, "period=2026-03&baseline=off&min_difference=0.01");
    let need = r["power"]["units_needed"].as_u64().unwrap();
    assert!(need > 1000, "{}", r["power"]);
}

#[test]
fn a_line_that_stops_posting_and_an_implausible_day_are_listed() {
    let s = Server::start();
    s.site("S1", &["L1", "L2"]);
    s.site("S2", &["L1"]);
    let mut records = Vec::new();
    // Every weekday from eight weeks before March to the end of March, about 1%
    // defective, except: S1/L2 posts nothing after 2026-03-10; S2/L1 reports every
    // unit defective on 2026-03-17 (a swapped column, say).
    for (i, d) in weekdays(date!(2026 - 01 - 05), date!(2026 - 03 - 31))
        .into_iter()
        .enumerate()
    {
        for (site, line) in [("S1", "L1"), ("S1", "L2"), ("S2", "L1")] {
            if (site, line) == ("S1", "L2") && d > date!(2026 - 03 - 10) {
                continue;
            }
            let defective = if (site, line) == ("S2", "L1") && d == date!(2026 - 03 - 17) {
                200
            } else {
                [2, 1, 3, 2, 2][i % 5]
            };
            records.push(json!({"site": site, "line": line, "date": d.to_string(),
                                "inspected": 200, "defective": defective}));
        }
    }
    post(&s, records);
    let r = report(&s, "period=2026-03");
    let gaps = &r["data_gaps"];
    assert_eq!(gaps["stopped"].as_array().unwrap().len(), 1, "{gaps}");
    assert_eq!(gaps["stopped"][0]["line"], "S1/L2");
    assert_eq!(gaps["stopped"][0]["last_posted"], "2026-03-10");
    // 2026-03-11..31 holds 15 weekdays.
    assert_eq!(gaps["stopped"][0]["usual_days_without_data"], 15);
    let implausible = gaps["implausible"].as_array().unwrap();
    assert_eq!(implausible.len(), 1, "{gaps}");
    assert_eq!(implausible[0]["line"], "S2/L1");
    assert_eq!(implausible[0]["date"], "2026-03-17");
    assert!(
        gaps["missing_days"].as_array().unwrap().is_empty(),
        "{gaps}"
    );
    assert!(gaps["note"].as_str().unwrap().contains("S1/L2"), "{gaps}");
    assert!(
        r["cautions"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c.as_str().unwrap().starts_with("Gaps in the data:")),
        "{}",
        r["cautions"]
    );
    // The gaps read a history before the period: a correction there moves the ETag.
    let first = s.request(
        "GET",
        "/v1/reports?period=2026-03",
        Some(s.admin()),
        Body::None,
    );
    let tag = first.header("etag").unwrap().to_owned();
    post(
        &s,
        vec![
            json!({"site": "S2", "line": "L1", "date": "2026-01-20", "inspected": 200,
                    "defective": 9}),
        ],
    );
    let again = s.request(
        "GET",
        "/v1/reports?period=2026-03",
        Some(s.admin()),
        Body::None,
    );
    assert_ne!(again.header("etag").unwrap(), tag);
}
