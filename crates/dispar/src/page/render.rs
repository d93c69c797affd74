//! HTML rendering of the pages: pure functions from a [`Report`] (or a series of
//! [`SeriesPoint`]s) and a [`PageContext`] to a complete HTML5 document.
//!
//! The report page reads top to bottom in the order a quality engineer asks: the
//! verdict in words, the per-group table, the two charts, the pairwise comparisons,
//! the flagged groups, the defect categories, the sample sizes, how it was computed,
//! and the cautions. Every piece of text is escaped ([`escape`]); the page needs no
//! script, and prints on paper (`@media print`).

use std::fmt::Write as _;
use std::sync::OnceLock;

use dispar_core::date::format_date;
use dispar_core::report::model::{Flag, GroupRow, PairRow, TableAnalysis, Test};
use dispar_core::report::text::method_words;
use dispar_core::report::{LevelKind, Report, SeriesPoint};

use super::charts::{confidence_words, funnel_chart, rates_chart, series_chart};
use super::format::{
    escape, fmt_count, fmt_log10_p, fmt_num, fmt_p, fmt_pct, fmt_pp, fmt_share, fmt_signed,
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

/// Who is signed in (shown in the header, with the sign-out button).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Viewer {
    /// The API key's id.
    pub key_id: i64,
    /// Its role (`read` or `admin`).
    pub role: String,
}

/// A site for the site picker.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SiteChoice {
    /// Site code.
    pub code: String,
    /// Site name.
    pub name: String,
}

/// What the pickers show, as the person chose it (strings, possibly invalid).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Selection {
    /// The period as typed (`2026-W16`).
    pub period: String,
    /// The level.
    pub level: LevelKind,
    /// The site, for `level=line`.
    pub site: Option<String>,
    /// Other parameters passed through to the computation (`alpha=`, …), kept in
    /// links and forms.
    pub extra: Vec<(String, String)>,
}

impl Selection {
    /// The report page of `period` with this selection.
    pub fn report_href(&self, period: &str) -> String {
        report_href(period, self.level, self.site.as_deref(), &self.extra)
    }

    /// Hidden form fields for [`Selection::extra`].
    fn hidden_extra(&self) -> String {
        let mut s = String::new();
        for (name, value) in &self.extra {
            let _ = write!(
                s,
                "<input type=\"hidden\" name=\"{}\" value=\"{}\">",
                escape(name),
                escape(value)
            );
        }
        s
    }
}

/// `/report?period=…&level=…[&site=…][&alpha=…]`.
pub fn report_href(
    period: &str,
    level: LevelKind,
    site: Option<&str>,
    extra: &[(String, String)],
) -> String {
    let mut q = form_urlencoded::Serializer::new(String::new());
    q.append_pair("period", period);
    q.append_pair("level", level.as_str());
    if level == LevelKind::Line
        && let Some(site) = site
    {
        q.append_pair("site", site);
    }
    for (name, value) in extra {
        q.append_pair(name, value);
    }
    format!("/report?{}", q.finish())
}

/// Everything around a report that the page shows: who is signed in, the pickers,
/// the neighbouring periods.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PageContext {
    /// The signed-in key (None on pages shown before sign-in).
    pub viewer: Option<Viewer>,
    /// The pickers' state.
    pub selection: Selection,
    /// Sites for the site picker.
    pub sites: Vec<SiteChoice>,
    /// The period before, as text (`2026-W15`).
    pub previous: Option<String>,
    /// The period after.
    pub next: Option<String>,
    /// A note above the verdict (for example why this period was chosen).
    pub notice: Option<String>,
}

/// Which navigation entry is current.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Nav {
    Report,
    Series,
    None,
}

/// The document shell: head with the style sheet, the top bar, `main`.
fn document(title: &str, viewer: Option<&Viewer>, nav: Nav, body: &str) -> String {
    let mut s = String::with_capacity(body.len() + STYLE.len() + 1024);
    let _ = write!(
        s,
        "<!doctype html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<meta name=\"referrer\" content=\"same-origin\">\n<link rel=\"icon\" href=\"/favicon.svg\" type=\"image/svg+xml\">\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<header class=\"top\"><a class=\"brand\" href=\"/report\">dispar</a>",
        escape(title)
    );
    if let Some(v) = viewer {
        let current = |n: Nav| {
            if n == nav {
                " aria-current=\"page\""
            } else {
                ""
            }
        };
        let _ = write!(
            s,
            "<nav><a href=\"/report\"{}>Report</a><a href=\"/series\"{}>Series</a></nav><form class=\"who\" method=\"post\" action=\"/sign-out\"><span>key {} \u{00b7} {}</span><button type=\"submit\" class=\"quiet\">Sign out</button></form>",
            current(Nav::Report),
            current(Nav::Series),
            v.key_id,
            escape(&v.role)
        );
    }
    s.push_str("</header>\n<main>\n");
    s.push_str(body);
    s.push_str("</main>\n</body>\n</html>\n");
    s
}

