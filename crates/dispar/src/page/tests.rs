//! Tests of the pages: rendering (pure, from reports built by the core's builder) and
//! the sign-in flow through the page router on a temporary SQLite database.

use std::collections::BTreeMap;

use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use dispar_core::period::Period;
use dispar_core::report::{
    BaselineWindow, DispersionChoice, GroupCounts, LevelKind, Parameters, Report, ReportRequest,
    build_report,
};
use tower::ServiceExt as _;

use super::render::{render_report, render_sign_in};
use super::view::{PageContext, Selection, SiteChoice, Viewer};

fn group(code: &str, name: &str, inspected: u64, defective: u64) -> GroupCounts {
    GroupCounts {
        code: code.to_owned(),
        name: Some(name.to_owned()),
        inspected,
        defective,
        defects: BTreeMap::new(),
        products: BTreeMap::new(),
    }
}

fn report_of(groups: &[GroupCounts], parameters: Parameters) -> Report {
    let req = ReportRequest {
        period: Some("2026-W16".parse::<Period>().unwrap()),
        level: Some(LevelKind::Site),
        parameters,
        ..ReportRequest::default()
    };
    build_report(&req, groups)
}

fn ctx() -> PageContext {
    PageContext {
        viewer: Some(Viewer {
            key_id: 3,
            role: "read".to_owned(),
        }),
        selection: Selection {
            period: "2026-W16".to_owned(),
            level: LevelKind::Site,
            site: None,
            extra: Vec::new(),
        },
        sites: vec![SiteChoice {
            code: "KES".to_owned(),
            name: "Kestelmoor <works>".to_owned(),
        }],
        previous: Some("2026-W15".to_owned()),
        next: Some("2026-W17".to_owned()),
        notice: None,
    }
}

/// Five sites, one clearly worse (flagged above).
fn five_sites() -> Vec<GroupCounts> {
    vec![
        group("KES", "Kestelmoor", 97_809, 1_977),
        group("MRQ", "Marquenne", 80_000, 1_000),
        group("ODW", "Oderwyn", 150_000, 1_350),
        group("TLG", "Tallowgate", 320_000, 3_200),
        group("VAL", "Valtrona", 7_500, 118),
    ]
}

fn sel(css: &str) -> scraper::Selector {
    scraper::Selector::parse(css).unwrap()
}

fn count(haystack: &str, needle: &str) -> usize {
    haystack.matches(needle).count()
}

#[test]
fn the_page_opens_with_the_verdict_then_the_table_and_both_charts() {
    let report = report_of(&five_sites(), Parameters::default());
    let html = render_report(&report, &ctx());
    assert!(html.starts_with("<!DOCTYPE html>"), "{}", &html[..40]);
    let order = [
        "id=\"verdict\"",
        "<table id=\"groups\"",
        "id=\"rates-chart\"",
        "id=\"funnel-chart\"",
        "id=\"pairwise\"",
        "id=\"flagged\"",
        "id=\"samples\"",
        "id=\"method\"",
        "<ul id=\"cautions\"",
    ];
    let positions: Vec<usize> = order
        .iter()
        .map(|needle| {
            html.find(needle)
                .unwrap_or_else(|| panic!("{needle} missing"))
        })
        .collect();
    assert!(positions.windows(2).all(|w| w[0] < w[1]), "{positions:?}");
    let p = super::format::p_equals(report.test.as_ref().unwrap().p_value);
    assert!(
        html.contains(&format!(
            "The difference in defect rate between the sites is significant at \u{3b1} = 0.05 ({p}, Pearson chi-square, 4 df)."
        )),
        "verdict sentence"
    );
    assert!(html.contains(
        "4 sites flagged: \u{25b2} <strong>KES</strong> above the pooled rate (2.02% against"
    ));
    // One row per site in the table, one mark per site in each chart.
    let table = &html[html.find("<table id=\"groups\"").unwrap()..];
    let table = &table[..table.find("</table>").unwrap()];
    assert_eq!(count(table, " data-name="), 5);
    assert_eq!(count(&html, "<g class=\"group "), 10);
    let doc = scraper::Html::parse_document(&html);
    let shown: Vec<String> = doc
        .select(&sel("#cautions li"))
        .map(|li| li.text().collect())
        .collect();
    assert_eq!(shown, report.cautions, "every caution, as text");
    assert_eq!(count(&html, "<section"), count(&html, "</section>"));
    assert_eq!(count(&html, "<svg"), count(&html, "</svg>"));
    assert_eq!(count(&html, "<table"), count(&html, "</table>"));
}

#[test]
fn the_defect_categories_are_shown_between_the_flags_and_the_sample_sizes() {
    let mix = [
        ("KES", 300, 1_500),
        ("MRQ", 700, 350),
        ("ODW", 900, 500),
        ("TLG", 2_000, 1_300),
        ("VAL", 70, 50),
    ];
    let mut groups = five_sites();
    for (g, (name, flash, seal)) in groups.iter_mut().zip(mix) {
        assert_eq!(g.code, name);
        g.defects = BTreeMap::from([("flash".to_owned(), flash), ("seal-leak".to_owned(), seal)]);
    }
    let html = render_report(&report_of(&groups, Parameters::default()), &ctx());
    let flagged = html.find("id=\"flagged\"").expect("flagged section");
    let section = html
        .find("<section id=\"categories-section\">")
        .expect("category section");
    let samples = html.find("id=\"samples\"").expect("sample sizes");
    assert!(
        flagged < section && section < samples,
        "{flagged} {section} {samples}"
    );
    // Totals by hand: flash 300 + 700 + 900 + 2,000 + 70 = 3,970 of 7,670 defects
    // (51.8%); seal-leak 1,500 + 350 + 500 + 1,300 + 50 = 3,700 (48.2%).
    for row in [
        "<tr><th scope=\"row\">flash</th><td>3,970</td><td>51.8%</td></tr>",
        "<tr><th scope=\"row\">seal-leak</th><td>3,700</td><td>48.2%</td></tr>",
    ] {
        assert!(html.contains(row), "{row} missing");
    }
    // KES's mix (83% seal-leak against 48% overall) makes the association obvious.
    assert!(html.contains("The defect mix differs between the groups: significant at"));
    let table = &html[html.find("<table id=\"category-mix\"").expect("mix table")..];
    let table = &table[..table.find("</table>").expect("end of mix table")];
    assert_eq!(count(table, "<th scope=\"row\">"), 5, "{table}");
    assert!(
        table.contains(">1,500 <span class=\"res\">(+"),
        "KES seal-leak above: {table}"
    );

    // No category counts, no section.
    let plain = render_report(&report_of(&five_sites(), Parameters::default()), &ctx());
    assert!(!plain.contains("categories-section"));
}

