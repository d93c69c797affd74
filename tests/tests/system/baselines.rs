//! Each group against its own baseline, end to end through `GET /v1/reports` and
//! `GET /v1/reports/series`: crafted weekly data with a step change, an excursion and
//! its return to normal, a persistent difference between sites, `baseline=off`, the
//! bounds of `baseline=N`, `as_of` reproducing an earlier baseline, and the demo's
//! story.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use dispar_system_tests::{Body, Reply, Server, Value, json, urlencode};

use crate::demo::Demo;

/// The Monday of ISO week `w` of 2026 (2026-W01 starts on 2025-12-29).
fn monday(w: u32) -> String {
    let d = time::Date::from_iso_week_date(2026, u8::try_from(w).unwrap(), time::Weekday::Monday)
        .unwrap();
    format!("{d}")
}

/// A small wobble so the weekly rates are not identical (binomial-sized).
const WOBBLE: [i64; 12] = [0, 4, -3, 2, -5, 3, -1, 5, -2, 1, -4, 0];

/// Defectives of `site` in week `w` (10,000 inspected every week):
/// S1 about 1%, stepping to 2.5% from W11; S2 about 1% with a 5% excursion in W08;
/// S3 about 2% every week (a persistent difference); S4 about 0.5%.
fn defective(site: &str, w: u32) -> u64 {
    let wob = WOBBLE[(w as usize - 1) % WOBBLE.len()];
    let base: i64 = match (site, w) {
        ("S1", 11..) => 250,
        ("S1", _) => 100,
        ("S2", 8) => 500,
        ("S2", _) => 100,
        ("S3", _) => 200,
        _ => 50,
    };
    u64::try_from(base + wob).unwrap()
}

const SITES: [&str; 4] = ["S1", "S2", "S3", "S4"];

fn loaded() -> Server {
    let s = Server::start();
    for site in SITES {
        s.site(site, &["L1"]);
    }
    let records: Vec<Value> = (1..=12)
        .flat_map(|w| {
            SITES.iter().map(move |site| {
                json!({"site": site, "line": "L1", "date": monday(w),
                       "inspected": 10_000, "defective": defective(site, w)})
            })
        })
        .collect();
    post(&s, json!({ "records": records }));
    s
}

fn post(s: &Server, body: Value) {
    let r = s.as_admin("POST", "/v1/counts", Body::Json(body));
    assert!(r.status == 200 || r.status == 201, "{}", r.text);
}

fn get(s: &Server, token: &str, path: &str) -> Reply {
    s.request("GET", path, Some(token), Body::None)
}

fn report(s: &Server, token: &str, query: &str) -> Value {
    let r = get(s, token, &format!("/v1/reports?{query}"));
    assert_eq!(r.status, 200, "{query}: {}", r.text);
    r.json()
}

fn baseline<'a>(report: &'a Value, code: &str) -> &'a Value {
    let b = &report["groups"]
        .as_array()
        .unwrap()
        .iter()
        .find(|g| g["code"] == code)
        .unwrap_or_else(|| panic!("no group {code}"))["baseline"];
    assert!(b.is_object(), "{code} has no baseline: {report}");
    b
}

fn verdict(report: &Value, code: &str) -> String {
    baseline(report, code)["verdict"]
        .as_str()
        .unwrap()
        .to_owned()
}

