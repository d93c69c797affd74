//! Where the pages get their reports: the [`crate::reports::ReportService`] of the
//! JSON endpoints (the same parameter type and checks, the same cache, the same
//! computation), fed with the page's GET form. Errors are the API's own
//! ([`ApiError`], 422 naming each parameter), so the page words them as the JSON
//! answer does.

use std::sync::Arc;

use dispar_core::date::MIN_DATE;
use dispar_core::error::FieldError;
use dispar_core::period::{DateRange, Granularity, Period};
use dispar_core::report::Report;
use time::{Date, Duration};

use crate::error::{ApiError, ErrorItem};
use crate::reports::{ReportParams, ReportSpec, Series};
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

/// The parameters of a page's query string, as a form sends them: of each name the
/// first value only, trimmed, an empty one as absent; unknown names are ignored (a
/// page is for people, and a stray parameter should not cost them the page).
pub fn page_params(query: &str) -> ReportParams {
    let mut seen: Vec<String> = Vec::new();
    let mut pairs = Vec::new();
    for (name, value) in form_urlencoded::parse(query.as_bytes()) {
        if seen.iter().any(|s| *s == name) {
            continue;
        }
        seen.push(name.clone().into_owned());
        let value = value.trim();
        if !value.is_empty() {
            pairs.push((name.into_owned(), value.to_owned()));
        }
    }
    // Every field is optional text and no name is repeated any more, so reading the
    // pairs cannot fail.
    ReportParams::from_pairs(pairs).unwrap_or_default()
}

/// The [`PASS_THROUGH`] parameters present, as (name, value).
pub fn pass_through(params: &ReportParams) -> Vec<(String, String)> {
    PASS_THROUGH
        .iter()
        .filter_map(|name| params.get(name).map(|v| ((*name).to_owned(), v.to_owned())))
        .collect()
}

/// What the computation gets from a page: the page's site picker is for `level=line`
/// only, so for other levels the site is not a filter.
fn for_computation(params: &ReportParams) -> ReportParams {
    let is_line = params.level.as_deref() == Some("line");
    ReportParams {
        site: if is_line { params.site.clone() } else { None },
        ..params.clone()
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

/// The report of `params.period`, as `GET /v1/reports` answers it (from the same
/// cache).
pub async fn report(state: &AppState, params: &ReportParams) -> Result<Arc<Report>, ApiError> {
    known_site(state, params).await?;
    let (spec, period) =
        ReportSpec::parse_report(&for_computation(params)).map_err(params_error)?;
    Ok(state.reports().report(&spec, period).await?.value)
}

/// The verdicts from `params.from` to `params.to`, as `GET /v1/reports/series`
/// answers them (from the same cache).
pub async fn series(state: &AppState, params: &ReportParams) -> Result<Arc<Series>, ApiError> {
    known_site(state, params).await?;
    let (spec, span) = ReportSpec::parse_series(&for_computation(params)).map_err(params_error)?;
    Ok(state.reports().series(&spec, &span).await?.value)
}

/// A `site=` that names no registered site is a 422 naming `site`, at every level, as
/// the JSON endpoints answer it (the page ignores the site below `level=line`, but an
/// unknown one is still a mistake in the link, not a choice to ignore silently).
async fn known_site(state: &AppState, params: &ReportParams) -> Result<(), ApiError> {
    let Some(site) = params.site.as_deref() else {
        return Ok(());
    };
    let Ok(code) = dispar_core::code::SiteCode::parse(site) else {
        // A malformed code: the report's own check names it.
        return Ok(());
    };
    match state.store().get_site(&code).await {
        Ok(_) => Ok(()),
        Err(dispar_store::StoreError::NotFound { .. }) => Err(ApiError::validation(
            "Some of the choices are not valid.",
            vec![ErrorItem::parameter(
                "site",
                "unknown-site",
                format!("site {site} is not registered"),
            )],
        )),
        Err(e) => Err(ApiError::from(e)),
    }
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

/// The default period of the pages ([`find_default_week`]), looked up once per data
/// version and day.
pub async fn default_week(state: &AppState) -> Result<Period, ApiError> {
    let version = state.reports().data_version().await?;
    let day = time::OffsetDateTime::now_utc().date();
    if let Some(p) = state.pages().default_week(version, day) {
        return Ok(p);
    }
    let p = find_default_week(state, day).await?;
    state.pages().remember_default_week(version, day, p);
    Ok(p)
}

/// The default period of the pages: the latest complete ISO week (before `today`'s
/// week) that has data; the current week when no complete week has any.
///
/// Searches backwards in windows of 1, 4, 16, … weeks, then halves the window that
/// has data: about a dozen aggregate queries at most.
pub async fn find_default_week(state: &AppState, today: Date) -> Result<Period, ApiError> {
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
        if state.reports().has_data(first, last).await? {
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
        if state.reports().has_data(later_first, last).await? {
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
        let q = page_params("period=2026-W16&level=site&site=KES&alpha=0.01");
        assert_eq!(q.site.as_deref(), Some("KES"), "kept for the picker");
        assert_eq!(for_computation(&q).site, None);
        assert_eq!(for_computation(&q).alpha.as_deref(), Some("0.01"));
        let q = page_params("period=2026-W16&level=line&site=KES");
        assert_eq!(for_computation(&q).site.as_deref(), Some("KES"));
    }

    #[test]
    fn a_page_form_keeps_the_first_value_trimmed_and_ignores_unknown_names() {
        let q = page_params("alpha=+0.01+&alpha=0.05&colour=red&method=&method=g&as_of=x");
        assert_eq!(q.alpha.as_deref(), Some("0.01"));
        assert_eq!(q.method, None, "the first value was empty");
        assert_eq!(
            pass_through(&q),
            [
                ("alpha".to_owned(), "0.01".to_owned()),
                ("as_of".to_owned(), "x".to_owned())
            ]
        );
        assert_eq!(page_params(""), ReportParams::default());
    }
}
