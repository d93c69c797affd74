//! Report periods: a day, an ISO week, a month, a quarter, a year, or an inclusive
//! date range, parsed from and formatted to ISO 8601 forms, and resolved to dates.
//!
//! | form                     | period                                  |
//! |--------------------------|-----------------------------------------|
//! | `2026-03-14`             | one day                                 |
//! | `2026-W11`               | ISO week 11 of ISO week-year 2026       |
//! | `2026-03`                | March 2026                              |
//! | `2026-Q1`                | January to March 2026                   |
//! | `2026`                   | the calendar year                       |
//! | `2026-03-01..2026-03-20` | both days included                      |
//!
//! ISO weeks follow ISO 8601: weeks start on Monday and week 1 of a week-year is the
//! week containing that year's first Thursday (equivalently, January 4th), so a week
//! year has 52 or 53 weeks and its first days may lie in December of the previous
//! calendar year (2024-12-30 is in 2025-W01) and its last days in January of the next
//! (2027-01-01 is in 2026-W53). Lower-case `w` and `q` are accepted on input; output
//! is always upper case. Years are limited to 2000..=2100 and a range to at most
//! [`MAX_RANGE_DAYS`] days (ten years), so a request cannot ask for unbounded work.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Deserializer, Serialize, Serializer};
use time::{Date, Month, Weekday};

use crate::date::{digits, format_date, parse_iso_date};
use crate::error::{FieldError, reason};

/// Earliest year a period may name.
pub const MIN_YEAR: i32 = 2000;
/// Latest year a period may name.
pub const MAX_YEAR: i32 = 2100;
/// Longest accepted date range (and series span): ten years of days, 3,653.
pub const MAX_RANGE_DAYS: u32 = 3653;
/// Most periods in one series.
pub const MAX_SERIES_LEN: usize = MAX_RANGE_DAYS as usize;

/// A day's baseline looks for the group's days with production within this many times
/// the baseline length before it (a week per baseline day: a line producing at least
/// once a week has its full baseline).
pub const DAY_BASELINE_SPAN: usize = 7;

/// Why a period string or range is refused.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum PeriodError {
    /// Not one of the accepted forms.
    #[error(
        "{0:?} is not a period; use 2026-03-14, 2026-W11, 2026-03, 2026-Q1, 2026 or 2026-03-01..2026-03-20"
    )]
    Malformed(String),
    /// A year outside 2000..=2100.
    #[error("year {0} is outside {MIN_YEAR}..={MAX_YEAR}")]
    YearOutOfRange(i32),
    /// Month not in 1..=12.
    #[error("month {0} does not exist; months are 01 to 12")]
    MonthOutOfRange(u32),
    /// Quarter not in 1..=4.
    #[error("quarter {0} does not exist; quarters are Q1 to Q4")]
    QuarterOutOfRange(u32),
    /// Week 0, or a week beyond the week-year's last (52 or 53).
    #[error("ISO week-year {year} has weeks 01 to {weeks}, not {week}")]
    WeekOutOfRange {
        /// The ISO week-year.
        year: i32,
        /// The week asked for.
        week: u32,
        /// How many weeks the year has.
        weeks: u8,
    },
    /// A day that is not in the calendar (for example 2026-02-30).
    #[error("{0:?} is not a calendar day")]
    InvalidDay(String),
    /// A range whose first day is after its last.
    #[error("range starts on {first} after it ends on {last}")]
    Reversed {
        /// First day given.
        first: String,
        /// Last day given.
        last: String,
    },
    /// A range or series longer than ten years.
    #[error("span of {days} days is longer than the maximum of {MAX_RANGE_DAYS}")]
    TooLong {
        /// Days in the span.
        days: i64,
    },
    /// A series whose two ends are of different kinds (for example a week and a month).
    #[error("series ends must be the same kind of period, got a {from} and a {to}")]
    MixedGranularity {
        /// Kind of the first end.
        from: Granularity,
        /// Kind of the last end.
        to: Granularity,
    },
    /// A series of date ranges (only days, weeks, months, quarters and years step).
    #[error("a series steps by day, week, month, quarter or year, not by ranges")]
    RangeSeries,
}