/// Words for what is compared: (capitalised plural, plural, singular).
fn units(level: Option<LevelKind>, site: Option<&str>) -> (String, &'static str, &'static str) {
    match level {
        Some(LevelKind::Site) => ("Sites".to_owned(), "sites", "site"),
        Some(LevelKind::Line) => (
            match site {
                Some(s) => format!("Lines of {s}"),
                None => "Lines".to_owned(),
            },
            "lines",
            "line",
        ),
        Some(LevelKind::AllLines) => ("Lines".to_owned(), "lines", "line"),
        None => ("Groups".to_owned(), "groups", "group"),
    }
}

/// `(p = 0.0004, Pearson chi-square, 4 df)`.
fn test_brief(t: &Test) -> String {
    let p = fmt_p(t.p_value);
    match t.method {
        "monte-carlo" => format!(
            "p = {p}{}, {}{}",
            t.p_std_error
                .map(|se| format!(" \u{00b1} {}", fmt_p(se)))
                .unwrap_or_default(),
            method_words(t.method),
            t.resamples
                .map(|r| format!(", {} resamples", fmt_count(r)))
                .unwrap_or_default()
        ),
        "fisher" => format!("p = {p}, {}", method_words(t.method)),
        m => format!("p = {p}, {}, {} df", method_words(m), t.df),
    }
}

/// A `<span>` with the p-value and its log10 as a tooltip.
fn p_cell(p: f64, log10_p: f64) -> String {
    format!(
        "<span title=\"{}\">{}</span>",
        escape(&fmt_log10_p(log10_p)),
        escape(&fmt_p(p))
    )
}

fn flag_tag(flag: Option<Flag>) -> &'static str {
    match flag {
        Some(Flag::Above) => "<span class=\"tag above\">above</span>",
        Some(Flag::Below) => "<span class=\"tag below\">below</span>",
        None => "",
    }
}

fn group_label(g: &GroupRow) -> String {
    match &g.name {
        Some(l) if l != &g.code => format!(
            "<span class=\"name\">{}</span> <span class=\"label\">{}</span>",
            escape(&g.code),
            escape(l)
        ),
        _ => format!("<span class=\"name\">{}</span>", escape(&g.code)),
    }
}

/// The verdict section (`#verdict`): what the test says, which groups stand out, the
/// pooled rate and the sample behind it.
fn verdict(report: &Report, out: &mut String) {
    let site = report.filters.site.as_ref().map(|s| s.as_str());
    let (cap, plural, singular) = units(report.level, site);
    let (class, headline, detail) = match (&report.test, &report.not_testable) {
        (None, _) if report.totals.inspected == 0 => (
            "untestable",
            "No data".to_owned(),
            format!(
                "No units were inspected in {}: there is nothing to compare.",
                report
                    .period
                    .map_or_else(|| "this period".to_owned(), |p| p.to_string())
            ),
        ),
        (Some(t), _) if t.significant => (
            "differ",
            format!("{cap} differ in defect rate"),
            format!("{cap} differ in defect rate ({}).", test_brief(t)),
        ),
        (Some(t), _) => (
            "same",
            format!("No significant difference between the {plural}"),
            format!(
                "No statistically significant difference in defect rate between the {plural} ({}). This is not proof that they are equal.",
                test_brief(t)
            ),
        ),
        (None, Some(n)) => (
            "untestable",
            "Not testable".to_owned(),
            format!("Not testable: {}.", n.reason.trim_end_matches('.')),
        ),
        (None, None) => ("untestable", "Not testable".to_owned(), String::new()),
    };
    let _ = write!(
        out,
        "<section id=\"verdict\" class=\"{class}\" aria-live=\"polite\"><h1>{}</h1><p class=\"verdict-line\">{}</p>",
        escape(&headline),
        escape(&detail)
    );
    if report.test.is_some() {
        let pooled = fmt_pct(report.totals.rate);
        if report.flagged.is_empty() {
            let _ = write!(
                out,
                "<p id=\"flag-summary\">No {singular} is flagged: none is beyond the flag limit on its own{}.</p>",
                if report.test.as_ref().is_some_and(|t| t.significant) {
                    format!("; the difference is spread over several {plural}")
                } else {
                    String::new()
                }
            );
        } else {
            let n = report.flagged.len();
            let items: Vec<String> = report
                .flagged
                .iter()
                .map(|f| {
                    format!(
                        "<strong>{}</strong> {} the pooled rate ({} against {pooled})",
                        escape(&f.code),
                        f.flag.as_str(),
                        fmt_pct(f.rate)
                    )
                })
                .collect();
            let _ = write!(
                out,
                "<p id=\"flag-summary\">{n} {} flagged: {}.</p>",
                if n == 1 { singular } else { plural },
                items.join(", ")
            );
        }
    }
    let t = &report.totals;
    let _ = writeln!(
        out,
        "<p class=\"muted\">Pooled defect rate {} ({} defective of {} inspected, {} {}).</p></section>",
        fmt_pct(t.rate),
        fmt_count(t.defective),
        fmt_count(t.inspected),
        t.group_count,
        if t.group_count == 1 { singular } else { plural }
    );
}

