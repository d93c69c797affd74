//! The pages' markup, through maud: every interpolated value is escaped by the
//! templating itself, so a site or line name cannot become markup. The words and
//! numbers come from the view models in [`super::view`]; this module only lays them
//! out.
//!
//! The report page reads top to bottom in the order a quality engineer asks: what
//! changed against each group's own usual, the persistent differences, the binomial
//! verdict of the period, the per-group table, the two charts, the pairwise comparisons,
//! the flagged contributors, the defect categories, the sample sizes, how it was
//! computed, and the cautions. The page needs no script, and prints on paper
//! (`@media print`).

use std::sync::OnceLock;

use dispar_core::report::Report;
use dispar_core::report::model::Flag;
use maud::{DOCTYPE, Markup, PreEscaped, html};

use super::charts::{CHANGE, flag_mark};
use super::view::{
    CategoriesView, Fact, PageContext, PairView, PairsView, ReportView, Selection, SeriesPage,
    SeriesView, SiteChoice, Viewer, flag_tag, level_options,
};

/// The page's one style sheet (inline, allowed by its hash in the CSP).
pub const STYLE: &str = include_str!("page.css");

/// `'sha256-…'` of [`STYLE`], for the `style-src` of the Content-Security-Policy.
pub fn style_hash() -> &'static str {
    static HASH: OnceLock<String> = OnceLock::new();
    HASH.get_or_init(|| {
        use sha2::{Digest, Sha256};
        format!("'sha256-{}'", base64(&Sha256::digest(STYLE.as_bytes())))
    })
}

/// The pages' icon: three dots at different heights around a line.
pub const FAVICON: &str = "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 32 32\"><rect width=\"32\" height=\"32\" rx=\"6\" fill=\"#24505a\"/><path d=\"M5 17h22\" stroke=\"#e9c46a\" stroke-width=\"2\"/><circle cx=\"9\" cy=\"12\" r=\"3\" fill=\"#fff\"/><circle cx=\"16\" cy=\"19\" r=\"3\" fill=\"#fff\"/><circle cx=\"23\" cy=\"9\" r=\"3\" fill=\"#f4a28c\"/></svg>";

/// Standard base64 (RFC 4648 section 4, with padding).
fn base64(bytes: &[u8]) -> String {
    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = (u32::from(b[0]) << 16) | (u32::from(b[1]) << 8) | u32::from(b[2]);
        for i in 0..4 {
            if i <= chunk.len() {
                out.push(char::from(ALPHABET[((n >> (18 - 6 * i)) & 63) as usize]));
            } else {
                out.push('=');
            }
        }
    }
    out
}

/// Which navigation entry is current.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Nav {
    Report,
    Series,
    None,
}

/// The document shell: head with the style sheet, the top bar, `main`.
fn document(title: &str, viewer: Option<&Viewer>, nav: Nav, body: Markup) -> String {
    let current = |n: Nav| (n == nav).then_some("page");
    html! {
        (DOCTYPE)
        html lang="en" {
            head {
                meta charset="utf-8";
                meta name="viewport" content="width=device-width, initial-scale=1";
                meta name="referrer" content="same-origin";
                link rel="icon" href="/favicon.svg" type="image/svg+xml";
                title { (title) }
                // The style sheet is this crate's own constant (allowed by its hash in
                // the Content-Security-Policy); CSS is raw text inside <style>, where
                // escaping would change it, and it holds nothing from a request.
                style { (PreEscaped(STYLE)) }
            }
            body {
                header .top {
                    a .brand href="/report" { "dispar" }
                    @if let Some(v) = viewer {
                        nav {
                            a href="/report" aria-current=[current(Nav::Report)] { "Report" }
                            a href="/series" aria-current=[current(Nav::Series)] { "Series" }
                        }
                        form .who method="post" action="/sign-out" {
                            span { "key " (v.key_id) " \u{00b7} " (v.role) }
                            button type="submit" .quiet { "Sign out" }
                        }
                    }
                }
                main { (body) }
            }
        }
    }
    .into_string()
}

