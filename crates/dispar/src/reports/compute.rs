//! From a checked request to a report: the store's sums per group (SQL), the groups'
//! display names, and the pure builder of `dispar-core` (statistics in Rust). In
//! the server only the `ReportService` calls these, so the JSON endpoints, the pages
//! and `dispar report` give the same report.

use std::collections::{BTreeMap, HashMap};
use std::time::Instant;

use dispar_core::period::Period;
use dispar_core::report::build::CAUTIONS;
use dispar_core::report::gaps::{self, DataGaps, LineDays};
use dispar_core::report::model::ParametersEcho;
use dispar_core::report::{
    BaselineWindow, GroupCounts, Level, Report, SeriesPoint, StratifyChoice, build_report,
    build_summary,
};
use dispar_store::{AggregateQuery, GroupTotals, Store, StoreError};
use time::Date;

use super::spec::{ReportSpec, format_as_of};

/// The groups of one period, as the builder takes them, and the data version they
/// were read at.
#[derive(Debug, Clone)]
pub struct Loaded {
    /// One entry per registered group at the level (those without data have zeros).
    pub groups: Vec<GroupCounts>,
    /// The store's data version of the read snapshot.
    pub data_version: u64,
}

/// The name a group is shown and referred to by: the site code, or `site/line`.
pub fn group_name(level: &Level, g: &GroupTotals) -> String {
    match (level, &g.line) {
        (Level::Site, _) | (_, None) => g.site.as_str().to_owned(),
        (_, Some(line)) => format!("{}/{}", g.site, line),
    }
}

fn counts(code: String, name: Option<String>, g: GroupTotals) -> GroupCounts {
    GroupCounts {
        code,
        name,
        inspected: g.inspected,
        defective: g.defective,
        defects: g
            .defects
            .into_iter()
            .map(|(c, n)| (c.as_str().to_owned(), n))
            .collect::<BTreeMap<_, _>>(),
        products: g
            .products
            .into_iter()
            .map(|(p, n)| (p.map(|p| p.as_str().to_owned()), n))
            .collect(),
    }
}

/// What a load is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Detail {
    /// A full report: with the groups' display names and defect categories.
    Report,
    /// A series point: names and categories are not shown, so they are not read.
    Summary,
}

/// The display names of the groups at the spec's level: site names at the site and
/// all-lines levels, line names at the line level.
async fn names(
    store: &dyn Store,
    spec: &ReportSpec,
) -> Result<HashMap<String, String>, StoreError> {
    Ok(match &spec.level {
        Level::Site | Level::AllLines => store
            .list_sites()
            .await?
            .into_iter()
            .map(|s| (s.code.as_str().to_owned(), s.name.as_str().to_owned()))
            .collect(),
        Level::Line { site } => store
            .get_site(site)
            .await?
            .lines
            .into_iter()
            .filter_map(|l| {
                let name = l.name?;
                Some((l.code.as_str().to_owned(), name.as_str().to_owned()))
            })
            .collect(),
    })
}

/// The name of a group `g` from `names` (by line at the line level, else by site).
fn label_of(spec: &ReportSpec, names: &HashMap<String, String>, g: &GroupTotals) -> Option<String> {
    match (&spec.level, &g.line) {
        (Level::Line { .. }, Some(line)) => names.get(line.as_str()).cloned(),
        _ => names.get(g.site.as_str()).cloned(),
    }
}

/// Sums the counts of `period` per group (one `aggregate` call). For a full report it
/// also reads the display names: site names at the site and all-lines levels, line
/// names at the line level (read after the sums, so they are never older than the
/// data).
pub async fn load(
    store: &dyn Store,
    spec: &ReportSpec,
    period: &Period,
    detail: Detail,
) -> Result<Loaded, StoreError> {
    let mut query = spec.aggregate_query(period);
    // The product-mix comparison needs each group's split by product, read in the same
    // statement so that it always adds up to the group.
    query.by_product =
        detail == Detail::Report && spec.parameters.stratify == StratifyChoice::Product;
    let mut aggregate = store.aggregate(&query).await?;
    if detail == Detail::Summary {
        // The category association is not part of a summary; without categories the
        // builder skips it.
        for g in &mut aggregate.groups {
            g.defects.clear();
        }
    }
    let names = if detail == Detail::Summary || aggregate.groups.is_empty() {
        HashMap::new()
    } else {
        names(store, spec).await?
    };
    let groups = aggregate
        .groups
        .into_iter()
        .map(|g| {
            let label = label_of(spec, &names, &g);
            counts(group_name(&spec.level, &g), label, g)
        })
        .collect();
    Ok(Loaded {
        groups,
        data_version: aggregate.data_version,
    })
}