fn groups_table(report: &Report, out: &mut String) {
    let conf = confidence_words(report.parameters.alpha);
    let _ = write!(
        out,
        "<section id=\"groups-section\"><h2>Groups</h2><div class=\"scroll\"><table id=\"groups\"><thead><tr><th scope=\"col\">Group</th><th scope=\"col\">Inspected</th><th scope=\"col\">Defective</th><th scope=\"col\">Rate</th><th scope=\"col\">{conf} Wilson interval</th><th scope=\"col\">Expected defective</th><th scope=\"col\" title=\"Adjusted standardized residual of the defective count (the analysis-of-means z-score)\">Adjusted residual</th><th scope=\"col\">Flag</th><th scope=\"col\">Share of X\u{00b2}</th></tr></thead><tbody>"
    );
    for g in &report.groups {
        let class = match g.flag {
            Some(Flag::Above) => " class=\"flag-above\"",
            Some(Flag::Below) => " class=\"flag-below\"",
            None => "",
        };
        let _ = write!(
            out,
            "<tr{class} data-name=\"{}\"><th scope=\"row\">{}</th><td>{}</td><td>{}</td><td>{}</td><td>{} \u{2013} {}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&g.code),
            group_label(g),
            fmt_count(g.inspected),
            fmt_count(g.defective),
            fmt_pct(g.rate),
            fmt_pct(g.rate_ci.lower),
            fmt_pct(g.rate_ci.upper),
            fmt_num(g.expected, 1),
            g.adjusted_residual
                .map(fmt_signed)
                .unwrap_or_else(|| "\u{2014}".to_owned()),
            flag_tag(g.flag),
            g.share_of_statistic
                .map(fmt_share)
                .unwrap_or_else(|| "\u{2014}".to_owned()),
        );
    }
    let t = &report.totals;
    let _ = write!(
        out,
        "</tbody><tfoot><tr><th scope=\"row\">All ({})</th><td>{}</td><td>{}</td><td>{}</td><td></td><td></td><td></td><td></td><td></td></tr></tfoot></table></div>",
        t.group_count,
        fmt_count(t.inspected),
        fmt_count(t.defective),
        fmt_pct(t.rate)
    );
    if let (Some(o), Some(rule)) = (&report.overdispersion, &report.flag_rule) {
        let _ = write!(
            out,
            "<p class=\"small muted\">A group is flagged when its adjusted residual is beyond \u{00b1}{} (the analysis-of-means critical value h = {} for {} groups at alpha = {}{}). Intervals are {conf} Wilson score intervals.</p>",
            fmt_num(rule.limit, 2),
            fmt_num(rule.critical_value, 2),
            t.group_count,
            report.parameters.alpha,
            if o.applied {
                format!(", widened by sqrt(phi) = {}", fmt_num(o.phi.sqrt(), 2))
            } else {
                String::new()
            }
        );
    }
    out.push_str("</section>\n");
}

fn charts(report: &Report, out: &mut String) {
    out.push_str("<section id=\"charts\"><h2>Charts</h2><div class=\"charts\">");
    out.push_str("<figure>");
    match rates_chart(report) {
        Some(svg) => out.push_str(&svg),
        None => out.push_str("<p class=\"muted\">No groups to draw.</p>"),
    }
    let _ = write!(
        out,
        "<figcaption>Each group's rate with its {} interval; dashed: the pooled rate.</figcaption></figure><figure>",
        confidence_words(report.parameters.alpha)
    );
    match funnel_chart(report) {
        Some(svg) => out.push_str(&svg),
        None => out.push_str(
            "<p class=\"muted\" id=\"funnel-missing\">No funnel: the pooled rate is 0 or 100%, so there are no limits to draw.</p>",
        ),
    }
    let widened = report
        .overdispersion
        .as_ref()
        .is_some_and(|o| o.applied && o.phi > 1.0);
    let _ = write!(
        out,
        "<figcaption>Rate against units inspected, with 95% and 99.8% limits around the pooled rate for a group of each size (normal approximation{}). A reading aid: the flags come from the analysis of means.</figcaption></figure>",
        if widened {
            ", widened for overdispersion"
        } else {
            ""
        }
    );
    out.push_str("</div></section>\n");
}

fn pair_row(p: &PairRow, with_practical: bool, out: &mut String) {
    let _ = write!(
        out,
        "<tr{}><th scope=\"row\">{} \u{2013} {}</th><td>{}</td><td>{} to {}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td>",
        if p.significant {
            " class=\"significant\""
        } else {
            ""
        },
        escape(&p.a),
        escape(&p.b),
        fmt_pp(p.difference),
        fmt_pp(p.difference_ci.lower),
        fmt_pp(p.difference_ci.upper),
        escape(method_words(p.method)),
        p_cell(p.p_value, p.log10_p),
        escape(&fmt_p(p.p_adjusted)),
        if p.significant { "differ" } else { "\u{2014}" },
    );
    if with_practical {
        let _ = write!(
            out,
            "<td>{}</td>",
            match p.beyond_min_difference {
                Some(true) => "yes",
                Some(false) => "not shown",
                None => "",
            }
        );
    }
    out.push_str("</tr>");
}

