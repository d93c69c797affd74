//! Gaps in the data: lines that stopped posting, usual production days missing inside
//! the period, days on which a whole site posted nothing, and days whose rate is
//! implausible against the line's own history. A report lists them (`data_gaps`) so
//! that a comparison never rests silently on data that are not there.
//!
//! [`data_gaps`] is given, per line, its posted days over the period `from ..= to` and
//! over a history window before it (`history_from ..` the day before `from`; the
//! service uses the 56 days before `from`, eight of each weekday). A day with no record,
//! or with 0 units inspected, is *not posted*.
//!
//! # Rules, and why
//!
//! - **Usual production days.** The weekdays (Monday to Sunday) on which the line
//!   posted in at least half of the history window's weeks of that weekday. Lines work
//!   to weekly rosters, so the weekday is what predicts production; "half" tolerates
//!   the odd holiday or short week without turning an occasional weekend shift into a
//!   usual day. A Monday-to-Friday line is therefore never asked for a Saturday.
//! - **No pattern.** A line with fewer than [`MIN_HISTORY_DAYS`] posted history days
//!   has no pattern: too few days to tell a roster from chance. It is not checked for
//!   stops or missing days, except that a line that posted in the history but never in
//!   the period is always listed as stopped (nothing else would show it). Its
//!   `usual_days_without_data` then counts the period's days on weekdays it posted on at
//!   least once in the history (site days off left out).
//! - **Site days off.** A day of the period on which at least [`SITE_MIN_LINES`] lines
//!   of a site usually produce and no line of the site posted is listed once for the
//!   site (a holiday, a shutdown, or a feed that failed for the whole site) rather than
//!   once per line. With a single line the site's absence and the line's are the same
//!   evidence, so it stays a missing day of the line. Site days off are worked out over
//!   the history window too, so that they do not count in a line's stop either.
//! - **Stopped.** A line with a pattern is stopped when its latest `stop_after` (or
//!   more) usual production days up to `to` have no record, counting back from `to`
//!   across the period and into the history until its last posted day; it is also
//!   stopped when it posted nothing in the period although the period holds at least
//!   one of its usual days. `usual_days_without_data` is the length of that run. Those
//!   days are not repeated as missing days: the stop says it once.
//! - **Missing days.** The usual production days inside the period without a record,
//!   except site days off and the days of a stop. A run shorter than `stop_after` at
//!   the end of the period is missing days, not a stop: a line a day or two late
//!   posting has not stopped.
//! - **Implausible days.** A posted day of the period is implausible when its defective
//!   count `x` out of `n` lies far from the line's history rate `r` (defectives over
//!   units, pooled over the posted history days), on the binomial variance widened by
//!   the history's Pearson dispersion
//!   `phi = max(1, sum over history days of (x_i - n_i r)^2 / (n_i r (1 - r)) / (days - 1))`:
//!   `z = (x - n r) / sqrt(n r (1 - r) phi)`, listed when `|z| > implausible_z`. This is
//!   the quasi-binomial (Pearson) estimate of dispersion of an intercept-only binomial
//!   model (Wedderburn, 1974, *Biometrika* 61(3); McCullagh and Nelder, 1989,
//!   *Generalized Linear Models*, 2nd ed., §4.5): day-to-day variation beyond the
//!   binomial is the line's normal, so only days beyond it are implausible. The limit
//!   is far out (6 by default) because this flags data errors, not process changes;
//!   those are the baseline's business. It needs [`MIN_HISTORY_DAYS`] posted history
//!   days, and a history with no defectives (or only defectives) gives no z, since its
//!   binomial variance is 0. A day beyond the limit is listed only when it is also
//!   beyond it against its neighbours (the line's posted days within
//!   [`NEIGHBOUR_DAYS`] either side, pooled, on the same widened variance; with fewer
//!   than [`MIN_NEIGHBOURS`] of them this check is skipped): a process that changed
//!   stays changed for days, so its days agree with each other, while a wrong record
//!   stands alone. A day on which every unit is defective with at least
//!   [`ALL_DEFECTIVE_MIN_UNITS`] inspected is always implausible, history or not: that
//!   is nearly always a column swapped or a count entered twice.
//! - **Order.** By line code, then date; sites by code. The result never depends on
//!   the order of the input.

use std::collections::BTreeMap;

use serde::{Serialize, Serializer};
use time::{Date, Duration};

use super::model::{num, opt_num};
use super::text::fmt_rate;
use crate::date::format_date;

/// Length of the history window the service gives (eight of each weekday).
pub const HISTORY_DAYS: i64 = 56;
/// Default of [`GapOptions::stop_after`]: usual production days without data before a
/// line counts as stopped.
pub const STOP_AFTER: usize = 3;
/// Default of [`GapOptions::implausible_z`].
pub const IMPLAUSIBLE_Z: f64 = 6.0;
/// Fewest posted history days for a posting pattern and a history rate.
pub const MIN_HISTORY_DAYS: usize = 10;
/// Fewest lines of a site usually producing on a day for the site's silence that day to
/// be a site day off.
pub const SITE_MIN_LINES: usize = 2;
/// Days either side of a day whose posted days are its neighbours (a week).
pub const NEIGHBOUR_DAYS: usize = 7;
/// Fewest posted neighbour days for the neighbour check of an implausible day.
pub const MIN_NEIGHBOURS: usize = 3;
/// Fewest units inspected for an all-defective day to be implausible on its own.
pub const ALL_DEFECTIVE_MIN_UNITS: u64 = 20;