/// The longest period whose gaps in the data are looked for (a year and a day): longer
/// date ranges would read a bucket per day for little use.
pub const MAX_GAP_DAYS: i64 = 367;

/// The first day a report of `period` reads for its gaps in the data: the history
/// window of [`gaps::HISTORY_DAYS`] before the period.
pub fn gaps_start(period: &Period) -> Date {
    period
        .first_day()
        .checked_sub(time::Duration::days(gaps::HISTORY_DAYS))
        .unwrap_or(period.first_day())
}

/// The days each line in scope posted over `period` and the history before it (one
/// read of line-days within the report's site and product filters and `as_of`), and
/// the gaps found in them; `None` for a period longer than [`MAX_GAP_DAYS`].
pub async fn load_gaps(
    store: &dyn Store,
    spec: &ReportSpec,
    period: &Period,
) -> Result<Option<DataGaps>, StoreError> {
    let (from, to) = (period.first_day(), period.last_day());
    if to - from > time::Duration::days(MAX_GAP_DAYS) {
        return Ok(None);
    }
    let mut query = spec.aggregate_query(period);
    query.from = gaps_start(period);
    if let Level::Line { site } = &spec.level {
        query.site = Some(site.clone());
    }
    let read = store.line_days(&query).await?;
    let mut lines: BTreeMap<(&str, &str), LineDays> = BTreeMap::new();
    for d in &read.days {
        if d.inspected == 0 {
            continue;
        }
        lines
            .entry((d.site.as_str(), d.line.as_str()))
            .or_insert_with(|| LineDays {
                line: format!("{}/{}", d.site, d.line),
                site: d.site.as_str().to_owned(),
                days: Vec::new(),
            })
            .days
            .push((d.date, d.inspected, d.defective));
    }
    let lines: Vec<LineDays> = lines.into_values().collect();
    Ok(Some(gaps::data_gaps(
        &lines,
        &gaps::GapOptions::for_period(from, to),
    )))
}

/// The report of `period` over `groups` against the baseline `window`, with the gaps
/// in the data (pure; CPU-bound for many groups), the statistics giving up at
/// `deadline`.
pub fn build(
    spec: &ReportSpec,
    period: Period,
    groups: &[GroupCounts],
    window: Option<BaselineWindow>,
    gaps: Option<DataGaps>,
    deadline: Option<Instant>,
) -> Report {
    let mut request = spec.request(period, deadline);
    request.baseline = window;
    request.gaps = gaps;
    build_report(&request, groups)
}

/// One period's verdict for a series.
pub fn summary(
    spec: &ReportSpec,
    period: Period,
    groups: &[GroupCounts],
    window: Option<BaselineWindow>,
    deadline: Option<Instant>,
) -> SeriesPoint {
    let mut request = spec.request(period, deadline);
    request.baseline = window;
    build_summary(&request, groups)
}

/// Per-bucket sums of a bucketed aggregate as group code -> counts per bucket.
fn by_code(spec: &ReportSpec, buckets: &[Vec<GroupTotals>]) -> BTreeMap<String, Vec<(u64, u64)>> {
    let mut counts: BTreeMap<String, Vec<(u64, u64)>> = BTreeMap::new();
    for (i, bucket) in buckets.iter().enumerate() {
        for g in bucket {
            let v = counts
                .entry(group_name(&spec.level, g))
                .or_insert_with(|| vec![(0, 0); buckets.len()]);
            v[i] = (g.inspected, g.defective);
        }
    }
    counts
}

/// The dates of `periods` as store buckets, with the range they span.
fn buckets_of(
    spec: &ReportSpec,
    periods: &[Period],
) -> Option<(AggregateQuery, Vec<(Date, Date)>)> {
    let first = periods.first()?;
    let last = periods.last()?;
    let mut query = spec.aggregate_query(first);
    query.to = last.last_day();
    let buckets = periods
        .iter()
        .map(|p| (p.first_day(), p.last_day()))
        .collect();
    Some((query, buckets))
}

/// The baseline window of `period` (one bucketed aggregate over its earlier periods),
/// or `None` with `baseline=off`; with the data version it was read at.
pub async fn load_window(
    store: &dyn Store,
    spec: &ReportSpec,
    period: &Period,
) -> Result<Option<(BaselineWindow, u64)>, StoreError> {
    let Some(length) = spec.parameters.baseline else {
        return Ok(None);
    };
    let periods = period.earlier(length);
    let Some((query, buckets)) = buckets_of(spec, &periods) else {
        return Ok(Some((
            BaselineWindow {
                periods,
                counts: BTreeMap::new(),
                length,
            },
            store.data_version().await?,
        )));
    };
    let a = store.aggregate_buckets(&query, &buckets).await?;
    Ok(Some((
        BaselineWindow {
            counts: by_code(spec, &a.buckets),
            periods,
            length,
        },
        a.data_version,
    )))
}

