//! View models of the pages: plain structs of words and formatted numbers, computed
//! from a [`Report`] (or a series) and the [`PageContext`]. They hold no markup; the
//! markup is in [`super::render`], which only lays these out.
//!
//! Page words follow the glossary: "significant" / "not significant at α = …",
//! "Pairwise comparisons", "Flagged contributors", "Flag rule", "Excluded",
//! "Cautions"; ▲ and ▼ for a flag above or below the pooled rate, everywhere; ◉ with
//! the word (`worse`, `better`) for a change against a group's own usual.

use dispar_core::date::format_date;
use dispar_core::report::baseline::{persistent_words, series_headline, unit_of};
use dispar_core::report::model::{
    Baseline, BaselineVerdict, Flag, GroupRow, PairRow, TableAnalysis, Test,
};
use dispar_core::report::text::method_words;
use dispar_core::report::trend::{Direction, GroupTrend, fmt_slope};
use dispar_core::report::{LevelKind, Report, SeriesPoint};

use super::charts::{
    CHANGE, FunnelChart, RatesChart, ReferenceChart, SeriesChart, Verdict, confidence_words,
    flag_mark,
};
use super::format::{
    count_of, fmt_count, fmt_log10_p, fmt_num, fmt_p, fmt_pct, fmt_pp, fmt_share, fmt_signed,
    p_equals,
};

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
    /// The series' headline as the service words it (the changes over the range);
    /// without it the page composes one from the points' changes.
    pub headline: Option<String>,
    /// Each group's trend over the periods, as the service gives them.
    pub trends: Vec<GroupTrend>,
}

/// Words for what is compared.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Units {
    /// Capitalised plural, with the site for lines of one site: `Lines of KES`.
    pub title: String,
    /// `sites`, `lines`, `groups`.
    pub plural: &'static str,
    /// `site`, `line`, `group`.
    pub singular: &'static str,
}

impl Units {
    /// The words for `level` (and the site of lines of one site).
    pub fn of(level: Option<LevelKind>, site: Option<&str>) -> Self {
        let (title, plural, singular) = match level {
            Some(LevelKind::Site) => ("Sites".to_owned(), "sites", "site"),
            Some(LevelKind::Line) => (
                site.map_or_else(|| "Lines".to_owned(), |s| format!("Lines of {s}")),
                "lines",
                "line",
            ),
            Some(LevelKind::AllLines) => ("Lines".to_owned(), "lines", "line"),
            None => ("Groups".to_owned(), "groups", "group"),
        };
        Self {
            title,
            plural,
            singular,
        }
    }

    /// `1 site`, `6 sites`.
    pub fn count(&self, n: usize) -> String {
        count_of(n, self.singular, self.plural)
    }
}

/// `α = 0.05`.
pub fn alpha_words(alpha: f64) -> String {
    format!("\u{03b1} = {alpha}")
}

/// The picker's level choices: (value, words, selected).
pub fn level_options(selected: LevelKind) -> Vec<(&'static str, &'static str, bool)> {
    [
        (LevelKind::Site, "sites"),
        (LevelKind::Line, "lines of one site"),
        (LevelKind::AllLines, "all lines"),
    ]
    .into_iter()
    .map(|(kind, words)| (kind.as_str(), words, kind == selected))
    .collect()
}

/// The verdict of a report or of a table's test, with its class for the page.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VerdictView {
    /// `significant`, `not-significant` or `untestable`.
    pub class: &'static str,
    /// The heading.
    pub headline: String,
    /// The sentence under it.
    pub line: String,
}

/// A flagged group in the verdict's summary: its code and what follows it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FlagWords {
    /// ▲ or ▼.
    pub mark: &'static str,
    /// The group's code.
    pub code: String,
    /// `above the pooled rate (2.02% against 1.23%)`.
    pub words: String,
}

/// What changed against each group's own usual: the page's opening words when the
/// report has baselines.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ChangesView {
    /// `changed` when some group is worse or better than its usual, else `as-usual`.
    pub class: &'static str,
    /// `KES worse than its usual: 2.02% against 0.71%`, or that none changed.
    pub headline: String,
    /// The others as usual, and those that cannot be told.
    pub line: String,
}

/// The verdict section.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct VerdictSection {
    /// The changes against each group's usual, first, when there are baselines.
    pub changes: Option<ChangesView>,
    /// Persistent differences between the groups over the baseline window.
    pub persistent: Option<String>,
    /// The binomial test's verdict and headline.
    pub verdict: VerdictView,
    /// The caution that at these volumes even small differences are significant.
    pub caveat: Option<String>,
    /// `1 site flagged:` with the flagged groups, or the sentence saying none is.
    pub flags: Option<(String, Vec<FlagWords>)>,
    /// The pooled rate and the sample behind it.
    pub pooled: String,
}

/// `p = 0.0004, Pearson chi-square, 4 df`.
pub fn test_brief(t: &Test) -> String {
    let p = p_equals(t.p_value);
    match t.method {
        "monte-carlo" => format!(
            "{p}{}, {}{}",
            t.p_std_error
                .map(|se| format!(" \u{00b1} {}", fmt_p(se)))
                .unwrap_or_default(),
            method_words(t.method),
            t.resamples
                .map(|r| format!(", {} resamples", fmt_count(r)))
                .unwrap_or_default()
        ),
        "fisher" => format!("{p}, {}", method_words(t.method)),
        m => format!("{p}, {}, {} df", method_words(m), fmt_count(t.df)),
    }
}