fn pairwise(report: &Report, out: &mut String) {
    out.push_str("<section id=\"pairwise-section\"><h2>Pairs</h2>");
    if report.pairs.is_empty() {
        out.push_str("<p class=\"muted\">No pairwise comparisons");
        if report.test.is_none() {
            out.push_str(" (there is no test)");
        }
        out.push_str(".</p></section>\n");
        return;
    }
    let adjust = adjust_words(report.parameters.adjust.as_str());
    let conf = confidence_words(report.parameters.alpha);
    let with_practical = report.parameters.min_difference.is_some();
    let mut pairs: Vec<&PairRow> = report.pairs.iter().collect();
    pairs.sort_by(|a, b| {
        b.significant
            .cmp(&a.significant)
            .then(a.p_adjusted.total_cmp(&b.p_adjusted))
            .then(a.log10_p.total_cmp(&b.log10_p))
    });
    let significant = pairs.iter().filter(|p| p.significant).count();
    let _ = write!(
        out,
        "<p>{significant} of {} pairs differ at alpha = {} after {adjust} adjustment of the p-values.</p>",
        pairs.len(),
        report.parameters.alpha
    );
    let head = format!(
        "<thead><tr><th scope=\"col\">Pair (A \u{2013} B)</th><th scope=\"col\">Difference A \u{2212} B</th><th scope=\"col\">{conf} interval (Newcombe)</th><th scope=\"col\">Test</th><th scope=\"col\">p</th><th scope=\"col\">p ({adjust})</th><th scope=\"col\">Verdict</th>{}</tr></thead>",
        if with_practical {
            format!(
                "<th scope=\"col\">Beyond {} pp</th>",
                fmt_num(report.parameters.min_difference.unwrap_or(0.0) * 100.0, 2)
            )
        } else {
            String::new()
        }
    );
    let (shown, rest): (Vec<&PairRow>, Vec<&PairRow>) = if significant > 0 {
        pairs.iter().partition(|p| p.significant)
    } else {
        (pairs.clone(), Vec::new())
    };
    let _ = write!(
        out,
        "<div class=\"scroll\"><table id=\"pairwise\">{head}<tbody>"
    );
    for p in &shown {
        pair_row(p, with_practical, out);
    }
    out.push_str("</tbody></table></div>");
    if !rest.is_empty() {
        let _ = write!(
            out,
            "<details><summary>{} pairs without a significant difference</summary><div class=\"scroll\"><table id=\"pairwise-rest\">{head}<tbody>",
            rest.len()
        );
        for p in &rest {
            pair_row(p, with_practical, out);
        }
        out.push_str("</tbody></table></div></details>");
    }
    out.push_str("</section>\n");
}

fn adjust_words(code: &str) -> &'static str {
    match code {
        "holm" => "Holm",
        "bonferroni" => "Bonferroni",
        "hochberg" => "Hochberg",
        "bh" => "Benjamini-Hochberg",
        _ => "multiple-comparison",
    }
}

fn flagged(report: &Report, out: &mut String) {
    let (_, plural, _) = units(report.level, None);
    out.push_str("<section id=\"flagged-section\"><h2>Flagged</h2>");
    if report.flagged.is_empty() {
        let _ = writeln!(
            out,
            "<p class=\"muted\">No {plural} beyond the flag limit.</p></section>"
        );
        return;
    }
    out.push_str("<div class=\"scroll\"><table id=\"flagged\"><thead><tr><th scope=\"col\">Group</th><th scope=\"col\">Direction</th><th scope=\"col\">Rate</th><th scope=\"col\">Adjusted residual</th><th scope=\"col\">Share of X\u{00b2}</th></tr></thead><tbody>");
    for f in &report.flagged {
        let _ = write!(
            out,
            "<tr data-name=\"{}\"><th scope=\"row\">{}</th><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&f.code),
            escape(&f.code),
            flag_tag(Some(f.flag)),
            fmt_pct(f.rate),
            fmt_signed(f.adjusted_residual),
            fmt_share(f.share_of_statistic)
        );
    }
    let _ = writeln!(
        out,
        "</tbody></table></div><p class=\"small muted\">Largest share of the chi-square statistic first. A flag says a group's rate is far from the pooled rate of these {plural} in this period; it is relative to the others, not a verdict on the group alone.</p></section>"
    );
}

fn association_words(a: &TableAnalysis) -> String {
    match (&a.test, &a.not_testable) {
        (Some(t), _) if t.significant => format!(
            "The defect mix differs between the groups ({}).",
            test_brief(t)
        ),
        (Some(t), _) => format!(
            "No significant difference in the defect mix between the groups ({}).",
            test_brief(t)
        ),
        (None, Some(n)) => format!(
            "The defect mix is not testable: {}.",
            n.reason.trim_end_matches('.')
        ),
        (None, None) => String::new(),
    }
}

