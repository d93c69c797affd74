//! Checks that the generator is deterministic, that the committed `demo-data/` is
//! what [`DEFAULT_SEED`] produces, and that the verdicts `demo-data/README.md`
//! promises are true of that data.
//!
//! The statistics are computed here directly (dispar-stats was being written at the
//! same time); the formulas are the textbook ones, with sources named:
//! - Pearson's X^2 for a k x 2 table, expected E = row total x column total / N.
//! - Adjusted (standardized) residual of a group's defective cell, Haberman (1973),
//!   "The analysis of residuals in cross-classified tables", Biometrics 29:205-220:
//!   (x_i - E_i) / sqrt(E_i (1 - n_i/N) (1 - D/N)), which for a k x 2 table equals
//!   (p_i - p) / sqrt(p (1 - p) (1/n_i - 1/N)) with p the pooled rate.
//! - Cochran's rule (Cochran 1954, "Some methods for strengthening the common chi^2
//!   tests", Biometrics 10:417-451): no expected count below 1 and at most 20% below 5.
//! - Indirect standardisation for the product mix: a group's expected defectives are
//!   E = sum over strata s of n_s r_s, with r_s the stratum's rate pooled over all
//!   groups, and its standardised ratio is O / E (the standardised mortality ratio of
//!   epidemiology; Breslow and Day 1987, "Statistical Methods in Cancer Research, Vol. II:
//!   The Design and Analysis of Cohort Studies", IARC Scientific Publications 82,
//!   chapter 2 (recalled from memory)). The strata are the products, "no product" being
//!   one of them.
//!
//! A group is called "above" here when its adjusted residual exceeds
//! [`FLAG_THRESHOLD`] = 3.0, a fixed threshold a little stricter than the ANOM
//! critical value for six groups at alpha = 0.05 (2.631 by the Sidak bound,
//! z at 1 - (1 - 0.95^(1/6))/2, computed with statrs 0.19). The drift assertions
//! leave a wide margin on both sides so they hold for any critical value between
//! 0 and 6. (The two citations above are from memory.)

use std::collections::BTreeMap;

use time::Date;

use super::generate::{CATEGORIES, DemoData, DemoRecord, FIRST_DAY, LAST_DAY, PRODUCT_LINES};
use super::{DEFAULT_SEED, generate};

const COMMITTED_SITES: &str = include_str!("../../../../../demo-data/sites.csv");
const COMMITTED_LINES: &str = include_str!("../../../../../demo-data/lines.csv");
const COMMITTED_COUNTS: &str = include_str!("../../../../../demo-data/counts.csv");

const FLAG_THRESHOLD: f64 = 3.0;

/// The claims of demo-data/README.md, restated here on purpose (not read from the
/// generator's constants) so the test checks the README, not the code against itself.
const DRIFT_SITE: &str = "KES";
const DRIFT_FLAGGED_WEEKS: std::ops::RangeInclusive<u8> = 15..=18;
const SPIKE_SITE: &str = "MRQ";
const SPIKE_LINE: &str = "L2";
const SPIKE_WEEK: u8 = 9;
const SMALL_SITE: &str = "SEM";
/// The site whose crude rate is high only because of its product mix.
const MIX_SITE: &str = "MRQ";
/// The products of demo-data/README.md, easy one first.
const PRODUCT_CODES: [&str; 2] = ["CAP", "DSP"];
/// What the README's totals say: (site, line, date) days, units, defective units. These
/// are the totals from before the days were split by product, which the split keeps.
const README_DAYS: usize = 2_052;
const README_DEFECTIVE: u64 = 161_777;
const README_UNITS_MILLIONS: f64 = 16.3;
/// How far from 1 the mix site's O/E may be and still count as "close to 1", as the
/// README says: about +-8%. A week of MRQ has about 1,000 defective units, whose Poisson
/// spread alone is about 3% of them, and the daily extra-binomial noise adds as much.
const OE_CLOSE: f64 = 0.08;
/// The least crude rate ratio (MRQ against the pooled rate) for "looks worse".
const CRUDE_ABOVE: f64 = 1.15;

/// One row of a k x 2 table: (group, inspected, defective).
type Group = (String, u64, u64);