/// One row of the groups table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct GroupView {
    /// The group's code (also its `data-name`).
    pub code: String,
    /// Its name, when it has one other than the code.
    pub name: Option<String>,
    /// Units inspected.
    pub inspected: String,
    /// Units defective.
    pub defective: String,
    /// The rate.
    pub rate: String,
    /// The interval, `1.10% – 1.30%`.
    pub interval: String,
    /// Expected defective.
    pub expected: String,
    /// Adjusted residual, or a dash.
    pub residual: String,
    /// The flag.
    pub flag: Option<Flag>,
    /// Share of X², or a dash.
    pub share: String,
    /// Against its own usual, when the report has baselines.
    pub baseline: Option<BaselineCells>,
}

/// A group's cells against its own usual.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BaselineCells {
    /// The usual (baseline) rate, or a dash.
    pub usual: String,
    /// Tooltip: its interval and the periods behind it.
    pub usual_title: String,
    /// `2.85×`, or a dash.
    pub ratio: String,
    /// Tooltip: the ratio's interval and the z-score against the limit.
    pub ratio_title: String,
    /// The verdict.
    pub verdict: BaselineVerdict,
    /// `◉ worse`, `◉ better`, `usual`, `unknown`.
    pub word: String,
    /// The verdict's reason in words.
    pub reason: String,
}

/// The verdict against its usual as the table shows it: changes carry ◉.
pub fn baseline_word(v: BaselineVerdict) -> String {
    if v.is_change() {
        format!("{CHANGE} {}", v.as_str())
    } else {
        v.as_str().to_owned()
    }
}

/// The flag's tag words: `▲ above`, `▼ below`.
pub fn flag_tag(flag: Flag) -> String {
    format!("{} {}", flag_mark(Some(flag)), flag.as_str())
}

/// One pair of the pairwise comparisons.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PairView {
    /// First group's code.
    pub a: String,
    /// Second group's code.
    pub b: String,
    /// Significant after adjustment.
    pub significant: bool,
    /// A − B.
    pub difference: String,
    /// Its interval.
    pub interval: String,
    /// The test's words.
    pub method: &'static str,
    /// Raw p.
    pub p: String,
    /// log10 of the raw p, for the tooltip.
    pub p_title: String,
    /// Adjusted p.
    pub p_adjusted: String,
    /// `yes` / `no` against the minimum difference of interest, when one was given.
    pub beyond: Option<&'static str>,
    /// Why the pair is no test, when it is not.
    pub untestable: Option<String>,
}

/// The pairwise comparisons section.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PairsView {
    /// The sentence when there are none.
    pub empty: Option<String>,
    /// `Significant at α = 0.05 after Holm adjustment of the p-values: 1 of 10 pairs.`
    pub summary: String,
    /// Interval words for the header, `95%`.
    pub conf: String,
    /// Adjustment words for the header, `Holm`.
    pub adjust: &'static str,
    /// Header of the minimum-difference column, when there is one.
    pub beyond_head: Option<String>,
    /// The pairs shown at once (the significant ones, or all when none is).
    pub shown: Vec<PairView>,
    /// The others, behind a summary line.
    pub rest: Vec<PairView>,
    /// `9 pairs not significant`.
    pub rest_summary: String,
}

/// One flagged contributor.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FlaggedView {
    /// Code.
    pub code: String,
    /// Direction.
    pub flag: Flag,
    /// Rate.
    pub rate: String,
    /// Adjusted residual.
    pub residual: String,
    /// Share of X².
    pub share: String,
}

/// One cell of the category mix.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MixCell {
    /// Defects counted.
    pub observed: String,
    /// Adjusted residual.
    pub residual: String,
    /// Tooltip.
    pub title: String,
    /// Beyond ±3 (bold).
    pub strong: bool,
}

/// The defect categories section.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CategoriesView {
    /// (category, defects, share).
    pub totals: Vec<(String, String, String)>,
    /// The association test in words.
    pub words: String,
    /// Category names (columns of the mix).
    pub columns: Vec<String>,
    /// (group, cells by column).
    pub rows: Vec<(String, Vec<Option<MixCell>>)>,
}

/// A term and its description in a list of facts; `aside` is shown muted after it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Fact {
    /// The term.
    pub term: &'static str,
    /// Its text.
    pub text: String,
    /// A muted note after the text.
    pub aside: Option<String>,
}

impl Fact {
    fn new(term: &'static str, text: String) -> Self {
        Self {
            term,
            text,
            aside: None,
        }
    }
}

/// Everything the report page shows, in page order.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportView {
    /// The title line.
    pub title: String,
    /// The verdict.
    pub verdict: VerdictSection,
    /// Interval words, `95%`.
    pub conf: String,
    /// The groups table.
    pub groups: Vec<GroupView>,
    /// The groups table has the columns against each group's usual.
    pub with_baseline: bool,
    /// The legend of the baseline columns.
    pub baseline_legend: Option<String>,
    /// `All (5)`, inspected, defective, rate.
    pub totals: [String; 4],
    /// The flag rule, when there was a test.
    pub flag_rule: Option<String>,
    /// The rates chart.
    pub rates: Option<RatesChart>,
    /// Under the rates chart.
    pub rates_caption: String,
    /// The funnel chart.
    pub funnel: Option<FunnelChart>,
    /// Under the funnel chart.
    pub funnel_caption: String,
    /// Pairwise comparisons.
    pub pairs: PairsView,
    /// Flagged contributors.
    pub flagged: Vec<FlaggedView>,
    /// `sites`.
    pub plural: &'static str,
    /// Defect categories, when counted.
    pub categories: Option<CategoriesView>,
    /// Sample sizes.
    pub samples: Vec<Fact>,
    /// Excluded groups: (code, reason).
    pub excluded: Vec<(String, String)>,
    /// How it was computed.
    pub method: Vec<Fact>,
    /// The test's reference distribution, when there is a test.
    pub reference: Option<ReferenceChart>,
    /// Cautions.
    pub cautions: Vec<String>,
    /// The query of the same report as JSON.
    pub json_query: Option<String>,
}