#[test]
fn a_step_change_is_worse_and_the_others_are_as_usual() {
    let s = loaded();
    let read = s.key("read", &[]);
    let r = report(&s, &read, "period=2026-W11");
    assert_eq!(r["parameters"]["baseline"], 8);
    assert_eq!(verdict(&r, "S1"), "worse", "{}", baseline(&r, "S1"));
    for code in ["S2", "S3", "S4"] {
        assert_eq!(verdict(&r, code), "usual", "{code}: {}", baseline(&r, code));
    }
    let b = baseline(&r, "S1");
    assert_eq!(b["periods"], 8);
    // W03..W10 of S1: 800 + the wobble of those weeks over 80,000 units.
    let wob: i64 = (3..=10).map(|w| WOBBLE[w - 1]).sum();
    let want = (800 + wob) as f64 / 80_000.0;
    assert!((b["rate"].as_f64().unwrap() - want).abs() < 1e-12, "{b}");
    assert!(b["z"].as_f64().unwrap() > b["limit"].as_f64().unwrap());
    assert!(
        b["reason"].as_str().unwrap().contains("against its usual"),
        "{b}"
    );
    let changes = r["changes"].as_array().unwrap();
    assert_eq!(changes.len(), 1, "{changes:?}");
    assert_eq!(changes[0]["code"], "S1");
    assert_eq!(changes[0]["verdict"], "worse");
    assert!((changes[0]["rate"].as_f64().unwrap() - 0.0246).abs() < 1e-12);
    // S2's W08 excursion is inside the window and is left out of its estimate.
    assert_eq!(baseline(&r, "S2")["left_out"], json!(["2026-W08"]));
    // S3 stands above the pooled rate in every week of the window but W08, when S2's
    // 5% excursion lifts the pooled rate above S3's 2%.
    let spread = &r["usual_spread"];
    assert_eq!(spread["periods"], 8);
    let s3 = spread["groups"]
        .as_array()
        .unwrap()
        .iter()
        .find(|g| g["code"] == "S3")
        .unwrap();
    assert_eq!((&s3["above"], &s3["periods"]), (&json!(7), &json!(8)));
}

#[test]
fn the_week_after_an_excursion_is_usual_not_better() {
    let s = loaded();
    let read = s.key("read", &[]);
    let excursion = report(&s, &read, "period=2026-W08");
    assert_eq!(verdict(&excursion, "S2"), "worse");
    let after = report(&s, &read, "period=2026-W09");
    assert_eq!(verdict(&after, "S2"), "usual", "{}", baseline(&after, "S2"));
    assert_eq!(baseline(&after, "S2")["left_out"], json!(["2026-W08"]));
    assert!(
        after["changes"].as_array().unwrap().is_empty(),
        "{}",
        after["changes"]
    );
    // Too few earlier weeks with units: unknown, with the minimum in words.
    let early = report(&s, &read, "period=2026-W03");
    assert_eq!(verdict(&early, "S1"), "unknown");
    assert!(
        baseline(&early, "S1")["reason"]
            .as_str()
            .unwrap()
            .contains("at least 4"),
        "{}",
        baseline(&early, "S1")
    );
}

#[test]
fn baseline_off_removes_the_objects_and_bad_values_are_problems_naming_it() {
    let s = loaded();
    let read = s.key("read", &[]);
    let r = report(&s, &read, "period=2026-W11&baseline=off");
    assert!(r["parameters"]["baseline"].is_null());
    assert!(r["changes"].as_array().unwrap().is_empty());
    assert!(r["usual_spread"].is_null());
    assert!(
        r["groups"]
            .as_array()
            .unwrap()
            .iter()
            .all(|g| g["baseline"].is_null())
    );
    let four = report(&s, &read, "period=2026-W11&baseline=4");
    assert_eq!(four["parameters"]["baseline"], 4);
    assert_eq!(baseline(&four, "S1")["periods"], 4);
    for bad in ["1", "53", "x", "-3", " 8"] {
        let r = get(
            &s,
            &read,
            &format!("/v1/reports?period=2026-W11&baseline={}", urlencode(bad)),
        );
        assert_eq!(r.status, 422, "baseline={bad:?}: {}", r.text);
        let errors = r.json()["errors"].as_array().unwrap().clone();
        assert_eq!(errors.len(), 1, "{errors:?}");
        assert_eq!(errors[0]["parameter"], "baseline", "{errors:?}");
    }
}

#[test]
fn as_of_reproduces_an_earlier_baseline() {
    let s = loaded();
    let read = s.key("read", &[]);
    let before = report(&s, &read, "period=2026-W11");
    let published = s
        .as_admin(
            "GET",
            &format!("/v1/sites/S4/lines/L1/days/{}/revisions", monday(5)),
            Body::None,
        )
        .json()["revisions"][0]["recorded_at"]
        .as_str()
        .unwrap()
        .to_owned();
    // A correction inside S4's baseline window changes its usual rate.
    post(
        &s,
        json!({"records": [{"site": "S4", "line": "L1", "date": monday(5),
                            "inspected": 10_000, "defective": 150}]}),
    );
    let after = report(&s, &read, "period=2026-W11");
    assert_ne!(
        baseline(&after, "S4")["rate"],
        baseline(&before, "S4")["rate"]
    );
    let old = report(
        &s,
        &read,
        &format!("period=2026-W11&as_of={}", urlencode(&published)),
    );
    assert_eq!(baseline(&old, "S4"), baseline(&before, "S4"));
    assert_eq!(old["usual_spread"], before["usual_spread"]);
    assert_eq!(old["changes"], before["changes"]);
}