#[test]
fn names_from_users_are_escaped_everywhere() {
    let mut groups = five_sites();
    groups[0].code = "<script>alert(1)</script>".to_owned();
    groups[0].name = Some("\"><img src=x onerror=alert(2)>".to_owned());
    let report = report_of(&groups, Parameters::default());
    let html = render_report(&report, &ctx());
    assert!(!html.contains("<script"), "raw script tag in the page");
    assert!(!html.contains("<img"), "raw img tag in the page");
    assert!(html.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(html.contains("&quot;&gt;&lt;img src=x onerror=alert(2)&gt;"));
    // The site picker's names too.
    assert!(html.contains("Kestelmoor &lt;works&gt;"));
    let sign_in = render_sign_in(Some("<b>bad</b>"), Some("/report?period=\"x"));
    assert!(sign_in.contains("&lt;b&gt;bad&lt;/b&gt;") && !sign_in.contains("<b>"));
    assert!(sign_in.contains("value=\"/report?period=&quot;x\""));
}

#[test]
fn p_values_are_written_for_people() {
    let groups = vec![
        group("A", "a", 1_000, 10),
        group("B", "b", 1_000, 12),
        group("C", "c", 1_000, 30),
    ];
    let report = report_of(&groups, Parameters::default());
    let t = report.test.as_ref().unwrap();
    let html = render_report(&report, &ctx());
    let shown = super::format::fmt_p(t.p_value);
    assert!(
        shown.contains("e-") || shown.starts_with("0."),
        "{shown} for {}",
        t.p_value
    );
    assert!(
        html.contains(&format!("p = {shown}, Pearson chi-square, 2 df")),
        "{shown}"
    );
    let huge = report_of(
        &[
            group("A", "a", 1_000_000, 100_000),
            group("B", "b", 1_000_000, 10_000),
        ],
        Parameters::default(),
    );
    let t = huge.test.as_ref().unwrap();
    assert!(
        t.p_value < 1e-300 && t.log10_p < -300.0,
        "{} {}",
        t.p_value,
        t.log10_p
    );
    let html = render_report(&huge, &ctx());
    assert!(
        html.contains("(p &lt; 1e-300, ") && !html.contains("p = &lt;"),
        "underflow shown as a bound"
    );
    assert!(
        html.contains(&format!("log10 p = \u{2212}{:.1}", -t.log10_p)),
        "log10 p kept"
    );
    let no_difference = report_of(
        &[group("A", "a", 1_000, 10), group("B", "b", 1_000, 11)],
        Parameters::default(),
    );
    let html = render_report(&no_difference, &ctx());
    assert!(html.contains("id=\"verdict\" class=\"not-significant\""));
    assert!(html.contains("This is not proof that they are equal."));
}

#[test]
fn a_period_that_cannot_be_tested_says_why_and_still_lists_the_groups() {
    let report = report_of(
        &[
            group("KES", "Kestelmoor", 500, 5),
            group("MRQ", "Marquenne", 0, 0),
        ],
        Parameters::default(),
    );
    assert!(report.test.is_none());
    let html = render_report(&report, &ctx());
    assert!(html.contains("id=\"verdict\" class=\"untestable\""));
    assert!(html.contains("<h1>Not testable</h1>"));
    assert!(html.contains("<tr data-name=\"KES\">"));
    assert!(html.contains("<li><strong>MRQ</strong>: no units inspected</li>"));
    assert!(html.contains("No pairwise comparisons (there is no test)."));

    let no_defects = report_of(
        &[group("A", "a", 500, 0), group("B", "b", 700, 0)],
        Parameters::default(),
    );
    let html = render_report(&no_defects, &ctx());
    assert!(
        html.contains("id=\"funnel-missing\""),
        "no funnel at a pooled rate of 0"
    );
    assert!(html.contains("id=\"rates-chart\""));
}

/// Attribute `attr` of the first element matching `css`, as a number.
fn attr_f64(doc: &scraper::Html, css: &str, attr: &str) -> f64 {
    doc.select(&sel(css))
        .next()
        .unwrap_or_else(|| panic!("{css} missing"))
        .value()
        .attr(attr)
        .unwrap_or_else(|| panic!("{css} has no {attr}"))
        .parse()
        .unwrap_or_else(|e| panic!("{css} {attr}: {e}"))
}

fn text_of(doc: &scraper::Html, css: &str) -> String {
    doc.select(&sel(css))
        .next()
        .unwrap_or_else(|| panic!("{css} missing"))
        .text()
        .collect()
}

#[test]
fn the_method_section_draws_the_reference_distribution_with_the_statistic_and_critical_value() {
    // Five sites whose rates differ a little: the statistic lands near the critical value.
    let groups = [
        group("KES", "Kestelmoor", 2_000, 20),
        group("MRQ", "Marquenne", 2_000, 28),
        group("ODW", "Oderwyn", 2_000, 31),
        group("TLG", "Tallowgate", 2_000, 36),
        group("VAL", "Valtrona", 2_000, 17),
    ];
    let report = report_of(&groups, Parameters::default());
    let t = report.test.as_ref().unwrap();
    assert_eq!(t.df, 4);
    assert!(
        t.statistic < 3.0 * t.critical_value,
        "a statistic near the critical value: {} vs {}",
        t.statistic,
        t.critical_value
    );
    let html = render_report(&report, &ctx());
    let doc = scraper::Html::parse_document(&html);
    assert_eq!(doc.select(&sel("#method svg#reference-chart")).count(), 1);
    assert_eq!(
        text_of(&doc, "#reference-chart-title"),
        "Chi-square distribution on 4 df, with the statistic and the critical value"
    );
    let desc = text_of(&doc, "#reference-chart-desc");
    assert!(desc.contains("on 4 degrees of freedom"), "{desc}");
    assert!(desc.contains("critical value 9.49"), "{desc}");
    let stat = super::format::fmt_num(t.statistic, 2);
    assert!(desc.contains(&format!("X\u{00b2} = {stat}.")), "{desc}");
    assert!(!desc.contains("log scale"), "linear axis near: {desc}");
    assert_eq!(
        text_of(&doc, "#reference-chart .statistic-label"),
        format!("X\u{00b2} = {stat}")
    );
    assert_eq!(
        text_of(&doc, "#reference-chart .critical-label"),
        "critical value 9.49 (\u{03b1} = 0.05)"
    );
    assert_eq!(doc.select(&sel("#reference-chart path.tail")).count(), 1);
    assert_eq!(doc.select(&sel("#reference-chart path.density")).count(), 1);
    assert_eq!(doc.select(&sel("#reference-chart .scale-note")).count(), 0);
    // Positions keep the order of the values, on a linear axis from 0.
    let x_stat = attr_f64(&doc, "#reference-chart line.statistic", "x1");
    let x_crit = attr_f64(&doc, "#reference-chart line.critical", "x1");
    let x0 = attr_f64(&doc, "#reference-chart .tick", "x");
    assert_eq!(text_of(&doc, "#reference-chart .tick"), "0");
    let want = (t.statistic / t.critical_value) * (x_crit - x0) + x0;
    assert!(
        (x_stat - want).abs() < 0.02,
        "linear: statistic at {x_stat}, want {want}"
    );
    assert!(x_stat < 720.0 - 24.0 + 1e-9, "statistic inside the plot");
}

#[test]
fn a_statistic_far_beyond_the_critical_value_is_drawn_on_a_log_axis_that_says_so() {
    let report = report_of(&five_sites(), Parameters::default());
    let t = report.test.as_ref().unwrap();
    assert!(t.statistic > 3.0 * t.critical_value, "{}", t.statistic);
    let html = render_report(&report, &ctx());
    let doc = scraper::Html::parse_document(&html);
    let desc = text_of(&doc, "#reference-chart-desc");
    let times = super::format::fmt_num(t.statistic / t.critical_value, 0);
    assert!(
        desc.contains(&format!(
            "is {times} times the critical value, so the horizontal axis is on a log scale."
        )),
        "{desc}"
    );
    assert!(text_of(&doc, "#reference-chart .scale-note").starts_with("log scale: X\u{00b2} = "));
    assert!(text_of(&doc, "#reference-chart .axis-label").ends_with("(log scale)"));
    assert!(text_of(&doc, "#reference figcaption").contains("log scale"));
    // Both marks inside the plot, the statistic right of the critical value, and the
    // decade ticks evenly spaced.
    let x_stat = attr_f64(&doc, "#reference-chart line.statistic", "x1");
    let x_crit = attr_f64(&doc, "#reference-chart line.critical", "x1");
    assert!(
        24.0 < x_crit && x_crit < x_stat && x_stat <= 696.0,
        "{x_crit} {x_stat}"
    );
    let ticks: Vec<f64> = doc
        .select(&sel("#reference-chart .tick"))
        .map(|t| t.value().attr("x").unwrap().parse().unwrap())
        .collect();
    assert!(ticks.len() >= 3, "{ticks:?}");
    let gap = ticks[1] - ticks[0];
    assert!(
        ticks.windows(2).all(|w| ((w[1] - w[0]) - gap).abs() < 0.02),
        "{ticks:?}"
    );
    // No test, no reference chart.
    let untested = report_of(&[group("KES", "Kestelmoor", 500, 5)], Parameters::default());
    assert!(untested.test.is_none());
    assert!(!render_report(&untested, &ctx()).contains("reference-chart"));
}

/// Eight earlier weeks for `groups`: each code's (inspected, usual defective per
/// week), with a small wobble so the baselines are not flat.
fn window(usual: &[(&str, u64, u64)]) -> BaselineWindow {
    let period: Period = "2026-W16".parse().unwrap();
    let wobble = [0i64, 3, -2, 1, -3, 2, -1, 0];
    BaselineWindow {
        periods: period.earlier(8),
        counts: usual
            .iter()
            .map(|&(code, inspected, defective)| {
                let weeks = wobble
                    .iter()
                    .map(|w| (inspected, defective.saturating_add_signed(*w * 4)))
                    .collect();
                (code.to_owned(), weeks)
            })
            .collect(),
        length: 8,
    }
}

fn report_with_baseline(groups: &[GroupCounts], usual: &[(&str, u64, u64)]) -> Report {
    let req = ReportRequest {
        period: Some("2026-W16".parse::<Period>().unwrap()),
        level: Some(LevelKind::Site),
        parameters: Parameters {
            baseline: Some(8),
            ..Parameters::default()
        },
        baseline: Some(window(usual)),
        ..ReportRequest::default()
    };
    build_report(&req, groups)
}

/// The demo's W16 in small: KES at three times its usual, the others as usual, MRQ
/// always above the others, SEM new (no earlier weeks).
fn drift_week() -> Report {
    let mut groups = five_sites();
    groups.push(group("SEM", "Semmering", 5_000, 40));
    report_with_baseline(
        &groups,
        &[
            ("KES", 97_000, 690),
            ("MRQ", 80_000, 1_000),
            ("ODW", 150_000, 1_350),
            ("TLG", 320_000, 3_200),
            ("VAL", 7_500, 118),
        ],
    )
}

#[test]
fn with_baselines_the_page_opens_with_the_changes_then_the_usual_spread_then_the_test() {
    let report = drift_week();
    assert_eq!(report.changes.len(), 1, "{:?}", report.changes);
    let html = render_report(&report, &ctx());
    let doc = scraper::Html::parse_document(&html);
    let usual = super::format::fmt_pct(report.changes[0].baseline_rate);
    assert_eq!(
        text_of(&doc, "#verdict h1#changes"),
        format!("KES worse than its usual: 2.02% against {usual}")
    );
    assert!(usual.starts_with("0.7"), "{usual}");
    assert_eq!(
        text_of(&doc, "#changes-line"),
        "The other 4 sites as usual. Not known for 1 site: SEM (too few earlier weeks with units to tell)."
    );
    let persistent = text_of(&doc, "#persistent");
    assert!(
        persistent.starts_with("The sites also differ as they usually do: ")
            && persistent.contains("; MRQ above the pooled rate in 8 of the last 8 weeks;")
            && !persistent.contains("SEM"),
        "{persistent}"
    );
    let binomial = text_of(&doc, "#binomial");
    assert!(
        binomial.starts_with("Sites differ in defect rate"),
        "{binomial}"
    );
    assert!(
        text_of(&doc, "#volume-caveat")
            .contains("even small differences are statistically significant"),
        "the volume caveat follows the test"
    );
    let order = [
        "id=\"changes\"",
        "id=\"persistent\"",
        "id=\"binomial\"",
        "id=\"flag-summary\"",
        "<table id=\"groups\"",
    ];
    let positions: Vec<usize> = order
        .iter()
        .map(|n| html.find(n).unwrap_or_else(|| panic!("{n} missing")))
        .collect();
    assert!(positions.windows(2).all(|w| w[0] < w[1]), "{positions:?}");
    assert!(doc.select(&sel("section#verdict.changed")).next().is_some());

    // The table: usual rate, ratio and the verdict word, with ◉ only on the change.
    let verdicts: Vec<(String, String)> = doc
        .select(&sel("table#groups tbody tr"))
        .map(|tr| {
            let cell = tr.select(&sel("td[data-baseline]")).next();
            (
                tr.value().attr("data-name").unwrap().to_owned(),
                cell.map(|c| c.text().collect()).unwrap_or_default(),
            )
        })
        .collect();
    for (code, word) in &verdicts {
        let want = match code.as_str() {
            "KES" => "\u{25c9} worse",
            "SEM" => "unknown",
            _ => "usual",
        };
        assert_eq!(word, want, "{code}");
    }
    let kes = doc
        .select(&sel("table#groups tr[data-name=\"KES\"] td"))
        .collect::<Vec<_>>();
    let ratio: String = kes[kes.len() - 2].text().collect();
    assert!(
        ratio.ends_with('\u{00d7}') && ratio.starts_with("2."),
        "{ratio}"
    );
    assert!(
        kes[kes.len() - 1]
            .value()
            .attr("title")
            .is_some_and(|t| !t.is_empty()),
        "the reason"
    );
    let legend = text_of(&doc, "#baseline-legend");
    assert!(
        legend.contains("\u{25c9} marks a change")
            && legend.contains("\u{25b2} \u{25bc} mark a flag"),
        "{legend}"
    );
    let method = text_of(&doc, "#method");
    assert!(
        method.contains("Laney 2002") && method.contains("baseline 8"),
        "{method}"
    );
}

#[test]
fn without_baselines_the_page_reads_as_before_and_untestable_pairs_say_why() {
    let report = report_of(
        &[
            group("A", "a", 500, 0),
            group("B", "b", 700, 0),
            group("C", "c", 1_000, 30),
        ],
        Parameters::default(),
    );
    let html = render_report(&report, &ctx());
    let doc = scraper::Html::parse_document(&html);
    assert!(
        doc.select(&sel(
            "#changes, #binomial, #baseline-legend, td[data-baseline]"
        ))
        .next()
        .is_none()
    );
    assert_eq!(
        doc.select(&sel("table#groups thead th")).count(),
        9,
        "no baseline columns"
    );
    let untestable = report
        .pairs
        .iter()
        .find(|p| p.untestable.is_some())
        .expect("A-B has no test");
    let reason = untestable.untestable.clone().unwrap();
    let row = doc
        .select(&sel(
            "table#pairwise tbody tr, table#pairwise-rest tbody tr",
        ))
        .find(|tr| tr.text().collect::<String>().contains("A \u{2013} B"))
        .expect("the A-B row");
    let text: String = row.text().collect();
    assert!(text.contains("no test") && text.contains(&reason), "{text}");
    assert!(!text.contains("untestable"), "{text}");
}

#[test]
fn the_series_headline_names_the_changes_and_the_strip_rings_them() {
    let drift = drift_week();
    let quiet = report_with_baseline(
        &five_sites()
            .into_iter()
            .map(|mut g| {
                if g.code == "KES" {
                    g.defective = 700;
                }
                g
            })
            .collect::<Vec<_>>(),
        &[
            ("KES", 97_000, 690),
            ("MRQ", 80_000, 1_000),
            ("ODW", 150_000, 1_350),
            ("TLG", 320_000, 3_200),
            ("VAL", 7_500, 118),
        ],
    );
    assert!(quiet.changes.is_empty(), "{:?}", quiet.changes);
    let mut a = quiet.summary();
    a.period = Some("2026-W15".parse().unwrap());
    let points = vec![a, drift.summary()];
    let mut c = ctx();
    c.selection.period = "2026-W16".to_owned();
    let series = super::view::SeriesView {
        from: "2026-W15".to_owned(),
        to: "2026-W16".to_owned(),
        alpha: 0.05,
        points: points.clone(),
        headline: None,
        trends: Vec::new(),
    };
    let html = super::render::render_series(&series, &c);
    let doc = scraper::Html::parse_document(&html);
    assert_eq!(
        text_of(&doc, "#verdict h1"),
        "KES worse than its usual in 2026-W16"
    );
    let rings: Vec<(&str, &str)> = doc
        .select(&sel("svg#series-chart circle.ring"))
        .map(|r| {
            (
                r.value().attr("data-name").unwrap(),
                r.value().attr("class").unwrap(),
            )
        })
        .collect();
    assert_eq!(rings, [("KES", "ring worse")], "one ring, on KES in W16");
    let ring = doc
        .select(&sel("svg#series-chart circle.ring"))
        .next()
        .unwrap();
    let column = ring.parent().and_then(scraper::ElementRef::wrap).unwrap();
    assert_eq!(column.value().attr("data-period"), Some("2026-W16"));
    // A flag is a triangle, a change a ring: KES has both in W16, distinct.
    assert!(column.select(&sel("path.mark.above")).count() >= 1);
    assert!(
        text_of(&doc, "#series-chart-desc").contains("a solid ring worse, a dashed ring better")
    );
    assert_eq!(
        text_of(
            &doc,
            "table#series tr[data-period=\"2026-W16\"] td:last-child"
        ),
        "KES \u{25c9} worse"
    );
    assert_eq!(
        text_of(
            &doc,
            "table#series tr[data-period=\"2026-W15\"] td:last-child"
        ),
        ""
    );

    // The service's own headline wins.
    let given = super::view::SeriesView {
        headline: Some("KES worse than its usual in 2026-W15–W18".to_owned()),
        ..series
    };
    let html = super::render::render_series(&given, &c);
    let doc = scraper::Html::parse_document(&html);
    assert_eq!(
        text_of(&doc, "#verdict h1"),
        "KES worse than its usual in 2026-W15–W18"
    );
}

#[test]
fn the_series_page_shows_each_groups_trend_with_its_direction_slope_and_p() {
    use dispar_core::report::trend::series_trends;
    let last: Period = "2026-W12".parse().unwrap();
    let mut periods = last.earlier(11);
    periods.push(last);
    let wobble = [0u64, 4, 1, 2, 0, 3, 1, 5, 2, 1, 0, 3];
    // KES rises by 0.08 pp a week, MRQ stays near 1%, VAL posted only twice.
    let groups: Vec<Vec<GroupCounts>> = (0..12u64)
        .map(|w| {
            let mut p = vec![
                group(
                    "KES",
                    "Kestelmoor",
                    10_000,
                    100 + 8 * w + wobble[w as usize],
                ),
                group("MRQ", "Marquenne", 10_000, 100 + wobble[w as usize]),
            ];
            if w >= 10 {
                p.push(group("VAL", "Valtrona", 5_000, 40));
            }
            p
        })
        .collect();
    let trends = series_trends(&periods, &groups, 0.05);
    let report = report_of(&five_sites(), Parameters::default());
    let series = super::view::SeriesView {
        from: "2026-W01".to_owned(),
        to: "2026-W12".to_owned(),
        alpha: 0.05,
        points: vec![report.summary()],
        headline: None,
        trends: trends.clone(),
    };
    let html = super::render::render_series(&series, &ctx());
    let doc = scraper::Html::parse_document(&html);
    let row = |code: &str| {
        let cells: Vec<String> = doc
            .select(&sel(&format!("table#trends tr[data-code=\"{code}\"] td")))
            .map(|td| td.text().collect())
            .collect();
        cells
    };
    let kes = row("KES");
    assert_eq!(kes[0], "\u{2197} rising", "{kes:?}");
    assert_eq!(kes[1], "+0.08 pp", "{kes:?}");
    assert_eq!(
        kes[2],
        super::format::fmt_p(trends[0].trend.as_ref().unwrap().p_widened)
    );
    assert_eq!(row("MRQ")[0], "\u{2192} steady");
    assert_eq!(row("VAL"), ["fewer than 3 weeks with units inspected (2)"]);
    assert_eq!(
        text_of(&doc, "table#trends thead th:nth-child(3)"),
        "Slope a week"
    );
    let rising = doc
        .select(&sel("table#trends span.tag.trend.rising"))
        .count();
    assert_eq!(rising, 1);
    let title = doc
        .select(&sel("table#trends tr[data-code=\"KES\"]"))
        .next()
        .and_then(|tr| tr.value().attr("title"))
        .unwrap();
    assert!(
        title.starts_with("KES getting steadily worse over the last 12 weeks"),
        "{title}"
    );

    // No trends, no section.
    let without = super::view::SeriesView {
        trends: Vec::new(),
        ..series
    };
    let html = super::render::render_series(&without, &ctx());
    assert!(!html.contains("table id=\"trends\""), "{html}");
}

#[test]
fn the_funnel_widens_when_overdispersion_is_applied() {
    // Twelve groups with more spread than binomial sampling gives.
    let groups: Vec<GroupCounts> = (0..12u64)
        .map(|i| {
            group(
                &format!("S{i}"),
                "s",
                20_000,
                160 + 15 * i + if i % 2 == 0 { 40 } else { 0 },
            )
        })
        .collect();
    let widen = Parameters {
        overdispersion: DispersionChoice::Widen,
        ..Parameters::default()
    };
    let report = report_of(&groups, widen);
    let o = report.overdispersion.as_ref().unwrap();
    assert!(o.applied, "phi = {}", o.phi);
    let html = render_report(&report, &ctx());
    assert!(html.contains(&format!("99.8% limits \u{00d7} {:.2}", o.phi.sqrt())));
    assert!(html.contains("widened for overdispersion"));
    let plain = report_of(&groups, Parameters::default());
    assert!(!render_report(&plain, &ctx()).contains("widened for overdispersion"));
}

#[test]
fn the_pickers_keep_the_selection_and_link_the_neighbouring_periods() {
    let report = report_of(&five_sites(), Parameters::default());
    let mut c = ctx();
    c.selection.extra = vec![("alpha".to_owned(), "0.01".to_owned())];
    let html = render_report(&report, &c);
    assert!(html.contains("<input id=\"period\" name=\"period\" value=\"2026-W16\""));
    assert!(html.contains("href=\"/report?period=2026-W15&amp;level=site&amp;alpha=0.01\""));
    assert!(html.contains("<input type=\"hidden\" name=\"alpha\" value=\"0.01\">"));
    assert!(html.contains("<option value=\"site\" selected>"));
    assert!(!html.contains("<script"), "the page needs no script");
}

// ---- the routes, in process -------------------------------------------------------

mod flow {
    use std::sync::Arc;
    use std::sync::atomic::{AtomicU64, Ordering};

    use axum::Router;
    use dispar_store::{KeyRole, Store};

    use super::*;
    use crate::state::{AppState, Limits};

    struct Fixture {
        app: Router,
        store: Arc<dyn Store>,
        path: std::path::PathBuf,
    }

    impl Drop for Fixture {
        fn drop(&mut self) {
            for suffix in ["", "-wal", "-shm"] {
                let _ = std::fs::remove_file(format!("{}{suffix}", self.path.display()));
            }
        }
    }

    async fn fixture() -> Fixture {
        fixture_with(false).await
    }

    /// With `whole_app`, the routes are served by [`crate::app`], with every layer the
    /// server has (problem bodies, limits, tracing), as in production.
    async fn fixture_with(whole_app: bool) -> Fixture {
        static N: AtomicU64 = AtomicU64::new(0);
        let path = std::env::temp_dir().join(format!(
            "dispar-page-test-{}-{}.db",
            std::process::id(),
            N.fetch_add(1, Ordering::Relaxed)
        ));
        let store = dispar_store::open(&format!("sqlite:{}", path.display()))
            .await
            .unwrap();
        let state = AppState::new(store.clone(), Limits::default());
        let app = if whole_app {
            crate::app(state)
        } else {
            crate::page::router().with_state(state)
        };
        Fixture { app, store, path }
    }

    async fn key(store: &Arc<dyn Store>, role: KeyRole) -> (i64, String) {
        let secret = crate::auth::new_secret().unwrap();
        let sites = if role == KeyRole::Ingest {
            vec![dispar_core::code::SiteCode::parse("KES").unwrap()]
        } else {
            Vec::new()
        };
        let id = store
            .create_key(role, &sites, None, &secret.hash)
            .await
            .unwrap();
        (id, crate::auth::token(id, &secret.secret_hex))
    }

    async fn send(app: &Router, req: Request<Body>) -> (StatusCode, axum::http::HeaderMap, String) {
        let resp = app.clone().oneshot(req).await.unwrap();
        let status = resp.status();
        let headers = resp.headers().clone();
        let bytes = axum::body::to_bytes(resp.into_body(), 10 << 20)
            .await
            .unwrap();
        (status, headers, String::from_utf8(bytes.to_vec()).unwrap())
    }

    fn post_form(path: &str, body: String, extra: &[(&str, &str)]) -> Request<Body> {
        let mut b = Request::post(path)
            .header(header::CONTENT_TYPE, "application/x-www-form-urlencoded")
            .header(header::HOST, "127.0.0.1:8080");
        for (k, v) in extra {
            b = b.header(*k, *v);
        }
        b.body(Body::from(body)).unwrap()
    }

    fn get(path: &str, cookie: Option<&str>) -> Request<Body> {
        let mut b = Request::get(path);
        if let Some(c) = cookie {
            b = b.header(header::COOKIE, c);
        }
        b.body(Body::empty()).unwrap()
    }

    fn form(key: &str, next: Option<&str>) -> String {
        let mut s = form_urlencoded::Serializer::new(String::new());
        s.append_pair("key", key);
        if let Some(n) = next {
            s.append_pair("next", n);
        }
        s.finish()
    }

    /// The `name=value` part of a Set-Cookie header.
    fn cookie_pair(set_cookie: &str) -> String {
        set_cookie.split(';').next().unwrap().to_owned()
    }

    #[tokio::test]
    async fn pages_need_a_session_and_sign_in_exchanges_a_read_key_for_a_cookie() {
        let f = fixture().await;
        let (_, token) = key(&f.store, KeyRole::Read).await;

        let (status, headers, _) = send(&f.app, get("/report?period=2026-W16", None)).await;
        assert_eq!(status, StatusCode::SEE_OTHER);
        assert_eq!(
            headers[header::LOCATION],
            "/sign-in?next=%2Freport%3Fperiod%3D2026-W16"
        );

        let (status, headers, body) = send(&f.app, get("/sign-in?next=%2Freport", None)).await;
        assert_eq!(status, StatusCode::OK);
        assert!(
            headers[header::CONTENT_TYPE]
                .to_str()
                .unwrap()
                .starts_with("text/html")
        );
        assert!(body.contains("type=\"password\"") && body.contains("method=\"post\""));
        let csp = headers[header::CONTENT_SECURITY_POLICY].to_str().unwrap();
        assert!(
            csp.contains("default-src 'none'") && csp.contains("'sha256-"),
            "{csp}"
        );

        let (status, headers, _) = send(
            &f.app,
            post_form(
                "/sign-in",
                form(&token, Some("/report?period=2026-W16")),
                &[],
            ),
        )
        .await;
        assert_eq!(status, StatusCode::SEE_OTHER);
        let location = headers[header::LOCATION].to_str().unwrap();
        assert_eq!(location, "/report?period=2026-W16");
        assert!(!location.contains(&token[4..20]), "no key in the URL");
        let set_cookie = headers[header::SET_COOKIE].to_str().unwrap();
        for part in [
            "dispar_session=",
            "HttpOnly",
            "SameSite=Strict",
            "Path=/",
            "Max-Age=43200",
        ] {
            assert!(set_cookie.contains(part), "{part} in {set_cookie}");
        }
        assert!(!set_cookie.contains("Secure"), "plain HTTP: {set_cookie}");
        assert!(
            !set_cookie.contains(&token[4..20]),
            "the cookie is not the key"
        );
        let cookie = cookie_pair(set_cookie);

        let (status, headers, body) =
            send(&f.app, get("/report?period=2026-W16", Some(&cookie))).await;
        assert_eq!(status, StatusCode::OK, "{body}");
        assert_eq!(headers[header::CACHE_CONTROL], "no-store");
        assert!(body.contains("id=\"verdict\""), "{body}");
        assert!(!body.contains(&token[4..20]), "the key is not in the page");

        // Signing out ends the session.
        let (status, headers, _) = send(
            &f.app,
            post_form("/sign-out", String::new(), &[("cookie", &cookie)]),
        )
        .await;
        assert_eq!(status, StatusCode::SEE_OTHER);
        assert!(
            headers[header::SET_COOKIE]
                .to_str()
                .unwrap()
                .contains("Max-Age=0")
        );
        let (status, _, _) = send(&f.app, get("/report", Some(&cookie))).await;
        assert_eq!(status, StatusCode::SEE_OTHER);
    }

    #[tokio::test]
    async fn wrong_ingest_and_revoked_keys_are_refused() {
        let f = fixture().await;
        let (_, token) = key(&f.store, KeyRole::Read).await;
        let (_, ingest) = key(&f.store, KeyRole::Ingest).await;

        let mut wrong = token.clone();
        let last = wrong.pop().unwrap();
        wrong.push(if last == '0' { '1' } else { '0' });
        for (k, status, words) in [
            (
                wrong.as_str(),
                StatusCode::UNAUTHORIZED,
                "That key is not valid.",
            ),
            (
                "hello",
                StatusCode::UNAUTHORIZED,
                "followed by 64 hexadecimal digits (0-9 and a-f).",
            ),
            ("", StatusCode::UNAUTHORIZED, "That is not a dispar key."),
            (
                ingest.as_str(),
                StatusCode::FORBIDDEN,
                "An ingest key cannot open reports; sign in with an API key with read access (read or admin).",
            ),
        ] {
            let (s, headers, body) = send(&f.app, post_form("/sign-in", form(k, None), &[])).await;
            assert_eq!(s, status, "{k:?}: {body}");
            assert!(headers.get(header::SET_COOKIE).is_none(), "{k:?}");
            assert!(body.contains(words), "{k:?}: {body}");
            assert!(!body.contains("letters and digits"), "{k:?}: {body}");
        }

        // A key in the query string is never read.
        let (s, headers, _) = send(
            &f.app,
            post_form(&format!("/sign-in?key={token}"), String::new(), &[]),
        )
        .await;
        assert_eq!(s, StatusCode::UNAUTHORIZED);
        assert!(headers.get(header::SET_COOKIE).is_none());

        // A post from another site is refused.
        let (s, headers, _) = send(
            &f.app,
            post_form(
                "/sign-in",
                form(&token, None),
                &[("origin", "https://evil.example")],
            ),
        )
        .await;
        assert_eq!(s, StatusCode::FORBIDDEN);
        assert!(headers.get(header::SET_COOKIE).is_none());

        // Revoking the key ends its session.
        let (_, headers, _) = send(&f.app, post_form("/sign-in", form(&token, None), &[])).await;
        let cookie = cookie_pair(headers[header::SET_COOKIE].to_str().unwrap());
        let (s, _, _) = send(&f.app, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::OK);
        let id = crate::auth::parse_token(&token).unwrap().id;
        f.store.revoke_key(id).await.unwrap();
        let (s, _, _) = send(&f.app, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::SEE_OTHER);
    }

    #[tokio::test]
    async fn the_cookie_is_secure_behind_an_https_proxy() {
        let f = fixture().await;
        let (_, token) = key(&f.store, KeyRole::Admin).await;
        let (s, headers, _) = send(
            &f.app,
            post_form(
                "/sign-in",
                form(&token, Some("https://evil.example/")),
                &[("x-forwarded-proto", "https")],
            ),
        )
        .await;
        assert_eq!(s, StatusCode::SEE_OTHER);
        assert_eq!(headers[header::LOCATION], "/report", "foreign next ignored");
        assert!(
            headers[header::SET_COOKIE]
                .to_str()
                .unwrap()
                .contains("; Secure")
        );
    }

    /// The page routes over a new store and state on the database file `path`: one
    /// server instance (or the same server after a restart).
    async fn instance(path: &std::path::Path) -> (Router, Arc<dyn Store>) {
        let store = dispar_store::open(&format!("sqlite:{}", path.display()))
            .await
            .unwrap();
        let state = AppState::new(store.clone(), Limits::default());
        (crate::page::router().with_state(state), store)
    }

    #[tokio::test]
    async fn a_session_survives_a_restart_is_shared_by_instances_and_ends_at_sign_out() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("pages.db");
        let (first, store) = instance(&path).await;
        let (_, token) = key(&store, KeyRole::Read).await;
        let (s, headers, _) = send(&first, post_form("/sign-in", form(&token, None), &[])).await;
        assert_eq!(s, StatusCode::SEE_OTHER);
        let cookie = cookie_pair(headers[header::SET_COOKIE].to_str().unwrap());
        let (s, _, _) = send(&first, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::OK, "the instance that signed in");

        // A second instance on the same database knows the session.
        let (second, second_store) = instance(&path).await;
        let (s, _, body) = send(&second, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::OK, "another instance: {body}");

        // Restart: every store closed, new state over the same file.
        second_store.close().await;
        store.close().await;
        drop((first, second));
        let (restarted, store) = instance(&path).await;
        let (s, _, body) = send(&restarted, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::OK, "after the restart: {body}");
        assert!(body.contains("id=\"series-chart\""), "{body}");

        // Signing out ends it everywhere, even for a copy of the old cookie.
        let (s, _, _) = send(
            &restarted,
            post_form("/sign-out", String::new(), &[("cookie", &cookie)]),
        )
        .await;
        assert_eq!(s, StatusCode::SEE_OTHER);
        let (s, headers, _) = send(&restarted, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::SEE_OTHER);
        assert!(
            headers[header::LOCATION]
                .to_str()
                .unwrap()
                .starts_with("/sign-in")
        );
        let (other, other_store) = instance(&path).await;
        let (s, _, _) = send(&other, get("/series", Some(&cookie))).await;
        assert_eq!(s, StatusCode::SEE_OTHER, "ended for every instance");
        other_store.close().await;
        store.close().await;
    }

    #[tokio::test]
    async fn a_cookie_the_store_never_issued_is_not_a_session() {
        let f = fixture().await;
        let (s, _, _) = send(
            &f.app,
            get(
                "/series",
                Some("dispar_session=0123456789abcdef0123456789abcdef"),
            ),
        )
        .await;
        assert_eq!(s, StatusCode::SEE_OTHER);
    }

    #[tokio::test]
    async fn bad_choices_are_shown_on_the_page_with_the_parameter_named() {
        let f = fixture().await;
        let (_, token) = key(&f.store, KeyRole::Read).await;
        let (_, headers, _) = send(&f.app, post_form("/sign-in", form(&token, None), &[])).await;
        let cookie = cookie_pair(headers[header::SET_COOKIE].to_str().unwrap());
        let (s, headers, body) = send(&f.app, get("/report?period=2026-W99", Some(&cookie))).await;
        assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
        assert!(
            headers[header::CONTENT_TYPE]
                .to_str()
                .unwrap()
                .starts_with("text/html")
        );
        assert!(
            body.contains("id=\"problem\"") && body.contains("period: "),
            "{body}"
        );
        assert!(
            body.contains("value=\"2026-W99\""),
            "the picker keeps the input"
        );
        let (s, _, body) = send(
            &f.app,
            get("/report?period=2026-W16&level=line", Some(&cookie)),
        )
        .await;
        assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
        assert!(body.contains("site: "), "{body}");
        // No data at all: the default week is the current one, and it is not testable.
        let (s, _, body) = send(&f.app, get("/report", Some(&cookie))).await;
        assert_eq!(s, StatusCode::OK);
        assert!(body.contains("class=\"untestable\""), "{body}");
        assert!(body.contains("<h1>No data</h1>"), "{body}");
        assert!(body.contains("id=\"notice\""));
        let (s, _, body) = send(&f.app, get("/", None)).await;
        assert_eq!(s, StatusCode::SEE_OTHER, "{body}");
    }

    #[tokio::test]
    async fn in_the_whole_application_refusals_stay_html_pages() {
        let f = fixture_with(true).await;
        let (_, token) = key(&f.store, KeyRole::Read).await;
        let (s, headers, body) =
            send(&f.app, post_form("/sign-in", form("dsp_1_00", None), &[])).await;
        assert_eq!(s, StatusCode::UNAUTHORIZED);
        assert!(
            headers[header::CONTENT_TYPE]
                .to_str()
                .unwrap()
                .starts_with("text/html"),
            "the sign-in form again, not a problem body: {body}"
        );
        let (s, headers, _) = send(&f.app, post_form("/sign-in", form(&token, None), &[])).await;
        assert_eq!(s, StatusCode::SEE_OTHER);
        let cookie = cookie_pair(headers[header::SET_COOKIE].to_str().unwrap());
        let (s, headers, body) = send(&f.app, get("/report?period=2026-13", Some(&cookie))).await;
        assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
        assert!(
            headers[header::CONTENT_TYPE]
                .to_str()
                .unwrap()
                .starts_with("text/html"),
            "{body}"
        );
        let (s, _, body) = send(&f.app, get("/favicon.svg", None)).await;
        assert_eq!(s, StatusCode::OK);
        assert!(body.starts_with("<svg"));
        // The problem type pages: the page shell, code spans as <code>, no backticks.
        let (s, headers, body) = send(&f.app, get("/problems/unauthorized", None)).await;
        assert_eq!(s, StatusCode::OK);
        assert!(headers.contains_key(header::CONTENT_SECURITY_POLICY));
        let doc = scraper::Html::parse_document(&body);
        let code: Vec<String> = doc
            .select(&sel("#problem-description code"))
            .map(|c| c.text().collect())
            .collect();
        assert_eq!(
            code,
            vec!["Authorization: Bearer <key>", "dispar keys create"],
            "{body}"
        );
        assert!(!page_text(&doc).contains('`'), "{body}");
    }

    #[tokio::test]
    async fn a_page_and_the_json_endpoint_share_one_cached_report() {
        let f = fixture_with(true).await;
        f.store
            .upsert_site(&dispar_core::site::Site {
                code: dispar_core::code::SiteCode::parse("KES").unwrap(),
                name: dispar_core::site::SiteName::parse_field("Kestelmoor", "name").unwrap(),
                time_zone: None,
            })
            .await
            .unwrap();
        let (_, token) = key(&f.store, KeyRole::Read).await;
        let (_, headers, _) = send(&f.app, post_form("/sign-in", form(&token, None), &[])).await;
        let cookie = cookie_pair(headers[header::SET_COOKIE].to_str().unwrap());
        // The page's site picker (a registered site) is not a filter at the site level:
        // the same report.
        let (s, _, _) = send(
            &f.app,
            get("/report?period=2026-W16&site=KES&alpha=0.01", Some(&cookie)),
        )
        .await;
        assert_eq!(s, StatusCode::OK);
        let json = Request::get("/v1/reports?period=2026-W16&alpha=0.010")
            .header(header::AUTHORIZATION, format!("Bearer {token}"))
            .body(Body::empty())
            .unwrap();
        let (s, headers, body) = send(&f.app, json).await;
        assert_eq!(s, StatusCode::OK, "{body}");
        assert_eq!(
            headers["server-timing"], "cache;desc=hit",
            "the page's report answers the JSON request"
        );
        let series = |path: &str| {
            Request::get(path)
                .header(header::AUTHORIZATION, format!("Bearer {token}"))
                .body(Body::empty())
                .unwrap()
        };
        let (s, _, _) = send(
            &f.app,
            get("/series?from=2026-W10&to=2026-W16", Some(&cookie)),
        )
        .await;
        assert_eq!(s, StatusCode::OK);
        let (_, headers, _) = send(
            &f.app,
            series("/v1/reports/series?from=2026-W10&to=2026-W16"),
        )
        .await;
        assert_eq!(headers["server-timing"], "cache;desc=hit");
    }
}