fn categories(report: &Report, out: &mut String) {
    let Some(c) = &report.categories else {
        return;
    };
    out.push_str("<section id=\"categories-section\"><h2>Defect categories</h2>");
    out.push_str("<div class=\"split\"><div class=\"scroll\"><table id=\"categories\"><thead><tr><th scope=\"col\">Category</th><th scope=\"col\">Defects</th><th scope=\"col\">Share</th></tr></thead><tbody>");
    for t in &c.totals {
        let _ = write!(
            out,
            "<tr><th scope=\"row\">{}</th><td>{}</td><td>{}</td></tr>",
            escape(&t.category),
            fmt_count(t.defects),
            fmt_share(t.share)
        );
    }
    out.push_str("</tbody></table></div><div>");
    let a = &c.association;
    let _ = write!(out, "<p>{}</p>", escape(&association_words(a)));
    if !a.cells.is_empty() && !a.columns.is_empty() {
        out.push_str("<div class=\"scroll\"><table id=\"category-mix\"><thead><tr><th scope=\"col\">Group</th>");
        for col in &a.columns {
            let _ = write!(out, "<th scope=\"col\">{}</th>", escape(&col.code));
        }
        out.push_str("</tr></thead><tbody>");
        for row in &a.rows {
            let _ = write!(out, "<tr><th scope=\"row\">{}</th>", escape(&row.code));
            for col in &a.columns {
                match a
                    .cells
                    .iter()
                    .find(|cell| cell.row == row.code && cell.column == col.code)
                {
                    Some(cell) => {
                        let strong = cell.adjusted_residual.abs() >= 3.0;
                        let _ = write!(
                            out,
                            "<td{} title=\"expected {}, adjusted residual {}\">{} <span class=\"res\">({})</span></td>",
                            if strong { " class=\"strong\"" } else { "" },
                            escape(&fmt_num(cell.expected, 1)),
                            escape(&fmt_signed(cell.adjusted_residual)),
                            fmt_count(cell.observed),
                            fmt_signed(cell.adjusted_residual)
                        );
                    }
                    None => out.push_str("<td></td>"),
                }
            }
            out.push_str("</tr>");
        }
        out.push_str("</tbody></table></div><p class=\"small muted\">Defects counted, with the adjusted residual in brackets; bold where it is beyond \u{00b1}3 (a reading aid, not a test).</p>");
    }
    out.push_str("</div></div></section>\n");
}

fn sample_sizes(report: &Report, out: &mut String) {
    let t = &report.totals;
    out.push_str("<section id=\"samples\"><h2>Sample sizes</h2><dl class=\"facts\">");
    let _ = write!(
        out,
        "<dt>Groups compared</dt><dd>{}</dd><dt>Units inspected</dt><dd>{}</dd><dt>Units defective</dt><dd>{}</dd><dt>Pooled rate</dt><dd>{}</dd>",
        t.group_count,
        fmt_count(t.inspected),
        fmt_count(t.defective),
        fmt_pct(t.rate)
    );
    if let (Some(small), Some(large)) = (
        report.groups.iter().min_by_key(|g| g.inspected),
        report.groups.iter().max_by_key(|g| g.inspected),
    ) {
        let _ = write!(
            out,
            "<dt>Smallest group</dt><dd>{} ({} units)</dd><dt>Largest group</dt><dd>{} ({} units)</dd>",
            escape(&small.code),
            fmt_count(small.inspected),
            escape(&large.code),
            fmt_count(large.inspected)
        );
    }
    if let Some(d) = report.dates {
        let _ = write!(
            out,
            "<dt>Production dates</dt><dd>{} to {} ({} days)</dd>",
            format_date(d.first()),
            format_date(d.last()),
            d.days()
        );
    }
    out.push_str("</dl>");
    if !report.excluded.is_empty() {
        out.push_str("<p>Left out:</p><ul id=\"excluded\">");
        for e in &report.excluded {
            let _ = write!(
                out,
                "<li><strong>{}</strong>: {}</li>",
                escape(&e.code),
                escape(&e.reason)
            );
        }
        out.push_str("</ul>");
    }
    out.push_str("</section>\n");
}

fn method_notes(report: &Report, out: &mut String) {
    out.push_str("<section id=\"method\"><h2>How this was computed</h2><dl class=\"facts\">");
    if let Some(t) = &report.test {
        let stat_name = if t.method == "g" {
            "G\u{00b2}"
        } else {
            "X\u{00b2}"
        };
        let _ = write!(
            out,
            "<dt>Test</dt><dd>{} \u{2014} {}</dd><dt>Statistic</dt><dd>{stat_name} = {} on {} df (critical value {} at alpha = {})</dd><dt>p-value</dt><dd>{}{} <span class=\"muted\">({})</span></dd><dt>Effect size</dt><dd>Cram\u{00e9}r's V = {} (bias-corrected {})</dd>",
            escape(method_words(t.method)),
            escape(&t.method_reason),
            fmt_num(t.statistic, 2),
            t.df,
            fmt_num(t.critical_value, 2),
            report.parameters.alpha,
            escape(&fmt_p(t.p_value)),
            t.p_std_error
                .map(|se| format!(" \u{00b1} {} (Monte Carlo standard error)", fmt_p(se)))
                .unwrap_or_default(),
            escape(&fmt_log10_p(t.log10_p)),
            fmt_num(t.cramers_v, 3),
            fmt_num(t.cramers_v_corrected, 3),
        );
    }
    if let Some(v) = &report.validity {
        let _ = write!(
            out,
            "<dt>Validity</dt><dd>Cochran's rule {}: smallest expected count {}, {} of {} cells below 5, {} below 1.</dd>",
            if v.cochran_holds { "holds" } else { "fails" },
            fmt_num(v.min_expected, 2),
            v.cells_below_5,
            v.cells,
            v.cells_below_1
        );
    }
    if let Some(o) = &report.overdispersion {
        let _ = write!(out, "<dt>Overdispersion</dt><dd>{}</dd>", escape(&o.note));
    }
    let p = &report.parameters;
    let _ = write!(
        out,
        "<dt>Parameters</dt><dd>alpha = {}, method {}, pairwise {}, adjustment {}, {} Monte Carlo resamples{}{}{}</dd>",
        p.alpha,
        p.method,
        p.pairwise,
        adjust_words(p.adjust.as_str()),
        fmt_count(p.resamples),
        p.min_difference
            .map(|d| format!(
                ", minimum difference of interest {} pp",
                fmt_num(d * 100.0, 2)
            ))
            .unwrap_or_default(),
        format_args!(", overdispersion {}", p.overdispersion),
        p.as_of
            .as_deref()
            .map(|a| format!(", data as of {}", escape(a)))
            .unwrap_or_default(),
    );
    out.push_str("<dt>Sources</dt><dd>Pearson chi-square and likelihood-ratio tests of homogeneity; Fisher's exact test; Monte Carlo p-values over tables with the same margins (Patefield 1981); Wilson (1927) score intervals; Newcombe (1998) intervals for differences; Holm (1979) adjustment; adjusted residuals (Haberman 1973) compared with the analysis-of-means critical value; overdispersion after Spiegelhalter (2005).</dd>");
    out.push_str("</dl></section>\n");
}

