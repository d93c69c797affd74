//! From a checked request to a report: the store's sums per group (SQL), the groups'
//! display names, and the pure builder of `dispar-core` (statistics in Rust). In
//! the server only the `ReportService` calls these, so the JSON endpoints, the pages
//! and `dispar report` give the same report.

use std::collections::{BTreeMap, HashMap};
use std::time::Instant;

use dispar_core::period::Period;
use dispar_core::report::build::CAUTIONS;
use dispar_core::report::model::ParametersEcho;
use dispar_core::report::{GroupCounts, Level, Report, SeriesPoint, build_report, build_summary};
use dispar_store::{GroupTotals, Store, StoreError};

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
    let mut aggregate = store.aggregate(&spec.aggregate_query(period)).await?;
    if detail == Detail::Summary {
        // The category association is not part of a summary; without categories the
        // builder skips it.
        for g in &mut aggregate.groups {
            g.defects.clear();
        }
    }
    let names: HashMap<String, String> = if detail == Detail::Summary || aggregate.groups.is_empty()
    {
        HashMap::new()
    } else {
        match &spec.level {
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
        }
    };
    let groups = aggregate
        .groups
        .into_iter()
        .map(|g| {
            let label = match (&spec.level, &g.line) {
                (Level::Line { .. }, Some(line)) => names.get(line.as_str()).cloned(),
                _ => names.get(g.site.as_str()).cloned(),
            };
            counts(group_name(&spec.level, &g), label, g)
        })
        .collect();
    Ok(Loaded {
        groups,
        data_version: aggregate.data_version,
    })
}

/// The report of `period` over `groups` (pure; CPU-bound for many groups), the
/// statistics giving up at `deadline`.
pub fn build(
    spec: &ReportSpec,
    period: Period,
    groups: &[GroupCounts],
    deadline: Option<Instant>,
) -> Report {
    build_report(&spec.request(period, deadline), groups)
}

/// One period's verdict for a series.
pub fn summary(
    spec: &ReportSpec,
    period: Period,
    groups: &[GroupCounts],
    deadline: Option<Instant>,
) -> SeriesPoint {
    build_summary(&spec.request(period, deadline), groups)
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