/// Text with Markdown-style `code` spans shown as `<code>` (the problem descriptions
/// name headers and fields that way); an unpaired backtick stays a backtick.
pub fn code_spans(text: &str) -> Markup {
    let parts: Vec<&str> = text.split('`').collect();
    // An even number of parts means an odd number of backticks: the last one has no
    // partner and is shown as it is.
    let paired = if parts.len().is_multiple_of(2) {
        parts.len() - 1
    } else {
        parts.len()
    };
    html! {
        @for (i, part) in parts.iter().enumerate() {
            @if i >= paired {
                "`" (part)
            } @else if i % 2 == 1 {
                code { (part) }
            } @else {
                (part)
            }
        }
    }
}

fn site_options(sites: &[SiteChoice], selected: Option<&str>) -> Markup {
    html! {
        option value="" { "\u{2014}" }
        @for site in sites {
            option value=(site.code) selected[Some(site.code.as_str()) == selected] {
                (site.code) " \u{2013} " (site.name)
            }
        }
    }
}

fn level_select(sel: &Selection) -> Markup {
    html! {
        label { "Compare"
            select #level name="level" {
                @for (value, words, selected) in level_options(sel.level) {
                    option value=(value) selected[selected] { (words) }
                }
            }
        }
    }
}

fn site_select(ctx: &PageContext) -> Markup {
    html! {
        label { "Site (for lines of one site)"
            select #site name="site" { (site_options(&ctx.sites, ctx.selection.site.as_deref())) }
        }
    }
}

fn hidden_extra(sel: &Selection) -> Markup {
    html! {
        @for (name, value) in &sel.extra {
            input type="hidden" name=(name) value=(value);
        }
    }
}

/// The period and level pickers (a plain GET form) with links to the neighbouring
/// periods.
fn picker(ctx: &PageContext) -> Markup {
    let sel = &ctx.selection;
    html! {
        form #picker .picker method="get" action="/report" {
            label { "Period"
                input #period name="period" value=(sel.period) size="22" spellcheck="false"
                    autocomplete="off" aria-describedby="period-help";
            }
            (level_select(sel))
            (site_select(ctx))
            (hidden_extra(sel))
            button type="submit" { "Show" }
            span .step {
                @if let Some(p) = &ctx.previous {
                    a rel="prev" #previous-period href=(sel.report_href(p)) { "\u{2190} " (p) }
                }
                @if let Some(n) = &ctx.next {
                    a rel="next" #next-period href=(sel.report_href(n)) { (n) " \u{2192}" }
                }
            }
            p #period-help .help {
                "A week (2026-W16), month (2026-04), quarter (2026-Q2), year (2026), day (2026-04-14) or date range (2026-04-01..2026-04-19)."
            }
        }
    }
}

fn flag_tag_markup(flag: Option<Flag>) -> Markup {
    html! {
        @if let Some(f) = flag {
            span class={ "tag " (f.as_str()) } { (flag_tag(f)) }
        }
    }
}

/// The class of a group's table row: `flag-above`, `flag-below` or none.
fn row_class(flag: Option<Flag>) -> Option<&'static str> {
    match flag {
        Some(Flag::Above) => Some("flag-above"),
        Some(Flag::Below) => Some("flag-below"),
        None => None,
    }
}

fn p_cell(p: &str, title: &str) -> Markup {
    html! { span title=(title) { (p) } }
}

fn facts(list: &[Fact]) -> Markup {
    html! {
        dl .facts {
            @for f in list {
                dt { (f.term) }
                dd {
                    (f.text)
                    @if let Some(a) = &f.aside { " " span .muted { "(" (a) ")" } }
                }
            }
        }
    }
}

