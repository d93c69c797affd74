//! Each group's period against its own baseline, the report's list of changes, and the
//! usual spread between the groups over the baseline window. The statistics are
//! `dispar_stats::baseline` (Laney's z against the pooled baseline, exact for small
//! counts, earlier excursions left out) and `dispar_stats::spread` (Spiegelhalter's
//! multiplicative overdispersion over the baseline periods); this module chooses the
//! baseline periods, the limit, and the words.

use std::collections::BTreeMap;

use dispar_stats::baseline::{self, BaselineOptions, Comparison, Limit, Method, Verdict};
use dispar_stats::interval::Interval;
use dispar_stats::spread;

use super::build::GroupCounts;
use super::model::{Baseline, BaselineVerdict, Change, Ci, SeriesPoint, Standing, UsualSpread};
use super::params::LevelKind;
use super::trend::{GroupTrend, rising_words};
use crate::period::{Granularity, Period};

/// Winsorising of the z-scores behind the usual spread (Spiegelhalter's 10% each end).
const WINSOR: f64 = 0.1;

/// The counts of the earlier periods a report's baselines are drawn from, read in one
/// aggregate bucketed by period.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct BaselineWindow {
    /// Earlier periods of the report's kind, oldest first (for a day: the candidate
    /// days, see [`Period::earlier`]).
    pub periods: Vec<Period>,
    /// Per group code, its `(inspected, defective)` in each of `periods`. A group
    /// missing here had no units in any of them.
    pub counts: BTreeMap<String, Vec<(u64, u64)>>,
    /// Baseline periods asked for (`baseline=N`).
    pub length: usize,
}

impl BaselineWindow {
    /// The baseline of `code`: its counts and the window positions they come from,
    /// oldest first. For days, the group's latest `length` days with production; for
    /// other periods, all of them (periods without production are skipped by the
    /// comparison itself).
    fn of(&self, code: &str) -> (Vec<(u64, u64)>, Vec<usize>) {
        let Some(counts) = self.counts.get(code) else {
            return (Vec::new(), Vec::new());
        };
        let is_day = self.periods.first().map(Period::granularity) == Some(Granularity::Day);
        let mut picked: Vec<usize> = if is_day {
            let mut days: Vec<usize> = (0..counts.len())
                .rev()
                .filter(|&i| counts[i].0 > 0)
                .take(self.length)
                .collect();
            days.reverse();
            days
        } else {
            (0..counts.len()).collect()
        };
        picked.retain(|&i| i < counts.len());
        (picked.iter().map(|&i| counts[i]).collect(), picked)
    }

    /// The window positions the usual spread is estimated over: every period for
    /// weeks, months and ranges; for days, the latest `length` days on which any of
    /// `codes` produced.
    fn spread_positions(&self, codes: &[&str]) -> Vec<usize> {
        let produced = |i: usize| {
            codes.iter().any(|c| {
                self.counts
                    .get(*c)
                    .and_then(|v| v.get(i))
                    .is_some_and(|g| g.0 > 0)
            })
        };
        let is_day = self.periods.first().map(Period::granularity) == Some(Granularity::Day);
        if is_day {
            let mut days: Vec<usize> = (0..self.periods.len())
                .rev()
                .filter(|&i| produced(i))
                .take(self.length)
                .collect();
            days.reverse();
            days
        } else {
            (0..self.periods.len()).collect()
        }
    }
}

/// What the baseline part of a report holds.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct Baselines {
    /// Per used group (in the order given), its baseline.
    pub rows: Vec<Baseline>,
    /// Worse or better, largest |z| first.
    pub changes: Vec<Change>,
    /// The usual spread between the groups.
    pub spread: UsualSpread,
}

fn ci(i: Interval) -> Ci {
    Ci {
        lower: i.lower,
        upper: i.upper,
    }
}

fn pct(x: f64) -> String {
    super::text::fmt_rate(x)
}

fn verdict_of(v: Verdict) -> BaselineVerdict {
    match v {
        Verdict::Worse => BaselineVerdict::Worse,
        Verdict::Better => BaselineVerdict::Better,
        Verdict::Usual => BaselineVerdict::Usual,
        Verdict::Unknown => BaselineVerdict::Unknown,
    }
}