impl PeriodError {
    /// The machine-readable reason (see [`crate::error::reason`]; `reversed-range`,
    /// `mixed-granularity` and `range-series` are specific to periods).
    pub fn reason(&self) -> &'static str {
        match self {
            PeriodError::Malformed(_) => reason::INVALID_FORMAT,
            PeriodError::YearOutOfRange(_)
            | PeriodError::MonthOutOfRange(_)
            | PeriodError::QuarterOutOfRange(_)
            | PeriodError::WeekOutOfRange { .. } => "out-of-range",
            PeriodError::InvalidDay(_) => reason::INVALID_DATE,
            PeriodError::Reversed { .. } => "reversed-range",
            PeriodError::TooLong { .. } => reason::TOO_LONG,
            PeriodError::MixedGranularity { .. } => "mixed-granularity",
            PeriodError::RangeSeries => "range-series",
        }
    }

    /// This error as a [`FieldError`] on `field` (for example the query parameter
    /// `period`).
    pub fn at(&self, field: impl Into<String>) -> FieldError {
        FieldError::new(field, self.reason(), self.to_string())
    }
}

/// An inclusive range of days, `first <= last`, at most [`MAX_RANGE_DAYS`] long.
///
/// Serializes as `{"first": "YYYY-MM-DD", "last": "YYYY-MM-DD"}`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct DateRange {
    first: Date,
    last: Date,
}

impl DateRange {
    /// The range `first ..= last`; refused when reversed or longer than ten years.
    pub fn new(first: Date, last: Date) -> Result<Self, PeriodError> {
        if first > last {
            return Err(PeriodError::Reversed {
                first: format_date(first),
                last: format_date(last),
            });
        }
        let days = i64::from(last.to_julian_day()) - i64::from(first.to_julian_day()) + 1;
        if days > i64::from(MAX_RANGE_DAYS) {
            return Err(PeriodError::TooLong { days });
        }
        Ok(Self { first, last })
    }

    /// First day, included.
    pub fn first(&self) -> Date {
        self.first
    }

    /// Last day, included.
    pub fn last(&self) -> Date {
        self.last
    }

    /// Number of days, at least 1.
    pub fn days(&self) -> u32 {
        u32::try_from(self.last.to_julian_day() - self.first.to_julian_day() + 1).unwrap_or(0)
    }

    /// True when `d` lies in the range.
    pub fn contains(&self, d: Date) -> bool {
        self.first <= d && d <= self.last
    }

    /// The days of the range in order.
    pub fn iter(&self) -> impl Iterator<Item = Date> + use<> {
        let (first, last) = (self.first, self.last);
        std::iter::successors(Some(first), move |d| d.next_day().filter(|n| *n <= last))
    }
}

impl fmt::Display for DateRange {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}..{}", format_date(self.first), format_date(self.last))
    }
}

impl Serialize for DateRange {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeStruct;
        let mut st = s.serialize_struct("DateRange", 2)?;
        st.serialize_field("first", &format_date(self.first))?;
        st.serialize_field("last", &format_date(self.last))?;
        st.end()
    }
}

/// The kind of a period, which is also the step of a series.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Granularity {
    /// One day.
    Day,
    /// One ISO week (Monday to Sunday).
    IsoWeek,
    /// One calendar month.
    Month,
    /// One calendar quarter.
    Quarter,
    /// One calendar year.
    Year,
    /// An arbitrary inclusive date range.
    Range,
}

impl fmt::Display for Granularity {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Granularity::Day => "day",
            Granularity::IsoWeek => "ISO week",
            Granularity::Month => "month",
            Granularity::Quarter => "quarter",
            Granularity::Year => "year",
            Granularity::Range => "date range",
        })
    }
}