impl ReportView {
    /// The view of `report`.
    pub fn of(report: &Report) -> Self {
        let site = report.filters.site.as_ref().map(|s| s.as_str());
        let units = Units::of(report.level, site);
        let conf = confidence_words(report.parameters.alpha);
        let t = &report.totals;
        Self {
            title: report_title(report),
            verdict: verdict_section(report, &units),
            groups: report.groups.iter().map(|g| group_view(g, &conf)).collect(),
            with_baseline: report.groups.iter().any(|g| g.baseline.is_some()),
            baseline_legend: baseline_legend(report),
            totals: [
                format!("All ({})", fmt_count(t.group_count as u64)),
                fmt_count(t.inspected),
                fmt_count(t.defective),
                fmt_pct(t.rate),
            ],
            flag_rule: flag_rule(report, &conf),
            rates: RatesChart::of(report),
            rates_caption: format!(
                "Each group's rate with its {conf} interval; dashed: the pooled rate. \u{25b2} flagged above, \u{25bc} flagged below the pooled rate."
            ),
            funnel: FunnelChart::of(report),
            funnel_caption: format!(
                "Rate against units inspected, with 95% and 99.8% limits around the pooled rate for a group of each size (normal approximation{}). A reading aid: the flags come from the analysis of means.",
                if report
                    .overdispersion
                    .as_ref()
                    .is_some_and(|o| o.applied && o.phi > 1.0)
                {
                    ", widened for overdispersion"
                } else {
                    ""
                }
            ),
            pairs: pairs_view(report, &conf),
            flagged: report
                .flagged
                .iter()
                .map(|f| FlaggedView {
                    code: f.code.clone(),
                    flag: f.flag,
                    rate: fmt_pct(f.rate),
                    residual: fmt_signed(f.adjusted_residual),
                    share: fmt_share(f.share_of_statistic),
                })
                .collect(),
            plural: Units::of(report.level, None).plural,
            categories: categories_view(report),
            samples: samples(report),
            excluded: report
                .excluded
                .iter()
                .map(|e| (e.code.clone(), e.reason.clone()))
                .collect(),
            method: method_facts(report),
            reference: ReferenceChart::of(report),
            cautions: report.cautions.clone(),
            json_query: json_query(report),
            conf,
        }
    }
}