struct GroupStats {
    adjusted_residual: f64,
    expected_defective: f64,
    expected_conforming: f64,
}

struct TableStats {
    pearson: f64,
    groups: Vec<GroupStats>,
    cochran_holds: bool,
    share_below_5: f64,
}

fn k_by_2(groups: &[Group]) -> TableStats {
    let n_total: u64 = groups.iter().map(|g| g.1).sum();
    let d_total: u64 = groups.iter().map(|g| g.2).sum();
    let (n, d) = (n_total as f64, d_total as f64);
    let p = d / n;
    let mut pearson = 0.0;
    let mut below_1 = 0;
    let mut below_5 = 0;
    let mut out = Vec::new();
    for (_, ni, xi) in groups {
        let (ni, xi) = (*ni as f64, *xi as f64);
        let e_def = ni * d / n;
        let e_conf = ni * (n - d) / n;
        pearson += (xi - e_def).powi(2) / e_def + ((ni - xi) - e_conf).powi(2) / e_conf;
        for e in [e_def, e_conf] {
            below_1 += usize::from(e < 1.0);
            below_5 += usize::from(e < 5.0);
        }
        let z = (xi / ni - p) / (p * (1.0 - p) * (1.0 / ni - 1.0 / n)).sqrt();
        out.push(GroupStats {
            adjusted_residual: z,
            expected_defective: e_def,
            expected_conforming: e_conf,
        });
    }
    let cells = 2 * groups.len();
    let share_below_5 = below_5 as f64 / cells as f64;
    TableStats {
        pearson,
        groups: out,
        cochran_holds: below_1 == 0 && share_below_5 <= 0.2,
        share_below_5,
    }
}

fn iso_week(d: Date) -> u8 {
    d.iso_week()
}

/// (week -> group key -> (inspected, defective)) over the records that `keep` selects.
fn weekly(
    data: &DemoData,
    keep: impl Fn(&DemoRecord) -> bool,
    key: impl Fn(&DemoRecord) -> String,
) -> BTreeMap<u8, Vec<Group>> {
    let mut acc: BTreeMap<u8, BTreeMap<String, (u64, u64)>> = BTreeMap::new();
    for r in data.records.iter().filter(|r| keep(r)) {
        let e = acc
            .entry(iso_week(r.date))
            .or_default()
            .entry(key(r))
            .or_default();
        e.0 += r.inspected;
        e.1 += r.defective;
    }
    acc.into_iter()
        .map(|(w, m)| (w, m.into_iter().map(|(k, (n, x))| (k, n, x)).collect()))
        .collect()
}

fn weekly_sites(data: &DemoData) -> BTreeMap<u8, Vec<Group>> {
    weekly(data, |_| true, |r| r.site.to_string())
}

fn residual_of(groups: &[Group], stats: &TableStats, name: &str) -> f64 {
    let i = groups
        .iter()
        .position(|g| g.0 == name)
        .unwrap_or_else(|| panic!("group {name} missing"));
    stats.groups[i].adjusted_residual
}

#[test]
fn the_same_seed_gives_identical_bytes() {
    let a = generate(DEFAULT_SEED);
    let b = generate(DEFAULT_SEED);
    assert_eq!(a, b);
    assert_eq!(a.counts_csv(), b.counts_csv());
    assert_eq!(a.sites_csv(), b.sites_csv());
    assert_eq!(a.lines_csv(), b.lines_csv());
}

#[test]
fn another_seed_gives_other_counts_on_the_same_calendar() {
    let a = generate(DEFAULT_SEED);
    let b = generate(DEFAULT_SEED + 1);
    assert_ne!(a.counts_csv(), b.counts_csv());
    let key = |d: &DemoData| -> Vec<(Date, &str, &str, Option<&str>)> {
        d.records
            .iter()
            .map(|r| (r.date, r.site, r.line, r.product))
            .collect()
    };
    assert_eq!(key(&a), key(&b), "the calendar does not depend on the seed");
}

