//! Builder tests. Every expected value is derived by hand (shown beside it) or cited.

use std::collections::BTreeMap;

use serde_json::Value;

use super::build::{
    CAUTIONS, GroupCounts, NO_UNITS, ReportRequest, analyze_table, build_report, build_summary,
};
use super::model::Flag;
use super::params::{DispersionChoice, LevelKind, Parameters};
use crate::tabular::CountTable;

fn group(code: &str, inspected: u64, defective: u64) -> GroupCounts {
    GroupCounts {
        code: code.to_owned(),
        name: None,
        inspected,
        defective,
        defects: BTreeMap::new(),
        products: BTreeMap::new(),
    }
}

fn nist_lots() -> Vec<GroupCounts> {
    [36, 46, 42, 63, 38]
        .iter()
        .enumerate()
        .map(|(i, d)| group(&format!("lot{}", i + 1), 300, *d))
        .collect()
}

fn close(a: f64, b: f64, tol: f64, what: &str) {
    assert!(
        (a - b).abs() <= tol * b.abs().max(1.0),
        "{what}: {a} vs {b}"
    );
}

/// NIST/SEMATECH e-Handbook of Statistical Methods, 7.4.6 "Comparing multiple
/// proportions": five lots of 300 with 36, 46, 42, 63, 38 nonconforming; X^2 = 12.13 on
/// 4 df, critical value 9.488 at 0.05 (table 1.3.6.7.4), equal proportions rejected.
/// By hand: pooled rate 225/1500 = 0.15, expected 45 defective and 255 conforming per
/// lot, squared deviations 81 + 1 + 9 + 324 + 49 = 464, X^2 = 464 (1/45 + 1/255) =
/// 12.130719; for even df the upper tail is exp(-x/2) sum_{j<df/2} (x/2)^j / j!
/// (Abramowitz & Stegun 26.4.21), so p = exp(-x/2)(1 + x/2) = 0.016405222 (mpmath 1.3.0
/// to 30 digits: 0.0164052219889036528699736).
#[test]
fn the_nist_five_lot_example_gives_the_published_verdict() {
    let r = build_report(&ReportRequest::default(), &nist_lots());
    let t = r.test.as_ref().expect("testable");
    assert_eq!(t.method, "pearson");
    close(
        t.statistic,
        464.0 * (1.0 / 45.0 + 1.0 / 255.0),
        1e-12,
        "X^2",
    );
    assert_eq!(t.df, 4);
    close(t.p_value, 0.016_405_221_988_903_653, 1e-12, "p");
    close(t.log10_p, -1.785_017_888_538_913_9, 1e-12, "log10 p");
    close(t.critical_value, 9.488, 5e-5, "critical value");
    assert!(t.significant);
    assert!(
        t.verdict
            .starts_with("Significant at α = 0.05: the defect rates differ between the groups"),
        "{}",
        t.verdict
    );

    let lot4 = &r.groups[3];
    assert_eq!(
        (lot4.code.as_str(), lot4.inspected, lot4.defective),
        ("lot4", 300, 63)
    );
    close(lot4.rate, 0.21, 1e-15, "rate");
    close(lot4.expected, 45.0, 1e-12, "expected");
    close(
        lot4.contribution.unwrap(),
        324.0 / 45.0 + 324.0 / 255.0,
        1e-12,
        "contribution",
    );
    // Haberman's adjusted residual: 18 / sqrt(45 (1 - 300/1500)(1 - 225/1500)) = 3.2540.
    close(
        lot4.adjusted_residual.unwrap(),
        18.0 / (45.0f64 * 0.8 * 0.85).sqrt(),
        1e-12,
        "adj",
    );
    assert_eq!(lot4.flag, Some(Flag::Above));
    let shares: f64 = r.groups.iter().filter_map(|g| g.share_of_statistic).sum();
    close(shares, 1.0, 1e-12, "shares of X^2 add up to 1");
    assert_eq!(r.flagged.len(), 1);
    assert_eq!(r.flagged[0].code, "lot4");
    close(
        r.flagged[0].share_of_statistic,
        (324.0 / 45.0 + 324.0 / 255.0) / t.statistic,
        1e-12,
        "share",
    );

    assert_eq!(r.pairs.len(), 10, "5 groups, 10 pairs");
    assert_eq!(
        (r.pairs[0].a.as_str(), r.pairs[0].b.as_str()),
        ("lot1", "lot2")
    );
    close(
        r.pairs[0].difference,
        (36.0 - 46.0) / 300.0,
        1e-15,
        "difference lot1 - lot2",
    );
    assert!(r.pairs.iter().all(|p| p.p_adjusted >= p.p_value));
    assert_eq!(r.totals.inspected, 1500);
    assert_eq!(r.totals.defective, 225);
    assert!(r.not_testable.is_none());
    assert!(
        r.categories.is_none(),
        "no category counts, no category test"
    );
    for c in CAUTIONS {
        assert!(r.cautions.iter().any(|x| x == c), "missing caution {c}");
    }
}