/// A report period. Construct by parsing (`"2026-W11".parse::<Period>()`) or with
/// the checked constructors; the fields of each variant are always valid.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Period {
    /// One day.
    Day(Date),
    /// ISO week `week` of ISO week-year `year`.
    IsoWeek {
        /// ISO week-year (may differ from the calendar year of some of its days).
        year: i32,
        /// Week number, 1..=52 or 53.
        week: u8,
    },
    /// A calendar month.
    Month {
        /// Year.
        year: i32,
        /// Month.
        month: Month,
    },
    /// A calendar quarter.
    Quarter {
        /// Year.
        year: i32,
        /// Quarter, 1..=4.
        quarter: u8,
    },
    /// A calendar year.
    Year(i32),
    /// An inclusive date range.
    Range(DateRange),
}

/// Number of ISO weeks (52 or 53) in ISO week-year `year`: December 28th always lies
/// in the last week of its week-year (ISO 8601).
pub fn iso_weeks_in_year(year: i32) -> u8 {
    Date::from_calendar_date(year, Month::December, 28).map_or(52, Date::iso_week)
}

fn check_year(year: i32) -> Result<i32, PeriodError> {
    if (MIN_YEAR..=MAX_YEAR).contains(&year) {
        Ok(year)
    } else {
        Err(PeriodError::YearOutOfRange(year))
    }
}

fn day_offset(d: Date, days: i32) -> Option<Date> {
    Date::from_julian_day(d.to_julian_day() + days).ok()
}

impl Period {
    /// The ISO week `week` of week-year `year`, checked (week 53 only in years that
    /// have one).
    pub fn iso_week(year: i32, week: u32) -> Result<Self, PeriodError> {
        let year = check_year(year)?;
        let weeks = iso_weeks_in_year(year);
        match u8::try_from(week) {
            Ok(w) if (1..=weeks).contains(&w) => Ok(Period::IsoWeek { year, week: w }),
            _ => Err(PeriodError::WeekOutOfRange { year, week, weeks }),
        }
    }

    /// The month `month` (1..=12) of `year`, checked.
    pub fn month(year: i32, month: u32) -> Result<Self, PeriodError> {
        let year = check_year(year)?;
        let m = u8::try_from(month)
            .ok()
            .and_then(|m| Month::try_from(m).ok())
            .ok_or(PeriodError::MonthOutOfRange(month))?;
        Ok(Period::Month { year, month: m })
    }

    /// The quarter `quarter` (1..=4) of `year`, checked.
    pub fn quarter(year: i32, quarter: u32) -> Result<Self, PeriodError> {
        let year = check_year(year)?;
        match u8::try_from(quarter) {
            Ok(q) if (1..=4).contains(&q) => Ok(Period::Quarter { year, quarter: q }),
            _ => Err(PeriodError::QuarterOutOfRange(quarter)),
        }
    }

    /// The calendar year, checked.
    pub fn year(year: i32) -> Result<Self, PeriodError> {
        Ok(Period::Year(check_year(year)?))
    }

    /// The day `d`, checked (its year must be in 2000..=2100).
    pub fn day(d: Date) -> Result<Self, PeriodError> {
        check_year(d.year())?;
        Ok(Period::Day(d))
    }

    /// The period of kind `granularity` that contains `d` (for [`Granularity::Range`],
    /// the one-day range of `d`).
    pub fn containing(granularity: Granularity, d: Date) -> Result<Self, PeriodError> {
        match granularity {
            Granularity::Day => Period::day(d),
            Granularity::IsoWeek => {
                let (y, w, _) = d.to_iso_week_date();
                Period::iso_week(y, u32::from(w))
            }
            Granularity::Month => Period::month(d.year(), u32::from(u8::from(d.month()))),
            Granularity::Quarter => {
                Period::quarter(d.year(), u32::from((u8::from(d.month()) - 1) / 3 + 1))
            }
            Granularity::Year => Period::year(d.year()),
            Granularity::Range => {
                check_year(d.year())?;
                Ok(Period::Range(DateRange::new(d, d)?))
            }
        }
    }

    /// The kind of period.
    pub fn granularity(&self) -> Granularity {
        match self {
            Period::Day(_) => Granularity::Day,
            Period::IsoWeek { .. } => Granularity::IsoWeek,
            Period::Month { .. } => Granularity::Month,
            Period::Quarter { .. } => Granularity::Quarter,
            Period::Year(_) => Granularity::Year,
            Period::Range(_) => Granularity::Range,
        }
    }