#[test]
fn the_committed_demo_data_is_what_the_default_seed_produces() {
    let data = generate(DEFAULT_SEED);
    // Compare line by line first so a mismatch names the first differing row.
    let fresh = data.counts_csv();
    for (i, (ours, committed)) in fresh.lines().zip(COMMITTED_COUNTS.lines()).enumerate() {
        assert_eq!(ours, committed, "counts.csv line {} differs", i + 1);
    }
    assert_eq!(fresh, COMMITTED_COUNTS, "counts.csv differs (length?)");
    assert_eq!(data.sites_csv(), COMMITTED_SITES);
    assert_eq!(data.lines_csv(), COMMITTED_LINES);
}

#[test]
fn write_to_writes_the_three_files() {
    let dir = std::env::temp_dir().join(format!("dispar-demo-test-{}", std::process::id()));
    let data = generate(DEFAULT_SEED);
    data.write_to(&dir).expect("write demo data");
    for (file, text) in [
        ("sites.csv", data.sites_csv()),
        ("lines.csv", data.lines_csv()),
        ("counts.csv", data.counts_csv()),
    ] {
        let got = std::fs::read_to_string(dir.join(file)).expect("read back");
        assert_eq!(got, text, "{file}");
    }
    std::fs::remove_dir_all(&dir).expect("clean up");
}

#[test]
fn counts_csv_parses_as_the_batch_format_and_every_row_is_plausible() {
    let mut reader = csv::Reader::from_reader(COMMITTED_COUNTS.as_bytes());
    let header: Vec<String> = reader
        .headers()
        .expect("header")
        .iter()
        .map(str::to_string)
        .collect();
    let mut expected = vec!["site", "line", "date", "inspected", "defective", "product"]
        .into_iter()
        .map(str::to_string)
        .collect::<Vec<_>>();
    expected.extend(CATEGORIES.iter().map(|c| format!("defect:{c}")));
    assert_eq!(header, expected);

    let sites: Vec<&str> = COMMITTED_SITES.lines().skip(1).collect();
    assert!((5..=7).contains(&sites.len()), "5 to 7 plants");
    let lines = generate(DEFAULT_SEED).lines;
    let mut rows = 0;
    for row in reader.records() {
        let row = row.expect("row");
        rows += 1;
        let num = |i: usize| row[i].parse::<u64>().expect("count");
        let (inspected, defective) = (num(3), num(4));
        let defects: u64 = (6..6 + CATEGORIES.len()).map(num).sum();
        assert!(defective <= inspected, "row {rows}: defective > inspected");
        assert!(inspected > 0, "row {rows}: no units");
        assert!(
            defects >= defective && defects <= 2 * defective,
            "row {rows}: {defects} defects for {defective} defective units"
        );
        assert!(
            lines.iter().any(|l| l.site == &row[0] && l.line == &row[1]),
            "row {rows}: unknown line"
        );
        let product_line = PRODUCT_LINES
            .iter()
            .any(|(s, l, _)| *s == &row[0] && *l == &row[1]);
        if product_line {
            assert!(
                PRODUCT_CODES.contains(&&row[5]),
                "row {rows}: product {:?} on a product line",
                &row[5]
            );
        } else {
            assert_eq!(
                &row[5], "",
                "row {rows}: a product on a line without products"
            );
        }
        let date = Date::parse(
            &row[2],
            time::macros::format_description!("[year]-[month]-[day]"),
        )
        .expect("ISO date");
        assert!((FIRST_DAY..=LAST_DAY).contains(&date));
        assert!(
            !matches!(
                date.weekday(),
                time::Weekday::Saturday | time::Weekday::Sunday
            ),
            "row {rows}: weekend production"
        );
    }
    assert!(rows > 1000);
    assert!(COMMITTED_COUNTS.len() < 3_000_000);
}

#[test]
fn holidays_have_no_rows() {
    let data = generate(DEFAULT_SEED);
    let has = |site: &str, d: Date| data.records.iter().any(|r| r.site == site && r.date == d);
    // Easter Monday at every European plant, Memorial Day at TLG, a normal Tuesday everywhere.
    for site in ["KES", "MRQ", "ODW", "SEM", "VAL"] {
        assert!(!has(site, time::macros::date!(2026 - 04 - 06)), "{site}");
        assert!(has(site, time::macros::date!(2026 - 04 - 07)), "{site}");
    }
    assert!(!has("TLG", time::macros::date!(2026 - 05 - 25)));
    assert!(has("TLG", time::macros::date!(2026 - 04 - 06)));
}