/// The title line of a report: `Defect rates by site · 2026-W16 · 2026-04-13 to 2026-04-19`.
pub fn report_title(report: &Report) -> String {
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

fn verdict_section(report: &Report, units: &Units) -> VerdictSection {
    let alpha = alpha_words(report.parameters.alpha);
    let Units { title, plural, .. } = units;
    let verdict = match (&report.test, &report.not_testable) {
        (None, _) if report.totals.inspected == 0 => VerdictView {
            class: Verdict::NotTestable.class(),
            headline: "No data".to_owned(),
            line: format!(
                "No units were inspected in {}: there is nothing to compare.",
                report
                    .period
                    .map_or_else(|| "this period".to_owned(), |p| p.to_string())
            ),
        },
        (Some(t), _) if t.significant => VerdictView {
            class: Verdict::Significant.class(),
            headline: format!("{title} differ in defect rate"),
            line: format!(
                "The difference in defect rate between the {plural} is significant at {alpha} ({}).",
                test_brief(t)
            ),
        },
        (Some(t), _) => VerdictView {
            class: Verdict::NotSignificant.class(),
            headline: format!("No significant difference between the {plural}"),
            line: format!(
                "The difference in defect rate between the {plural} is not significant at {alpha} ({}). This is not proof that they are equal.",
                test_brief(t)
            ),
        },
        (None, Some(n)) => VerdictView {
            class: Verdict::NotTestable.class(),
            headline: "Not testable".to_owned(),
            line: format!("Not testable: {}.", n.reason.trim_end_matches('.')),
        },
        (None, None) => VerdictView {
            class: Verdict::NotTestable.class(),
            headline: "Not testable".to_owned(),
            line: String::new(),
        },
    };
    let flags = report.test.as_ref().map(|test| {
        if report.flagged.is_empty() {
            (
                format!(
                    "No {} is flagged: none is beyond the flag limit on its own{}.",
                    units.singular,
                    if test.significant {
                        format!("; the difference is spread over several {plural}")
                    } else {
                        String::new()
                    }
                ),
                Vec::new(),
            )
        } else {
            let pooled = fmt_pct(report.totals.rate);
            (
                format!("{} flagged:", units.count(report.flagged.len())),
                report
                    .flagged
                    .iter()
                    .map(|f| FlagWords {
                        mark: flag_mark(Some(f.flag)),
                        code: f.code.clone(),
                        words: format!(
                            "{} the pooled rate ({} against {pooled})",
                            f.flag.as_str(),
                            fmt_pct(f.rate)
                        ),
                    })
                    .collect(),
            )
        }
    });
    let t = &report.totals;
    VerdictSection {
        changes: changes_view(report, units),
        persistent: persistent_view(report, units),
        verdict,
        caveat: report
            .cautions
            .iter()
            .find(|c| c.contains("even small differences are statistically significant"))
            .cloned(),
        flags,
        pooled: format!(
            "Pooled defect rate {} ({} defective of {} inspected, {}).",
            fmt_pct(t.rate),
            fmt_count(t.defective),
            fmt_count(t.inspected),
            units.count(t.group_count)
        ),
    }
}

/// The changes against each group's usual, in words; `None` without baselines.
fn changes_view(report: &Report, units: &Units) -> Option<ChangesView> {
    let with: Vec<(&GroupRow, &Baseline)> = report
        .groups
        .iter()
        .filter_map(|g| g.baseline.as_ref().map(|b| (g, b)))
        .collect();
    if with.is_empty() {
        return None;
    }
    let unit = unit_of(report.period.as_ref());
    let count = |v: BaselineVerdict| with.iter().filter(|(_, b)| b.verdict == v).count();
    let (usual, unknown) = (
        count(BaselineVerdict::Usual),
        count(BaselineVerdict::Unknown),
    );
    let headline = if report.changes.is_empty() {
        format!("No {} worse or better than its usual", units.singular)
    } else {
        report
            .changes
            .iter()
            .map(|c| {
                format!(
                    "{} {} than its usual: {} against {}",
                    c.code,
                    c.verdict.as_str(),
                    fmt_pct(c.rate),
                    fmt_pct(c.baseline_rate)
                )
            })
            .collect::<Vec<_>>()
            .join("; ")
    };
    let mut line = match (report.changes.is_empty(), usual) {
        (_, 0) => String::new(),
        (true, n) if n == with.len() => format!(
            "All {} as usual, each against its own last {unit}s.",
            units.count(n)
        ),
        (true, n) => format!("{} as usual.", units.count(n)),
        (false, n) => format!(
            "The other {} as usual.",
            if n == 1 {
                units.singular.to_owned()
            } else {
                units.count(n)
            }
        ),
    };
    if unknown > 0 {
        let who: Vec<&str> = with
            .iter()
            .filter(|(_, b)| b.verdict == BaselineVerdict::Unknown)
            .map(|(g, _)| g.code.as_str())
            .collect();
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(&format!(
            "Not known for {}: {} (too few earlier {unit}s with units to tell).",
            units.count(unknown),
            who.join(", ")
        ));
    }
    Some(ChangesView {
        class: if report.changes.is_empty() {
            "as-usual"
        } else {
            "changed"
        },
        headline,
        line,
    })
}

/// Persistent differences over the baseline window, in words.
fn persistent_view(report: &Report, units: &Units) -> Option<String> {
    let spread = report.usual_spread.as_ref()?;
    let persistent = persistent_words(spread, unit_of(report.period.as_ref()));
    let differ = report.test.as_ref().is_some_and(|t| t.significant);
    let usually = spread.phi.is_some_and(|phi| phi > 1.0);
    let list = persistent.join("; ");
    match (differ && usually, persistent.is_empty()) {
        (true, true) => Some(format!(
            "The {} also differ as they usually do (over the last {}).",
            units.plural,
            {
                let unit = unit_of(report.period.as_ref());
                count_of(spread.periods, unit, &format!("{unit}s"))
            }
        )),
        (true, false) => Some(format!(
            "The {} also differ as they usually do: {list}.",
            units.plural
        )),
        (false, false) => Some(format!("Persistent differences: {list}.")),
        (false, true) => None,
    }
}

fn group_view(g: &GroupRow, conf: &str) -> GroupView {
    GroupView {
        code: g.code.clone(),
        name: g.name.clone().filter(|l| *l != g.code),
        inspected: fmt_count(g.inspected),
        defective: fmt_count(g.defective),
        rate: fmt_pct(g.rate),
        interval: format!(
            "{} \u{2013} {}",
            fmt_pct(g.rate_ci.lower),
            fmt_pct(g.rate_ci.upper)
        ),
        expected: fmt_num(g.expected, 1),
        residual: g
            .adjusted_residual
            .map_or_else(|| "\u{2014}".to_owned(), fmt_signed),
        flag: g.flag,
        share: g
            .share_of_statistic
            .map_or_else(|| "\u{2014}".to_owned(), fmt_share),
        baseline: g.baseline.as_ref().map(|b| baseline_cells(b, conf)),
    }
}

const DASH: &str = "\u{2014}";

fn baseline_cells(b: &Baseline, conf: &str) -> BaselineCells {
    let left_out = if b.left_out.is_empty() {
        String::new()
    } else {
        format!("; left out as excursions: {}", b.left_out.join(", "))
    };
    BaselineCells {
        usual: b.rate.map_or_else(|| DASH.to_owned(), fmt_pct),
        usual_title: format!(
            "pooled over {}{}{left_out}",
            count_of(b.periods, "earlier period", "earlier periods"),
            b.rate_ci
                .map(|ci| format!(
                    ", {conf} interval {} to {}",
                    fmt_pct(ci.lower),
                    fmt_pct(ci.upper)
                ))
                .unwrap_or_default()
        ),
        ratio: b
            .ratio
            .filter(|r| r.is_finite())
            .map_or_else(|| DASH.to_owned(), |r| format!("{}\u{00d7}", fmt_num(r, 2))),
        ratio_title: format!(
            "{}{}",
            b.ratio_ci
                .filter(|ci| ci.lower.is_finite() && ci.upper.is_finite())
                .map(|ci| format!(
                    "{conf} interval {}\u{00d7} to {}\u{00d7}; ",
                    fmt_num(ci.lower, 2),
                    fmt_num(ci.upper, 2)
                ))
                .unwrap_or_default(),
            match b.z {
                Some(z) => format!(
                    "z = {} against \u{00b1}{} ({})",
                    fmt_num(z, 1),
                    fmt_num(b.limit, 2),
                    b.method
                ),
                None => format!("no z ({})", b.method),
            }
        ),
        verdict: b.verdict,
        word: baseline_word(b.verdict),
        reason: b.reason.clone(),
    }
}

fn baseline_legend(report: &Report) -> Option<String> {
    let b = report.groups.iter().find_map(|g| g.baseline.as_ref())?;
    let unit = unit_of(report.period.as_ref());
    Some(format!(
        "Usual rate: the group's own pooled rate over up to {} earlier {unit}s; ratio: this {unit}'s rate divided by it. {CHANGE} marks a change against the group's own usual (worse or better, in words), with the between-{unit} variation folded in (limit \u{00b1}{}); \u{25b2} \u{25bc} mark a flag against the pooled rate of this {unit}'s groups. Hover a verdict for its reason.",
        report
            .parameters
            .baseline
            .map_or_else(|| fmt_count(b.periods as u64), |n| fmt_count(n as u64)),
        fmt_num(b.limit, 2),
    ))
}

fn flag_rule(report: &Report, conf: &str) -> Option<String> {
    let rule = report.flag_rule.as_ref()?;
    let widened = report.overdispersion.as_ref().filter(|o| o.applied);
    Some(format!(
        "Flag rule: a group is flagged when its adjusted residual is beyond \u{00b1}{} (the analysis-of-means critical value h = {} for {} groups at {}{}). Intervals are {conf} Wilson score intervals.",
        fmt_num(rule.limit, 2),
        fmt_num(rule.critical_value, 2),
        fmt_count(report.totals.group_count as u64),
        alpha_words(report.parameters.alpha),
        match widened {
            Some(o) => format!(", widened by sqrt(phi) = {}", fmt_num(o.phi.sqrt(), 2)),
            None => String::new(),
        }
    ))
}

/// The words of an adjustment code.
pub fn adjust_words(code: &str) -> &'static str {
    match code {
        "holm" => "Holm",
        "bonferroni" => "Bonferroni",
        "hochberg" => "Hochberg",
        "bh" => "Benjamini-Hochberg",
        _ => "multiple-comparison",
    }
}