#[test]
fn a_series_names_the_changes_of_every_point_and_in_its_headline() {
    let s = loaded();
    let read = s.key("read", &[]);
    let r = get(&s, &read, "/v1/reports/series?from=2026-W06&to=2026-W12");
    assert_eq!(r.status, 200, "{}", r.text);
    let v = r.json();
    let points = v["periods"].as_array().unwrap();
    assert_eq!(points.len(), 7);
    let changed: Vec<(String, String, String)> = points
        .iter()
        .flat_map(|p| {
            p["changes"].as_array().unwrap().iter().map(move |c| {
                (
                    p["period"].as_str().unwrap().to_owned(),
                    c["code"].as_str().unwrap().to_owned(),
                    c["verdict"].as_str().unwrap().to_owned(),
                )
            })
        })
        .collect();
    let want: Vec<(String, String, String)> = [
        ("2026-W08", "S2", "worse"),
        ("2026-W11", "S1", "worse"),
        ("2026-W12", "S1", "worse"),
    ]
    .iter()
    .map(|(a, b, c)| ((*a).to_owned(), (*b).to_owned(), (*c).to_owned()))
    .collect();
    assert_eq!(changed, want);
    let c = &points[5]["changes"][0];
    for field in ["code", "name", "verdict", "rate", "baseline_rate", "z"] {
        assert!(c.get(field).is_some(), "{field} in {c}");
    }
    // The series point equals the one-period report's changes.
    let w11 = report(&s, &read, "period=2026-W11");
    assert_eq!(points[5]["changes"], w11["changes"]);
    // S1's step in W11 also tilts its rate across W06–W12 upwards (its `trends` entry
    // is rising), but the headline names it once, as the change it is.
    let s1 = v["trends"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["code"] == "S1")
        .unwrap();
    assert_eq!(s1["trend"]["direction"], "rising", "{s1}");
    assert_eq!(
        v["headline"],
        "S2 worse than its usual in 2026-W08; S1 worse than its usual in 2026-W11–W12"
    );
    let off = get(
        &s,
        &read,
        "/v1/reports/series?from=2026-W06&to=2026-W12&baseline=off",
    )
    .json();
    assert!(
        off["periods"]
            .as_array()
            .unwrap()
            .iter()
            .all(|p| p["changes"] == json!([]))
    );
    assert!(
        off["headline"].as_str().unwrap().starts_with("Sites: "),
        "{}",
        off["headline"]
    );
}

/// (period, code, verdict) of every change in a series.
fn series_changes(v: &Value) -> Vec<(String, String, String)> {
    v["periods"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|p| {
            p["changes"].as_array().unwrap().iter().map(move |c| {
                (
                    p["period"].as_str().unwrap().to_owned(),
                    c["code"].as_str().unwrap().to_owned(),
                    c["verdict"].as_str().unwrap().to_owned(),
                )
            })
        })
        .collect()
}