#[test]
fn volumes_range_from_tens_to_tens_of_thousands_of_units_a_day() {
    let data = generate(DEFAULT_SEED);
    let mean_daily = |site: &str| {
        let mut per_day: BTreeMap<Date, u64> = BTreeMap::new();
        for r in data.records.iter().filter(|r| r.site == site) {
            *per_day.entry(r.date).or_default() += r.inspected;
        }
        per_day.values().sum::<u64>() as f64 / per_day.len() as f64
    };
    let sem = mean_daily(SMALL_SITE);
    assert!((30.0..100.0).contains(&sem), "SEM makes tens a day: {sem}");
    let val = mean_daily("VAL");
    assert!(
        (500.0..5000.0).contains(&val),
        "VAL makes hundreds to a few thousand: {val}"
    );
    let tlg = mean_daily("TLG");
    assert!(tlg > 30_000.0, "TLG makes tens of thousands: {tlg}");
}

#[test]
fn the_drifting_plant_is_flagged_above_in_its_weeks_and_not_before() {
    let data = generate(DEFAULT_SEED);
    let weeks = weekly_sites(&data);
    assert_eq!(
        weeks.keys().copied().collect::<Vec<_>>(),
        (2..=26).collect::<Vec<_>>()
    );
    // Critical value of chi-square with df = 5 at alpha = 0.05: 11.0705 (statrs 0.19
    // ChiSquared::inverse_cdf(0.95) = 11.070497693516343).
    let critical_df5 = 11.0705;
    for (week, groups) in &weeks {
        assert_eq!(groups.len(), 6, "W{week:02}: six plants report");
        let stats = k_by_2(groups);
        let z = residual_of(groups, &stats, DRIFT_SITE);
        let summary: Vec<String> = groups
            .iter()
            .zip(&stats.groups)
            .map(|(g, s)| {
                format!(
                    "{} {:.3}% z={:+.1}",
                    g.0,
                    100.0 * g.2 as f64 / g.1 as f64,
                    s.adjusted_residual
                )
            })
            .collect();
        println!(
            "W{week:02} X2={:.0} | {}",
            stats.pearson,
            summary.join(" | ")
        );
        assert!(
            stats.cochran_holds,
            "W{week:02}: site-level table meets Cochran's rule"
        );
        assert!(stats.pearson > critical_df5, "W{week:02}: sites differ");
        if DRIFT_FLAGGED_WEEKS.contains(week) {
            assert!(
                z > 2.0 * FLAG_THRESHOLD,
                "W{week:02}: {DRIFT_SITE} should be flagged above, z = {z:.2}"
            );
        } else if *week < *DRIFT_FLAGGED_WEEKS.start() {
            assert!(
                z < 0.0,
                "W{week:02}: {DRIFT_SITE} should be below the pooled rate before its drift, z = {z:.2}"
            );
        } else {
            assert!(
                z < 0.0,
                "W{week:02}: {DRIFT_SITE} should be back below the pooled rate after W18, z = {z:.2}"
            );
        }
    }
}

#[test]
fn the_drift_shows_in_seal_leak_defects() {
    let data = generate(DEFAULT_SEED);
    let share = |weeks: std::ops::RangeInclusive<u8>| {
        let mut seal = 0;
        let mut all = 0;
        for r in data
            .records
            .iter()
            .filter(|r| r.site == DRIFT_SITE && weeks.contains(&iso_week(r.date)))
        {
            seal += r.defects[2];
            all += r.defects.iter().sum::<u64>();
        }
        seal as f64 / all as f64
    };
    assert_eq!(CATEGORIES[2], "seal-leak");
    let before = share(2..=13);
    let during = share(DRIFT_FLAGGED_WEEKS);
    println!("{DRIFT_SITE} seal-leak share of defects: before {before:.3}, during {during:.3}");
    assert!(
        before < 0.25 && during > 0.45,
        "before {before}, during {during}"
    );
}