/// The reason of a verdict in words: "2.02% against its usual 0.71%; z = 9.40 beyond
/// ±3.14 (8 earlier weeks)".
fn reason_words(c: &Comparison, unit: &str, left_out: &[String]) -> String {
    match (c.verdict, c.period_rate, c.rate, c.z) {
        (Verdict::Worse | Verdict::Better | Verdict::Usual, Some(p), Some(b), Some(z)) => {
            let side = if c.verdict == Verdict::Usual {
                "within"
            } else {
                "beyond"
            };
            let mut s = format!(
                "{} against its usual {}; z = {z:.2} {side} ±{:.2} ({} earlier {unit}{}",
                pct(p),
                pct(b),
                c.limit,
                c.used.len(),
                if c.used.len() == 1 { "" } else { "s" },
            );
            if c.method == Some(Method::Exact) {
                s.push_str(", exact test for small counts");
            }
            s.push(')');
            if !left_out.is_empty() {
                s.push_str(&format!(
                    "; left out as earlier excursions: {}",
                    left_out.join(", ")
                ));
            }
            s
        }
        _ => c.explanation(),
    }
}

/// The name of a period kind in words, for reasons ("8 earlier weeks") and the pages.
pub fn unit_of(period: Option<&Period>) -> &'static str {
    match period.map(Period::granularity) {
        Some(Granularity::Day) => "day",
        Some(Granularity::IsoWeek) => "week",
        Some(Granularity::Month) => "month",
        Some(Granularity::Quarter) => "quarter",
        Some(Granularity::Year) => "year",
        Some(Granularity::Range) => "range",
        None => "period",
    }
}

/// The baselines of the `used` groups (those with units in the period) against
/// `window`, with the Šidák limit for as many calls as there are groups.
pub(super) fn baselines(window: &BaselineWindow, used: &[&GroupCounts]) -> Baselines {
    let unit = unit_of(window.periods.first());
    let options = BaselineOptions {
        limit: Limit::sidak(used.len().max(1)),
        ..BaselineOptions::default()
    };
    let mut rows = Vec::with_capacity(used.len());
    let mut changes = Vec::new();
    for g in used {
        let (counts, positions) = window.of(&g.code);
        let row = match baseline::compare((g.inspected, g.defective), &counts, &options) {
            Ok(c) => {
                let label = |i: &usize| {
                    positions
                        .get(*i)
                        .and_then(|p| window.periods.get(*p))
                        .map_or_else(String::new, ToString::to_string)
                };
                let left_out: Vec<String> = c.left_out.iter().map(label).collect();
                Baseline {
                    verdict: verdict_of(c.verdict),
                    reason: reason_words(&c, unit, &left_out),
                    method: match c.method {
                        Some(Method::Exact) => "exact",
                        _ => "normal",
                    },
                    rate: c.rate,
                    rate_ci: c.rate_ci.map(ci),
                    ratio: c.ratio,
                    ratio_ci: c.ratio_ci.map(ci),
                    difference: c.difference,
                    difference_ci: c.difference_ci.map(ci),
                    z: c.z,
                    limit: c.limit,
                    dispersion: c.sigma_z,
                    periods: c.used.len(),
                    left_out,
                }
            }
            // Only counts that checked records cannot produce get here (defective
            // above inspected); the group then has no verdict.
            Err(e) => Baseline {
                verdict: BaselineVerdict::Unknown,
                reason: format!("the baseline could not be computed: {e}"),
                method: "normal",
                rate: None,
                rate_ci: None,
                ratio: None,
                ratio_ci: None,
                difference: None,
                difference_ci: None,
                z: None,
                limit: options.limit.value().unwrap_or(3.0),
                dispersion: None,
                periods: 0,
                left_out: Vec::new(),
            },
        };
        if row.verdict.is_change()
            && let (Some(rate), Some(z)) = (row.rate, row.z)
        {
            changes.push(Change {
                code: g.code.clone(),
                name: g.name.clone(),
                verdict: row.verdict,
                rate: g.defective as f64 / g.inspected as f64,
                baseline_rate: rate,
                z,
            });
        }
        rows.push(row);
    }
    sort_changes(&mut changes);
    Baselines {
        rows,
        changes,
        spread: usual_spread(window, used),
    }
}