// ---- hostile names, parsed ----------------------------------------------------------

/// Names that would run script or break out of an attribute or the SVG if a page
/// wrote them unescaped.
const HOSTILE: [&str; 5] = [
    "<script>alert(1)</script>",
    "\" onerror=alert(1) x=\"",
    "</svg><img src=x onerror=alert(2)>",
    "'quoted' & \"double\"",
    "javascript:alert(3)",
];

/// What the parsed page holds that could execute, as messages (empty when none).
fn executable_parts(doc: &scraper::Html) -> Vec<String> {
    let mut found = Vec::new();
    for el in doc.select(&sel("*")) {
        let name = el.value().name();
        if matches!(name, "script" | "img" | "iframe" | "object" | "embed") {
            found.push(format!("a <{name}> element"));
        }
        for (attr, value) in el.value().attrs() {
            if attr.to_ascii_lowercase().starts_with("on") {
                found.push(format!("attribute {attr}={value:?} on <{name}>"));
            }
            let url = matches!(
                attr,
                "href" | "src" | "action" | "formaction" | "xlink:href" | "data" | "poster"
            );
            if url && value.trim().to_ascii_lowercase().starts_with("javascript:") {
                found.push(format!("a javascript: URL in {attr} of <{name}>"));
            }
        }
    }
    found
}