#[test]
fn the_spike_line_is_flagged_above_among_its_plants_lines_in_its_week() {
    let data = generate(DEFAULT_SEED);
    let weeks = weekly(&data, |r| r.site == SPIKE_SITE, |r| r.line.to_string());
    let groups = &weeks[&SPIKE_WEEK];
    let stats = k_by_2(groups);
    let z = residual_of(groups, &stats, SPIKE_LINE);
    println!("{SPIKE_SITE} lines W{SPIKE_WEEK:02}: {SPIKE_LINE} z = {z:.1}");
    assert!(z > 2.0 * FLAG_THRESHOLD, "{SPIKE_LINE} z = {z:.2}");

    // Day level: each spike day, the line stands out among its plant's lines.
    for day in 24..=26 {
        let date = Date::from_calendar_date(2026, time::Month::February, day).expect("date");
        // Summed over the line's product rows.
        let mut by_line: BTreeMap<&str, (u64, u64)> = BTreeMap::new();
        for r in data
            .records
            .iter()
            .filter(|r| r.site == SPIKE_SITE && r.date == date)
        {
            let cell = by_line.entry(r.line).or_default();
            cell.0 += r.inspected;
            cell.1 += r.defective;
        }
        let groups: Vec<Group> = by_line
            .into_iter()
            .map(|(line, (n, x))| (line.to_string(), n, x))
            .collect();
        let stats = k_by_2(&groups);
        let z = residual_of(&groups, &stats, SPIKE_LINE);
        println!("{SPIKE_SITE} lines 2026-02-{day}: {SPIKE_LINE} z = {z:.1}");
        assert!(
            z > 2.0 * FLAG_THRESHOLD,
            "2026-02-{day}: {SPIKE_LINE} z = {z:.2}"
        );
    }

    // The spike pushes the whole plant above in that week, and is not a plant-wide habit.
    let sites = weekly_sites(&data);
    let groups = &sites[&SPIKE_WEEK];
    let z_site = residual_of(groups, &k_by_2(groups), SPIKE_SITE);
    println!("{SPIKE_SITE} site-level W{SPIKE_WEEK:02}: z = {z_site:.1}");
    assert!(z_site > FLAG_THRESHOLD);

    // In the other weeks the line is not flagged above among its plant's lines.
    for (week, groups) in weeks.iter().filter(|(w, _)| **w != SPIKE_WEEK) {
        let z = residual_of(groups, &k_by_2(groups), SPIKE_LINE);
        assert!(z < FLAG_THRESHOLD, "W{week:02}: {SPIKE_LINE} z = {z:.2}");
    }
}

#[test]
fn the_small_plants_line_tables_fail_cochrans_rule_every_week() {
    let data = generate(DEFAULT_SEED);
    let weeks = weekly(&data, |r| r.site == SMALL_SITE, |r| r.line.to_string());
    assert_eq!(weeks.len(), 25);
    for (week, groups) in &weeks {
        let stats = k_by_2(groups);
        let min_e = stats
            .groups
            .iter()
            .flat_map(|g| [g.expected_defective, g.expected_conforming])
            .fold(f64::INFINITY, f64::min);
        println!(
            "{SMALL_SITE} lines W{week:02}: n = {:?}, min expected {min_e:.2}, share below 5 = {:.2}",
            groups.iter().map(|g| g.1).collect::<Vec<_>>(),
            stats.share_below_5
        );
        assert!(
            !stats.cochran_holds,
            "W{week:02}: {SMALL_SITE}'s line table should need an exact test"
        );
    }
}

#[test]
fn the_other_plants_weekly_verdicts_are_as_the_readme_describes() {
    let data = generate(DEFAULT_SEED);
    for (week, groups) in &weekly_sites(&data) {
        let stats = k_by_2(groups);
        let z = |site: &str| residual_of(groups, &stats, site);
        let drift_week = DRIFT_FLAGGED_WEEKS.contains(week);
        // VAL: a small plant with a persistently higher rate, above every week.
        assert!(
            z("VAL") > FLAG_THRESHOLD,
            "W{week:02}: VAL z = {:.2}",
            z("VAL")
        );
        // ODW: a little better than the pool, never above.
        assert!(z("ODW") < 0.0, "W{week:02}: ODW z = {:.2}", z("ODW"));
        // MRQ: above in every week except while KES's drift lifts the pooled rate
        // (W15, W17, W18; W16 only just above).
        if ![15, 17, 18].contains(week) {
            assert!(
                z("MRQ") > FLAG_THRESHOLD,
                "W{week:02}: MRQ z = {:.2}",
                z("MRQ")
            );
        }
        // TLG: pushed below the pooled rate by KES's drift, with no change of its own.
        if drift_week {
            assert!(
                z("TLG") < -FLAG_THRESHOLD,
                "W{week:02}: TLG z = {:.2}",
                z("TLG")
            );
        }
        // SEM: a few hundred units a week; its residual crosses 3.0 by chance in W08
        // and W15 only.
        let sem_above = z(SMALL_SITE) > FLAG_THRESHOLD;
        assert_eq!(
            sem_above,
            [8, 15].contains(week),
            "W{week:02}: SEM z = {:.2}",
            z(SMALL_SITE)
        );
    }
}