/// One line's posted days over the history window and the period.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct LineDays {
    /// The line's code, `SITE/LINE`.
    pub line: String,
    /// The code of the line's site.
    pub site: String,
    /// `(date, inspected, defective)` of the posted days, in any order. Days with 0
    /// inspected count as not posted; days outside `history_from ..= to` are ignored;
    /// two entries for one date are added up.
    pub days: Vec<(Date, u64, u64)>,
}

/// The window and the limits of [`data_gaps`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GapOptions {
    /// First day of the history window (the window ends the day before `from`).
    pub history_from: Date,
    /// First day of the period, included.
    pub from: Date,
    /// Last day of the period, included.
    pub to: Date,
    /// Usual production days without data, up to `to`, that make a line stopped
    /// (0 is taken as 1).
    pub stop_after: usize,
    /// |z| beyond which a day's rate is implausible against the line's history.
    pub implausible_z: f64,
}

impl GapOptions {
    /// The defaults for the period `from ..= to`: the [`HISTORY_DAYS`] before `from`,
    /// [`STOP_AFTER`] and [`IMPLAUSIBLE_Z`].
    ///
    /// ```
    /// use dispar_core::report::gaps::GapOptions;
    /// use time::macros::date;
    /// let o = GapOptions::for_period(date!(2026 - 03 - 02), date!(2026 - 03 - 15));
    /// assert_eq!(o.history_from, date!(2026 - 01 - 05));
    /// assert_eq!((o.stop_after, o.implausible_z), (3, 6.0));
    /// ```
    pub fn for_period(from: Date, to: Date) -> Self {
        Self {
            history_from: from.saturating_sub(Duration::days(HISTORY_DAYS)),
            from,
            to,
            stop_after: STOP_AFTER,
            implausible_z: IMPLAUSIBLE_Z,
        }
    }
}

/// Everything [`data_gaps`] found.
#[derive(Debug, Clone, PartialEq, Default, Serialize)]
pub struct DataGaps {
    /// Lines that stopped posting, by line code.
    pub stopped: Vec<Stopped>,
    /// Per line, its usual production days inside the period without a record (those
    /// of a stop and site days off left out), by line code.
    pub missing_days: Vec<MissingDays>,
    /// Per site, the usual production days on which no line of the site posted, by
    /// site code.
    pub site_days_off: Vec<SiteDaysOff>,
    /// Days whose rate is implausible against the line's own history, by line code then
    /// date.
    pub implausible: Vec<ImplausibleDay>,
    /// The gaps in one sentence, or `""` when nothing is listed.
    pub note: String,
}

impl DataGaps {
    /// True when nothing is listed.
    pub fn is_empty(&self) -> bool {
        self.stopped.is_empty()
            && self.missing_days.is_empty()
            && self.site_days_off.is_empty()
            && self.implausible.is_empty()
    }
}

/// A line that stopped posting.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Stopped {
    /// The line's code.
    pub line: String,
    /// Its latest posted day up to `to`, within the window given (`null` when none).
    #[serde(serialize_with = "opt_date")]
    pub last_posted: Option<Date>,
    /// Its usual production days since then, up to `to`, without a record.
    pub usual_days_without_data: usize,
}

/// A line's usual production days in the period without a record.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct MissingDays {
    /// The line's code.
    pub line: String,
    /// The days, in order.
    #[serde(serialize_with = "dates")]
    pub dates: Vec<Date>,
}

/// A site's usual production days on which none of its lines posted.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct SiteDaysOff {
    /// The site's code.
    pub site: String,
    /// The days, in order.
    #[serde(serialize_with = "dates")]
    pub dates: Vec<Date>,
}

/// A day whose rate is implausible against its line's history.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImplausibleDay {
    /// The line's code.
    pub line: String,
    /// The day.
    #[serde(serialize_with = "date")]
    pub date: Date,
    /// Units inspected that day.
    pub inspected: u64,
    /// Defectives that day.
    pub defective: u64,
    /// `defective / inspected`.
    #[serde(serialize_with = "num")]
    pub rate: f64,
    /// The line's pooled history rate (`null` without enough history).
    #[serde(serialize_with = "opt_num")]
    pub usual_rate: Option<f64>,
    /// The day's z against the history rate, widened by the history's dispersion
    /// (`null` without enough history, or when the history rate is 0 or 1).
    #[serde(serialize_with = "opt_num")]
    pub z: Option<f64>,
}

fn date<S: Serializer>(d: &Date, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(&format_date(*d))
}

fn opt_date<S: Serializer>(d: &Option<Date>, s: S) -> Result<S::Ok, S::Error> {
    match d {
        Some(d) => date(d, s),
        None => s.serialize_none(),
    }
}

fn dates<S: Serializer>(d: &[Date], s: S) -> Result<S::Ok, S::Error> {
    s.collect_seq(d.iter().map(|d| format_date(*d)))
}

