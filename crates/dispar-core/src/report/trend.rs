//! Each group's trend across the periods of a series: the Cochran–Armitage test for a
//! trend in proportions (`dispar_stats::trend`, binomial variance convention), widened
//! by the periods' departure from a line, with the slope per period and the words.
//!
//! The verdict follows the widened p (`p_widened`): a line's week-to-week variation
//! beyond binomial sampling would otherwise be called a trend in most series at plant
//! volumes, while a change that builds up by a little each period, too small to be a
//! change against the baseline in any one of them, is still named.

use std::collections::BTreeMap;

use dispar_stats::StatsError;
use dispar_stats::trend::cochran_armitage;
use serde::Serialize;

use super::baseline::{run_label, unit_of};
use super::build::GroupCounts;
use super::model::num;
use super::text::fmt_p;
use crate::period::Period;

/// Fewest periods with units a trend is computed from (a line and its departure).
pub const TREND_MIN_PERIODS: usize = 3;

/// Which way a group's rate is going over the series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Direction {
    /// The rate rises, significantly at alpha on the widened p.
    Rising,
    /// The rate falls, significantly at alpha on the widened p.
    Falling,
    /// No trend significant at alpha on the widened p.
    Steady,
}

impl Direction {
    /// The JSON word: `rising`, `falling`, `steady`.
    pub fn as_str(self) -> &'static str {
        match self {
            Direction::Rising => "rising",
            Direction::Falling => "falling",
            Direction::Steady => "steady",
        }
    }
}

/// One group's trend over the series (`trends[].trend`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Trend {
    /// The first period in which the group had units.
    pub from: Option<Period>,
    /// The last period in which the group had units.
    pub to: Option<Period>,
    /// Periods with units inspected, those the trend is computed from.
    pub periods: usize,
    /// Change of the rate per period (rate units: 0.0008 = +0.08 pp a period), the
    /// units-weighted least-squares slope; a period without units keeps its place.
    #[serde(serialize_with = "num")]
    pub slope: f64,
    /// Cochran–Armitage z, signed (positive: rising), binomial variance convention.
    #[serde(serialize_with = "num")]
    pub statistic: f64,
    /// Two-sided normal p of `statistic`.
    #[serde(serialize_with = "num")]
    pub p_value: f64,
    /// log10 of `p_value`, finite where it underflows.
    #[serde(serialize_with = "num")]
    pub log10_p: f64,
    /// Variation of the periods around the line relative to binomial sampling.
    #[serde(serialize_with = "num")]
    pub dispersion: f64,
    /// Two-sided p of z widened by `dispersion` when it exceeds 1 (Student's t on
    /// `periods - 2` df), else `p_value`: the p the verdict follows.
    #[serde(serialize_with = "num")]
    pub p_widened: f64,
    /// True when `p_widened < alpha`.
    pub significant: bool,
    /// `rising`, `falling` or `steady`.
    pub direction: Direction,
    /// The trend in words.
    pub verdict: String,
}

/// One group of a series with its trend, or the reason there is none (`trends[]`).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GroupTrend {
    /// The group's code.
    pub code: String,
    /// The group's name, or null.
    pub name: Option<String>,
    /// The trend, or null when it cannot be computed.
    pub trend: Option<Trend>,
    /// Why there is no trend, or null.
    pub reason: Option<String>,
}

/// A slope in percentage points with its sign: `+0.08 pp`, more digits for the small
/// slopes of rates in the parts-per-million range.
pub fn fmt_slope(slope: f64) -> String {
    let pp = slope * 100.0;
    if pp != 0.0 && pp.abs() < 0.01 {
        format!("{pp:+.4} pp")
    } else {
        format!("{pp:+.2} pp")
    }
}

/// `p_widened` for people. Its log10 is not kept: when it underflows to 0 the
/// unwidened log10 p stands in where the two agree (no widening), else a bound.
fn fmt_p_widened(p_widened: f64, log10_p: f64, dispersion: f64) -> String {
    if p_widened > 0.0 || dispersion <= 1.0 {
        fmt_p(p_widened, log10_p)
    } else {
        "< 1e-300".to_owned()
    }
}

fn p_words(shown: &str) -> String {
    match shown.strip_prefix("< ") {
        Some(bound) => format!("p < {bound}"),
        None => format!("p = {shown}"),
    }
}

/// The span in words: "over the last 12 weeks" when the group produced in every
/// period up to the last of the series, else the periods with units and their range.
fn span_words(
    periods: usize,
    unit: &str,
    range: Option<String>,
    to_the_end_without_gaps: bool,
) -> String {
    let plural = if periods == 1 { "" } else { "s" };
    match range {
        Some(range) if !to_the_end_without_gaps => {
            format!("over {periods} {unit}{plural} with units in {range}")
        }
        _ => format!("over the last {periods} {unit}{plural}"),
    }
}