fn cautions(report: &Report, out: &mut String) {
    out.push_str("<section id=\"cautions-section\"><h2>Read with care</h2><ul id=\"cautions\">");
    for c in &report.cautions {
        let _ = write!(out, "<li>{}</li>", escape(c));
    }
    out.push_str("</ul></section>\n");
}

fn level_options(selected: LevelKind) -> String {
    let mut s = String::new();
    for (kind, words) in [
        (LevelKind::Site, "sites"),
        (LevelKind::Line, "lines of one site"),
        (LevelKind::AllLines, "all lines"),
    ] {
        let _ = write!(
            s,
            "<option value=\"{}\"{}>{words}</option>",
            kind.as_str(),
            if kind == selected { " selected" } else { "" }
        );
    }
    s
}

fn site_options(sites: &[SiteChoice], selected: Option<&str>) -> String {
    let mut s = String::from("<option value=\"\">\u{2014}</option>");
    for site in sites {
        let _ = write!(
            s,
            "<option value=\"{}\"{}>{} \u{2013} {}</option>",
            escape(&site.code),
            if Some(site.code.as_str()) == selected {
                " selected"
            } else {
                ""
            },
            escape(&site.code),
            escape(&site.name)
        );
    }
    s
}

/// The period and level pickers (a plain GET form) with links to the neighbouring
/// periods.
fn picker(ctx: &PageContext, out: &mut String) {
    let sel = &ctx.selection;
    let _ = write!(
        out,
        "<form id=\"picker\" class=\"picker\" method=\"get\" action=\"/report\"><label>Period<input id=\"period\" name=\"period\" value=\"{}\" size=\"22\" spellcheck=\"false\" autocomplete=\"off\" aria-describedby=\"period-help\"></label><label>Compare<select id=\"level\" name=\"level\">{}</select></label><label>Site (for lines of one site)<select id=\"site\" name=\"site\">{}</select></label>{}<button type=\"submit\">Show</button>",
        escape(&sel.period),
        level_options(sel.level),
        site_options(&ctx.sites, sel.site.as_deref()),
        sel.hidden_extra()
    );
    out.push_str("<span class=\"step\">");
    if let Some(p) = &ctx.previous {
        let _ = write!(
            out,
            "<a rel=\"prev\" id=\"previous-period\" href=\"{}\">\u{2190} {}</a>",
            escape(&sel.report_href(p)),
            escape(p)
        );
    }
    if let Some(n) = &ctx.next {
        let _ = write!(
            out,
            "<a rel=\"next\" id=\"next-period\" href=\"{}\">{} \u{2192}</a>",
            escape(&sel.report_href(n)),
            escape(n)
        );
    }
    out.push_str("</span><p id=\"period-help\" class=\"help\">A week (2026-W16), month (2026-04), quarter (2026-Q2), year (2026), day (2026-04-14) or date range (2026-04-01..2026-04-19).</p></form>\n");
}

/// The title line of a report: `Defect rates by site · 2026-W16 · 2026-04-13 to 2026-04-19`.
fn report_title(report: &Report) -> String {
    let site = report.filters.site.as_ref().map(|s| s.as_str());
    let what = match report.level {
        Some(LevelKind::Site) | None => "Defect rates by site".to_owned(),
        Some(LevelKind::Line) => match site {
            Some(s) => format!("Defect rates by line of {s}"),
            None => "Defect rates by line".to_owned(),
        },
        Some(LevelKind::AllLines) => "Defect rates by line, all sites".to_owned(),
    };
    match (report.period, report.dates) {
        (Some(p), Some(d)) if d.first() == d.last() => format!("{what} \u{00b7} {p}"),
        (Some(p), Some(d)) => format!(
            "{what} \u{00b7} {p} \u{00b7} {} to {}",
            format_date(d.first()),
            format_date(d.last())
        ),
        (Some(p), None) => format!("{what} \u{00b7} {p}"),
        _ => what,
    }
}