/// One line laid out on the window: day `i` is `history_from + i`.
struct Line<'a> {
    code: &'a str,
    site: &'a str,
    /// `(inspected, defective)` per window day, `None` when not posted.
    counts: Vec<Option<(u64, u64)>>,
    /// Posted days in the history part.
    history_days: usize,
    /// Per weekday (Monday first), posted on in at least half the history's weeks of it.
    usual: [bool; 7],
    /// Per weekday, posted on at least once in the history.
    posted_weekday: [bool; 7],
}

impl Line<'_> {
    fn has_pattern(&self) -> bool {
        self.history_days >= MIN_HISTORY_DAYS
    }
}

/// The window's geometry: its length, where the period starts, and day `i`'s weekday.
struct Window {
    start: Date,
    len: usize,
    history_len: usize,
    first_weekday: usize,
}

impl Window {
    fn weekday(&self, i: usize) -> usize {
        (self.first_weekday + i) % 7
    }

    fn date(&self, i: usize) -> Date {
        let offset = i64::try_from(i).unwrap_or(i64::MAX);
        self.start.saturating_add(Duration::days(offset))
    }

    fn index(&self, d: Date) -> Option<usize> {
        let i = usize::try_from(d.to_julian_day() - self.start.to_julian_day()).ok()?;
        (i < self.len).then_some(i)
    }
}

/// The gaps in `lines` over the period and history of `options`; see the module doc for
/// the rules. An empty period (`from` after `to`) has no gaps; a `history_from` after
/// `from` is taken as an empty history.
pub fn data_gaps(lines: &[LineDays], options: &GapOptions) -> DataGaps {
    let Some(window) = window_of(options) else {
        return DataGaps::default();
    };
    let lines = lay_out(lines, &window);
    let site_off = site_days_off(&lines, &window);

    let mut gaps = DataGaps::default();
    for line in &lines {
        let off = site_off.get(line.site).map_or(&[][..], Vec::as_slice);
        posting(line, &window, off, options.stop_after.max(1), &mut gaps);
        implausible(line, &window, options.implausible_z, &mut gaps);
    }
    for (site, off) in &site_off {
        let dates: Vec<Date> = (window.history_len..window.len)
            .filter(|&i| off[i])
            .map(|i| window.date(i))
            .collect();
        if !dates.is_empty() {
            gaps.site_days_off.push(SiteDaysOff {
                site: (*site).to_owned(),
                dates,
            });
        }
    }
    gaps.note = note(&gaps);
    gaps
}

fn window_of(options: &GapOptions) -> Option<Window> {
    if options.from > options.to {
        return None;
    }
    let start = options.history_from.min(options.from);
    let days = |a: Date, b: Date| usize::try_from(b.to_julian_day() - a.to_julian_day()).ok();
    Some(Window {
        start,
        len: days(start, options.to)? + 1,
        history_len: days(start, options.from)?,
        first_weekday: usize::from(start.weekday().number_days_from_monday()),
    })
}

/// Merges entries by line code (sorted, which gives the output its order) and learns
/// each line's pattern from its history.
fn lay_out<'a>(input: &'a [LineDays], window: &Window) -> Vec<Line<'a>> {
    let mut by_code: BTreeMap<&'a str, Line<'a>> = BTreeMap::new();
    for l in input {
        let line = by_code.entry(l.line.as_str()).or_insert_with(|| Line {
            code: &l.line,
            site: &l.site,
            counts: vec![None; window.len],
            history_days: 0,
            usual: [false; 7],
            posted_weekday: [false; 7],
        });
        for &(d, n, x) in &l.days {
            if n == 0 {
                continue;
            }
            if let Some(i) = window.index(d) {
                let (n0, x0) = line.counts[i].unwrap_or((0, 0));
                line.counts[i] = Some((n0.saturating_add(n), x0.saturating_add(x)));
            }
        }
    }
    let mut weeks = [0usize; 7];
    for i in 0..window.history_len {
        weeks[window.weekday(i)] += 1;
    }
    let mut lines: Vec<Line<'a>> = by_code.into_values().collect();
    for line in &mut lines {
        let mut posted = [0usize; 7];
        for i in 0..window.history_len {
            if line.counts[i].is_some() {
                posted[window.weekday(i)] += 1;
            }
        }
        line.history_days = posted.iter().sum();
        for w in 0..7 {
            line.usual[w] = weeks[w] > 0 && 2 * posted[w] >= weeks[w];
            line.posted_weekday[w] = posted[w] > 0;
        }
    }
    lines
}

/// Per site, per window day: at least [`SITE_MIN_LINES`] of its lines with a pattern
/// usually produce that weekday and none of its lines posted.
fn site_days_off<'a>(lines: &[Line<'a>], window: &Window) -> BTreeMap<&'a str, Vec<bool>> {
    let mut by_site: BTreeMap<&'a str, Vec<&Line<'a>>> = BTreeMap::new();
    for line in lines {
        by_site.entry(line.site).or_default().push(line);
    }
    by_site
        .into_iter()
        .map(|(site, members)| {
            let off = (0..window.len)
                .map(|i| {
                    let w = window.weekday(i);
                    let expecting = members
                        .iter()
                        .filter(|l| l.has_pattern() && l.usual[w])
                        .count();
                    expecting >= SITE_MIN_LINES && members.iter().all(|l| l.counts[i].is_none())
                })
                .collect();
            (site, off)
        })
        .collect()
}