/// Why a group's trend could not be computed, in words.
fn reason_of(e: &StatsError, unit: &str, with_units: usize) -> String {
    match e {
        StatsError::InvalidParameter {
            name: "points with units",
            ..
        } => too_few(unit, with_units),
        StatsError::NotTestable(nt) if nt.dropped_cols.first() == Some(&1) => {
            format!("every unit inspected was defective in every {unit}")
        }
        StatsError::NotTestable(_) => format!("no defective unit in any {unit}"),
        other => format!("the trend could not be computed: {other}"),
    }
}

fn too_few(unit: &str, with_units: usize) -> String {
    format!("fewer than {TREND_MIN_PERIODS} {unit}s with units inspected ({with_units})")
}

/// The trend of one group from its `(inspected, defective)` per period of the series
/// (zeros where it had no units).
fn trend_of(
    code: &str,
    points: &[(u64, u64)],
    periods: &[Period],
    alpha: f64,
) -> Result<Trend, String> {
    let unit = unit_of(periods.first());
    let with_units: Vec<usize> = (0..points.len()).filter(|&i| points[i].0 > 0).collect();
    if with_units.len() < TREND_MIN_PERIODS {
        return Err(too_few(unit, with_units.len()));
    }
    let t = cochran_armitage(points, None).map_err(|e| reason_of(&e, unit, with_units.len()))?;
    let first = with_units.first().copied().unwrap_or(0);
    let last = with_units.last().copied().unwrap_or(0);
    let from = periods.get(first).copied();
    let to = periods.get(last).copied();
    let range = from.zip(to).map(|(a, b)| run_label(&a, &b));
    let whole = last + 1 == points.len() && last + 1 - first == with_units.len();
    let significant = t.p_widened < alpha;
    let direction = match (significant, t.slope > 0.0, t.slope < 0.0) {
        (true, true, _) => Direction::Rising,
        (true, _, true) => Direction::Falling,
        _ => Direction::Steady,
    };
    let span = span_words(t.periods, unit, range, whole);
    let per = format!("{} a {unit}", fmt_slope(t.slope));
    let p = p_words(&fmt_p_widened(t.p_widened, t.log10_p, t.dispersion));
    let verdict = match direction {
        Direction::Rising => format!("{code} getting steadily worse {span}: {per} ({p})"),
        Direction::Falling => format!("{code} getting steadily better {span}: {per} ({p})"),
        Direction::Steady => format!(
            "{code} without a steady trend {span}: {per} ({p}, not significant at α = {alpha})"
        ),
    };
    Ok(Trend {
        from,
        to,
        periods: t.periods,
        slope: t.slope,
        statistic: t.statistic,
        p_value: t.p_value,
        log10_p: t.log10_p,
        dispersion: t.dispersion,
        p_widened: t.p_widened,
        significant,
        direction,
        verdict,
    })
}

/// The trend of every group of a series. `groups` holds one list per period of
/// `periods` (oldest first), groups identified by `code`; a group missing from a
/// period had no units in it. One entry per group: those of the last period in its
/// order, then the others by code; `trend: null` with a `reason` where it cannot be
/// computed (fewer than [`TREND_MIN_PERIODS`] periods with units, no defective unit).
pub fn series_trends(
    periods: &[Period],
    groups: &[Vec<GroupCounts>],
    alpha: f64,
) -> Vec<GroupTrend> {
    let mut order: Vec<&str> = groups
        .last()
        .map(|last| last.iter().map(|g| g.code.as_str()).collect())
        .unwrap_or_default();
    let mut counts: BTreeMap<&str, Vec<(u64, u64)>> = BTreeMap::new();
    let mut names: BTreeMap<&str, &str> = BTreeMap::new();
    for (i, period) in groups.iter().enumerate() {
        for g in period {
            let v = counts
                .entry(g.code.as_str())
                .or_insert_with(|| vec![(0, 0); groups.len()]);
            // A code twice in one period (not from the store) adds up, like a report.
            v[i].0 = v[i].0.saturating_add(g.inspected);
            v[i].1 = v[i].1.saturating_add(g.defective);
            // The latest name wins: a renamed site shows its name of now.
            if let Some(n) = &g.name {
                names.insert(g.code.as_str(), n.as_str());
            }
        }
    }
    let mut seen: std::collections::BTreeSet<&str> = std::collections::BTreeSet::new();
    order.retain(|c| seen.insert(c));
    order.extend(counts.keys().filter(|c| !seen.contains(*c)).copied());
    order
        .into_iter()
        .map(|code| {
            let points = counts.get(code).map_or(&[][..], Vec::as_slice);
            let (trend, reason) = match trend_of(code, points, periods, alpha) {
                Ok(t) => (Some(t), None),
                Err(r) => (None, Some(r)),
            };
            GroupTrend {
                code: code.to_owned(),
                name: names.get(code).map(|n| (*n).to_owned()),
                trend,
                reason,
            }
        })
        .collect()
}