/// The HTML report page of `report`.
pub fn render_report(report: &Report, ctx: &PageContext) -> String {
    let title = report_title(report);
    let mut body = String::with_capacity(64 * 1024);
    picker(ctx, &mut body);
    let _ = write!(
        body,
        "<p class=\"report-title\" id=\"report-title\">{}</p>",
        escape(&title)
    );
    if let Some(n) = &ctx.notice {
        let _ = write!(body, "<p class=\"notice\" id=\"notice\">{}</p>", escape(n));
    }
    verdict(report, &mut body);
    groups_table(report, &mut body);
    charts(report, &mut body);
    pairwise(report, &mut body);
    flagged(report, &mut body);
    categories(report, &mut body);
    sample_sizes(report, &mut body);
    method_notes(report, &mut body);
    cautions(report, &mut body);
    if let Some(p) = report.period {
        let mut q = form_urlencoded::Serializer::new(String::new());
        q.append_pair("period", &p.to_string());
        if let Some(level) = report.level {
            q.append_pair("level", level.as_str());
        }
        if let Some(site) = &report.filters.site {
            q.append_pair("site", site.as_str());
        }
        let _ = write!(
            body,
            "<footer class=\"small muted\">The same report as JSON: <code>GET /v1/reports?{}</code> with an API key.</footer>",
            escape(&q.finish())
        );
    }
    document(
        &format!("{title} \u{2014} dispar"),
        ctx.viewer.as_ref(),
        Nav::Report,
        &body,
    )
}

/// The report page with the pickers and a problem instead of a report (a period that
/// does not parse, a missing site, a store that does not answer).
pub fn render_report_problem(ctx: &PageContext, message: &str, details: &[String]) -> String {
    let mut body = String::new();
    picker(ctx, &mut body);
    problem_box(message, details, &mut body);
    document(
        "Report \u{2014} dispar",
        ctx.viewer.as_ref(),
        Nav::Report,
        &body,
    )
}

fn problem_box(message: &str, details: &[String], out: &mut String) {
    let _ = write!(
        out,
        "<section id=\"problem\" class=\"problem\" role=\"alert\"><h1>{}</h1>",
        escape(message)
    );
    if !details.is_empty() {
        out.push_str("<ul>");
        for d in details {
            let _ = write!(out, "<li>{}</li>", escape(d));
        }
        out.push_str("</ul>");
    }
    out.push_str("</section>\n");
}

/// The series page's data: periods in order with their verdicts.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesView {
    /// First period, as typed.
    pub from: String,
    /// Last period, as typed.
    pub to: String,
    /// Significance level the verdicts used.
    pub alpha: f64,
    /// One point per period, oldest first.
    pub points: Vec<SeriesPoint>,
}

fn series_picker(view_from: &str, view_to: &str, ctx: &PageContext, out: &mut String) {
    let sel = &ctx.selection;
    let _ = writeln!(
        out,
        "<form id=\"picker\" class=\"picker\" method=\"get\" action=\"/series\"><label>From<input id=\"from\" name=\"from\" value=\"{}\" size=\"12\" spellcheck=\"false\" autocomplete=\"off\"></label><label>To<input id=\"to\" name=\"to\" value=\"{}\" size=\"12\" spellcheck=\"false\" autocomplete=\"off\"></label><label>Compare<select id=\"level\" name=\"level\">{}</select></label><label>Site (for lines of one site)<select id=\"site\" name=\"site\">{}</select></label>{}<button type=\"submit\">Show</button><p class=\"help\">Periods of one kind: weeks (2026-W10 to 2026-W26), months (2026-01 to 2026-06), quarters or years.</p></form>",
        escape(view_from),
        escape(view_to),
        level_options(sel.level),
        site_options(&ctx.sites, sel.site.as_deref()),
        sel.hidden_extra()
    );
}