fn pair_view(p: &PairRow, with_practical: bool) -> PairView {
    PairView {
        a: p.a.clone(),
        b: p.b.clone(),
        significant: p.significant,
        difference: fmt_pp(p.difference),
        interval: format!(
            "{} to {}",
            fmt_pp(p.difference_ci.lower),
            fmt_pp(p.difference_ci.upper)
        ),
        method: method_words(p.method),
        // An untestable pair has no p (the report says why in `untestable`).
        // An untestable pair has no p (the reason is shown instead).
        p: p.p_value.map_or_else(|| "\u{2014}".to_owned(), fmt_p),
        p_title: p.log10_p.map_or_else(String::new, fmt_log10_p),
        p_adjusted: p.p_adjusted.map_or_else(|| "\u{2014}".to_owned(), fmt_p),
        untestable: p.untestable.clone(),
        beyond: with_practical.then_some(match p.beyond_min_difference {
            Some(true) => "yes",
            Some(false) => "no",
            None => "",
        }),
    }
}

fn pairs_view(report: &Report, conf: &str) -> PairsView {
    let adjust = adjust_words(report.parameters.adjust.as_str());
    let with_practical = report.parameters.min_difference.is_some();
    let mut pairs: Vec<&PairRow> = report.pairs.iter().collect();
    pairs.sort_by(|a, b| {
        b.significant
            .cmp(&a.significant)
            .then(
                a.p_adjusted
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.p_adjusted.unwrap_or(f64::INFINITY)),
            )
            .then(
                a.log10_p
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.log10_p.unwrap_or(f64::INFINITY)),
            )
    });
    let significant = pairs.iter().filter(|p| p.significant).count();
    let (shown, rest): (Vec<&PairRow>, Vec<&PairRow>) = if significant > 0 {
        pairs.iter().partition(|p| p.significant)
    } else {
        (pairs.clone(), Vec::new())
    };
    PairsView {
        empty: pairs.is_empty().then(|| {
            if report.test.is_none() {
                "No pairwise comparisons (there is no test).".to_owned()
            } else {
                "No pairwise comparisons.".to_owned()
            }
        }),
        summary: format!(
            "Significant at {} after {adjust} adjustment of the p-values: {} of {}.",
            alpha_words(report.parameters.alpha),
            fmt_count(significant as u64),
            count_of(pairs.len(), "pair", "pairs")
        ),
        conf: conf.to_owned(),
        adjust,
        beyond_head: report.parameters.min_difference.map(|d| {
            format!(
                "Beyond the minimum difference of interest ({} pp)",
                fmt_num(d * 100.0, 2)
            )
        }),
        shown: shown.iter().map(|p| pair_view(p, with_practical)).collect(),
        rest_summary: format!("{} not significant", count_of(rest.len(), "pair", "pairs")),
        rest: rest.iter().map(|p| pair_view(p, with_practical)).collect(),
    }
}