/// The JSON names shared with `dispar analyze` (issue 2, item 3).
#[test]
fn the_json_has_the_shared_field_names_and_no_nulls_in_numbers() {
    let r = build_report(&ReportRequest::default(), &nist_lots());
    let v: Value = serde_json::to_value(&r).unwrap();
    for f in [
        "method",
        "statistic",
        "df",
        "p_value",
        "log10_p",
        "critical_value",
        "significant",
        "verdict",
        "cramers_v",
    ] {
        assert!(
            v["test"][f].is_number() || v["test"][f].is_string() || v["test"][f].is_boolean(),
            "test.{f}: {v}"
        );
    }
    for f in ["min_expected", "share_below_5", "reason"] {
        assert!(!v["validity"][f].is_null(), "validity.{f}");
    }
    let g = &v["groups"][3];
    for f in [
        "code",
        "inspected",
        "defective",
        "rate",
        "expected",
        "contribution",
        "adjusted_residual",
    ] {
        assert!(!g[f].is_null(), "groups[].{f}");
    }
    assert!(g["rate_ci"]["lower"].is_number() && g["rate_ci"]["upper"].is_number());
    assert_eq!(g["flag"], "above");
    assert_eq!(v["groups"][0]["flag"], Value::Null);
    let p = &v["pairs"][0];
    for f in [
        "a",
        "b",
        "method",
        "difference",
        "p_value",
        "p_adjusted",
        "significant",
    ] {
        assert!(!p[f].is_null(), "pairs[].{f}");
    }
    assert!(p["difference_ci"]["lower"].is_number());
    assert_eq!(
        (p["a"].as_str(), p["b"].as_str()),
        (Some("lot1"), Some("lot2"))
    );
    assert_eq!(v["totals"]["group_count"], 5);
    assert_eq!(v["flag_rule"]["method"], "exact");
    assert!(v["flag_rule"]["critical_value"].is_number() && v["flag_rule"]["limit"].is_number());
    assert_eq!(v["flagged"][0]["code"], "lot4");
    assert_eq!(v["parameters"]["overdispersion"], "estimate");
    assert!(
        v["totals"].get("groups").is_none(),
        "a count is group_count"
    );
    for old in [
        "pairwise",
        "reject",
        "decision",
        "label",
        "anom_critical",
        "flag_limit",
    ] {
        for (part, obj) in [
            ("report", &v),
            ("test", &v["test"]),
            ("overdispersion", &v["overdispersion"]),
            ("groups[0]", &v["groups"][0]),
            ("pairs[0]", p),
        ] {
            assert!(obj.get(old).is_none(), "old name {old} still in {part}");
        }
    }
    assert!(
        v.get("period").is_none(),
        "no period for an offline analysis"
    );
}

#[test]
fn groups_without_units_are_excluded_and_one_group_is_not_testable() {
    let r = build_report(
        &ReportRequest::default(),
        &[group("A", 100, 3), group("B", 0, 0)],
    );
    assert!(r.test.is_none());
    assert!(r.pairs.is_empty());
    let reason = &r.not_testable.as_ref().expect("not testable").reason;
    assert!(reason.contains("only 1 of the groups"), "{reason}");
    assert_eq!(r.excluded.len(), 1);
    assert_eq!(
        (r.excluded[0].code.as_str(), r.excluded[0].reason.as_str()),
        ("B", NO_UNITS)
    );
    assert_eq!(r.groups.len(), 1, "the usable group is still shown");
    assert_eq!(r.groups[0].adjusted_residual, None);
    let json = serde_json::to_value(&r).unwrap();
    assert_eq!(json["test"], Value::Null, "test is null, not absent");
    let text = r.to_text();
    assert!(text.contains("Not testable"), "{text}");
    assert!(
        text.contains("\nExcluded:\n- B: no units inspected\n"),
        "{text}"
    );
}

