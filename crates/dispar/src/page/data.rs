//! Where the pages get their reports: the very computation of `GET /v1/reports` and
//! `GET /v1/reports/series` ([`crate::reports`]: the same parameter parsing, the same
//! store sums and group names, the same builder), fed with the strings of the page's
//! GET forms. Errors are the API's own ([`ApiError`], 422 naming each parameter), so
//! the page words them as the JSON answer does.

use dispar_core::date::MIN_DATE;
use dispar_core::error::FieldError;
use dispar_core::period::{DateRange, Granularity, Period};
use dispar_core::report::{Report, SeriesPoint};
use dispar_store::{AggregateQuery, Level as StoreLevel};
use time::{Date, Duration};

use crate::error::{ApiError, ErrorItem};
use crate::reports::compute::{self, Detail};
use crate::reports::spec::{RawQuery, ReportSpec};
use crate::state::AppState;

/// The statistical and filter parameters a page passes through unchanged to the
/// report computation (they are kept in the page's links and forms).
pub const PASS_THROUGH: [&str; 9] = [
    "product",
    "alpha",
    "method",
    "pairwise",
    "adjust",
    "resamples",
    "min_difference",
    "overdispersion",
    "as_of",
];

/// The strings of a report or series request, as a form sends them.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct PageQuery<'a> {
    /// `period=` (report page).
    pub period: Option<&'a str>,
    /// `from=` (series page).
    pub from: Option<&'a str>,
    /// `to=` (series page).
    pub to: Option<&'a str>,
    /// `level=` (`site`, `line`, `all-lines`; absent = `site`).
    pub level: Option<&'a str>,
    /// `site=`, used with `level=line` only (the page's site picker is for that).
    pub site: Option<&'a str>,
    /// The [`PASS_THROUGH`] parameters present, as (name, value).
    pub extra: &'a [(String, String)],
}

impl<'a> PageQuery<'a> {
    fn get(&self, name: &str) -> Option<&'a str> {
        self.extra
            .iter()
            .find(|(n, _)| n == name)
            .map(|(_, v)| v.as_str())
    }

    fn raw(&self) -> RawQuery<'a> {
        let is_line = self.level.map(str::trim) == Some("line");
        RawQuery {
            period: self.period,
            from: self.from,
            to: self.to,
            level: self.level,
            site: if is_line { self.site } else { None },
            product: self.get("product"),
            alpha: self.get("alpha"),
            method: self.get("method"),
            pairwise: self.get("pairwise"),
            adjust: self.get("adjust"),
            resamples: self.get("resamples"),
            min_difference: self.get("min_difference"),
            overdispersion: self.get("overdispersion"),
            as_of: self.get("as_of"),
        }
    }
}

/// A 422 naming each bad parameter (as the JSON endpoints answer).
fn params_error(errors: Vec<FieldError>) -> ApiError {
    ApiError::validation(
        "Some of the choices are not valid.",
        errors
            .into_iter()
            .map(|e| ErrorItem::parameter(e.field, e.reason, e.message))
            .collect(),
    )
}

/// A period from a form field, or a 422 naming `field`.
pub fn parse_period(text: &str, field: &str) -> Result<Period, ApiError> {
    text.trim()
        .parse::<Period>()
        .map_err(|e| params_error(vec![e.at(field)]))
}

/// The report of `q.period`, exactly as `GET /v1/reports` computes it.
pub async fn report(state: &AppState, q: PageQuery<'_>) -> Result<Report, ApiError> {
    let (spec, period) = ReportSpec::parse_report(&q.raw()).map_err(params_error)?;
    let spec = spec.until(state.limits().request_timeout);
    let loaded = compute::load(state.store().as_ref(), &spec, &period, Detail::Report)
        .await
        .map_err(ApiError::from)?;
    // The statistics are CPU-bound: off the async workers, as the JSON endpoint does.
    let deadline = spec.deadline;
    crate::reports::heavy(deadline, move || {
        compute::build(&spec, period, &loaded.groups)
    })
    .await
}

/// The verdicts from `q.from` to `q.to`, exactly as `GET /v1/reports/series`
/// computes them, with the significance level they used.
pub async fn series(
    state: &AppState,
    q: PageQuery<'_>,
) -> Result<(Vec<SeriesPoint>, f64), ApiError> {
    let (spec, periods) = ReportSpec::parse_series(&q.raw()).map_err(params_error)?;
    let spec = spec.until(state.limits().request_timeout);
    let alpha = spec.parameters.alpha;
    let mut loads = Vec::with_capacity(periods.len());
    for p in &periods {
        loads.push(
            compute::load(state.store().as_ref(), &spec, p, Detail::Summary)
                .await
                .map_err(ApiError::from)?,
        );
    }
    let deadline = spec.deadline;
    let points = crate::reports::heavy(deadline, move || {
        periods
            .iter()
            .zip(&loads)
            .map(|(p, l)| compute::summary(&spec, *p, &l.groups))
            .collect::<Vec<_>>()
    })
    .await?;
    Ok((points, alpha))
}