fn association_words(a: &TableAnalysis, alpha: f64) -> String {
    match (&a.test, &a.not_testable) {
        (Some(t), _) if t.significant => format!(
            "The defect mix differs between the groups: significant at {} ({}).",
            alpha_words(alpha),
            test_brief(t)
        ),
        (Some(t), _) => format!(
            "No significant difference in the defect mix between the groups: not significant at {} ({}).",
            alpha_words(alpha),
            test_brief(t)
        ),
        (None, Some(n)) => format!(
            "The defect mix is not testable: {}.",
            n.reason.trim_end_matches('.')
        ),
        (None, None) => String::new(),
    }
}

fn categories_view(report: &Report) -> Option<CategoriesView> {
    let c = report.categories.as_ref()?;
    let a = &c.association;
    let with_mix = !a.cells.is_empty() && !a.columns.is_empty();
    Some(CategoriesView {
        totals: c
            .totals
            .iter()
            .map(|t| (t.category.clone(), fmt_count(t.defects), fmt_share(t.share)))
            .collect(),
        words: association_words(a, report.parameters.alpha),
        columns: if with_mix {
            a.columns.iter().map(|c| c.code.clone()).collect()
        } else {
            Vec::new()
        },
        rows: if with_mix {
            a.rows
                .iter()
                .map(|row| {
                    let cells = a
                        .columns
                        .iter()
                        .map(|col| {
                            a.cells
                                .iter()
                                .find(|cell| cell.row == row.code && cell.column == col.code)
                                .map(|cell| MixCell {
                                    observed: fmt_count(cell.observed),
                                    residual: fmt_signed(cell.adjusted_residual),
                                    title: format!(
                                        "expected {}, adjusted residual {}",
                                        fmt_num(cell.expected, 1),
                                        fmt_signed(cell.adjusted_residual)
                                    ),
                                    strong: cell.adjusted_residual.abs() >= 3.0,
                                })
                        })
                        .collect();
                    (row.code.clone(), cells)
                })
                .collect()
        } else {
            Vec::new()
        },
    })
}

fn samples(report: &Report) -> Vec<Fact> {
    let t = &report.totals;
    let mut facts = vec![
        Fact::new("Groups compared", fmt_count(t.group_count as u64)),
        Fact::new("Units inspected", fmt_count(t.inspected)),
        Fact::new("Units defective", fmt_count(t.defective)),
        Fact::new("Pooled rate", fmt_pct(t.rate)),
    ];
    if let (Some(small), Some(large)) = (
        report.groups.iter().min_by_key(|g| g.inspected),
        report.groups.iter().max_by_key(|g| g.inspected),
    ) {
        facts.push(Fact::new(
            "Smallest group",
            format!(
                "{} ({})",
                small.code,
                count_of_u64(small.inspected, "unit", "units")
            ),
        ));
        facts.push(Fact::new(
            "Largest group",
            format!(
                "{} ({})",
                large.code,
                count_of_u64(large.inspected, "unit", "units")
            ),
        ));
    }
    if let Some(d) = report.dates {
        facts.push(Fact::new(
            "Production dates",
            format!(
                "{} to {} ({})",
                format_date(d.first()),
                format_date(d.last()),
                count_of_u64(u64::from(d.days()), "day", "days")
            ),
        ));
    }
    facts
}

fn count_of_u64(n: u64, singular: &str, plural: &str) -> String {
    format!(
        "{} {}",
        fmt_count(n),
        if n == 1 { singular } else { plural }
    )
}