#[test]
fn no_defective_units_anywhere_is_not_testable_with_a_reason() {
    let r = build_report(
        &ReportRequest::default(),
        &[group("A", 100, 0), group("B", 200, 0)],
    );
    assert!(r.test.is_none());
    assert!(
        r.not_testable
            .unwrap()
            .reason
            .contains("no defective units")
    );
    // Wilson interval of 0/100 at 95%: upper = z^2 / (n + z^2) = 3.8415 / 103.8415.
    let z2 = 1.959_963_984_540_054_f64.powi(2);
    close(
        r.groups[0].rate_ci.upper,
        z2 / (100.0 + z2),
        1e-9,
        "Wilson upper bound for 0/100",
    );
    assert_eq!(r.groups[0].rate_ci.lower, 0.0);
}

/// Group x category: a 2 x 2 table [[10, 10], [30, 10]] of defect counts. By hand,
/// X^2 = N (ad - bc)^2 / (R1 R2 C1 C2) = 60 (100 - 300)^2 / (20 * 40 * 40 * 20) = 3.75;
/// smallest expected count 20 * 20 / 60 = 6.67, so Cochran's rule holds and Pearson
/// runs; on 1 df p = erfc(sqrt(3.75 / 2)) = 0.052807511416 (mpmath 1.3.0).
#[test]
fn category_counts_get_an_association_test_and_totals() {
    let mut a = group("A", 1000, 15);
    a.defects = BTreeMap::from([("dent".to_owned(), 10), ("scratch".to_owned(), 10)]);
    let mut b = group("B", 1000, 30);
    b.defects = BTreeMap::from([("dent".to_owned(), 10), ("scratch".to_owned(), 30)]);
    let r = build_report(&ReportRequest::default(), &[a, b]);
    let c = r.categories.expect("categories exist");
    assert_eq!(c.totals[0].category, "scratch");
    assert_eq!(c.totals[0].defects, 40);
    close(c.totals[0].share, 40.0 / 60.0, 1e-15, "share");
    let t = c.association.test.expect("testable");
    assert_eq!(t.method, "pearson");
    close(t.statistic, 3.75, 1e-12, "X^2");
    close(t.p_value, 0.052_807_511_416_113_62, 1e-10, "p");
    assert!(!t.significant);
    assert!(
        t.verdict.starts_with("Not significant at α = 0.05"),
        "{}",
        t.verdict
    );
    assert_eq!(c.association.cells.len(), 4);
    assert_eq!(c.association.cells[0].row, "A");
    assert_eq!(c.association.cells[0].column, "dent");
}

#[test]
fn sparse_category_tables_fall_back_to_monte_carlo_reproducibly() {
    let mk = |name: &str, d: [u64; 3]| {
        let mut g = group(name, 500, 10);
        g.defects = ["a", "b", "c"]
            .iter()
            .zip(d)
            .map(|(k, n)| ((*k).to_owned(), n))
            .collect();
        g
    };
    let groups = [
        mk("S1", [3, 0, 1]),
        mk("S2", [0, 4, 1]),
        mk("S3", [1, 1, 2]),
    ];
    let r1 = build_report(&ReportRequest::default(), &groups);
    let r2 = build_report(&ReportRequest::default(), &groups);
    let t = r1
        .categories
        .as_ref()
        .unwrap()
        .association
        .test
        .clone()
        .unwrap();
    assert_eq!(t.method, "monte-carlo");
    assert!(t.p_std_error.is_some() && t.resamples == Some(10_000));
    assert_eq!(r1, r2, "same data, same report");
}

#[test]
fn period_level_and_as_of_are_echoed() {
    let req = ReportRequest {
        period: Some("2026-W11".parse().unwrap()),
        level: Some(LevelKind::Site),
        as_of: Some("2026-03-20T12:00:00Z".to_owned()),
        ..ReportRequest::default()
    };
    let r = build_report(&req, &nist_lots());
    let v = serde_json::to_value(&r).unwrap();
    assert_eq!(v["period"], "2026-W11");
    assert_eq!(v["dates"]["first"], "2026-03-09");
    assert_eq!(v["dates"]["last"], "2026-03-15");
    assert_eq!(v["level"], "site");
    assert_eq!(v["parameters"]["as_of"], "2026-03-20T12:00:00Z");
    assert!(
        r.test
            .as_ref()
            .unwrap()
            .verdict
            .contains("between the sites")
    );
    let s = serde_json::to_value(r.summary()).unwrap();
    assert_eq!(s["period"], "2026-W11");
    assert_eq!(s["method"], "pearson");
    assert_eq!(s["significant"], true);
    assert!(
        s["verdict"]
            .as_str()
            .unwrap()
            .starts_with("Significant at α = 0.05")
    );
    assert_eq!(s["inspected"], 1500);
    assert_eq!(s["group_count"], 5);
    assert_eq!(s["flagged"][0]["code"], "lot4");
}

