//! The demo data's planted story, read by `baseline::compare` itself: weekly verdicts of
//! every site against its own eight earlier ISO weeks, and of MRQ's and SEM's lines, with
//! the default limit (Šidák over the groups of the report at family alpha 0.01, Student's
//! t on the baseline's periods less one). demo-data/README.md tells the same story;
//! crates/dispar/src/cli/demo/generate.rs writes the data.

use std::collections::BTreeMap;
use std::path::PathBuf;

use dispar_stats::baseline::{BaselineOptions, Comparison, Limit, Method, Verdict, compare};

/// Days since 1970-01-01 of a proleptic Gregorian date (Hinnant's days_from_civil).
fn days(y: i64, m: i64, d: i64) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let doy = (153 * (m + if m > 2 { -3 } else { 9 }) + 2) / 5 + d - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// ISO week of 2026 (the data covers 2026-W02..W26; W01 began on Monday 2025-12-29).
fn iso_week(date: &str) -> usize {
    let part = |r: std::ops::Range<usize>| -> i64 { date[r].parse().expect("date digits") };
    let day = days(part(0..4), part(5..7), part(8..10));
    let w01 = days(2025, 12, 29);
    ((day - w01).div_euclid(7) + 1) as usize
}

/// (week, group) -> (inspected, defective), summed over the rows `key` maps to a group.
type Weekly = BTreeMap<(usize, String), (u64, u64)>;

fn weekly(key: impl Fn(&str, &str) -> Option<String>) -> Weekly {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/counts.csv");
    let text = std::fs::read_to_string(&path)
        .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    let mut out = Weekly::new();
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let Some(group) = key(f[0], f[1]) else {
            continue;
        };
        let n: u64 = f[3].parse().expect("inspected");
        let d: u64 = f[4].parse().expect("defective");
        let cell = out.entry((iso_week(f[2]), group)).or_default();
        cell.0 += n;
        cell.1 += d;
    }
    out
}

/// Every group's comparison for weeks `from..=to`, each against its 8 earlier weeks.
fn verdicts(data: &Weekly, from: usize, to: usize) -> BTreeMap<(usize, String), Comparison> {
    let groups: Vec<String> = {
        let mut g: Vec<String> = data.keys().map(|k| k.1.clone()).collect();
        g.sort();
        g.dedup();
        g
    };
    let opts = BaselineOptions {
        limit: Limit::sidak(groups.len()),
        ..BaselineOptions::default()
    };
    let mut out = BTreeMap::new();
    for week in from..=to {
        for g in &groups {
            let get = |w: usize| data.get(&(w, g.clone())).copied().unwrap_or((0, 0));
            let base: Vec<(u64, u64)> = (week.saturating_sub(8).max(2)..week).map(get).collect();
            let c = compare(get(week), &base, &opts).expect("valid counts");
            out.insert((week, g.clone()), c);
        }
    }
    out
}

fn calls(v: &BTreeMap<(usize, String), Comparison>) -> Vec<(usize, String, Verdict)> {
    v.iter()
        .filter(|(_, c)| matches!(c.verdict, Verdict::Worse | Verdict::Better))
        .map(|((w, g), c)| (*w, g.clone(), c.verdict))
        .collect()
}

fn table(v: &BTreeMap<(usize, String), Comparison>) -> String {
    v.iter()
        .map(|((w, g), c)| {
            format!(
                "W{w:02} {g}: {:?} z {:.2} limit {:.2} phi {:.2} rate {:.4} base {:.4} left out {:?} {:?}\n",
                c.verdict,
                c.z.unwrap_or(f64::NAN),
                c.limit,
                c.dispersion.unwrap_or(f64::NAN),
                c.period_rate.unwrap_or(f64::NAN),
                c.rate.unwrap_or(f64::NAN),
                c.left_out,
                c.method,
            )
        })
        .collect()
}

#[test]
fn sites_kes_is_worse_in_w15_to_w18_and_nothing_else_to_speak_of() {
    let data = weekly(|site, _| Some(site.to_string()));
    let v = verdicts(&data, 6, 26);
    println!("{}", table(&v));
    let all = calls(&v);
    let kes: Vec<usize> = all
        .iter()
        .filter(|(_, g, verdict)| g == "KES" && *verdict == Verdict::Worse)
        .map(|c| c.0)
        .collect();
    assert_eq!(
        kes,
        vec![15, 16, 17, 18],
        "KES worse weeks; all calls {all:?}"
    );
    let others: Vec<_> = all
        .iter()
        .filter(|c| !(c.1 == "KES" && c.2 == Verdict::Worse))
        .collect();
    assert!(
        others.len() <= 1,
        "other site-weeks with a call: {others:?}"
    );
    // The one other call is the MRQ L2 spike showing at site level.
    assert_eq!(
        others.first().map(|c| (c.0, c.1.as_str(), c.2)),
        Some((9, "MRQ", Verdict::Worse))
    );
    // After the drift KES is compared with a baseline that still holds it; back at its
    // usual rate it is usual, not better.
    for week in 19..=26 {
        assert_eq!(
            v[&(week, "KES".to_string())].verdict,
            Verdict::Usual,
            "W{week}"
        );
    }
    // SEM's ~300 units a week: exact wherever the expected defectives at the baseline
    // rate are below 5, and only there.
    let mut exact = 0;
    for w in 6..=26 {
        let key = (w, "SEM".to_string());
        let c = &v[&key];
        let expected = data[&key].0 as f64 * c.rate.expect("rate");
        assert_eq!(c.method == Some(Method::Exact), expected < 5.0, "SEM W{w}");
        exact += usize::from(c.method == Some(Method::Exact));
    }
    // 8 of the 21 weeks with seed 7.
    assert!(exact >= 5, "SEM exact in {exact} of 21 weeks");
}

#[test]
fn mrq_lines_l2_is_worse_in_w09() {
    let v = verdicts(
        &weekly(|site, line| (site == "MRQ").then(|| line.to_string())),
        6,
        26,
    );
    println!("{}", table(&v));
    assert_eq!(calls(&v), vec![(9, "L2".to_string(), Verdict::Worse)]);
}

#[test]
fn sem_lines_use_the_exact_method_where_their_volumes_need_it() {
    let v = verdicts(
        &weekly(|site, line| (site == "SEM").then(|| line.to_string())),
        6,
        26,
    );
    println!("{}", table(&v));
    // Tens of units a day per line: every line-week's expected defectives at the baseline
    // rate is below 5, so every one is judged by Fisher's exact test, and none is called.
    assert!(v.values().all(|c| c.method == Some(Method::Exact)));
    assert_eq!(calls(&v), vec![]);
}