/// All text of the page (text nodes, not attributes).
fn page_text(doc: &scraper::Html) -> String {
    doc.root_element().text().collect()
}

/// Parses `html` and checks that nothing executable got through, that the page has
/// `svgs` SVG elements (a `</svg>` in a name cannot close one early) and that each of
/// `shown` appears as text.
fn assert_inert(what: &str, html: &str, svgs: usize, shown: &[&str]) -> scraper::Html {
    let doc = scraper::Html::parse_document(html);
    let bad = executable_parts(&doc);
    assert!(bad.is_empty(), "{what}: {bad:?}");
    assert_eq!(
        doc.select(&sel("svg")).count(),
        svgs,
        "{what}: svg elements"
    );
    let text = page_text(&doc);
    for s in shown {
        assert!(text.contains(s), "{what}: {s:?} not shown as text");
    }
    doc
}

fn hostile_groups() -> Vec<GroupCounts> {
    let mut groups = five_sites();
    for (g, h) in groups.iter_mut().zip(HOSTILE) {
        g.code = h.to_owned();
        g.name = Some(format!("{h} name"));
        g.defects = BTreeMap::from([(h.to_owned(), g.defective / 2), ("seal".to_owned(), 3)]);
    }
    // One more group with no units, so the "Excluded" list shows a hostile name too.
    groups.push(group(HOSTILE[0], "x", 0, 0));
    groups.last_mut().unwrap().code = format!("{} excluded", HOSTILE[2]);
    groups
}