/// The line's stop and missing days.
fn posting(line: &Line<'_>, window: &Window, off: &[bool], stop_after: usize, out: &mut DataGaps) {
    let period = window.history_len..window.len;
    let is_off = |i: usize| off.get(i).copied().unwrap_or(false);
    let posted_in_period = period.clone().any(|i| line.counts[i].is_some());
    let last = (0..window.len).rev().find(|&i| line.counts[i].is_some());

    if !line.has_pattern() {
        if line.history_days > 0 && !posted_in_period {
            let usual_days_without_data = period
                .filter(|&i| line.posted_weekday[window.weekday(i)] && !is_off(i))
                .count();
            out.stopped.push(Stopped {
                line: line.code.to_owned(),
                last_posted: last.map(|i| window.date(i)),
                usual_days_without_data,
            });
        }
        return;
    }

    let expected = |i: usize| line.usual[window.weekday(i)] && !is_off(i);
    // The days after the last posted one are the candidate stop: none has a record.
    let run_from = last.map_or(0, |i| i + 1);
    let run = (run_from..window.len).filter(|&i| expected(i)).count();
    let expected_in_period = period.clone().any(expected);
    let stopped = run >= stop_after || (!posted_in_period && expected_in_period);
    if stopped {
        out.stopped.push(Stopped {
            line: line.code.to_owned(),
            last_posted: last.map(|i| window.date(i)),
            usual_days_without_data: run,
        });
    }
    let missing: Vec<Date> = period
        .filter(|&i| expected(i) && line.counts[i].is_none() && !(stopped && i >= run_from))
        .map(|i| window.date(i))
        .collect();
    if !missing.is_empty() {
        out.missing_days.push(MissingDays {
            line: line.code.to_owned(),
            dates: missing,
        });
    }
}

/// A line's history as the implausible-day rule uses it.
struct History {
    /// Defectives over units, pooled over the posted history days.
    rate: f64,
    /// Pearson dispersion, at least 1; `None` when `rate` is 0 or 1 (no binomial
    /// variance to widen).
    phi: Option<f64>,
}

/// The line's history, when it has at least [`MIN_HISTORY_DAYS`] posted history days.
fn history(line: &Line<'_>, window: &Window) -> Option<History> {
    if line.history_days < MIN_HISTORY_DAYS {
        return None;
    }
    let days = || line.counts[..window.history_len].iter().flatten();
    let (n, x) = days().fold((0u64, 0u64), |(n, x), &(ni, xi)| {
        (n.saturating_add(ni), x.saturating_add(xi))
    });
    // n > 0: every posted day has units.
    let rate = x as f64 / n as f64;
    let phi = (rate > 0.0 && rate < 1.0).then(|| {
        let chi2: f64 = days()
            .map(|&(ni, xi)| {
                let e = ni as f64 * rate;
                (xi as f64 - e).powi(2) / (e * (1.0 - rate))
            })
            .sum();
        (chi2 / (line.history_days - 1) as f64).max(1.0)
    });
    Some(History { rate, phi })
}

/// The line's implausible days in the period.
fn implausible(line: &Line<'_>, window: &Window, limit: f64, out: &mut DataGaps) {
    let history = history(line, window);
    for i in window.history_len..window.len {
        let Some((n, x)) = line.counts[i] else {
            continue;
        };
        let z = history.as_ref().and_then(|h| {
            let phi = h.phi?;
            let e = n as f64 * h.rate;
            Some((x as f64 - e) / (e * (1.0 - h.rate) * phi).sqrt())
        });
        // More defectives than units cannot come from checked records; should it
        // ever happen, it is implausible too.
        let all_defective = x >= n && n >= ALL_DEFECTIVE_MIN_UNITS;
        // A real change of the process lasts: the days around it share the new rate. A
        // data error is a day unlike its neighbours too, so a day far from the
        // history but in line with its neighbours is a change (the baseline's
        // business), not a record to check.
        let unlike_neighbours = || {
            let Some(phi) = history.as_ref().and_then(|h| h.phi) else {
                return true;
            };
            let lo = i.saturating_sub(NEIGHBOUR_DAYS);
            let hi = (i + NEIGHBOUR_DAYS).min(window.len - 1);
            let around: Vec<(u64, u64)> = (lo..=hi)
                .filter(|&j| j != i)
                .filter_map(|j| line.counts[j])
                .collect();
            if around.len() < MIN_NEIGHBOURS {
                return true;
            }
            let (nn, xn) = around.iter().fold((0u64, 0u64), |(a, b), &(ni, xi)| {
                (a.saturating_add(ni), b.saturating_add(xi))
            });
            let r = xn as f64 / nn as f64;
            if !(r > 0.0 && r < 1.0) {
                return true;
            }
            let e = n as f64 * r;
            ((x as f64 - e) / (e * (1.0 - r) * phi).sqrt()).abs() > limit
        };
        if all_defective || (z.is_some_and(|z| z.abs() > limit) && unlike_neighbours()) {
            out.implausible.push(ImplausibleDay {
                line: line.code.to_owned(),
                date: window.date(i),
                inspected: n,
                defective: x,
                rate: x as f64 / n as f64,
                usual_rate: history.as_ref().map(|h| h.rate),
                z,
            });
        }
    }
}

fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

/// A list of codes in words, the first three named: "A/1, B/2, C/3 and 2 more".
fn some_of(codes: &[&str]) -> String {
    const SHOWN: usize = 3;
    if codes.len() <= SHOWN {
        codes.join(", ")
    } else {
        format!(
            "{} and {} more",
            codes[..SHOWN].join(", "),
            codes.len() - SHOWN
        )
    }
}

/// The gaps in one sentence: "Gaps in the data: line A/L1 stopped posting (last posted
/// 2026-03-10, 4 usual days without data); 1 usual day without data on line B/L2."
fn note(g: &DataGaps) -> String {
    let mut parts = Vec::new();
    match g.stopped.as_slice() {
        [] => {}
        [s] => {
            let since = s.last_posted.map_or_else(
                || "never posted".to_owned(),
                |d| format!("last posted {}", format_date(d)),
            );
            parts.push(format!(
                "line {} stopped posting ({since}, {} without data)",
                s.line,
                plural(s.usual_days_without_data, "usual day", "usual days")
            ));
        }
        many => {
            let codes: Vec<&str> = many.iter().map(|s| s.line.as_str()).collect();
            parts.push(format!(
                "{} stopped posting ({})",
                plural(many.len(), "line", "lines"),
                some_of(&codes)
            ));
        }
    }
    if !g.missing_days.is_empty() {
        let days: usize = g.missing_days.iter().map(|m| m.dates.len()).sum();
        let on = match g.missing_days.as_slice() {
            [m] => format!("line {}", m.line),
            many => plural(many.len(), "line", "lines"),
        };
        parts.push(format!(
            "{} without data on {on}",
            plural(days, "usual production day", "usual production days")
        ));
    }
    if !g.site_days_off.is_empty() {
        let days: usize = g.site_days_off.iter().map(|s| s.dates.len()).sum();
        let sites: Vec<&str> = g.site_days_off.iter().map(|s| s.site.as_str()).collect();
        parts.push(format!(
            "no line of {} {} posted on {} (holiday or shutdown?)",
            if sites.len() == 1 { "site" } else { "sites" },
            some_of(&sites),
            plural(days, "usual day", "usual days")
        ));
    }
    match g.implausible.as_slice() {
        [] => {}
        [d] => parts.push(format!(
            "the rate of line {} on {} ({}) is implausible against its history",
            d.line,
            format_date(d.date),
            fmt_rate(d.rate)
        )),
        many => {
            let mut codes: Vec<&str> = many.iter().map(|d| d.line.as_str()).collect();
            codes.dedup();
            parts.push(format!(
                "{} with a rate implausible against the line's history ({})",
                plural(many.len(), "day", "days"),
                some_of(&codes)
            ));
        }
    }
    if parts.is_empty() {
        String::new()
    } else {
        format!("Gaps in the data: {}.", parts.join("; "))
    }
}

#[cfg(test)]
mod tests {
    use time::Weekday;
    use time::macros::date;

    use super::*;

    /// Relative tolerance against R's `glm`, fitted with `epsilon = 1e-14` so that its
    /// IRLS rate equals the pooled rate to about 1e-16; what is left is the order of
    /// floating-point sums over 40 days, far below 1e-12.
    const GLM_REL_TOL: f64 = 1e-12;

    /// The period of most tests: two full weeks, Monday 2026-03-02 to Sunday 2026-03-15,
    /// with the 56 days from Monday 2026-01-05 as history.
    fn options() -> GapOptions {
        GapOptions::for_period(date!(2026 - 03 - 02), date!(2026 - 03 - 15))
    }

    fn window_days() -> impl Iterator<Item = Date> {
        let o = options();
        std::iter::successors(Some(o.history_from), move |d| {
            d.next_day().filter(|n| *n <= o.to)
        })
    }

    fn is_weekday(d: Date) -> bool {
        !matches!(d.weekday(), Weekday::Saturday | Weekday::Sunday)
    }

    /// A line of `site` posting `(inspected, defective)` on the days `f` gives.
    fn line(code: &str, f: impl Fn(Date) -> Option<(u64, u64)>) -> LineDays {
        let site = code.split('/').next().unwrap_or(code).to_owned();
        LineDays {
            line: code.to_owned(),
            site,
            days: window_days()
                .filter_map(|d| f(d).map(|(n, x)| (d, n, x)))
                .collect(),
        }
    }

    /// A Monday-to-Friday line at 1% that posts every weekday except `absent`.
    fn weekdays_except(code: &str, absent: &'static [Date]) -> LineDays {
        line(code, move |d| {
            (is_weekday(d) && !absent.contains(&d)).then_some((1000, 10))
        })
    }