/// Largest |z| first; ties by code, so the order never depends on the input order.
pub(super) fn sort_changes(changes: &mut [Change]) {
    changes.sort_by(|a, b| {
        b.z.abs()
            .total_cmp(&a.z.abs())
            .then_with(|| a.code.cmp(&b.code))
    });
}

fn usual_spread(window: &BaselineWindow, used: &[&GroupCounts]) -> UsualSpread {
    let codes: Vec<&str> = used.iter().map(|g| g.code.as_str()).collect();
    let positions = window.spread_positions(&codes);
    let periods: Vec<Vec<(u64, u64)>> = positions
        .iter()
        .map(|&i| {
            codes
                .iter()
                .map(|c| {
                    window
                        .counts
                        .get(*c)
                        .and_then(|v| v.get(i))
                        .copied()
                        .unwrap_or((0, 0))
                })
                .collect()
        })
        .collect();
    match spread::usual_spread(&periods, codes.len(), WINSOR) {
        Ok(s) => UsualSpread {
            periods: s.periods,
            phi: s.overdispersion.map(|o| o.phi),
            groups: codes
                .iter()
                .zip(&s.groups)
                .map(|(c, r)| Standing {
                    code: (*c).to_owned(),
                    above: r.above,
                    below: r.below,
                    periods: r.periods,
                })
                .collect(),
        },
        // Only impossible counts (defective above inspected) get here.
        Err(_) => UsualSpread {
            periods: 0,
            phi: None,
            groups: Vec::new(),
        },
    }
}

/// Persistent differences in words: the groups on one side of the pooled rate in
/// every baseline period they produced in (at least [`PERSISTENT_MIN`] of them), e.g.
/// "KES above the pooled rate in 8 of the last 8 weeks".
pub fn persistent_words(spread: &UsualSpread, unit: &str) -> Vec<String> {
    spread
        .groups
        .iter()
        .filter(|s| s.periods >= PERSISTENT_MIN)
        .filter_map(|s| {
            let (side, count) = if s.above == s.periods {
                ("above", s.above)
            } else if s.below == s.periods {
                ("below", s.below)
            } else {
                return None;
            };
            Some(format!(
                "{} {side} the pooled rate in {count} of the last {} {unit}s",
                s.code, s.periods
            ))
        })
        .collect()
}

/// A period's label shortened after the first of a run: "2026-W15–W18",
/// "2026-03–05"; the full label when the year differs.
pub(super) fn run_label(first: &Period, last: &Period) -> String {
    let (a, b) = (first.to_string(), last.to_string());
    if first == last {
        return a;
    }
    match (a.split_once('-'), b.split_once('-')) {
        (Some((ya, _)), Some((yb, rest)))
            if ya == yb && !matches!(first.granularity(), Granularity::Day) =>
        {
            format!("{a}–{rest}")
        }
        _ => format!("{a}–{b}"),
    }
}

/// The headline of a series: the changes over the range, each group's worse (or
/// better) periods as runs ("KES worse than its usual in 2026-W15–W18"); without
/// baselines, how many periods differ.
pub fn series_headline(points: &[SeriesPoint], level: LevelKind, with_baseline: bool) -> String {
    series_headline_with_trends(points, level, with_baseline, &[])
}

/// [`series_headline`] followed by the groups whose rate is rising over the series
/// ("…; KES getting steadily worse over 2026-W01–W12"): a change that builds up by a
/// little each period is no change in any one of them.
pub fn series_headline_with_trends(
    points: &[SeriesPoint],
    level: LevelKind,
    with_baseline: bool,
    trends: &[GroupTrend],
) -> String {
    let mut words = changes_headline(points, level, with_baseline);
    // A group already named worse than its usual in the range has its news said; a
    // step change also fits a rising line, and "steadily" would misdescribe it.
    let worse: std::collections::BTreeSet<&str> = points
        .iter()
        .flat_map(|p| &p.changes)
        .filter(|c| c.verdict == BaselineVerdict::Worse)
        .map(|c| c.code.as_str())
        .collect();
    let quiet: Vec<GroupTrend> = trends
        .iter()
        .filter(|t| !worse.contains(t.code.as_str()))
        .cloned()
        .collect();
    for rising in rising_words(&quiet) {
        words.push_str("; ");
        words.push_str(&rising);
    }
    words
}

