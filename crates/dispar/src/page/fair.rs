//! The report page's fairer comparisons, read straight from the [`Report`]: the gaps
//! in the data and the power note beside the verdict (a comparison resting on missing
//! days, or too few units to tell, must be seen before the tables), and the product-mix
//! section after the flagged contributors.

use maud::{Markup, html};

use dispar_core::report::Report;
use dispar_core::report::mix::NO_PRODUCT;
use dispar_core::report::model::Flag;

use super::format::{fmt_num, fmt_p, fmt_pct};

fn flag_words(flag: Option<Flag>) -> &'static str {
    match flag {
        Some(Flag::Above) => "\u{25b2} above",
        Some(Flag::Below) => "\u{25bc} below",
        None => "",
    }
}

/// The gaps in the data and, when it matters, the power note: shown right under the
/// verdict.
pub fn beside_verdict(report: &Report) -> Markup {
    let gaps = report.data_gaps.as_ref().filter(|g| !g.is_empty());
    let power = report.power.as_ref();
    html! {
        @if let Some(g) = gaps {
            section #data-gaps .notice role="note" {
                h2 { "Gaps in the data" }
                p { (g.note) " The comparison covers only the days posted." }
                ul {
                    @for s in &g.stopped {
                        li { strong { (s.line) } " stopped posting: "
                            (s.usual_days_without_data) " usual production days without data"
                            @if let Some(d) = s.last_posted { " since " (d) } "." }
                    }
                    @for m in &g.missing_days {
                        li { strong { (m.line) } " has no data on "
                            (m.dates.iter().map(|d| d.to_string()).collect::<Vec<_>>().join(", ")) "." }
                    }
                    @for s in &g.site_days_off {
                        li { "No line of " strong { (s.site) } " posted on "
                            (s.dates.iter().map(|d| d.to_string()).collect::<Vec<_>>().join(", ")) "." }
                    }
                    @for d in &g.implausible {
                        li { strong { (d.line) } " on " (d.date) ": " (d.defective) " of " (d.inspected)
                            " defective (" (fmt_pct(d.rate)) ")"
                            @if let Some(u) = d.usual_rate { ", usually " (fmt_pct(u)) }
                            "; check the record." }
                    }
                }
            }
        }
        @if let Some(p) = power {
            p #power .muted[!p.uninformative] .notice[p.uninformative] { (p.note) }
        }
    }
}