    /// The days of the period as an inclusive range.
    pub fn dates(&self) -> DateRange {
        let (first, last) = self.bounds();
        DateRange { first, last }
    }

    /// First day of the period, included.
    pub fn first_day(&self) -> Date {
        self.bounds().0
    }

    /// Last day of the period, included.
    pub fn last_day(&self) -> Date {
        self.bounds().1
    }

    fn bounds(&self) -> (Date, Date) {
        // The constructors guarantee valid components and years in 2000..=2100, so the
        // fallbacks below are never taken; they avoid panics all the same.
        let ymd = |y: i32, m: Month, d: u8| Date::from_calendar_date(y, m, d).unwrap_or(Date::MIN);
        match *self {
            Period::Day(d) => (d, d),
            Period::IsoWeek { year, week } => {
                let first =
                    Date::from_iso_week_date(year, week, Weekday::Monday).unwrap_or(Date::MIN);
                (first, day_offset(first, 6).unwrap_or(first))
            }
            Period::Month { year, month } => (
                ymd(year, month, 1),
                ymd(year, month, time::util::days_in_month(month, year)),
            ),
            Period::Quarter { year, quarter } => {
                let m0 = Month::try_from(3 * quarter - 2).unwrap_or(Month::January);
                let m1 = Month::try_from(3 * quarter).unwrap_or(Month::December);
                (
                    ymd(year, m0, 1),
                    ymd(year, m1, time::util::days_in_month(m1, year)),
                )
            }
            Period::Year(y) => (ymd(y, Month::January, 1), ymd(y, Month::December, 31)),
            Period::Range(r) => (r.first, r.last),
        }
    }

    /// The next period of the same kind (for a range: the range of the same length
    /// starting the day after). `None` past year 2100.
    pub fn next(&self) -> Option<Period> {
        match *self {
            Period::Range(r) => {
                let first = r.last.next_day()?;
                let last = day_offset(first, i32::try_from(r.days()).ok()? - 1)?;
                check_year(last.year()).ok()?;
                DateRange::new(first, last).ok().map(Period::Range)
            }
            p => Period::containing(p.granularity(), p.last_day().next_day()?).ok(),
        }
    }

    /// The previous period of the same kind (for a range: the range of the same length
    /// ending the day before). `None` before year 2000.
    pub fn previous(&self) -> Option<Period> {
        match *self {
            Period::Range(r) => {
                let last = r.first.previous_day()?;
                let first = day_offset(last, 1 - i32::try_from(r.days()).ok()?)?;
                check_year(first.year()).ok()?;
                DateRange::new(first, last).ok().map(Period::Range)
            }
            p => Period::containing(p.granularity(), p.first_day().previous_day()?).ok(),
        }
    }

    /// The earlier periods a baseline of `n` periods is drawn from, oldest first: the
    /// `n` previous periods of the same kind (ISO weeks, months, ...; for a date range
    /// the `n` ranges of the same length before it). For a day, the baseline is each
    /// group's `n` latest earlier days *with production*, so this gives the candidate
    /// days: the [`DAY_BASELINE_SPAN`] x `n` days before it. Fewer near year 2000.
    pub fn earlier(&self, n: usize) -> Vec<Period> {
        let count = match self {
            Period::Day(_) => n.saturating_mul(DAY_BASELINE_SPAN),
            _ => n,
        };
        let mut out = Vec::with_capacity(count);
        let mut cur = *self;
        while out.len() < count {
            match cur.previous() {
                Some(p) => {
                    out.push(p);
                    cur = p;
                }
                None => break,
            }
        }
        out.reverse();
        out
    }

    /// Every period from `from` to `to`, both included, stepping by their common kind:
    /// `2026-W01` to `2026-W26` gives 26 weeks. Refused when the kinds differ, for
    /// date ranges, when `to` precedes `from`, or when the span exceeds ten years.
    pub fn series(from: Period, to: Period) -> Result<Vec<Period>, PeriodError> {
        let (g, h) = (from.granularity(), to.granularity());
        if g != h {
            return Err(PeriodError::MixedGranularity { from: g, to: h });
        }
        if g == Granularity::Range {
            return Err(PeriodError::RangeSeries);
        }
        DateRange::new(from.first_day(), to.last_day())?;
        let mut out = vec![from];
        let mut cur = from;
        while cur != to {
            match cur.next() {
                Some(n) if out.len() < MAX_SERIES_LEN => {
                    out.push(n);
                    cur = n;
                }
                _ => break,
            }
        }
        Ok(out)
    }
}