/// The rising trends for the series' headline: "KES getting steadily worse over
/// 2026-W01–W12".
pub fn rising_words(trends: &[GroupTrend]) -> Vec<String> {
    trends
        .iter()
        .filter_map(|g| {
            let t = g.trend.as_ref()?;
            if t.direction != Direction::Rising {
                return None;
            }
            let over = match t.from.zip(t.to) {
                Some((a, b)) => format!(" over {}", run_label(&a, &b)),
                None => String::new(),
            };
            Some(format!("{} getting steadily worse{over}", g.code))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn group(code: &str, inspected: u64, defective: u64) -> GroupCounts {
        GroupCounts {
            code: code.to_owned(),
            name: Some(format!("Site {code}")),
            inspected,
            defective,
            ..GroupCounts::default()
        }
    }

    /// A binomial-sized wobble, so no rate is on a line exactly.
    const WOBBLE: [i64; 12] = [0, 4, -3, 2, -5, 3, -1, 5, -2, 1, -4, 0];

    fn weeks(n: usize) -> Vec<Period> {
        let last: Period = "2026-W12".parse().unwrap();
        let mut p = last.earlier(n - 1);
        p.push(last);
        p
    }

    fn count(x: i64) -> u64 {
        u64::try_from(x).unwrap()
    }

    fn entry<'a>(trends: &'a [GroupTrend], code: &str) -> &'a GroupTrend {
        trends
            .iter()
            .find(|t| t.code == code)
            .unwrap_or_else(|| panic!("no entry {code}: {trends:?}"))
    }

    #[test]
    fn a_steady_rise_is_rising_with_the_slope_per_week() {
        // KES rises by 8 defectives in 10,000 (0.08 pp) a week; AAB stays near 1%.
        let periods = weeks(12);
        let groups: Vec<Vec<GroupCounts>> = (0..12)
            .map(|w| {
                vec![
                    group("AAB", 10_000, count(100 + WOBBLE[w])),
                    group("KES", 10_000, count(100 + 8 * w as i64 + WOBBLE[w])),
                ]
            })
            .collect();
        let trends = series_trends(&periods, &groups, 0.05);
        let codes: Vec<&str> = trends.iter().map(|t| t.code.as_str()).collect();
        assert_eq!(codes, ["AAB", "KES"]);
        let kes = entry(&trends, "KES");
        assert_eq!(kes.name.as_deref(), Some("Site KES"));
        assert_eq!(kes.reason, None);
        let t = kes.trend.as_ref().unwrap();
        let points: Vec<(u64, u64)> = groups
            .iter()
            .map(|p| (p[1].inspected, p[1].defective))
            .collect();
        let reference = cochran_armitage(&points, None).unwrap();
        assert_eq!(t.periods, 12);
        assert_eq!(t.slope, reference.slope);
        assert_eq!(t.statistic, reference.statistic);
        assert_eq!(t.p_widened, reference.p_widened);
        assert!((t.slope - 0.0008).abs() < 0.0001, "{}", t.slope);
        assert_eq!(t.direction, Direction::Rising);
        assert!(t.significant);
        assert_eq!(t.from, periods.first().copied());
        assert_eq!(t.to, periods.last().copied());
        assert!(
            t.verdict.starts_with(
                "KES getting steadily worse over the last 12 weeks: +0.08 pp a week (p "
            ),
            "{}",
            t.verdict
        );
        let aab = entry(&trends, "AAB").trend.as_ref().unwrap();
        assert_eq!(aab.direction, Direction::Steady, "{}", aab.verdict);
        assert_eq!(
            rising_words(&trends),
            ["KES getting steadily worse over 2026-W01–W12"]
        );
        let point = |changes| crate::report::SeriesPoint {
            period: None,
            dates: None,
            inspected: 0,
            defective: 0,
            group_count: 2,
            method: None,
            p_value: None,
            log10_p: None,
            significant: None,
            verdict: String::new(),
            flagged: Vec::new(),
            changes,
        };
        let headline = super::super::baseline::series_headline_with_trends(
            &[point(Vec::new())],
            super::super::params::LevelKind::Site,
            true,
            &trends,
        );
        assert_eq!(
            headline,
            "No site worse or better than its usual in any period of the range; KES getting steadily worse over 2026-W01–W12"
        );
        let json = serde_json::to_value(&trends[1]).unwrap();
        assert_eq!(json["trend"]["direction"], "rising");
        assert_eq!(json["trend"]["from"], "2026-W01");
        assert_eq!(json["reason"], serde_json::Value::Null);
    }

    #[test]
    fn noise_beyond_binomial_at_plant_volumes_is_not_called_a_trend() {
        // 100,000 units a week with a wobble forty times binomial-sized: unwidened, the
        // wobble's chance tilt would be significant; widened by its dispersion it is not.
        let periods = weeks(12);
        let groups: Vec<Vec<GroupCounts>> = (0..12)
            .map(|w| vec![group("KES", 100_000, count(1000 + 40 * WOBBLE[w]))])
            .collect();
        let trends = series_trends(&periods, &groups, 0.05);
        let t = trends[0].trend.as_ref().unwrap();
        assert!(t.p_value < 0.05, "unwidened p {}", t.p_value);
        assert!(t.dispersion > 1.0, "{}", t.dispersion);
        assert!(t.p_widened >= 0.05, "widened p {}", t.p_widened);
        assert_eq!(t.direction, Direction::Steady);
        assert!(!t.significant);
        assert!(
            t.verdict
                .starts_with("KES without a steady trend over the last 12 weeks: -"),
            "{}",
            t.verdict
        );
        assert!(
            t.verdict.contains("not significant at α = 0.05"),
            "{}",
            t.verdict
        );
        assert!(rising_words(&trends).is_empty());
    }

    #[test]
    fn a_group_absent_in_some_periods_keeps_their_places_in_time() {
        // KES posts nothing in the 3rd and 7th weeks, nor in the last; AAB posts every
        // week and so comes first, KES after it by code.
        let periods = weeks(12);
        let groups: Vec<Vec<GroupCounts>> = (0..12)
            .map(|w| {
                let mut p = vec![group("AAB", 10_000, count(100 + WOBBLE[w]))];
                if ![2, 6, 11].contains(&w) {
                    p.push(group("KES", 10_000, count(100 + 8 * w as i64 + WOBBLE[w])));
                }
                p
            })
            .collect();
        let trends = series_trends(&periods, &groups, 0.05);
        let codes: Vec<&str> = trends.iter().map(|t| t.code.as_str()).collect();
        assert_eq!(codes, ["AAB", "KES"]);
        let t = entry(&trends, "KES").trend.as_ref().unwrap();
        let points: Vec<(u64, u64)> = (0..12)
            .map(|w| {
                if [2, 6, 11].contains(&w) {
                    (0, 0)
                } else {
                    (10_000, count(100 + 8 * w as i64 + WOBBLE[w]))
                }
            })
            .collect();
        assert_eq!(
            t.statistic,
            cochran_armitage(&points, None).unwrap().statistic
        );
        assert_eq!(t.periods, 9);
        assert_eq!(t.to, periods.get(10).copied());
        assert_eq!(t.direction, Direction::Rising);
        assert!(
            t.verdict
                .starts_with("KES getting steadily worse over 9 weeks with units in 2026-W01–W11"),
            "{}",
            t.verdict
        );
    }

    #[test]
    fn too_few_periods_or_no_defective_give_a_reason_instead() {
        let periods = weeks(4);
        let groups: Vec<Vec<GroupCounts>> = (0..4)
            .map(|w| {
                let mut p = vec![group("NIL", 5_000, 0)];
                if w >= 2 {
                    p.push(group("NEW", 5_000, 40));
                }
                if w == 0 {
                    p.push(group("OLD", 0, 0));
                }
                p
            })
            .collect();
        let trends = series_trends(&periods, &groups, 0.05);
        let codes: Vec<&str> = trends.iter().map(|t| t.code.as_str()).collect();
        assert_eq!(codes, ["NIL", "NEW", "OLD"]);
        let reasons: Vec<Option<&str>> = trends.iter().map(|t| t.reason.as_deref()).collect();
        assert_eq!(
            reasons,
            [
                Some("no defective unit in any week"),
                Some("fewer than 3 weeks with units inspected (2)"),
                Some("fewer than 3 weeks with units inspected (0)"),
            ]
        );
        assert!(trends.iter().all(|t| t.trend.is_none()));
        let json = serde_json::to_value(&trends).unwrap();
        assert_eq!(json[1]["trend"], serde_json::Value::Null);
        assert!(series_trends(&[], &[], 0.05).is_empty());
    }
}