/// The period before `p` of the same kind (a range: the range of the same length
/// ending the day before).
pub fn previous(p: Period) -> Option<Period> {
    let before = p.first_day().previous_day()?;
    match p {
        Period::Range(r) => {
            let first = before.checked_sub(Duration::days(i64::from(r.days()) - 1))?;
            DateRange::new(first, before).ok().map(Period::Range)
        }
        p => Period::containing(p.granularity(), before).ok(),
    }
}

/// `n` periods back from `p` (stopping early at the calendar's start).
pub fn back(p: Period, n: usize) -> Period {
    let mut cur = p;
    for _ in 0..n {
        match previous(cur) {
            Some(prev) => cur = prev,
            None => break,
        }
    }
    cur
}

async fn has_data(state: &AppState, from: Date, to: Date) -> Result<bool, ApiError> {
    let a = state
        .store()
        .aggregate(&AggregateQuery {
            from,
            to,
            level: StoreLevel::Site,
            site: None,
            product: None,
            as_of: None,
        })
        .await
        .map_err(ApiError::from)?;
    Ok(a.groups.iter().any(|g| g.inspected > 0))
}

/// The default period of the pages: the latest complete ISO week (before `today`'s
/// week) that has data; the current week when no complete week has any.
///
/// Searches backwards in windows of 1, 4, 16, … weeks, then halves the window that
/// has data: about a dozen aggregate queries at most.
pub async fn default_week(state: &AppState, today: Date) -> Result<Period, ApiError> {
    let current = Period::containing(Granularity::IsoWeek, today)
        .map_err(|e| ApiError::internal(format!("the current week: {e}")))?;
    let Some(last_complete) = previous(current) else {
        return Ok(current);
    };
    // Find a window [first, last] of whole weeks ending at `last` that has data.
    let mut last = last_complete.last_day();
    let mut weeks: i64 = 1;
    let window = loop {
        let first = last
            .checked_sub(Duration::weeks(weeks) - Duration::days(1))
            .unwrap_or(MIN_DATE)
            .max(MIN_DATE);
        if has_data(state, first, last).await? {
            break Some((first, last));
        }
        if first <= MIN_DATE {
            break None;
        }
        match first.previous_day() {
            Some(d) => last = d,
            None => break None,
        }
        weeks = (weeks * 4).min(52 * 20);
    };
    let Some((mut first, mut last)) = window else {
        return Ok(current);
    };
    // Narrow to one week: keep the later half when it has data.
    while (last - first).whole_days() >= 7 {
        let span_weeks = ((last - first).whole_days() + 1).div_euclid(7).max(1);
        let later_first = last
            .checked_sub(Duration::weeks(span_weeks / 2) - Duration::days(1))
            .unwrap_or(first)
            .max(first);
        if has_data(state, later_first, last).await? {
            first = later_first;
        } else {
            last = later_first.previous_day().unwrap_or(first);
        }
    }
    Period::containing(Granularity::IsoWeek, last)
        .map_err(|e| ApiError::internal(format!("the default week: {e}")))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(s: &str) -> Period {
        s.parse().unwrap()
    }

    #[test]
    fn previous_periods_step_back_by_their_own_kind() {
        assert_eq!(previous(p("2026-W16")), Some(p("2026-W15")));
        assert_eq!(previous(p("2026-W01")), Some(p("2025-W52")));
        assert_eq!(previous(p("2026-03")), Some(p("2026-02")));
        assert_eq!(previous(p("2026-Q1")), Some(p("2025-Q4")));
        assert_eq!(previous(p("2026-03-01")), Some(p("2026-02-28")));
        assert_eq!(
            previous(p("2026-04-10..2026-04-19")),
            Some(p("2026-03-31..2026-04-09"))
        );
        assert_eq!(back(p("2026-W16"), 11), p("2026-W05"));
        assert_eq!(previous(p("2000")), None);
    }

    #[test]
    fn a_bad_period_names_its_parameter() {
        let e = parse_period("2026-W99", "period").unwrap_err();
        assert_eq!(e.status().as_u16(), 422);
        assert_eq!(e.errors()[0].parameter.as_deref(), Some("period"));
    }

    #[test]
    fn the_site_goes_to_the_computation_only_for_lines_of_one_site() {
        let extra = vec![("alpha".to_owned(), "0.01".to_owned())];
        let q = PageQuery {
            period: Some("2026-W16"),
            level: Some("site"),
            site: Some("KES"),
            extra: &extra,
            ..PageQuery::default()
        };
        assert_eq!(q.raw().site, None);
        assert_eq!(q.raw().alpha, Some("0.01"));
        let q = PageQuery {
            level: Some("line"),
            ..q
        };
        assert_eq!(q.raw().site, Some("KES"));
    }
}