#[test]
fn overdispersion_widens_the_flag_limit_only_when_asked() {
    // Twenty lines of 10,000 units with 100, 107, ..., 233 defective: far more spread
    // than binomial sampling gives, so phi > 1.
    let groups: Vec<GroupCounts> = (0..20u64)
        .map(|i| group(&format!("L{i:02}"), 10_000, 100 + 7 * i))
        .collect();
    let plain = build_report(&ReportRequest::default(), &groups);
    let o = plain.overdispersion.as_ref().unwrap();
    assert!(o.present && !o.applied);
    let rule = plain.flag_rule.as_ref().unwrap();
    assert_eq!(rule.limit, rule.critical_value);
    let mut req = ReportRequest::default();
    req.parameters.overdispersion = DispersionChoice::Widen;
    let wide = build_report(&req, &groups);
    let w = wide.overdispersion.as_ref().unwrap();
    assert!(w.applied);
    let wide_rule = wide.flag_rule.as_ref().unwrap();
    close(
        wide_rule.limit,
        wide_rule.critical_value * w.phi.sqrt(),
        1e-12,
        "widened limit",
    );
    assert!(
        wide.flagged.len() < plain.flagged.len(),
        "{} vs {}",
        wide.flagged.len(),
        plain.flagged.len()
    );
    // Flagged contributors come largest share of X^2 first.
    let shares: Vec<f64> = plain.flagged.iter().map(|f| f.share_of_statistic).collect();
    assert!(shares.windows(2).all(|w| w[0] >= w[1]), "{shares:?}");
}

#[test]
fn large_volumes_with_a_tiny_effect_get_a_caution() {
    let groups = [group("A", 2_000_000, 20_000), group("B", 2_000_000, 20_600)];
    let r = build_report(&ReportRequest::default(), &groups);
    assert!(r.test.as_ref().unwrap().significant);
    assert!(
        r.cautions
            .iter()
            .any(|c| c.contains("even small differences")),
        "{:?}",
        r.cautions
    );
    let mut req = ReportRequest::default();
    req.parameters.min_difference = Some(0.005);
    let r = build_report(&req, &groups);
    // Difference 0.01 - 0.0103 = -0.0003: its interval does not reach beyond 0.005.
    assert_eq!(r.pairs[0].beyond_min_difference, Some(false));
}

/// Fisher's tea-tasting experiment (Fisher 1935, The Design of Experiments, ch. 2):
/// [[3, 1], [1, 3]]; expected counts 2 fail Cochran's rule, so the exact test runs;
/// two-sided p = (1 + 16 + 16 + 1) / 70 = 0.4857.
#[test]
fn a_raw_table_is_analysed_with_the_exact_test_when_counts_are_small() {
    let table = CountTable {
        row_names: vec!["milk first".into(), "tea first".into()],
        col_names: vec!["said milk".into(), "said tea".into()],
        counts: vec![vec![3, 1], vec![1, 3]],
    };
    let r = analyze_table(&Parameters::default(), &table);
    let t = r.test.as_ref().unwrap();
    assert_eq!(t.method, "fisher");
    close(t.p_value, 34.0 / 70.0, 1e-12, "Fisher p");
    assert!(!r.validity.as_ref().unwrap().cochran_holds);
    assert_eq!(r.table.cells.len(), 4);
    let text = r.to_text();
    assert!(text.contains("Fisher's exact test"), "{text}");
}

#[test]
fn a_raw_table_with_an_empty_column_drops_it_and_says_so() {
    let table = CountTable {
        row_names: vec!["A".into(), "B".into()],
        col_names: vec!["x".into(), "y".into(), "z".into()],
        counts: vec![vec![30, 0, 20], vec![10, 0, 40]],
    };
    let r = analyze_table(&Parameters::default(), &table);
    assert_eq!(r.table.columns.len(), 2);
    assert_eq!(r.table.excluded[0].code, "y");
    assert_eq!(r.test.as_ref().unwrap().df, 1);
}