fn verdict(v: &ReportView) -> Markup {
    let s = &v.verdict;
    let class = s.changes.as_ref().map_or(s.verdict.class, |c| c.class);
    html! {
        section #verdict class=(class) aria-live="polite" {
            @if let Some(c) = &s.changes {
                // With baselines the page opens with what changed; the binomial test
                // of the period follows as the third thing said.
                h1 #changes { (c.headline) }
                @if !c.line.is_empty() { p .verdict-line #changes-line { (c.line) } }
                @if let Some(p) = &s.persistent { p #persistent { (p) } }
                div #binomial class=(s.verdict.class) {
                    p { strong { (s.verdict.headline) } }
                    p { (s.verdict.line) }
                    @if let Some(c) = &s.caveat { p #volume-caveat .muted { (c) } }
                }
            } @else {
                h1 { (s.verdict.headline) }
                p .verdict-line { (s.verdict.line) }
                @if let Some(p) = &s.persistent { p #persistent { (p) } }
            }
            @if let Some((lead, flagged)) = &s.flags {
                p #flag-summary {
                    (lead)
                    @for (i, f) in flagged.iter().enumerate() {
                        @if i > 0 { "," }
                        " " (f.mark) " " strong { (f.code) } " " (f.words)
                    }
                    @if !flagged.is_empty() { "." }
                }
            }
            p .muted { (s.pooled) }
        }
    }
}

fn groups_table(v: &ReportView) -> Markup {
    html! {
        section #groups-section {
            h2 { "Groups" }
            div .scroll {
                table #groups {
                    thead { tr {
                        th scope="col" { "Group" }
                        th scope="col" { "Inspected" }
                        th scope="col" { "Defective" }
                        th scope="col" { "Rate" }
                        th scope="col" { (v.conf) " Wilson interval" }
                        th scope="col" { "Expected defective" }
                        th scope="col" title="Adjusted standardized residual of the defective count (the analysis-of-means z-score)" { "Adjusted residual" }
                        th scope="col" { "Flag" }
                        th scope="col" { "Share of X\u{00b2}" }
                        @if v.with_baseline {
                            th scope="col" title="The group's own pooled rate over its earlier periods" { "Usual rate" }
                            th scope="col" title="This period's rate divided by the usual rate" { "Ratio to usual" }
                            th scope="col" { "Against its usual" }
                        }
                    } }
                    tbody {
                        @for g in &v.groups {
                            tr class=[row_class(g.flag)] data-name=(g.code) {
                                th scope="row" {
                                    span .name { (g.code) }
                                    @if let Some(n) = &g.name { " " span .label { (n) } }
                                }
                                td { (g.inspected) }
                                td { (g.defective) }
                                td { (g.rate) }
                                td { (g.interval) }
                                td { (g.expected) }
                                td { (g.residual) }
                                td { (flag_tag_markup(g.flag)) }
                                td { (g.share) }
                                @if v.with_baseline {
                                    @match &g.baseline {
                                        Some(b) => {
                                            td title=(b.usual_title) { (b.usual) }
                                            td title=(b.ratio_title) { (b.ratio) }
                                            td data-baseline=(b.verdict.as_str()) title=(b.reason) {
                                                span class={ "tag baseline " (b.verdict.as_str()) } { (b.word) }
                                            }
                                        }
                                        None => { td { "\u{2014}" } td { "\u{2014}" } td { "\u{2014}" } }
                                    }
                                }
                            }
                        }
                    }
                    tfoot { tr {
                        th scope="row" { (v.totals[0]) }
                        td { (v.totals[1]) }
                        td { (v.totals[2]) }
                        td { (v.totals[3]) }
                        td {} td {} td {} td {} td {}
                        @if v.with_baseline { td {} td {} td {} }
                    } }
                }
            }
            @if let Some(legend) = &v.baseline_legend {
                p #baseline-legend .small .muted { (legend) }
            }
            @if let Some(rule) = &v.flag_rule {
                p #flag-rule .small .muted { (rule) }
            }
        }
    }
}