#[test]
fn splitting_by_product_keeps_the_readme_totals_of_every_day() {
    let data = generate(DEFAULT_SEED);
    // (site, line, date) -> the products of its rows.
    let mut days: BTreeMap<(&str, &str, Date), Vec<Option<&str>>> = BTreeMap::new();
    for r in &data.records {
        days.entry((r.site, r.line, r.date))
            .or_default()
            .push(r.product);
        let defects: u64 = r.defects.iter().sum();
        assert!(
            r.inspected > 0 && r.defective <= r.inspected,
            "{} {} {} {:?}: {} of {}",
            r.site,
            r.line,
            r.date,
            r.product,
            r.defective,
            r.inspected
        );
        assert!(
            defects >= r.defective && defects <= 2 * r.defective,
            "{} {} {} {:?}: {defects} defects for {} defective units",
            r.site,
            r.line,
            r.date,
            r.product,
            r.defective
        );
    }
    assert_eq!(days.len(), README_DAYS, "days (site, line, date)");
    for ((site, line, date), products) in &days {
        let product_line = PRODUCT_LINES.iter().any(|(s, l, _)| s == site && l == line);
        let want: Vec<Option<&str>> = if product_line {
            PRODUCT_CODES.iter().map(|p| Some(*p)).collect()
        } else {
            vec![None]
        };
        assert_eq!(products, &want, "{site} {line} {date}: rows by product");
    }
    let units: u64 = data.records.iter().map(|r| r.inspected).sum();
    let defective: u64 = data.records.iter().map(|r| r.defective).sum();
    println!(
        "{} rows, {units} units, {defective} defective",
        data.records.len()
    );
    assert_eq!(defective, README_DEFECTIVE);
    assert!(
        (units as f64 / 1e6 - README_UNITS_MILLIONS).abs() < 0.05,
        "{units} units"
    );
}

/// Observed and expected defectives of each site over the records `keep` selects, the
/// expected ones from the strata's (products', "no product" included) pooled rates.
struct MixTable {
    /// site -> (inspected, defective, expected defective).
    sites: BTreeMap<&'static str, (u64, u64, f64)>,
    /// stratum -> (inspected, defective) pooled over all sites.
    strata: BTreeMap<Option<&'static str>, (u64, u64)>,
}

impl MixTable {
    fn new(data: &DemoData, keep: impl Fn(&DemoRecord) -> bool) -> Self {
        let mut strata: BTreeMap<Option<&str>, (u64, u64)> = BTreeMap::new();
        let mut cells: BTreeMap<(&str, Option<&str>), (u64, u64)> = BTreeMap::new();
        for r in data.records.iter().filter(|r| keep(r)) {
            for cell in [
                strata.entry(r.product).or_default(),
                cells.entry((r.site, r.product)).or_default(),
            ] {
                cell.0 += r.inspected;
                cell.1 += r.defective;
            }
        }
        let mut sites: BTreeMap<&str, (u64, u64, f64)> = BTreeMap::new();
        for ((site, product), (n, x)) in cells {
            let (sn, sx) = strata[&product];
            let e = sites.entry(site).or_default();
            e.0 += n;
            e.1 += x;
            e.2 += n as f64 * sx as f64 / sn as f64;
        }
        MixTable { sites, strata }
    }

    fn pooled_rate(&self) -> f64 {
        let (n, x) = self
            .strata
            .values()
            .fold((0, 0), |acc, c| (acc.0 + c.0, acc.1 + c.1));
        x as f64 / n as f64
    }

