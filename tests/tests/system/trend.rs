//! Each group's trend over a series, end to end through `GET /v1/reports/series`:
//! crafted weekly data in which one site's rate creeps up by a little each week, too
//! little for any single week to be a change against its baseline, while the series
//! calls it rising and says so in its headline; the other sites are steady.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Server, Value, json};

/// The Monday of ISO week `w` of 2026 (2026-W01 starts on 2025-12-29).
fn monday(w: u32) -> String {
    let d = time::Date::from_iso_week_date(2026, u8::try_from(w).unwrap(), time::Weekday::Monday)
        .unwrap();
    format!("{d}")
}

/// A binomial-sized wobble, so the weekly rates are not on a line exactly.
const WOBBLE: [i64; 12] = [0, 4, -3, 2, -5, 3, -1, 5, -2, 1, -4, 0];

/// Defectives of `site` in week `w` (10,000 inspected every week): CRP about 1% rising
/// by 4 in 10,000 (0.04 pp) a week; FLT about 1%, HLM about 2%, NVE about 0.5%.
fn defective(site: &str, w: u32) -> u64 {
    let wob = WOBBLE[(w as usize - 1) % WOBBLE.len()];
    let base: i64 = match site {
        "CRP" => 100 + 4 * i64::from(w),
        "FLT" => 100,
        "HLM" => 200,
        _ => 50,
    };
    u64::try_from(base + wob).unwrap()
}

const SITES: [&str; 4] = ["CRP", "FLT", "HLM", "NVE"];

/// Sixteen weeks of data; the series asked for is W05–W16, so every point has a
/// baseline of at least four earlier weeks.
fn loaded() -> Server {
    let s = Server::start();
    for site in SITES {
        s.site(site, &["L1"]);
    }
    let records: Vec<Value> = (1..=16)
        .flat_map(|w| {
            SITES.iter().map(move |site| {
                json!({"site": site, "line": "L1", "date": monday(w),
                       "inspected": 10_000, "defective": defective(site, w)})
            })
        })
        .collect();
    let r = s.as_admin(
        "POST",
        "/v1/counts",
        Body::Json(json!({ "records": records })),
    );
    assert!(r.status == 200 || r.status == 201, "{}", r.text);
    s
}

fn trend_of<'a>(series: &'a Value, code: &str) -> &'a Value {
    series["trends"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["code"] == code)
        .unwrap_or_else(|| panic!("no trend of {code}: {}", series["trends"]))
}

#[test]
fn a_slow_rise_that_is_no_change_in_any_week_is_a_rising_trend_in_the_series() {
    let s = loaded();
    let read = s.key("read", &[]);
    let r = s.request(
        "GET",
        "/v1/reports/series?from=2026-W05&to=2026-W16",
        Some(&read),
        Body::None,
    );
    assert_eq!(r.status, 200, "{}", r.text);
    let v = r.json();
    let points = v["periods"].as_array().unwrap();
    assert_eq!(points.len(), 12);
    for p in points {
        assert_eq!(p["changes"], json!([]), "{}: {}", p["period"], p["changes"]);
    }
    let codes: Vec<&str> = v["trends"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["code"].as_str().unwrap())
        .collect();
    assert_eq!(codes, SITES, "the groups of the last period, in order");

    let crp = trend_of(&v, "CRP");
    assert_eq!(crp["reason"], Value::Null);
    let t = &crp["trend"];
    assert_eq!(t["direction"], "rising", "{t}");
    assert_eq!(t["significant"], true);
    assert_eq!(t["periods"], 12);
    assert_eq!(
        (t["from"].as_str(), t["to"].as_str()),
        (Some("2026-W05"), Some("2026-W16"))
    );
    let slope = t["slope"].as_f64().unwrap();
    assert!((slope - 0.0004).abs() < 0.0001, "{t}");
    assert!(t["p_widened"].as_f64().unwrap() < 0.05, "{t}");
    for field in ["statistic", "p_value", "log10_p", "dispersion"] {
        assert!(t[field].is_number(), "{field} in {t}");
    }
    assert!(
        t["verdict"]
            .as_str()
            .unwrap()
            .starts_with("CRP getting steadily worse over the last 12 weeks: +0.04 pp a week (p "),
        "{t}"
    );
    for code in ["FLT", "HLM", "NVE"] {
        let t = &trend_of(&v, code)["trend"];
        assert_eq!(t["direction"], "steady", "{code}: {t}");
        assert_eq!(t["significant"], false, "{code}: {t}");
    }
    assert_eq!(
        v["headline"],
        "No site worse or better than its usual in any week of the range; CRP getting steadily worse over 2026-W05–W16"
    );

    // The same data give the same tag: a conditional request is answered unchanged.
    let tag = r.header("etag").unwrap().to_owned();
    let again = s.request_with(
        "GET",
        "/v1/reports/series?from=2026-W05&to=2026-W16",
        Some(&read),
        Body::None,
        &[("if-none-match", tag.as_str())],
    );
    assert_eq!(again.status, 304, "{}", again.text);
}

#[test]
fn too_few_weeks_give_a_reason_and_no_trend() {
    let s = loaded();
    let read = s.key("read", &[]);
    let r = s.request(
        "GET",
        "/v1/reports/series?from=2026-W15&to=2026-W16&baseline=off",
        Some(&read),
        Body::None,
    );
    assert_eq!(r.status, 200, "{}", r.text);
    let v = r.json();
    for code in SITES {
        let t = trend_of(&v, code);
        assert_eq!(t["trend"], Value::Null, "{t}");
        assert_eq!(
            t["reason"], "fewer than 3 weeks with units inspected (2)",
            "{t}"
        );
    }
    // HLM's 2% and NVE's 0.5% differ every week; no trend is added to the words.
    assert_eq!(v["headline"], "Sites: 2 of 2 periods differ");
}