fn method_facts(report: &Report) -> Vec<Fact> {
    let alpha = alpha_words(report.parameters.alpha);
    let mut facts = Vec::new();
    if let Some(t) = &report.test {
        let stat_name = if t.method == "g" {
            "G\u{00b2}"
        } else {
            "X\u{00b2}"
        };
        facts.push(Fact::new(
            "Test",
            format!("{} \u{2014} {}", method_words(t.method), t.method_reason),
        ));
        facts.push(Fact::new(
            "Statistic",
            format!(
                "{stat_name} = {} on {} df (critical value {} at {alpha})",
                fmt_num(t.statistic, 2),
                fmt_count(t.df),
                fmt_num(t.critical_value, 2),
            ),
        ));
        facts.push(Fact {
            term: "p-value",
            text: format!(
                "{}{}",
                p_equals(t.p_value),
                t.p_std_error
                    .map(|se| format!(" \u{00b1} {} (Monte Carlo standard error)", fmt_p(se)))
                    .unwrap_or_default()
            ),
            aside: Some(fmt_log10_p(t.log10_p)).filter(|s| !s.is_empty()),
        });
        facts.push(Fact::new(
            "Effect size",
            format!(
                "Cram\u{00e9}r's V = {} (bias-corrected {})",
                fmt_num(t.cramers_v, 3),
                fmt_num(t.cramers_v_corrected, 3)
            ),
        ));
    }
    if let Some(v) = &report.validity {
        facts.push(Fact::new(
            "Validity",
            format!(
                "Cochran's rule {}: smallest expected count {}, {} of {} below 5, {} below 1.",
                if v.cochran_holds { "holds" } else { "fails" },
                fmt_num(v.min_expected, 2),
                fmt_count(v.cells_below_5 as u64),
                count_of(v.cells, "cell", "cells"),
                fmt_count(v.cells_below_1 as u64),
            ),
        ));
    }
    if let Some(b) = report.groups.iter().find_map(|g| g.baseline.as_ref()) {
        let unit = unit_of(report.period.as_ref());
        let exact = report
            .groups
            .iter()
            .filter(|g| g.baseline.as_ref().is_some_and(|b| b.method == "exact"))
            .count();
        facts.push(Fact::new(
            "Against its usual",
            format!(
                "Each group's rate against its own pooled rate over up to {} earlier {unit}s; the z-score has the group's between-{unit} variation folded in (Laney 2002), and |z| beyond \u{00b1}{} (a \u{0160}id\u{00e1}k-adjusted limit for {} calls) is a change. A baseline {unit} beyond the limit against the rest is left out as an excursion.{}",
                report
                    .parameters
                    .baseline
                    .map_or_else(|| fmt_count(b.periods as u64), |n| fmt_count(n as u64)),
                fmt_num(b.limit, 2),
                fmt_count(report.groups.iter().filter(|g| g.baseline.is_some()).count() as u64),
                if exact > 0 {
                    format!(
                        " {} with small counts {} judged by an exact test instead.",
                        count_of(exact, "group", "groups"),
                        if exact == 1 { "is" } else { "are" }
                    )
                } else {
                    String::new()
                }
            ),
        ));
    }
    if let Some(u) = &report.usual_spread {
        facts.push(Fact::new(
            "Usual spread",
            match u.phi {
                Some(phi) => format!(
                    "Between-group overdispersion phi = {} over the last {} (Spiegelhalter 2005).",
                    fmt_num(phi, 2),
                    count_of(u.periods, "period", "periods")
                ),
                None => format!(
                    "Not estimable over the last {}.",
                    count_of(u.periods, "period", "periods")
                ),
            },
        ));
    }
    if let Some(o) = &report.overdispersion {
        facts.push(Fact::new("Overdispersion", o.note.clone()));
    }
    let p = &report.parameters;
    facts.push(Fact::new(
        "Parameters",
        format!(
            "{alpha}, method {}, pairwise {}, adjustment {}, {} Monte Carlo resamples{}, overdispersion {}{}{}",
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
            p.overdispersion,
            match p.baseline {
                Some(n) => format!(", baseline {n}"),
                None => ", baseline off".to_owned(),
            },
            p.as_of
                .as_deref()
                .map(|a| format!(", data as of {a}"))
                .unwrap_or_default(),
        ),
    ));
    facts.push(Fact::new(
        "Sources",
        "Pearson chi-square and likelihood-ratio tests of homogeneity; Fisher's exact test; Monte Carlo p-values over tables with the same margins (Patefield 1981); Wilson (1927) score intervals; Newcombe (1998) intervals for differences; Holm (1979) adjustment; adjusted residuals (Haberman 1973) compared with the analysis-of-means critical value; overdispersion after Spiegelhalter (2005); funnel limits after Spiegelhalter (2005); each group against its own baseline after Laney (2002), with \u{0160}id\u{00e1}k-adjusted limits.".to_owned(),
    ));
    facts
}

fn json_query(report: &Report) -> Option<String> {
    let p = report.period?;
    let mut q = form_urlencoded::Serializer::new(String::new());
    q.append_pair("period", &p.to_string());
    if let Some(level) = report.level {
        q.append_pair("level", level.as_str());
    }
    if let Some(site) = &report.filters.site {
        q.append_pair("site", site.as_str());
    }
    Some(q.finish())
}

/// One row of the series table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SeriesRow {
    /// The period.
    pub period: String,
    /// Its report page.
    pub href: String,
    /// Tooltip: the verdict in words.
    pub title: String,
    /// Units inspected.
    pub inspected: String,
    /// Units defective.
    pub defective: String,
    /// Pooled rate, or a dash.
    pub rate: String,
    /// Groups compared.
    pub groups: String,
    /// Test words, or a dash.
    pub method: &'static str,
    /// (p, log10 p tooltip), when tested.
    pub p: Option<(String, String)>,
    /// The verdict.
    pub verdict: Verdict,
    /// Flagged groups: (code, flag).
    pub flagged: Vec<(String, Flag)>,
    /// Changes against the groups' own usual: (code, verdict, tooltip).
    pub changes: Vec<(String, BaselineVerdict, String)>,
}

/// One row of the series page's trend table.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TrendRow {
    /// The group's code.
    pub code: String,
    /// Tooltip: the trend's verdict, or why there is none.
    pub title: String,
    /// `rising`, `falling` or `steady`; `None` without a trend.
    pub direction: Option<Direction>,
    /// Arrow and word: `↗ rising`.
    pub words: &'static str,
    /// The slope: `+0.08 pp`.
    pub slope: String,
    /// (widened p, tooltip with the dispersion and the unwidened p).
    pub p: Option<(String, String)>,
    /// Why there is no trend.
    pub reason: Option<String>,
}