fn hostile_ctx() -> PageContext {
    let mut c = ctx();
    c.viewer = Some(Viewer {
        key_id: 3,
        role: HOSTILE[0].to_owned(),
    });
    c.selection.period = HOSTILE[1].to_owned();
    c.selection.site = Some(HOSTILE[2].to_owned());
    c.selection.extra = vec![("alpha".to_owned(), HOSTILE[1].to_owned())];
    c.sites = HOSTILE
        .iter()
        .map(|h| SiteChoice {
            code: (*h).to_owned(),
            name: format!("{h} site"),
        })
        .collect();
    c.previous = Some(HOSTILE[4].to_owned());
    c.next = Some(HOSTILE[2].to_owned());
    c.notice = Some(HOSTILE[0].to_owned());
    c
}

#[test]
fn every_page_keeps_hostile_names_as_text() {
    let mut parameters = Parameters {
        min_difference: Some(0.001),
        ..Parameters::default()
    };
    parameters.alpha = 0.05;
    let report = report_of(&hostile_groups(), parameters);
    assert!(report.test.is_some() && !report.excluded.is_empty());
    let c = hostile_ctx();
    let html = render_report(&report, &c);
    let doc = assert_inert("report", &html, 3, &HOSTILE);
    // The names are in the table, the charts' labels, the pairs and the categories.
    assert_eq!(doc.select(&sel("table#groups tbody tr")).count(), 5);
    assert_eq!(doc.select(&sel("svg#rates-chart g.group")).count(), 5);
    assert_eq!(doc.select(&sel("svg#funnel-chart g.group")).count(), 5);
    let first = doc
        .select(&sel("table#groups tbody tr"))
        .next()
        .and_then(|tr| tr.value().attr("data-name"))
        .map(str::to_owned);
    assert_eq!(first.as_deref(), Some(HOSTILE[0]), "attribute kept whole");
    let options: Vec<&str> = doc
        .select(&sel("select#site option"))
        .filter_map(|o| o.value().attr("value"))
        .collect();
    assert_eq!(options[1..], HOSTILE, "site codes as option values");
    let hidden = doc
        .select(&sel("input[type=hidden][name=alpha]"))
        .next()
        .and_then(|i| i.value().attr("value"));
    assert_eq!(hidden, Some(HOSTILE[1]));
    assert!(page_text(&doc).contains(&format!("{} excluded", HOSTILE[2])));

    let problem = super::render::render_report_problem(&c, HOSTILE[0], &[HOSTILE[1].to_owned()]);
    assert_inert("report problem", &problem, 0, &HOSTILE[..2]);

    let series = super::view::SeriesView {
        from: HOSTILE[3].to_owned(),
        to: HOSTILE[2].to_owned(),
        alpha: 0.05,
        points: vec![report.summary(), report.summary()],
        headline: None,
        trends: Vec::new(),
    };
    let html = super::render::render_series(&series, &c);
    let doc = assert_inert("series", &html, 1, &HOSTILE);
    assert_eq!(doc.select(&sel("svg#series-chart .period")).count(), 2);
    let problem = super::render::render_series_problem(HOSTILE[1], HOSTILE[4], &c, HOSTILE[2], &[]);
    assert_inert("series problem", &problem, 0, &[HOSTILE[2]]);

    let sign_in = render_sign_in(Some(HOSTILE[2]), Some(HOSTILE[1]));
    let doc = assert_inert("sign-in", &sign_in, 0, &[HOSTILE[2]]);
    let next = doc
        .select(&sel("input[name=next]"))
        .next()
        .and_then(|i| i.value().attr("value"));
    assert_eq!(next, Some(HOSTILE[1]));

    let problem_type = super::render::render_problem_type(
        HOSTILE[0],
        400,
        HOSTILE[1],
        "Send `<b>x</b>` not <i>y</i>.",
    );
    let doc = assert_inert(
        "problem type",
        &problem_type,
        0,
        &[HOSTILE[0], "<b>x</b>", "<i>y</i>"],
    );
    let code: Vec<String> = doc
        .select(&sel("#problem-description code"))
        .map(|c| c.text().collect())
        .collect();
    assert_eq!(code, vec!["<b>x</b>".to_owned()], "the code span, escaped");
    assert_eq!(doc.select(&sel("b, i")).count(), 0);
}