impl fmt::Display for Period {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Period::Day(d) => f.write_str(&format_date(*d)),
            Period::IsoWeek { year, week } => write!(f, "{year:04}-W{week:02}"),
            Period::Month { year, month } => write!(f, "{year:04}-{:02}", u8::from(*month)),
            Period::Quarter { year, quarter } => write!(f, "{year:04}-Q{quarter}"),
            Period::Year(y) => write!(f, "{y:04}"),
            Period::Range(r) => write!(f, "{r}"),
        }
    }
}

fn parse_day(s: &str) -> Result<Date, PeriodError> {
    let b = s.as_bytes();
    let shaped = b.len() == 10
        && b[4] == b'-'
        && b[7] == b'-'
        && [0..4, 5..7, 8..10]
            .iter()
            .all(|r| digits(&b[r.clone()]).is_some());
    if !shaped {
        return Err(PeriodError::Malformed(s.to_owned()));
    }
    let d = parse_iso_date(s).ok_or_else(|| PeriodError::InvalidDay(s.to_owned()))?;
    check_year(d.year())?;
    Ok(d)
}

impl FromStr for Period {
    type Err = PeriodError;

    fn from_str(s: &str) -> Result<Self, PeriodError> {
        let malformed = || PeriodError::Malformed(s.to_owned());
        if let Some((a, b)) = s.split_once("..") {
            let (first, last) = (parse_day(a)?, parse_day(b)?);
            return Ok(Period::Range(DateRange::new(first, last)?));
        }
        let b = s.as_bytes();
        let year_of = |b: &[u8]| -> Result<i32, PeriodError> {
            let y = digits(b).ok_or_else(malformed)?;
            i32::try_from(y).map_err(|_| malformed())
        };
        match b.len() {
            4 => Period::year(year_of(b)?),
            7 if b[4] == b'-' && matches!(b[5], b'Q' | b'q') => {
                let q = digits(&b[6..7]).ok_or_else(malformed)?;
                Period::quarter(year_of(&b[0..4])?, q)
            }
            7 if b[4] == b'-' => {
                let m = digits(&b[5..7]).ok_or_else(malformed)?;
                Period::month(year_of(&b[0..4])?, m)
            }
            8 if b[4] == b'-' && matches!(b[5], b'W' | b'w') => {
                let w = digits(&b[6..8]).ok_or_else(malformed)?;
                Period::iso_week(year_of(&b[0..4])?, w)
            }
            10 => Ok(Period::Day(parse_day(s)?)),
            _ => Err(malformed()),
        }
    }
}

impl Serialize for Period {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

impl<'de> Deserialize<'de> for Period {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let s = String::deserialize(d)?;
        s.parse().map_err(serde::de::Error::custom)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use time::macros::date;

    fn p(s: &str) -> Period {
        s.parse().unwrap_or_else(|e| panic!("{s}: {e}"))
    }

    #[test]
    fn every_form_round_trips_through_display() {
        for s in [
            "2026-03-14",
            "2026-W11",
            "2026-W01",
            "2026-03",
            "2026-Q1",
            "2026",
            "2026-03-01..2026-03-20",
        ] {
            assert_eq!(p(s).to_string(), s);
        }
        assert_eq!(
            p("2026-w11").to_string(),
            "2026-W11",
            "lower case w accepted"
        );
        assert_eq!(p("2026-q4").to_string(), "2026-Q4");
    }