#[test]
fn the_demo_tells_its_story_against_each_sites_baseline() {
    let demo = Demo::start(&[]);
    let read = demo.line("read key: ");
    let sites = demo.json(
        "/v1/reports/series?from=2026-W06&to=2026-W26&level=site",
        &read,
    );
    let changes = series_changes(&sites);
    let kes: Vec<&str> = changes
        .iter()
        .filter(|c| c.1 == "KES")
        .map(|c| c.0.as_str())
        .collect();
    assert_eq!(
        kes,
        ["2026-W15", "2026-W16", "2026-W17", "2026-W18"],
        "{changes:?}"
    );
    assert!(
        changes
            .iter()
            .filter(|c| c.1 == "KES")
            .all(|c| c.2 == "worse")
    );
    let lines = demo.json(
        "/v1/reports/series?from=2026-W06&to=2026-W26&level=line&site=MRQ",
        &read,
    );
    let mrq = series_changes(&lines);
    assert!(
        mrq.contains(&(
            "2026-W09".to_owned(),
            "MRQ/L2".to_owned(),
            "worse".to_owned()
        )),
        "{mrq:?}"
    );
    // W16 at site level reads as the issue asks: the change first.
    let w16 = demo.json("/v1/reports?period=2026-W16&level=site", &read);
    assert_eq!(w16["changes"][0]["code"], "KES");
    let usual = w16["changes"][0]["baseline_rate"].as_f64().unwrap();
    assert!((0.006..0.008).contains(&usual), "KES usual {usual}");
    // SEM's small lines are judged with the exact method.
    let sem = demo.json("/v1/reports?period=2026-W16&level=line&site=SEM", &read);
    assert!(
        sem["groups"]
            .as_array()
            .unwrap()
            .iter()
            .all(|g| g["baseline"]["method"] == "exact"),
        "{}",
        sem["groups"]
    );
}

/// The target for the other site-weeks of the demo: at most one worse or
/// better call in total. It depends on the limit and the z's calibration in
/// dispar-stats (being recalibrated); see the report of this change for what it gives
/// today.
#[test]
fn the_demo_makes_at_most_one_other_site_call() {
    let demo = Demo::start(&[]);
    let read = demo.line("read key: ");
    let sites = demo.json(
        "/v1/reports/series?from=2026-W06&to=2026-W26&level=site",
        &read,
    );
    let others: Vec<_> = series_changes(&sites)
        .into_iter()
        .filter(|c| c.1 != "KES")
        .collect();
    assert!(others.len() <= 1, "{others:?}");
}

/// S1's pooled rate over weeks `ws` (10,000 units a week).
fn pooled(site: &str, ws: std::ops::RangeInclusive<u32>) -> f64 {
    let n = ws.clone().count() as f64 * 10_000.0;
    ws.map(|w| defective(site, w) as f64).sum::<f64>() / n
}

#[test]
fn a_day_uses_earlier_days_with_production_and_a_range_earlier_ranges_of_its_length() {
    let s = loaded();
    let read = s.key("read", &[]);
    // The data are Mondays only: a day's baseline is the group's four earlier Mondays,
    // not the four calendar days before (which have no production).
    let day = report(&s, &read, &format!("period={}&baseline=4", monday(11)));
    let b = baseline(&day, "S1");
    assert_eq!(b["periods"], 4, "{b}");
    assert_eq!(b["verdict"], "worse", "{b}");
    let want = pooled("S1", 7..=10);
    assert!((b["rate"].as_f64().unwrap() - want).abs() < 1e-15, "{b}");
    assert_eq!(day["parameters"]["baseline"], 4);

    // A seven-day range: the four earlier seven-day ranges are W07..W10.
    let sunday = |w: u32| {
        let d =
            time::Date::from_iso_week_date(2026, u8::try_from(w).unwrap(), time::Weekday::Sunday)
                .unwrap();
        format!("{d}")
    };
    let week = report(
        &s,
        &read,
        &format!("period={}..{}&baseline=4", monday(11), sunday(11)),
    );
    let b = baseline(&week, "S1");
    assert_eq!(b["periods"], 4, "{b}");
    assert!((b["rate"].as_f64().unwrap() - want).abs() < 1e-15, "{b}");
    // The same seven days as an ISO week give the same baseline.
    let iso = report(&s, &read, "period=2026-W11&baseline=4");
    assert_eq!(baseline(&iso, "S1")["rate"], b["rate"]);

    // Fourteen days (W11 and W12): the four earlier fourteen-day ranges are W03..W10.
    let fortnight = report(
        &s,
        &read,
        &format!("period={}..{}&baseline=4", monday(11), sunday(12)),
    );
    let b = baseline(&fortnight, "S1");
    assert_eq!(b["periods"], 4, "{b}");
    let want = pooled("S1", 3..=10);
    assert!((b["rate"].as_f64().unwrap() - want).abs() < 1e-15, "{b}");
    // S3 is persistently higher but as usual against its own baseline.
    assert_eq!(verdict(&fortnight, "S3"), "usual");
}