impl TrendRow {
    fn of(g: &GroupTrend) -> Self {
        match &g.trend {
            Some(t) => Self {
                code: g.code.clone(),
                title: t.verdict.clone(),
                direction: Some(t.direction),
                words: direction_words(t.direction),
                slope: fmt_slope(t.slope),
                p: Some((
                    fmt_p(t.p_widened),
                    format!(
                        "dispersion around the line {}; unwidened {}",
                        fmt_num(t.dispersion, 2),
                        p_equals(t.p_value)
                    ),
                )),
                reason: None,
            },
            None => Self {
                code: g.code.clone(),
                title: g.reason.clone().unwrap_or_default(),
                direction: None,
                words: "\u{2014}",
                slope: "\u{2014}".to_owned(),
                p: None,
                reason: g.reason.clone(),
            },
        }
    }
}

/// A trend's direction with its arrow (not ▲ ▼, which are the flags against the
/// pooled rate).
pub fn direction_words(d: Direction) -> &'static str {
    match d {
        Direction::Rising => "\u{2197} rising",
        Direction::Falling => "\u{2198} falling",
        Direction::Steady => "\u{2192} steady",
    }
}

/// Everything the series page shows.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesPage {
    /// `significant` when some period is, else `not-significant`.
    pub class: &'static str,
    /// The heading.
    pub headline: String,
    /// The sentence under it.
    pub line: String,
    /// The strip chart.
    pub chart: SeriesChart,
    /// The table.
    pub rows: Vec<SeriesRow>,
    /// The trend table, one row per group.
    pub trends: Vec<TrendRow>,
    /// The period kind in words (`week`), for the slope's column.
    pub unit: &'static str,
}

impl SeriesPage {
    /// The view of `view` for the selection in `ctx`.
    pub fn of(view: &SeriesView, ctx: &PageContext) -> Self {
        let sel = &ctx.selection;
        let units = Units::of(Some(sel.level), sel.site.as_deref());
        let alpha = alpha_words(view.alpha);
        let significant = view
            .points
            .iter()
            .filter(|p| p.significant == Some(true))
            .count();
        let tested = view
            .points
            .iter()
            .filter(|p| p.significant.is_some())
            .count();
        let untested = view.points.len() - tested;
        let links: Vec<String> = view
            .points
            .iter()
            .map(|p| sel.report_href(&p.period.map(|x| x.to_string()).unwrap_or_default()))
            .collect();
        let rows = view
            .points
            .iter()
            .zip(&links)
            .map(|(p, href)| {
                let verdict = Verdict::of(p.significant);
                SeriesRow {
                    period: p.period.map(|x| x.to_string()).unwrap_or_default(),
                    href: href.clone(),
                    title: match (verdict, p.p_value) {
                        (Verdict::NotTestable, _) | (_, None) => p.verdict.clone(),
                        (v, Some(pv)) => format!(
                            "The difference between the {} is {} at {alpha} ({}).",
                            units.plural,
                            v.words(),
                            p_equals(pv)
                        ),
                    },
                    inspected: fmt_count(p.inspected),
                    defective: fmt_count(p.defective),
                    rate: if p.inspected > 0 {
                        fmt_pct(p.defective as f64 / p.inspected as f64)
                    } else {
                        "\u{2014}".to_owned()
                    },
                    groups: fmt_count(p.group_count as u64),
                    method: p.method.map_or("\u{2014}", method_words),
                    p: match (p.p_value, p.log10_p) {
                        (Some(v), Some(l)) => Some((fmt_p(v), fmt_log10_p(l))),
                        _ => None,
                    },
                    verdict,
                    flagged: p.flagged.iter().map(|f| (f.code.clone(), f.flag)).collect(),
                    changes: p
                        .changes
                        .iter()
                        .map(|c| {
                            (
                                c.code.clone(),
                                c.verdict,
                                format!(
                                    "{} {} than its usual: {} against {} (z = {})",
                                    c.code,
                                    c.verdict.as_str(),
                                    fmt_pct(c.rate),
                                    fmt_pct(c.baseline_rate),
                                    fmt_num(c.z, 1)
                                ),
                            )
                        })
                        .collect(),
                }
            })
            .collect();
        Self {
            class: if significant > 0 {
                Verdict::Significant.class()
            } else {
                Verdict::NotSignificant.class()
            },
            headline: match &view.headline {
                Some(h) => h.clone(),
                None if view.points.iter().any(|p| !p.changes.is_empty()) => {
                    series_headline(&view.points, sel.level, true)
                }
                None => format!(
                    "{}: significant in {} of {}",
                    units.title,
                    fmt_count(significant as u64),
                    count_of(view.points.len(), "period", "periods")
                ),
            },
            line: format!(
                "From {} to {}: the difference in defect rate between the {} is significant at {alpha} in {} of the {} that could be tested{}.",
                view.from,
                view.to,
                units.plural,
                fmt_count(significant as u64),
                count_of(tested, "period", "periods"),
                if untested > 0 {
                    format!("; {} could not be tested", fmt_count(untested as u64))
                } else {
                    String::new()
                },
            ),
            chart: SeriesChart::of(&view.points, view.alpha, &links),
            rows,
            trends: view.trends.iter().map(TrendRow::of).collect(),
            unit: unit_of(view.points.first().and_then(|p| p.period.as_ref())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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

    #[test]
    fn counted_words_agree_with_their_number() {
        let u = Units::of(Some(LevelKind::Site), None);
        assert_eq!(u.count(1), "1 site");
        assert_eq!(u.count(6), "6 sites");
        assert_eq!(count_of_u64(1, "day", "days"), "1 day");
        assert_eq!(
            Units::of(Some(LevelKind::Line), Some("KES")).title,
            "Lines of KES"
        );
    }
}