    fn crude_rate(&self, site: &str) -> f64 {
        let (n, x, _) = self.sites[site];
        x as f64 / n as f64
    }

    fn o_over_e(&self, site: &str) -> f64 {
        let (_, x, e) = self.sites[site];
        x as f64 / e
    }

    fn stratum_rate(&self, product: Option<&str>) -> f64 {
        let (n, x) = self.strata[&product];
        x as f64 / n as f64
    }
}

#[test]
fn the_mix_site_looks_worse_only_because_it_makes_the_hard_product() {
    let data = generate(DEFAULT_SEED);

    // Its units are mostly the hard product; at the other product lines' sites a minority.
    let hard_share = |site: &str| {
        let (mut hard, mut all) = (0, 0);
        for r in data.records.iter().filter(|r| r.site == site) {
            all += r.inspected;
            if r.product == Some(PRODUCT_CODES[1]) {
                hard += r.inspected;
            }
        }
        hard as f64 / all as f64
    };
    let mrq_share = hard_share(MIX_SITE);
    println!(
        "{MIX_SITE}: {:.1}% of units are {}",
        100.0 * mrq_share,
        PRODUCT_CODES[1]
    );
    assert!((0.80..0.90).contains(&mrq_share), "{mrq_share}");

    // The month: crude rate well above the pooled one (and flagged), O/E close to 1.
    let march = MixTable::new(&data, |r| u8::from(r.date.month()) == 3);
    let ratio = march.crude_rate(MIX_SITE) / march.pooled_rate();
    let oe = march.o_over_e(MIX_SITE);
    let relative =
        march.stratum_rate(Some(PRODUCT_CODES[1])) / march.stratum_rate(Some(PRODUCT_CODES[0]));
    println!(
        "2026-03: {MIX_SITE} crude {:.3}% against pooled {:.3}% (x{ratio:.2}), O/E = {oe:.3}; \
         pooled rates: none {:.3}%, {} {:.3}%, {} {:.3}% ({relative:.2}x)",
        100.0 * march.crude_rate(MIX_SITE),
        100.0 * march.pooled_rate(),
        100.0 * march.stratum_rate(None),
        PRODUCT_CODES[0],
        100.0 * march.stratum_rate(Some(PRODUCT_CODES[0])),
        PRODUCT_CODES[1],
        100.0 * march.stratum_rate(Some(PRODUCT_CODES[1])),
    );
    assert!(ratio > CRUDE_ABOVE, "2026-03: crude ratio {ratio:.3}");
    assert!((oe - 1.0).abs() < OE_CLOSE, "2026-03: O/E {oe:.3}");
    assert!(
        (1.6..2.2).contains(&relative),
        "hard against easy: {relative:.2}"
    );
    let site_groups: Vec<Group> = march
        .sites
        .iter()
        .map(|(s, (n, x, _))| (s.to_string(), *n, *x))
        .collect();
    let z = residual_of(&site_groups, &k_by_2(&site_groups), MIX_SITE);
    println!("2026-03: {MIX_SITE} crude adjusted residual {z:+.1}");
    assert!(z > FLAG_THRESHOLD, "2026-03: crude z {z:.2}");

    // The weeks outside the spike: O/E close to 1 in most (the weeks of KES's drift too:
    // KES makes no products, so its drift lifts only the "no product" stratum's rate).
    let mut close = 0;
    let mut weeks = 0;
    for week in (2..=26).filter(|w| *w != SPIKE_WEEK) {
        let t = MixTable::new(&data, |r| iso_week(r.date) == week);
        let oe = t.o_over_e(MIX_SITE);
        let ratio = t.crude_rate(MIX_SITE) / t.pooled_rate();
        println!(
            "W{week:02}: {MIX_SITE} crude {:.3}% against pooled {:.3}% (x{ratio:.2}), O/E = {oe:.3}",
            100.0 * t.crude_rate(MIX_SITE),
            100.0 * t.pooled_rate()
        );
        weeks += 1;
        close += usize::from((oe - 1.0).abs() < OE_CLOSE);
    }
    assert!(
        close + 1 >= weeks,
        "O/E close to 1 in {close} of {weeks} weeks"
    );
}