    #[test]
    fn each_kind_resolves_to_its_inclusive_dates() {
        let cases = [
            ("2026-03-14", date!(2026 - 03 - 14), date!(2026 - 03 - 14)),
            ("2026-W11", date!(2026 - 03 - 09), date!(2026 - 03 - 15)),
            ("2026-02", date!(2026 - 02 - 01), date!(2026 - 02 - 28)),
            ("2024-02", date!(2024 - 02 - 01), date!(2024 - 02 - 29)),
            ("2026-Q1", date!(2026 - 01 - 01), date!(2026 - 03 - 31)),
            ("2026-Q4", date!(2026 - 10 - 01), date!(2026 - 12 - 31)),
            ("2026", date!(2026 - 01 - 01), date!(2026 - 12 - 31)),
            (
                "2026-03-01..2026-03-20",
                date!(2026 - 03 - 01),
                date!(2026 - 03 - 20),
            ),
        ];
        for (s, first, last) in cases {
            let r = p(s).dates();
            assert_eq!((r.first(), r.last()), (first, last), "{s}");
        }
        assert_eq!(p("2026-03-01..2026-03-20").dates().days(), 20);
    }

    /// Source: ISO 8601-1:2019, 3.1.1.23 (week-year) and 5.2.3 (week dates): weeks begin
    /// on Monday, week 01 is the week with the year's first Thursday; a year has 53
    /// weeks when it starts on a Thursday, or is a leap year starting on a Wednesday.
    #[test]
    fn iso_week_year_boundaries_follow_iso_8601() {
        // 2025-01-01 is a Wednesday, so 2025-W01 runs Monday 2024-12-30 .. 2025-01-05.
        let w = Period::containing(Granularity::IsoWeek, date!(2024 - 12 - 30)).unwrap();
        assert_eq!(w.to_string(), "2025-W01");
        assert_eq!(p("2025-W01").first_day(), date!(2024 - 12 - 30));
        // 2026-01-01 is a Thursday, so 2026 has 53 weeks and 2027-01-01 (a Friday)
        // is in 2026-W53, which runs 2026-12-28 .. 2027-01-03.
        let w = Period::containing(Granularity::IsoWeek, date!(2027 - 01 - 01)).unwrap();
        assert_eq!(w.to_string(), "2026-W53");
        assert_eq!(
            (w.first_day(), w.last_day()),
            (date!(2026 - 12 - 28), date!(2027 - 01 - 03))
        );
        // 2020 is a leap year starting on a Wednesday: 53 weeks. 2021 and 2025: 52.
        // 2015 starts on a Thursday: 53.
        let weeks: Vec<u8> = [2015, 2020, 2021, 2025, 2026, 2032]
            .map(iso_weeks_in_year)
            .to_vec();
        assert_eq!(weeks, [53, 53, 52, 52, 53, 53]);
        // 2021-01-03 (a Sunday) belongs to 2020-W53.
        let w = Period::containing(Granularity::IsoWeek, date!(2021 - 01 - 03)).unwrap();
        assert_eq!(w.to_string(), "2020-W53");
        // A year without week 53 refuses it.
        assert_eq!(
            "2025-W53".parse::<Period>(),
            Err(PeriodError::WeekOutOfRange {
                year: 2025,
                week: 53,
                weeks: 52
            })
        );
        assert!("2026-W53".parse::<Period>().is_ok());
        assert!(matches!(
            "2026-W00".parse::<Period>(),
            Err(PeriodError::WeekOutOfRange { .. })
        ));
    }

    #[test]
    fn bad_periods_are_refused_with_a_reason() {
        let cases = [
            ("2026-Q5", "out-of-range"),
            ("2026-Q0", "out-of-range"),
            ("2026-13", "out-of-range"),
            ("2026-00", "out-of-range"),
            ("2026-02-30", "invalid-date"),
            ("1999", "out-of-range"),
            ("2101-01", "out-of-range"),
            ("2026-03-20..2026-03-01", "reversed-range"),
            ("2010-01-01..2020-12-31", "too-long"),
            ("2026-W1", "invalid-format"),
            ("2026W11", "invalid-format"),
            ("2026-3", "invalid-format"),
            ("", "invalid-format"),
            ("last week", "invalid-format"),
            ("2026-03..2026-04", "invalid-format"),
            ("+2026", "invalid-format"),
        ];
        for (s, reason) in cases {
            let e = s.parse::<Period>().expect_err(s);
            assert_eq!(e.reason(), reason, "{s}: {e}");
        }
        let ok = "2016-01-01..2025-12-31".parse::<Period>().unwrap();
        assert_eq!(ok.dates().days(), 3653, "ten years is the most");
        let e = "2026-Q5".parse::<Period>().unwrap_err().at("period");
        assert_eq!(e.field, "period");
    }