fn charts(v: &ReportView) -> Markup {
    html! {
        section #charts {
            h2 { "Charts" }
            div .charts {
                figure {
                    @match &v.rates {
                        Some(chart) => { (chart) }
                        None => { p .muted { "No groups to draw." } }
                    }
                    figcaption { (v.rates_caption) }
                }
                figure {
                    @match &v.funnel {
                        Some(chart) => { (chart) }
                        None => {
                            p .muted #funnel-missing {
                                "No funnel: the pooled rate is 0 or 100%, so there are no limits to draw."
                            }
                        }
                    }
                    figcaption { (v.funnel_caption) }
                }
            }
        }
    }
}

fn pair_head(p: &PairsView) -> Markup {
    html! {
        thead { tr {
            th scope="col" { "Pair (A \u{2013} B)" }
            th scope="col" { "Difference A \u{2212} B" }
            th scope="col" { (p.conf) " interval (Newcombe)" }
            th scope="col" { "Test" }
            th scope="col" { "p" }
            th scope="col" { "p (" (p.adjust) ")" }
            th scope="col" { "Significant" }
            @if let Some(h) = &p.beyond_head { th scope="col" { (h) } }
        } }
    }
}

fn pair_row(p: &PairView) -> Markup {
    html! {
        tr class=[p.significant.then_some("significant")] {
            th scope="row" { (p.a) " \u{2013} " (p.b) }
            td { (p.difference) }
            td { (p.interval) }
            @match &p.untestable {
                Some(reason) => {
                    td .wrap { span .tag .untestable { "no test" } " " span .small .muted { (reason) } }
                }
                None => { td { (p.method) } }
            }
            td { (p_cell(&p.p, &p.p_title)) }
            td { (p.p_adjusted) }
            td { @if p.significant { span .tag .significant { "yes" } } @else { "no" } }
            @if let Some(b) = p.beyond { td { (b) } }
        }
    }
}

fn pairwise(v: &ReportView) -> Markup {
    let p = &v.pairs;
    html! {
        section #pairwise-section {
            h2 { "Pairwise comparisons" }
            @if let Some(empty) = &p.empty {
                p .muted { (empty) }
            } @else {
                p #pairwise-summary { (p.summary) }
                div .scroll {
                    table #pairwise {
                        (pair_head(p))
                        tbody { @for row in &p.shown { (pair_row(row)) } }
                    }
                }
                @if !p.rest.is_empty() {
                    details {
                        summary { (p.rest_summary) }
                        div .scroll {
                            table #pairwise-rest {
                                (pair_head(p))
                                tbody { @for row in &p.rest { (pair_row(row)) } }
                            }
                        }
                    }
                }
            }
        }
    }
}

fn flagged(v: &ReportView) -> Markup {
    html! {
        section #flagged-section {
            h2 { "Flagged contributors" }
            @if v.flagged.is_empty() {
                p .muted { "No " (v.plural) " beyond the flag limit." }
            } @else {
                div .scroll {
                    table #flagged {
                        thead { tr {
                            th scope="col" { "Group" }
                            th scope="col" { "Direction" }
                            th scope="col" { "Rate" }
                            th scope="col" { "Adjusted residual" }
                            th scope="col" { "Share of X\u{00b2}" }
                        } }
                        tbody {
                            @for f in &v.flagged {
                                tr data-name=(f.code) {
                                    th scope="row" { (f.code) }
                                    td { (flag_tag_markup(Some(f.flag))) }
                                    td { (f.rate) }
                                    td { (f.residual) }
                                    td { (f.share) }
                                }
                            }
                        }
                    }
                }
                p .small .muted {
                    "Largest share of the chi-square statistic first. A flag says a group's rate is far from the pooled rate of these "
                    (v.plural) " in this period; it is relative to the others, not a verdict on the group alone."
                }
            }
        }
    }
}