#[test]
fn the_text_layout_shows_every_group_under_the_glossary_headings() {
    let mut req = ReportRequest::default();
    req.parameters.min_difference = Some(0.005);
    let r = build_report(&req, &nist_lots());
    let text = r.to_text();
    for needle in [
        "adjust holm, overdispersion estimate, min_difference 0.50 pp\n",
        "Verdict: Significant at α = 0.05: the defect rates differ",
        "Cramér's V",
        "lot4",
        "\nFlag rule: flagged when |adjusted residual| > ",
        "\nOverdispersion: phi = ",
        "\nFlagged contributors:\n- lot4: above the pooled rate",
        "\nPairwise comparisons (10 pairs, p adjusted by holm)",
        "significant  beyond min difference",
        "minimum difference of interest (0.50 pp)",
        "\nCautions:\n",
    ] {
        assert!(text.contains(needle), "missing {needle:?} in\n{text}");
    }
    for old in [
        "differ  ",
        "beyond min diff ",
        "Flag limit",
        "Cramer's",
        "alpha = ",
    ] {
        assert!(!text.contains(old), "old wording {old:?} in\n{text}");
    }
}

#[test]
fn one_pair_is_one_pair_in_the_text() {
    let r = build_report(
        &ReportRequest::default(),
        &[group("A", 1000, 10), group("B", 1000, 40)],
    );
    let text = r.to_text();
    assert!(
        text.contains("Pairwise comparisons (1 pair, p adjusted by holm)"),
        "{text}"
    );
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    fn groups() -> impl Strategy<Value = Vec<GroupCounts>> {
        prop::collection::vec(
            (
                0u64..2000,
                0.0f64..1.0,
                prop::collection::vec(0u64..20, 0..4),
            )
                .prop_map(|(n, f, cats)| {
                    let d = (n as f64 * f * f) as u64;
                    GroupCounts {
                        code: String::new(),
                        name: None,
                        inspected: n,
                        defective: d.min(n),
                        defects: cats
                            .into_iter()
                            .enumerate()
                            .map(|(i, c)| (format!("c{i}"), c))
                            .collect(),
                        products: BTreeMap::new(),
                    }
                }),
            0..8,
        )
        .prop_map(|mut gs| {
            for (i, g) in gs.iter_mut().enumerate() {
                g.code = format!("g{i}");
            }
            gs
        })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        /// Any input gives a report whose numbers are all finite (the serializer
        /// asserts it in debug builds) and whose parts agree with each other.
        #[test]
        fn any_counts_give_a_consistent_finite_report(gs in groups()) {
            let mut req = ReportRequest::default();
            req.parameters.resamples = 200;
            let r = build_report(&req, &gs);
            let json = serde_json::to_string(&r).unwrap();
            prop_assert!(!json.contains("NaN"));
            prop_assert_eq!(r.groups.len() + r.excluded.len(), gs.len());
            prop_assert_eq!(r.test.is_some(), r.not_testable.is_none());
            if let Some(t) = &r.test {
                prop_assert!((0.0..=1.0).contains(&t.p_value));
                let k = r.groups.len();
                prop_assert_eq!(r.pairs.len(), k * (k - 1) / 2);
            }
            for g in &r.groups {
                prop_assert!(g.rate_ci.lower <= g.rate && g.rate <= g.rate_ci.upper);
            }
            let _ = r.to_text();
        }
    }
}

#[test]
fn a_series_summary_equals_the_summary_of_the_full_report() {
    // The series path skips the pairwise follow-ups; its verdict, flags and totals must
    // be exactly those of the full report.
    let req = ReportRequest {
        period: Some("2026-W11".parse().unwrap()),
        level: Some(LevelKind::Site),
        ..ReportRequest::default()
    };
    let mut groups = nist_lots();
    groups.push(group("Z", 0, 0));
    let full = build_report(&req, &groups);
    assert!(!full.pairs.is_empty(), "the full report has pairs");
    assert_eq!(build_summary(&req, &groups), full.summary());
}

#[test]
fn totals_beyond_u64_are_not_testable_instead_of_wrapping() {
    // Three groups of 10^19 units each add up past u64::MAX (1.8 * 10^19).
    let big = 10_000_000_000_000_000_000u64;
    let groups = [group("A", big, 1), group("B", big, 2), group("C", big, 3)];
    let r = build_report(&ReportRequest::default(), &groups);
    assert_eq!(r.totals.inspected, u64::MAX, "saturated, not wrapped");
    assert!(r.test.is_none());
    let reason = &r.not_testable.as_ref().expect("a note").reason;
    assert!(reason.contains("overflow"), "{reason}");
}