/// Every period of a series with the baseline window of each, from ONE bucketed
/// aggregate over the earlier periods of the first and the periods of the series.
#[derive(Debug, Clone)]
pub struct SeriesLoad {
    /// Per period of the series, its groups (no names, no categories).
    pub groups: Vec<Vec<GroupCounts>>,
    /// Per period of the series, its baseline window (`None` with `baseline=off`).
    pub windows: Vec<Option<BaselineWindow>>,
    /// The data version of the read.
    pub data_version: u64,
}

/// Loads a series: the periods of `span` and, with a baseline, the earlier periods
/// before the first, in one aggregate bucketed by period.
pub async fn load_series(
    store: &dyn Store,
    spec: &ReportSpec,
    periods: &[Period],
) -> Result<SeriesLoad, StoreError> {
    let length = spec.parameters.baseline;
    let before = match (length, periods.first()) {
        (Some(n), Some(first)) => first.earlier(n),
        _ => Vec::new(),
    };
    let all: Vec<Period> = before.iter().chain(periods).copied().collect();
    let Some((query, buckets)) = buckets_of(spec, &all) else {
        return Ok(SeriesLoad {
            groups: Vec::new(),
            windows: Vec::new(),
            data_version: store.data_version().await?,
        });
    };
    let a = store.aggregate_buckets(&query, &buckets).await?;
    // Read after the sums, so the names are never older than the data; the changes
    // of a point show them.
    let names = names(store, spec).await?;
    let counts = by_code(spec, &a.buckets);
    let offset = before.len();
    // A point's window is the `wanted` buckets before it (the first point's window
    // may be shorter near year 2000; later points then have the longer one).
    let wanted = periods
        .first()
        .zip(length)
        .map_or(0, |(p, n)| p.earlier(n).len().max(offset));
    let windows = (0..periods.len())
        .map(|j| {
            let length = length?;
            let end = offset + j;
            let start = end.saturating_sub(wanted);
            Some(BaselineWindow {
                periods: all[start..end].to_vec(),
                counts: counts
                    .iter()
                    .map(|(code, v)| (code.clone(), v[start..end].to_vec()))
                    .collect(),
                length,
            })
        })
        .collect();
    let groups = a.buckets[offset..]
        .iter()
        .map(|bucket| {
            bucket
                .iter()
                .map(|g| GroupCounts {
                    code: group_name(&spec.level, g),
                    name: label_of(spec, &names, g),
                    inspected: g.inspected,
                    defective: g.defective,
                    defects: BTreeMap::new(),
                    products: BTreeMap::new(),
                })
                .collect()
        })
        .collect();
    Ok(SeriesLoad {
        groups,
        windows,
        data_version: a.data_version,
    })
}

/// The headline of a series (see [`dispar_core::report::baseline::series_headline`]).
pub fn series_headline(spec: &ReportSpec, points: &[SeriesPoint]) -> String {
    dispar_core::report::baseline::series_headline(
        points,
        spec.level.kind(),
        spec.parameters.baseline.is_some(),
    )
}

/// The parameters as a report echoes them.
pub fn echo(spec: &ReportSpec) -> ParametersEcho {
    let p = &spec.parameters;
    ParametersEcho {
        alpha: p.alpha,
        method: p.method,
        pairwise: p.pairwise,
        adjust: p.adjust,
        resamples: p.resamples,
        min_difference: p.min_difference,
        overdispersion: p.overdispersion,
        as_of: spec.as_of.map(format_as_of),
        baseline: p.baseline,
        stratify: p.stratify,
    }
}

/// The cautions every report and series carries.
pub fn cautions() -> Vec<String> {
    CAUTIONS.iter().map(|s| (*s).to_owned()).collect()
}

/// The report as compact JSON (the API's body), into a buffer sized from the report's
/// shape (a 200-site report is about 6 MB, mostly its 19,900 pairs), which spares the
/// copies of growing it by doubling.
pub fn to_json(report: &Report) -> serde_json::Result<Vec<u8>> {
    let estimate = 4096 + 400 * report.groups.len() + 320 * report.pairs.len();
    let mut out = Vec::with_capacity(estimate);
    serde_json::to_writer(&mut out, report)?;
    Ok(out)
}