fn categories(c: &CategoriesView) -> Markup {
    html! {
        section #categories-section {
            h2 { "Defect categories" }
            div .split {
                div .scroll {
                    table #categories {
                        thead { tr {
                            th scope="col" { "Category" }
                            th scope="col" { "Defects" }
                            th scope="col" { "Share" }
                        } }
                        tbody {
                            @for (name, defects, share) in &c.totals {
                                tr { th scope="row" { (name) } td { (defects) } td { (share) } }
                            }
                        }
                    }
                }
                div {
                    p { (c.words) }
                    @if !c.columns.is_empty() {
                        div .scroll {
                            table #category-mix {
                                thead { tr {
                                    th scope="col" { "Group" }
                                    @for col in &c.columns { th scope="col" { (col) } }
                                } }
                                tbody {
                                    @for (row, cells) in &c.rows {
                                        tr {
                                            th scope="row" { (row) }
                                            @for cell in cells {
                                                @match cell {
                                                    Some(m) => {
                                                        td class=[m.strong.then_some("strong")] title=(m.title) {
                                                            (m.observed) " " span .res { "(" (m.residual) ")" }
                                                        }
                                                    }
                                                    None => { td {} }
                                                }
                                            }
                                        }
                                    }
                                }
                            }
                        }
                        p .small .muted {
                            "Defects counted, with the adjusted residual in brackets; bold where it is beyond \u{00b1}3 (a reading aid, not a test)."
                        }
                    }
                }
            }
        }
    }
}

fn samples(v: &ReportView) -> Markup {
    html! {
        section #samples {
            h2 { "Sample sizes" }
            (facts(&v.samples))
            @if !v.excluded.is_empty() {
                h3 { "Excluded" }
                ul #excluded {
                    @for (code, reason) in &v.excluded {
                        li { strong { (code) } ": " (reason) }
                    }
                }
            }
        }
    }
}

fn report_body(v: &ReportView, report: &Report, ctx: &PageContext) -> Markup {
    html! {
        (picker(ctx))
        p .report-title #report-title { (v.title) }
        @if let Some(n) = &ctx.notice { p .notice #notice { (n) } }
        (verdict(v))
        (super::fair::beside_verdict(report))
        (groups_table(v))
        (charts(v))
        (pairwise(v))
        (flagged(v))
        (super::fair::product_mix(report))
        @if let Some(c) = &v.categories { (categories(c)) }
        (samples(v))
        section #method {
            h2 { "How this was computed" }
            (facts(&v.method))
            @if let Some(chart) = &v.reference {
                figure #reference {
                    (chart)
                    figcaption {
                        "The reference distribution of the test: shaded, the upper tail beyond the critical value (dashed); solid, this report's statistic."
                        @if chart.log_scale { " The statistic is far beyond the critical value, so the horizontal axis is on a log scale." }
                    }
                }
            }
        }
        section #cautions-section {
            h2 { "Cautions" }
            ul #cautions { @for c in &v.cautions { li { (code_spans(c)) } } }
        }
        @if let Some(q) = &v.json_query {
            footer .small .muted {
                "The same report as JSON: " code { "GET /v1/reports?" (q) } " with an API key."
            }
        }
    }
}

/// The HTML report page of `report`.
pub fn render_report(report: &Report, ctx: &PageContext) -> String {
    let view = ReportView::of(report);
    document(
        &format!("{} \u{2014} dispar", view.title),
        ctx.viewer.as_ref(),
        Nav::Report,
        report_body(&view, report, ctx),
    )
}

fn problem_box(message: &str, details: &[String]) -> Markup {
    html! {
        section #problem .problem role="alert" {
            h1 { (code_spans(message)) }
            @if !details.is_empty() {
                ul { @for d in details { li { (code_spans(d)) } } }
            }
        }
    }
}

/// The report page with the pickers and a problem instead of a report (a period that
/// does not parse, a missing site, a store that does not answer).
pub fn render_report_problem(ctx: &PageContext, message: &str, details: &[String]) -> String {
    document(
        "Report \u{2014} dispar",
        ctx.viewer.as_ref(),
        Nav::Report,
        html! { (picker(ctx)) (problem_box(message, details)) },
    )
}