// ---- page wording --------------------------------------------------------------------

/// Negative numbers written with an ASCII hyphen in text: a `-` before a digit that
/// does not follow a letter or digit (so `2026-W16`, `2026-04-13` and `1e-300` pass).
fn ascii_minus_numbers(text: &str) -> Vec<String> {
    let chars: Vec<char> = text.chars().collect();
    chars
        .windows(3)
        .filter(|w| w[1] == '-' && w[2].is_ascii_digit() && !w[0].is_alphanumeric())
        .map(|w| w.iter().collect())
        .collect()
}

#[test]
fn the_page_text_has_none_of_the_reported_glitches() {
    // 664,474 units in all; two groups, so one pair.
    let groups = vec![
        group("AAA", "Aston", 400_000, 4_000),
        group("BBB", "Barrow", 264_474, 2_100),
    ];
    let report = report_of(&groups, Parameters::default());
    let html = render_report(&report, &ctx());
    let doc = scraper::Html::parse_document(&html);
    let text = page_text(&doc);
    assert!(
        text.contains("664,474") && !text.contains("664474"),
        "thousands separators"
    );
    assert!(
        text.contains("1 pair") && !text.contains("1 pairs"),
        "singular pair"
    );
    assert!(
        text.contains("Cram\u{e9}r's V") && !text.contains("Cramer"),
        "accent"
    );
    assert!(
        !text.contains('\u{2191}') && !text.contains('\u{2193}'),
        "no arrows ↑↓"
    );
    assert!(
        text.contains('\u{25b2}') && text.contains('\u{25bc}'),
        "▲ and ▼"
    );
    assert_eq!(
        ascii_minus_numbers(&text),
        Vec::<String>::new(),
        "true minus signs"
    );
    assert!(
        text.contains("\u{2212}"),
        "the negative difference uses U+2212"
    );
    for heading in [
        "Pairwise comparisons",
        "Flagged contributors",
        "Cautions",
        "Groups",
    ] {
        assert!(
            doc.select(&sel("h2"))
                .any(|h| h.text().collect::<String>() == heading),
            "heading {heading}"
        );
    }
    let significant: Vec<String> = doc
        .select(&sel("table#pairwise tbody td"))
        .map(|td| td.text().collect())
        .collect();
    assert!(significant.contains(&"yes".to_owned()), "{significant:?}");
    assert!(
        significant.iter().all(|c| c != "differ" && c != "\u{2014}"),
        "the significant column says yes or no: {significant:?}"
    );
    assert!(text.contains("significant at \u{3b1} = 0.05"));
    // Each colour meaning has words or a shape beside it: flagged rows carry a tag.
    for tr in doc.select(&sel(
        "table#groups tbody tr.flag-above, table#groups tbody tr.flag-below",
    )) {
        let t: String = tr.text().collect();
        assert!(t.contains('\u{25b2}') || t.contains('\u{25bc}'), "{t}");
    }

    // p underflows: "p < 1e-300", never "p = < 1e-300".
    let huge = report_of(
        &[
            group("A", "a", 1_000_000, 100_000),
            group("B", "b", 1_000_000, 10_000),
        ],
        Parameters::default(),
    );
    let text = page_text(&scraper::Html::parse_document(&render_report(
        &huge,
        &ctx(),
    )));
    assert!(
        text.contains("p < 1e-300") && !text.contains("p = <"),
        "{text}"
    );
    assert_eq!(ascii_minus_numbers(&text), Vec::<String>::new());

    // The series: ▲ beside the flagged group, verdict words, no arrows.
    let series = super::view::SeriesView {
        from: "2026-W15".to_owned(),
        to: "2026-W16".to_owned(),
        alpha: 0.05,
        points: vec![
            report.summary(),
            report_of(&five_sites(), Parameters::default()).summary(),
        ],
        headline: None,
        trends: Vec::new(),
    };
    let doc = scraper::Html::parse_document(&super::render::render_series(&series, &ctx()));
    let text = page_text(&doc);
    assert!(
        text.contains("KES \u{25b2}") && !text.contains('\u{2191}'),
        "{text}"
    );
    let verdicts: Vec<String> = doc
        .select(&sel("table#series tbody .tag"))
        .map(|t| t.text().collect())
        .collect();
    assert_eq!(verdicts, vec!["significant", "significant"]);
    assert_eq!(ascii_minus_numbers(&text), Vec::<String>::new());

    // Sign-in: any key with read access.
    let text = page_text(&scraper::Html::parse_document(&render_sign_in(None, None)));
    assert!(
        text.contains("API key with read access (a read or admin key"),
        "{text}"
    );
}