fn changes_headline(points: &[SeriesPoint], level: LevelKind, with_baseline: bool) -> String {
    let (one, many) = match level {
        LevelKind::Site => ("site", "Sites"),
        LevelKind::Line | LevelKind::AllLines => ("line", "Lines"),
    };
    if !with_baseline {
        let differ = points
            .iter()
            .filter(|p| p.significant == Some(true))
            .count();
        return format!("{many}: {differ} of {} periods differ", points.len());
    }
    // (code, verdict) -> indices of the points where it is a change, in order of first
    // appearance.
    let mut order: Vec<(String, BaselineVerdict)> = Vec::new();
    let mut at: BTreeMap<(String, &'static str), Vec<usize>> = BTreeMap::new();
    for (j, p) in points.iter().enumerate() {
        for c in &p.changes {
            let key = (c.code.clone(), c.verdict.as_str());
            let v = at.entry(key).or_default();
            if v.is_empty() {
                order.push((c.code.clone(), c.verdict));
            }
            v.push(j);
        }
    }
    if order.is_empty() {
        let unit = unit_of(points.first().and_then(|p| p.period.as_ref()));
        return format!("No {one} worse or better than its usual in any {unit} of the range");
    }
    let label = |j: usize| points.get(j).and_then(|p| p.period);
    let parts: Vec<String> = order
        .iter()
        .map(|(code, verdict)| {
            let idx = &at[&(code.clone(), verdict.as_str())];
            let mut runs: Vec<(usize, usize)> = Vec::new();
            for &j in idx {
                match runs.last_mut() {
                    Some(r) if r.1 + 1 == j => r.1 = j,
                    _ => runs.push((j, j)),
                }
            }
            let runs: Vec<String> = runs
                .iter()
                .filter_map(|&(a, b)| Some(run_label(&label(a)?, &label(b)?)))
                .collect();
            format!(
                "{code} {} than its usual in {}",
                verdict.as_str(),
                runs.join(", ")
            )
        })
        .collect();
    parts.join("; ")
}

/// Fewest baseline periods on one side of the pooled rate for a difference to be
/// called persistent.
pub const PERSISTENT_MIN: usize = 4;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::build::{ReportRequest, build_report};
    use crate::report::params::Parameters;

    fn group(code: &str, inspected: u64, defective: u64) -> GroupCounts {
        GroupCounts {
            code: code.to_owned(),
            inspected,
            defective,
            ..GroupCounts::default()
        }
    }

    /// Eight earlier weeks: A steady near 1%, B near 2%, C near 0.5%, D near 1.5%.
    fn window(period: Period) -> BaselineWindow {
        let periods = period.earlier(8);
        let wobble = [0i64, 3, -2, 1, -3, 2, -1, 0];
        let series = |base: i64| -> Vec<(u64, u64)> {
            wobble
                .iter()
                .map(|w| (10_000, u64::try_from(base + w).unwrap()))
                .collect()
        };
        BaselineWindow {
            periods,
            counts: [
                ("A".to_owned(), series(100)),
                ("B".to_owned(), series(200)),
                ("C".to_owned(), series(50)),
                ("D".to_owned(), series(150)),
            ]
            .into(),
            length: 8,
        }
    }

    fn request(baseline: Option<usize>) -> ReportRequest {
        let period: Period = "2026-W16".parse().unwrap();
        ReportRequest {
            period: Some(period),
            parameters: Parameters {
                baseline,
                ..Parameters::default()
            },
            baseline: Some(window(period)),
            ..ReportRequest::default()
        }
    }

    #[test]
    fn changes_are_the_worse_and_better_groups_largest_z_first() {
        // A doubles (worse), C falls to a fifth (better), B and D as usual.
        let groups = [
            group("A", 10_000, 200),
            group("B", 10_000, 203),
            group("C", 10_000, 10),
            group("D", 10_000, 148),
        ];
        let r = build_report(&request(Some(8)), &groups);
        let verdicts: Vec<&str> = r
            .groups
            .iter()
            .map(|g| g.baseline.as_ref().unwrap().verdict.as_str())
            .collect();
        assert_eq!(verdicts, ["worse", "usual", "better", "usual"]);
        let codes: Vec<&str> = r.changes.iter().map(|c| c.code.as_str()).collect();
        let z: Vec<f64> = r.changes.iter().map(|c| c.z.abs()).collect();
        assert_eq!(codes.len(), 2);
        assert!(z[0] >= z[1], "{z:?}");
        assert!(codes.contains(&"A") && codes.contains(&"C"));
        let a = r.groups[0].baseline.as_ref().unwrap();
        assert_eq!(a.periods, 8);
        assert!((a.rate.unwrap() - 0.01).abs() < 1e-12);
        // Šidák for four calls at 1%: 1 - 0.99^(1/4) per call, as a Student t quantile on
        // the 7 degrees of freedom of the 8 baseline periods' dispersion.
        assert!((a.limit - Limit::sidak(4).value_for(8).unwrap()).abs() < 1e-12);
        assert!(a.limit > Limit::sidak(4).value().unwrap());
        assert_eq!(r.parameters.baseline, Some(8));
        let spread = r.usual_spread.as_ref().unwrap();
        assert_eq!(spread.periods, 8);
        let b = spread.groups.iter().find(|s| s.code == "B").unwrap();
        assert_eq!((b.above, b.periods), (8, 8));
        let words = r.headline();
        assert!(
            words.starts_with("A worse than its usual (2.00% against about 1.00%); C better"),
            "{words}"
        );
        assert!(words.contains("the other groups as usual"), "{words}");
        assert!(
            words.contains("B above the pooled rate in 8 of the last 8 weeks"),
            "{words}"
        );
    }

    #[test]
    fn baseline_off_leaves_no_baseline_objects() {
        let groups = [group("A", 10_000, 200), group("B", 10_000, 203)];
        let r = build_report(&request(None), &groups);
        assert!(r.groups.iter().all(|g| g.baseline.is_none()));
        assert!(r.changes.is_empty());
        assert!(r.usual_spread.is_none());
        assert_eq!(r.parameters.baseline, None);
        let json = serde_json::to_value(&r).unwrap();
        assert_eq!(json["parameters"]["baseline"], serde_json::Value::Null);
        assert_eq!(json["groups"][0]["baseline"], serde_json::Value::Null);
    }

    #[test]
    fn a_day_uses_the_groups_latest_days_with_production() {
        let day: Period = "2026-03-14".parse().unwrap();
        let periods = day.earlier(3);
        let len = periods.len();
        // Production only on every other day; the latest three are picked.
        let counts: Vec<(u64, u64)> = (0..len)
            .map(|i| if i % 2 == 0 { (100, i as u64) } else { (0, 0) })
            .collect();
        let w = BaselineWindow {
            periods,
            counts: [("A".to_owned(), counts)].into(),
            length: 3,
        };
        let (c, at) = w.of("A");
        assert_eq!(c.len(), 3);
        assert!(at.iter().all(|&i| i % 2 == 0), "{at:?}");
        assert_eq!(*at.last().unwrap(), len - 1 - (len - 1) % 2);
        let (none, _) = w.of("missing");
        assert!(none.is_empty());
    }

    #[test]
    fn widen_uses_the_usual_spread_of_the_baseline_window() {
        // This period A is far out; its own excursion would widen the limit a lot.
        let groups = [
            group("A", 10_000, 400),
            group("B", 10_000, 203),
            group("C", 10_000, 52),
            group("D", 10_000, 148),
        ];
        let mut req = request(Some(8));
        req.parameters.overdispersion = crate::report::DispersionChoice::Widen;
        let r = build_report(&req, &groups);
        let o = r.overdispersion.as_ref().unwrap();
        let spread_phi = r.usual_spread.as_ref().unwrap().phi.unwrap();
        let rule = r.flag_rule.as_ref().unwrap();
        assert!(
            (rule.limit - rule.critical_value * spread_phi.max(1.0).sqrt()).abs() < 1e-12,
            "{} vs phi {spread_phi}",
            rule.limit
        );
        assert!(
            o.note.contains("earlier weeks of the baseline"),
            "{}",
            o.note
        );
        assert!(
            o.phi > spread_phi,
            "this period's phi {} is the larger",
            o.phi
        );
        assert!(r.flagged.iter().any(|f| f.code == "A"));
    }
}