fn series_picker(from: &str, to: &str, ctx: &PageContext) -> Markup {
    let sel = &ctx.selection;
    html! {
        form #picker .picker method="get" action="/series" {
            label { "From" input #from name="from" value=(from) size="12" spellcheck="false" autocomplete="off"; }
            label { "To" input #to name="to" value=(to) size="12" spellcheck="false" autocomplete="off"; }
            (level_select(sel))
            (site_select(ctx))
            (hidden_extra(sel))
            button type="submit" { "Show" }
            p .help { "Periods of one kind: weeks (2026-W10 to 2026-W26), months (2026-01 to 2026-06), quarters or years." }
        }
    }
}

fn series_body(view: &SeriesView, page: &SeriesPage, ctx: &PageContext) -> Markup {
    html! {
        (series_picker(&view.from, &view.to, ctx))
        section #verdict class=(page.class) {
            h1 { (page.headline) }
            p .verdict-line { (page.line) }
        }
        section {
            h2 { "Verdict per period" }
            figure {
                (page.chart)
                figcaption {
                    "Top row: filled where the difference between the groups is significant, outlined where it is not significant, dashed grey where the period could not be tested. Below: "
                    (flag_mark(Some(Flag::Above))) " flagged above, " (flag_mark(Some(Flag::Below)))
                    " flagged below that period's pooled rate; a ring (" (CHANGE) ") where the group changed against its own usual, solid worse, dashed better (groups never flagged nor changed are not shown). Each column opens that period's report."
                }
            }
        }
        section {
            h2 { "Periods" }
            div .scroll {
                table #series {
                    thead { tr {
                        th scope="col" { "Period" }
                        th scope="col" { "Inspected" }
                        th scope="col" { "Defective" }
                        th scope="col" { "Rate" }
                        th scope="col" { "Groups" }
                        th scope="col" { "Test" }
                        th scope="col" { "p" }
                        th scope="col" { "Verdict" }
                        th scope="col" { "Flagged" }
                        th scope="col" { "Changed against its usual" }
                    } }
                    tbody {
                        @for r in &page.rows {
                            tr data-period=(r.period) title=(r.title) {
                                th scope="row" { a href=(r.href) { (r.period) } }
                                td { (r.inspected) }
                                td { (r.defective) }
                                td { (r.rate) }
                                td { (r.groups) }
                                td { (r.method) }
                                td {
                                    @match &r.p {
                                        Some((p, title)) => { (p_cell(p, title)) }
                                        None => { "\u{2014}" }
                                    }
                                }
                                td { span class={ "tag " (r.verdict.class()) } { (r.verdict.words()) } }
                                td .wrap {
                                    @for (i, (code, flag)) in r.flagged.iter().enumerate() {
                                        @if i > 0 { " " }
                                        span class={ "flag " (flag.as_str()) } { (code) " " (flag_mark(Some(*flag))) }
                                    }
                                }
                                td .wrap {
                                    @for (i, (code, verdict, title)) in r.changes.iter().enumerate() {
                                        @if i > 0 { " " }
                                        span class={ "tag baseline " (verdict.as_str()) } title=(title) {
                                            (code) " " (CHANGE) " " (verdict.as_str())
                                        }
                                    }
                                }
                            }
                        }
                    }
                }
            }
            p .small .muted {
                (flag_mark(Some(Flag::Above))) " flagged above the pooled rate of its period, "
                (flag_mark(Some(Flag::Below))) " below. " (CHANGE)
                " worse or better: the group against its own usual over its earlier periods, with a limit that keeps such calls rare across the groups. Each period is tested on its own; with many periods, some significant differences appear by chance."
            }
        }
        @if !page.trends.is_empty() {
            (trends_section(view, page))
        }
    }
}