#[test]
fn hostile_names_in_changes_and_baselines_stay_text() {
    let groups = hostile_groups();
    let usual: Vec<(&str, u64, u64)> = HOSTILE
        .iter()
        .zip([
            (97_000, 690),
            (80_000, 1_000),
            (150_000, 1_350),
            (320_000, 3_200),
            (7_500, 118),
        ])
        .map(|(h, (n, d))| (*h, n, d))
        .collect();
    let report = report_with_baseline(&groups, &usual);
    assert_eq!(
        report.changes.first().map(|c| c.code.as_str()),
        Some(HOSTILE[0]),
        "{:?}",
        report.changes
    );
    let c = hostile_ctx();
    let html = render_report(&report, &c);
    let doc = assert_inert("report with baselines", &html, 3, &HOSTILE);
    assert!(
        text_of(&doc, "h1#changes").starts_with(&format!("{} worse than its usual", HOSTILE[0]))
    );
    assert_eq!(doc.select(&sel("td[data-baseline]")).count(), 5);
    let mut point = report.summary();
    point.changes = report.changes.clone();
    let series = super::view::SeriesView {
        from: HOSTILE[3].to_owned(),
        to: HOSTILE[2].to_owned(),
        alpha: 0.05,
        points: vec![point.clone(), point],
        headline: None,
        trends: Vec::new(),
    };
    let html = super::render::render_series(&series, &c);
    let doc = assert_inert("series with changes", &html, 1, &HOSTILE[..1]);
    let rings: Vec<&str> = doc
        .select(&sel("svg#series-chart circle.ring"))
        .filter_map(|r| r.value().attr("data-name"))
        .collect();
    assert_eq!(rings, [HOSTILE[0], HOSTILE[0]]);
}