    #[test]
    fn series_steps_by_the_kind_of_its_ends() {
        let weeks = Period::series(p("2026-W01"), p("2026-W26")).unwrap();
        assert_eq!(weeks.len(), 26);
        assert_eq!(weeks[25].to_string(), "2026-W26");
        let across = Period::series(p("2026-W52"), p("2027-W02")).unwrap();
        let names: Vec<String> = across.iter().map(ToString::to_string).collect();
        assert_eq!(names, ["2026-W52", "2026-W53", "2027-W01", "2027-W02"]);
        let months = Period::series(p("2025-11"), p("2026-02")).unwrap();
        assert_eq!(
            months.iter().map(ToString::to_string).collect::<Vec<_>>(),
            ["2025-11", "2025-12", "2026-01", "2026-02"]
        );
        assert_eq!(Period::series(p("2026-Q4"), p("2026-Q4")).unwrap().len(), 1);
        assert_eq!(
            Period::series(p("2024-02-27"), p("2024-03-01"))
                .unwrap()
                .len(),
            4
        );
        assert!(matches!(
            Period::series(p("2026-W01"), p("2026-03")),
            Err(PeriodError::MixedGranularity { .. })
        ));
        assert!(matches!(
            Period::series(p("2026-03"), p("2026-01")),
            Err(PeriodError::Reversed { .. })
        ));
        assert!(matches!(
            Period::series(p("2000"), p("2100")),
            Err(PeriodError::TooLong { .. })
        ));
        assert_eq!(
            p("2026-03-01..2026-03-10").next().unwrap().to_string(),
            "2026-03-11..2026-03-20"
        );
        assert_eq!(p("2100").next(), None);
    }

    #[test]
    fn periods_serialize_as_their_iso_text() {
        let j = serde_json::to_string(&p("2026-W11")).unwrap();
        assert_eq!(j, "\"2026-W11\"");
        let back: Period = serde_json::from_str(&j).unwrap();
        assert_eq!(back, p("2026-W11"));
        let r = serde_json::to_string(&p("2026-W11").dates()).unwrap();
        assert_eq!(r, r#"{"first":"2026-03-09","last":"2026-03-15"}"#);
    }

    #[test]
    fn baselines_are_the_earlier_periods_of_the_same_kind() {
        let labels = |v: Vec<Period>| v.iter().map(ToString::to_string).collect::<Vec<_>>();
        // ISO weeks across a week-year boundary (2026 has 53 weeks).
        assert_eq!(
            labels(p("2027-W02").earlier(3)),
            ["2026-W52", "2026-W53", "2027-W01"]
        );
        assert_eq!(
            labels(p("2026-W16").earlier(8)).first().map(String::as_str),
            Some("2026-W08")
        );
        assert_eq!(
            labels(p("2026-03").earlier(3)),
            ["2025-12", "2026-01", "2026-02"]
        );
        assert_eq!(labels(p("2026-Q1").earlier(2)), ["2025-Q3", "2025-Q4"]);
        // A date range: earlier ranges of the same length, back to back.
        assert_eq!(
            labels(p("2026-03-01..2026-03-10").earlier(2)),
            ["2026-02-09..2026-02-18", "2026-02-19..2026-02-28"]
        );
        // A day: the candidate days, DAY_BASELINE_SPAN per baseline day.
        let days = p("2026-03-14").earlier(4);
        assert_eq!(days.len(), 4 * DAY_BASELINE_SPAN);
        assert_eq!(days.last().unwrap().to_string(), "2026-03-13");
        assert_eq!(days.first().unwrap().to_string(), "2026-02-14");
        // Nothing before year 2000.
        assert_eq!(labels(p("2000-02").earlier(3)), ["2000-01"]);
        assert_eq!(p("2000-01-01..2000-01-05").previous(), None);
    }
}