fn trends_section(view: &SeriesView, page: &SeriesPage) -> Markup {
    html! {
        section {
            h2 { "Trends" }
            div .scroll {
                table #trends {
                    thead { tr {
                        th scope="col" { "Group" }
                        th scope="col" { "Direction" }
                        th scope="col" { "Slope a " (page.unit) }
                        th scope="col" { "p (widened)" }
                    } }
                    tbody {
                        @for t in &page.trends {
                            tr data-code=(t.code) title=(t.title) {
                                th scope="row" { (t.code) }
                                @match (&t.direction, &t.reason) {
                                    (Some(d), _) => {
                                        td { span class={ "tag trend " (d.as_str()) } { (t.words) } }
                                        td { (t.slope) }
                                        td {
                                            @match &t.p {
                                                Some((p, title)) => { (p_cell(p, title)) }
                                                None => { "\u{2014}" }
                                            }
                                        }
                                    }
                                    (None, reason) => {
                                        td .muted colspan="3" { (reason.as_deref().unwrap_or("\u{2014}")) }
                                    }
                                }
                            }
                        }
                    }
                }
            }
            p .small .muted {
                "Each group's rate across the periods of the series: the Cochran\u{2013}Armitage test for a trend, its p widened when the periods scatter around the line more than sampling alone would make them, so a line's usual ups and downs are not called a trend. Rising or falling where significant at \u{03b1} = "
                (view.alpha) ", steady otherwise; a trend can build up by so little each period that no single period is a change."
            }
        }
    }
}

/// The series page: a strip chart of the verdict per period and a table.
pub fn render_series(view: &SeriesView, ctx: &PageContext) -> String {
    let page = SeriesPage::of(view, ctx);
    document(
        &format!("Verdicts {} to {} \u{2014} dispar", view.from, view.to),
        ctx.viewer.as_ref(),
        Nav::Series,
        series_body(view, &page, ctx),
    )
}

/// The series page with the pickers and a problem instead of a series.
pub fn render_series_problem(
    from: &str,
    to: &str,
    ctx: &PageContext,
    message: &str,
    details: &[String],
) -> String {
    document(
        "Series \u{2014} dispar",
        ctx.viewer.as_ref(),
        Nav::Series,
        html! { (series_picker(from, to, ctx)) (problem_box(message, details)) },
    )
}

/// The sign-in page: one password field for an API key with read access, posted to
/// `/sign-in`. `next` is the page to return to (a local path, already checked).
pub fn render_sign_in(message: Option<&str>, next: Option<&str>) -> String {
    let body = html! {
        section #sign-in .narrow {
            h1 { "Sign in" }
            p {
                "Paste an API key with read access (a " strong { "read" } " or " strong { "admin" }
                " key; it starts with " code { "dsp_" } "). It is checked once and exchanged for a session that ends when you sign out or after 12 hours; the key itself is not kept in the browser."
            }
            @if let Some(m) = message {
                p #sign-in-problem .problem-line role="alert" { (code_spans(m)) }
            }
            form #sign-in-form method="post" action="/sign-in" {
                label { "API key"
                    input #key name="key" type="password" autocomplete="off" spellcheck="false" required size="40";
                }
                @if let Some(n) = next { input type="hidden" name="next" value=(n); }
                button type="submit" { "Sign in" }
            }
            p .small .muted {
                "No key? Whoever runs this server makes one with " code { "dispar keys create --role read" } "."
            }
        }
    };
    document("Sign in \u{2014} dispar", None, Nav::None, body)
}

/// The page of a problem type (`/problems/{slug}`): its title, status, type URI and
/// description, with the description's `code` spans shown as code.
pub fn render_problem_type(title: &str, status: u16, type_uri: &str, description: &str) -> String {
    let body = html! {
        section #problem-type .narrow {
            h1 { (title) }
            p { "HTTP status " (status) ". Problem type " code { (type_uri) } "." }
            p #problem-description { (code_spans(description)) }
        }
    };
    document(&format!("{title} \u{2014} dispar"), None, Nav::None, body)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64_matches_rfc_4648_test_vectors() {
        // RFC 4648 section 10.
        for (input, want) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64(input.as_bytes()), want, "{input:?}");
        }
    }

    #[test]
    fn the_style_hash_is_a_sha256_source_expression() {
        let h = style_hash();
        assert!(h.starts_with("'sha256-") && h.ends_with("='"), "{h}");
        assert_eq!(h.len(), "'sha256-".len() + 44 + 1);
    }
}