    #[test]
    fn a_line_silent_on_its_last_four_usual_days_is_stopped_not_missing() {
        let silent = |d: Date| d > date!(2026 - 03 - 09);
        let lines = [
            line("S/1", |d| {
                (is_weekday(d) && !silent(d)).then_some((1000, 10))
            }),
            weekdays_except("S/2", &[]),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(
            g.stopped,
            [Stopped {
                line: "S/1".to_owned(),
                last_posted: Some(date!(2026 - 03 - 09)),
                usual_days_without_data: 4,
            }],
            "Tue 10 to Fri 13 March; the weekend is not usual"
        );
        assert!(g.missing_days.is_empty(), "{:?}", g.missing_days);
        assert!(g.site_days_off.is_empty(), "{:?}", g.site_days_off);
        assert_eq!(
            g.note,
            "Gaps in the data: line S/1 stopped posting (last posted 2026-03-09, \
             4 usual days without data)."
        );

        // Four days short of five is not yet a stop: the days are missing days.
        let g = data_gaps(
            &lines,
            &GapOptions {
                stop_after: 5,
                ..options()
            },
        );
        assert!(g.stopped.is_empty(), "{:?}", g.stopped);
        assert_eq!(
            g.missing_days,
            [MissingDays {
                line: "S/1".to_owned(),
                dates: vec![
                    date!(2026 - 03 - 10),
                    date!(2026 - 03 - 11),
                    date!(2026 - 03 - 12),
                    date!(2026 - 03 - 13),
                ],
            }]
        );
    }

    #[test]
    fn a_day_missing_inside_the_period_is_listed_for_its_line() {
        let lines = [
            weekdays_except("S/1", &[date!(2026 - 03 - 04)]),
            weekdays_except("S/2", &[]),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(
            g.missing_days,
            [MissingDays {
                line: "S/1".to_owned(),
                dates: vec![date!(2026 - 03 - 04)],
            }]
        );
        assert!(g.stopped.is_empty() && g.site_days_off.is_empty() && g.implausible.is_empty());
        assert_eq!(
            g.note,
            "Gaps in the data: 1 usual production day without data on line S/1."
        );
    }

    #[test]
    fn a_day_no_line_of_a_site_posted_is_listed_once_for_the_site() {
        const HOLIDAY: &[Date] = &[date!(2026 - 03 - 10)];
        let lines = [
            weekdays_except("S/1", HOLIDAY),
            weekdays_except("S/2", HOLIDAY),
            weekdays_except("S/3", HOLIDAY),
            weekdays_except("T/1", &[]),
            weekdays_except("T/2", &[]),
            // A site of one line: its silence is the line's, so a missing day.
            weekdays_except("U/1", HOLIDAY),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(
            g.site_days_off,
            [SiteDaysOff {
                site: "S".to_owned(),
                dates: HOLIDAY.to_vec(),
            }]
        );
        assert_eq!(
            g.missing_days,
            [MissingDays {
                line: "U/1".to_owned(),
                dates: HOLIDAY.to_vec(),
            }],
            "no S line is listed as missing the holiday"
        );
        assert!(g.stopped.is_empty());
        assert_eq!(
            g.note,
            "Gaps in the data: 1 usual production day without data on line U/1; no line \
             of site S posted on 1 usual day (holiday or shutdown?)."
        );
    }

    #[test]
    fn a_site_day_off_does_not_count_in_a_stop() {
        // S/1 last posted Monday 9th; Tuesday 10th is a holiday of the whole site, so
        // S/1 has only three usual days without data (11th to 13th).
        let lines = [
            line("S/1", |d| {
                (is_weekday(d) && d <= date!(2026 - 03 - 09)).then_some((1000, 10))
            }),
            weekdays_except("S/2", &[date!(2026 - 03 - 10)]),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(g.site_days_off.len(), 1, "{g:?}");
        assert_eq!(g.stopped.len(), 1, "{g:?}");
        assert_eq!(g.stopped[0].usual_days_without_data, 3);
    }

    #[test]
    fn monday_to_friday_lines_are_never_asked_for_weekends() {
        // S/1 also works a Saturday shift now and then (3 of the 8 history Saturdays):
        // not often enough for Saturday to be one of its usual days.
        let odd_saturdays = [
            date!(2026 - 01 - 10),
            date!(2026 - 01 - 31),
            date!(2026 - 02 - 21),
        ];
        let lines = [
            line("S/1", move |d| {
                (is_weekday(d) || odd_saturdays.contains(&d)).then_some((1000, 10))
            }),
            weekdays_except("S/2", &[]),
            // W/1 works every day and misses Saturday 7th: for it, that is a gap.
            line("W/1", |d| {
                (d != date!(2026 - 03 - 07)).then_some((1000, 10))
            }),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(
            g.missing_days,
            [MissingDays {
                line: "W/1".to_owned(),
                dates: vec![date!(2026 - 03 - 07)],
            }]
        );
        assert!(g.stopped.is_empty() && g.site_days_off.is_empty(), "{g:?}");
    }

    /// History of line R/1 on its 40 history weekdays (k = 0, 1, ... in date order):
    /// `n = 1000 + 100 (k mod 3)`, `x = 10 + w[k mod 8]`, `w = [0, 7, -5, 3, -7, 4, -2, 0]`.
    /// It varies about twice as much as binomial counts would.
    fn noisy_history(d: Date) -> Option<(u64, u64)> {
        const W: [i64; 8] = [0, 7, -5, 3, -7, 4, -2, 0];
        if !is_weekday(d) || d >= options().from {
            return None;
        }
        let k = window_days().filter(|e| is_weekday(*e) && *e < d).count();
        let x = u64::try_from(10 + W[k % 8]).ok()?;
        Some((1000 + 100 * (k % 3) as u64, x))
    }

    #[test]
    fn a_rate_ten_times_the_usual_is_implausible_and_a_noisy_day_is_not() {
        // Reference: R 4.2.2 on the history above:
        //   fit <- glm(cbind(x, n - x) ~ 1, family = quasibinomial,
        //              control = glm.control(epsilon = 1e-14))
        //   r <- fitted(fit)[1]                                      # 0.0091116173120729099
        //   phi <- sum(residuals(fit, "pearson")^2) / df.residual(fit) # 2.0491442113442075
        //   z <- (x - n * r) / sqrt(n * r * (1 - r) * phi)
        // (summary(fit)$dispersion is not used: it takes the working weights of the
        // last IRLS step and differs from the Pearson sum in the 5th digit at the
        // default epsilon.)
        const SOURCE: &str = "R 4.2.2 glm quasibinomial (stats)";
        let period = [
            (date!(2026 - 03 - 04), 100, Some(21.130_608_797_874_178)),
            (date!(2026 - 03 - 05), 17, None),
            // 6.95 on the plain binomial variance; 4.86 once widened by phi.
            (date!(2026 - 03 - 06), 30, None),
        ];
        let lines = [line("R/1", |d| {
            noisy_history(d).or_else(|| {
                period
                    .iter()
                    .find(|p| p.0 == d)
                    .map(|p| (1000, p.1))
                    .or_else(|| (is_weekday(d) && d >= options().from).then_some((1000, 9)))
            })
        })];
        let g = data_gaps(&lines, &options());
        assert_eq!(g.implausible.len(), 1, "{:?}", g.implausible);
        let day = &g.implausible[0];
        assert_eq!(
            (day.line.as_str(), day.date, day.inspected, day.defective),
            ("R/1", date!(2026 - 03 - 04), 1000, 100)
        );
        assert!((day.rate - 0.1).abs() < f64::EPSILON);
        let close = |got: f64, want: f64, what: &str| {
            assert!(
                ((got - want) / want).abs() < GLM_REL_TOL,
                "{what}: {got} against {want} ({SOURCE})"
            );
        };
        close(
            day.usual_rate.unwrap(),
            0.009_111_617_312_072_91,
            "usual rate",
        );
        close(day.z.unwrap(), period[0].2.unwrap(), "z");
        assert!(g.missing_days.is_empty() && g.stopped.is_empty());
        assert_eq!(
            g.note,
            "Gaps in the data: the rate of line R/1 on 2026-03-04 (10.00%) is implausible \
             against its history."
        );

        // At a limit of 4.5 the widened z = 4.8563328991605541 of the 6th (same
        // source) is beyond it against the history, the 5th's 1.8339673751137378 is
        // not; but the 6th's neighbours include the 4th's 100 defectives, and against
        // them it is in line, so only the 4th stands alone.
        let g = data_gaps(
            &lines,
            &GapOptions {
                implausible_z: 4.5,
                ..options()
            },
        );
        let dates: Vec<Date> = g.implausible.iter().map(|d| d.date).collect();
        assert_eq!(dates, [date!(2026 - 03 - 04)]);
    }

    #[test]
    fn a_rate_that_stays_raised_is_a_change_not_an_implausible_day() {
        // Every weekday of the period at 4% (x4 the noisy history's 0.9%): each day is
        // far beyond the history, but in line with its neighbours.
        let lines = [line("R/1", |d| {
            noisy_history(d)
                .or_else(|| (is_weekday(d) && d >= options().from).then_some((1000, 40)))
        })];
        let g = data_gaps(&lines, &options());
        assert!(g.implausible.is_empty(), "{:?}", g.implausible);
        // One day of 40% among them stands alone.
        let lines = [line("R/1", |d| {
            noisy_history(d).or_else(|| {
                (is_weekday(d) && d >= options().from)
                    .then_some((1000, if d == date!(2026 - 03 - 10) { 400 } else { 40 }))
            })
        })];
        let g = data_gaps(&lines, &options());
        let dates: Vec<Date> = g.implausible.iter().map(|d| d.date).collect();
        assert_eq!(dates, [date!(2026 - 03 - 10)]);
    }

    #[test]
    fn all_defective_days_are_implausible_even_without_history() {
        let lines = [line("N/1", |d| match d {
            d if d == date!(2026 - 03 - 03) => Some((20, 20)),
            d if d == date!(2026 - 03 - 04) => Some((19, 19)),
            _ => None,
        })];
        let g = data_gaps(&lines, &options());
        assert_eq!(g.implausible.len(), 1, "{:?}", g.implausible);
        let day = &g.implausible[0];
        assert_eq!(
            (day.date, day.rate, day.usual_rate, day.z),
            (date!(2026 - 03 - 03), 1.0, None, None)
        );
    }

    #[test]
    fn a_line_without_history_is_not_checked_for_stops_or_missing_days() {
        let period = |d: Date| d >= options().from;
        let lines = [
            // New in the period, posting irregularly.
            line("N/1", move |d| {
                (period(d) && d.weekday() == Weekday::Wednesday).then_some((1000, 10))
            }),
            // Five history days, then nothing: always stopped.
            line("N/2", |d| {
                (d >= date!(2026 - 02 - 16) && d <= date!(2026 - 02 - 20)).then_some((1000, 10))
            }),
            // A full history, then nothing in the period: stopped, and its run goes back
            // to its last posted day.
            line("N/3", move |d| {
                (is_weekday(d) && !period(d)).then_some((1000, 10))
            }),
        ];
        let g = data_gaps(&lines, &options());
        assert_eq!(
            g.stopped,
            [
                Stopped {
                    line: "N/2".to_owned(),
                    last_posted: Some(date!(2026 - 02 - 20)),
                    usual_days_without_data: 10,
                },
                Stopped {
                    line: "N/3".to_owned(),
                    last_posted: Some(date!(2026 - 02 - 27)),
                    usual_days_without_data: 10,
                },
            ]
        );
        assert!(
            g.missing_days.is_empty() && g.implausible.is_empty(),
            "{g:?}"
        );
        assert!(
            g.note.contains("2 lines stopped posting (N/2, N/3)"),
            "{}",
            g.note
        );
    }

    #[test]
    fn the_result_does_not_depend_on_the_order_of_the_input() {
        let mut lines = vec![
            weekdays_except("S/2", &[date!(2026 - 03 - 04)]),
            weekdays_except("S/1", &[date!(2026 - 03 - 05), date!(2026 - 03 - 03)]),
            line("R/1", |d| {
                noisy_history(d).or_else(|| {
                    let x = if d == date!(2026 - 03 - 04) { 200 } else { 10 };
                    (is_weekday(d) && d >= options().from).then_some((1000, x))
                })
            }),
            weekdays_except("Q/1", &[]),
        ];
        let first = data_gaps(&lines, &options());
        let codes: Vec<&str> = first.missing_days.iter().map(|m| m.line.as_str()).collect();
        assert_eq!(codes, ["S/1", "S/2"]);
        assert_eq!(first.implausible.len(), 1, "{:?}", first.implausible);
        assert_eq!(
            first.missing_days[0].dates,
            [date!(2026 - 03 - 03), date!(2026 - 03 - 05)]
        );
        lines.reverse();
        for l in &mut lines {
            l.days.reverse();
        }
        assert_eq!(data_gaps(&lines, &options()), first);
    }

    #[test]
    fn gaps_serialize_with_snake_case_keys_and_iso_dates() {
        let lines = [
            line("S/1", |d| {
                (is_weekday(d) && d < date!(2026 - 03 - 10)).then_some((1000, 10))
            }),
            weekdays_except("S/2", &[date!(2026 - 03 - 04)]),
        ];
        let json = serde_json::to_value(data_gaps(&lines, &options())).unwrap();
        assert_eq!(json["stopped"][0]["last_posted"], "2026-03-09");
        assert_eq!(json["stopped"][0]["usual_days_without_data"], 4);
        assert_eq!(json["missing_days"][0]["dates"][0], "2026-03-04");
        assert_eq!(json["site_days_off"], serde_json::json!([]));
        assert_eq!(json["implausible"], serde_json::json!([]));

        let quiet = data_gaps(&[weekdays_except("S/1", &[])], &options());
        assert!(quiet.is_empty());
        assert_eq!(quiet.note, "");
        let empty = GapOptions {
            from: date!(2026 - 03 - 16),
            ..options()
        };
        assert!(
            data_gaps(&lines, &empty).is_empty(),
            "from after to: no period"
        );
    }

    #[test]
    fn two_hundred_lines_over_eighty_four_days() {
        // 20 sites of 10 lines, 28 days of period after the 56 of history. Planted: L007
        // stops after the 20th, L050 misses the 10th, site S03 is off on the 16th.
        let o = GapOptions::for_period(date!(2026 - 03 - 02), date!(2026 - 03 - 29));
        let days: Vec<Date> = std::iter::successors(Some(o.history_from), |d| {
            d.next_day().filter(|n| *n <= o.to)
        })
        .collect();
        assert_eq!(days.len(), 84);
        let lines: Vec<LineDays> = (0..200)
            .map(|i| {
                let site = format!("S{:02}", i / 10);
                let code = format!("{site}/L{i:03}");
                let days = days
                    .iter()
                    .filter(|d| is_weekday(**d))
                    .filter(|d| !(i == 7 && **d > date!(2026 - 03 - 20)))
                    .filter(|d| !(i == 50 && **d == date!(2026 - 03 - 10)))
                    .filter(|d| !(i / 10 == 3 && **d == date!(2026 - 03 - 16)))
                    .map(|d| (*d, 1000 + i, 10 + (d.day() as u64 % 5)))
                    .collect();
                LineDays {
                    line: code,
                    site,
                    days,
                }
            })
            .collect();
        let g = data_gaps(&lines, &o);
        assert_eq!(g.stopped.len(), 1, "{:?}", g.stopped);
        assert_eq!(g.stopped[0].line, "S00/L007");
        assert_eq!(g.stopped[0].usual_days_without_data, 5);
        assert_eq!(
            g.missing_days,
            [MissingDays {
                line: "S05/L050".to_owned(),
                dates: vec![date!(2026 - 03 - 10)],
            }]
        );
        assert_eq!(
            g.site_days_off,
            [SiteDaysOff {
                site: "S03".to_owned(),
                dates: vec![date!(2026 - 03 - 16)],
            }]
        );
        assert!(g.implausible.is_empty(), "{:?}", g.implausible);
    }
}