/// The series page: a strip chart of the verdict per period and a table.
pub fn render_series(view: &SeriesView, ctx: &PageContext) -> String {
    let sel = &ctx.selection;
    let mut body = String::with_capacity(32 * 1024);
    series_picker(&view.from, &view.to, ctx, &mut body);
    let (cap, plural, _) = units(Some(sel.level), sel.site.as_deref());
    let differ = view
        .points
        .iter()
        .filter(|p| p.significant == Some(true))
        .count();
    let tested = view
        .points
        .iter()
        .filter(|p| p.significant.is_some())
        .count();
    let _ = writeln!(
        body,
        "<section id=\"verdict\" class=\"{}\"><h1>{cap}: {} of {} periods differ</h1><p class=\"verdict-line\">From {} to {}: the {plural} differ in defect rate in {differ} of the {tested} periods that could be tested at alpha = {}{}.</p></section>",
        if differ > 0 { "differ" } else { "same" },
        differ,
        view.points.len(),
        escape(&view.from),
        escape(&view.to),
        view.alpha,
        if tested < view.points.len() {
            format!("; {} could not be tested", view.points.len() - tested)
        } else {
            String::new()
        },
    );
    let links: Vec<String> = view
        .points
        .iter()
        .map(|p| {
            let period = p.period.map(|x| x.to_string()).unwrap_or_default();
            sel.report_href(&period)
        })
        .collect();
    body.push_str("<section><h2>Verdict per period</h2><figure>");
    body.push_str(&series_chart(&view.points, view.alpha, &links));
    body.push_str("<figcaption>Top row: red where the groups differ, green where they do not, grey where the period could not be tested. Below: \u{25b2} flagged above, \u{25bc} flagged below that period's pooled rate (groups never flagged are not shown). Each column opens that period's report.</figcaption></figure></section>\n");
    body.push_str("<section><h2>Periods</h2><div class=\"scroll\"><table id=\"series\"><thead><tr><th scope=\"col\">Period</th><th scope=\"col\">Inspected</th><th scope=\"col\">Defective</th><th scope=\"col\">Rate</th><th scope=\"col\">Groups</th><th scope=\"col\">Test</th><th scope=\"col\">p</th><th scope=\"col\">Verdict</th><th scope=\"col\">Flagged</th></tr></thead><tbody>");
    for (p, href) in view.points.iter().zip(&links) {
        let period = p.period.map(|x| x.to_string()).unwrap_or_default();
        let rate = if p.inspected > 0 {
            fmt_pct(p.defective as f64 / p.inspected as f64)
        } else {
            "\u{2014}".to_owned()
        };
        let verdict = match p.significant {
            Some(true) => "<span class=\"tag above\">differ</span>",
            Some(false) => "<span class=\"tag same\">no difference</span>",
            None => "<span class=\"tag\">not testable</span>",
        };
        let flagged: Vec<String> = p
            .flagged
            .iter()
            .map(|f| {
                format!(
                    "<span class=\"flag {}\">{} {}</span>",
                    f.flag.as_str(),
                    escape(&f.code),
                    match f.flag {
                        Flag::Above => "\u{2191}",
                        Flag::Below => "\u{2193}",
                    }
                )
            })
            .collect();
        let _ = write!(
            body,
            "<tr data-period=\"{pd}\" title=\"{title}\"><th scope=\"row\"><a href=\"{href}\">{pd}</a></th><td>{}</td><td>{}</td><td>{rate}</td><td>{}</td><td>{}</td><td>{}</td><td>{verdict}</td><td class=\"wrap\">{}</td></tr>",
            fmt_count(p.inspected),
            fmt_count(p.defective),
            p.group_count,
            escape(p.method.map(method_words).unwrap_or("\u{2014}")),
            match (p.p_value, p.log10_p) {
                (Some(v), Some(l)) => p_cell(v, l),
                _ => "\u{2014}".to_owned(),
            },
            flagged.join(" "),
            pd = escape(&period),
            title = escape(&p.verdict),
            href = escape(href),
        );
    }
    body.push_str("</tbody></table></div><p class=\"small muted\">\u{2191} flagged above the pooled rate of its period, \u{2193} below. Each period is tested on its own; with many periods, some differences at alpha appear by chance.</p></section>\n");
    document(
        &format!("Verdicts {} to {} \u{2014} dispar", view.from, view.to),
        ctx.viewer.as_ref(),
        Nav::Series,
        &body,
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
    let mut body = String::new();
    series_picker(from, to, ctx, &mut body);
    problem_box(message, details, &mut body);
    document(
        "Series \u{2014} dispar",
        ctx.viewer.as_ref(),
        Nav::Series,
        &body,
    )
}

/// The sign-in page: one password field for the read key, posted to `/sign-in`.
/// `next` is the page to return to (a local path, already checked).
pub fn render_sign_in(message: Option<&str>, next: Option<&str>) -> String {
    let mut body = String::new();
    body.push_str("<section id=\"sign-in\" class=\"narrow\"><h1>Sign in</h1><p>Paste a <strong>read key</strong> (it starts with <code>dsp_</code>). It is checked once and exchanged for a session that ends when you sign out or after 12 hours; the key itself is not kept in the browser.</p>");
    if let Some(m) = message {
        let _ = write!(
            body,
            "<p id=\"sign-in-problem\" class=\"problem-line\" role=\"alert\">{}</p>",
            escape(m)
        );
    }
    body.push_str("<form id=\"sign-in-form\" method=\"post\" action=\"/sign-in\"><label>API key<input id=\"key\" name=\"key\" type=\"password\" autocomplete=\"off\" spellcheck=\"false\" required size=\"40\"></label>");
    if let Some(n) = next {
        let _ = write!(
            body,
            "<input type=\"hidden\" name=\"next\" value=\"{}\">",
            escape(n)
        );
    }
    body.push_str("<button type=\"submit\">Sign in</button></form><p class=\"small muted\">No key? Whoever runs this server makes one with <code>dispar keys create --role read</code>.</p></section>\n");
    document("Sign in \u{2014} dispar", None, Nav::None, &body)
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

    #[test]
    fn report_links_carry_the_site_only_for_lines_of_one_site() {
        assert_eq!(
            report_href("2026-W16", LevelKind::Site, Some("KES"), &[]),
            "/report?period=2026-W16&level=site"
        );
        assert_eq!(
            report_href(
                "2026-W16",
                LevelKind::Line,
                Some("K&S"),
                &[("alpha".to_owned(), "0.01".to_owned())]
            ),
            "/report?period=2026-W16&level=line&site=K%26S&alpha=0.01"
        );
    }
}