/// The product-mix section, when the report has one.
pub fn product_mix(report: &Report) -> Markup {
    let Some(mix) = &report.product_mix else {
        return html! {};
    };
    let conf = format!("{:.0}%", (1.0 - report.parameters.alpha) * 100.0);
    let label = |p: &Option<String>| p.clone().unwrap_or_else(|| NO_PRODUCT.to_owned());
    html! {
        section #product-mix-section {
            h2 { "Product mix" }
            @if let Some(t) = &mix.test {
                p #product-mix-verdict { strong { (t.verdict) } }
            }
            @if let Some(n) = &mix.not_testable {
                p .muted { "Within products there is no test: " (n.reason) "." }
            }
            @if !mix.disagreements.is_empty() {
                ul #disagreements {
                    @for d in &mix.disagreements { li { (d.note) } }
                }
            }
            @if let Some(or) = &mix.common_odds_ratio {
                p {
                    "Common odds ratio of a defective, " (or.a) " against " (or.b) ": "
                    (fmt_num(or.odds_ratio, 3)) " (" (conf) " interval "
                    (or.odds_ratio_ci.lower.map_or_else(|| "0".to_owned(), |x| fmt_num(x, 3)))
                    " to "
                    (or.odds_ratio_ci.upper.map_or_else(|| "unbounded".to_owned(), |x| fmt_num(x, 3)))
                    ")."
                    @if let Some(b) = &or.breslow_day {
                        @if b.significant {
                            " The odds ratio differs between products (Breslow-Day p = " (fmt_p(b.p_value)) "), so one common ratio summarises them poorly."
                        } @else {
                            " It is about the same for every product (Breslow-Day p = " (fmt_p(b.p_value)) ")."
                        }
                    }
                }
            }
            div .scroll {
                table #product-mix {
                    thead { tr {
                        th scope="col" { "Group" }
                        th scope="col" { "Observed" }
                        th scope="col" { "Expected for its mix" }
                        th scope="col" { "O/E" }
                        th scope="col" { (conf) " interval" }
                        th scope="col" { "Limits" }
                        th scope="col" { "Flag" }
                        th scope="col" { "By product" }
                    } }
                    tbody {
                        @for g in &mix.groups {
                            tr data-name=(g.code) {
                                th scope="row" { (g.code) }
                                td { (g.observed) }
                                td { (fmt_num(g.expected, 1)) }
                                td { (g.ratio.map_or_else(String::new, |r| fmt_num(r, 3))) }
                                td { (g.ratio_ci.map_or_else(String::new, |c| format!("{} \u{2013} {}", fmt_num(c.lower, 3), fmt_num(c.upper, 3)))) }
                                td { (g.limits.map_or_else(String::new, |c| format!("{} \u{2013} {}", fmt_num(c.lower, 3), fmt_num(c.upper, 3)))) }
                                td { (flag_words(g.flag)) }
                                td .small {
                                    (g.products.iter().map(|p| format!("{} {} of {}", label(&p.product), fmt_pct(p.rate), p.inspected)).collect::<Vec<_>>().join("; "))
                                }
                            }
                        }
                    }
                }
            }
            p .small .muted {
                "Each group's expected defectives come from the pooled rate of each product over these groups in this period: "
                (mix.products.iter().map(|p| format!("{} {}", label(&p.product), fmt_pct(p.rate))).collect::<Vec<_>>().join(", "))
                ". O/E above 1 means more defectives than its product mix explains; the limits cover "
                (fmt_num(mix.funnel_coverage * 100.0, 2)) "% of equal groups each, so that all of them together keep the chance of a false flag at \u{03b1}."
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use dispar_core::report::gaps::{DataGaps, Stopped};
    use dispar_core::report::{GroupCounts, LevelKind, Parameters, ReportRequest, build_report};

    use super::*;

    fn group(code: &str, cells: &[(&str, u64, u64)]) -> GroupCounts {
        GroupCounts::of_products(code, cells.iter().map(|&(p, n, x)| (Some(p), n, x)))
    }

    #[test]
    fn the_page_shows_the_product_mix_and_the_gaps_beside_the_verdict() {
        let request = ReportRequest {
            level: Some(LevelKind::Site),
            parameters: Parameters {
                baseline: None,
                ..Parameters::default()
            },
            gaps: Some(DataGaps {
                stopped: vec![Stopped {
                    line: "S1/L2".to_owned(),
                    last_posted: None,
                    usual_days_without_data: 5,
                }],
                note: "S1/L2 stopped posting.".to_owned(),
                ..DataGaps::default()
            }),
            ..ReportRequest::default()
        };
        let report = build_report(
            &request,
            &[
                group("S1", &[("EASY", 1000, 10), ("HARD", 9000, 360)]),
                group("S2", &[("EASY", 9000, 90), ("HARD", 1000, 40)]),
            ],
        );
        let mix = product_mix(&report).into_string();
        assert!(mix.contains("id=\"product-mix\""), "{mix}");
        assert!(mix.contains("S1 looks worse"), "{mix}");
        assert!(mix.contains("EASY 1.00%"), "{mix}");
        let beside = beside_verdict(&report).into_string();
        assert!(beside.contains("Gaps in the data"), "{beside}");
        assert!(
            beside.contains("<strong>S1/L2</strong> stopped posting: 5 usual production days"),
            "{beside}"
        );
        assert!(beside.contains("id=\"power\""), "{beside}");

        let none = build_report(
            &ReportRequest {
                gaps: None,
                ..request
            },
            &[
                group("S1", &[("EASY", 100, 1)]),
                group("S2", &[("EASY", 100, 2)]),
            ],
        );
        assert!(
            !beside_verdict(&none)
                .into_string()
                .contains("Gaps in the data")
        );
        // Too few units: the power note says the verdict is uninformative.
        assert!(
            beside_verdict(&none)
                .into_string()
                .contains("uninformative")
        );
    }
}
