//! What a report is asked for, checked: the [`ReportParams`] of `GET /v1/reports`,
//! `GET /v1/reports/series`, the pages and `dispar report`, checked once for all.
//!
//! Every problem is collected (not only the first), each as a
//! [`FieldError`] whose `field` is the query parameter's name (`period`, `alpha`,
//! `as_of`, ...); the HTTP layer turns them into `parameter` entries of a 422 problem
//! and the command line into `--flag: message` lines.

use dispar_core::code::{ProductCode, SiteCode};
use dispar_core::error::FieldError;
use dispar_core::period::Period;
use dispar_core::report::{Filters, Level, LevelKind, Parameters, ReportRequest};
use dispar_store::AggregateQuery;
use time::format_description::FormatItem;
use time::macros::format_description;
use time::{OffsetDateTime, UtcOffset};

use super::params::ReportParams;

/// Most periods one series may hold (`GET /v1/reports/series`); more is a 422 on `to`.
pub const MAX_SERIES_PERIODS: usize = 400;

/// `as_of` as echoed and keyed: UTC, exactly six fractional digits (the store keeps
/// microseconds), so equal instants give equal text.
const INSTANT: &[FormatItem<'static>] =
    format_description!("[year]-[month]-[day]T[hour]:[minute]:[second].[subsecond digits:6]Z");

/// Everything of a report request but its period(s), checked and normalized.
#[derive(Debug, Clone, PartialEq)]
pub struct ReportSpec {
    /// Which groups are compared.
    pub level: Level,
    /// Site and product filters (for `level=line` the site is here too).
    pub filters: Filters,
    /// The statistical choices.
    pub parameters: Parameters,
    /// Read the data as it stood at this instant (UTC, whole microseconds).
    pub as_of: Option<OffsetDateTime>,
}

/// The periods of a series, `from` to `to` in steps of their kind: never empty.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Span {
    /// The first period.
    pub from: Period,
    /// The last period.
    pub to: Period,
    /// Every period from `from` to `to`, in order.
    pub periods: Vec<Period>,
}

fn required(field: &str, example: &str) -> FieldError {
    FieldError::new(
        field,
        dispar_core::error::reason::REQUIRED,
        format!("{field} is required, for example {field}={example}"),
    )
}

fn parse_period_field(s: Option<&str>, field: &str, example: &str) -> Result<Period, FieldError> {
    match s {
        None | Some("") => Err(required(field, example)),
        Some(s) => s.parse::<Period>().map_err(|e| e.at(field)),
    }
}

/// Reads an RFC 3339 timestamp (`2026-03-14T08:00:00Z`, any offset), truncated to
/// microseconds in UTC.
pub fn parse_as_of(s: &str) -> Result<OffsetDateTime, FieldError> {
    let t = OffsetDateTime::parse(s, &time::format_description::well_known::Rfc3339)
        .map_err(|_| {
            FieldError::new(
                "as_of",
                dispar_core::error::reason::INVALID_FORMAT,
                format!("{s:?} is not an RFC 3339 timestamp; use for example 2026-03-14T08:00:00Z"),
            )
        })?
        .to_offset(UtcOffset::UTC);
    let nanos = t.nanosecond();
    Ok(t.replace_nanosecond(nanos - nanos % 1000).unwrap_or(t))
}

/// An instant as [`ReportSpec`] echoes it (`2026-03-14T08:00:00.000000Z`).
pub fn format_as_of(t: OffsetDateTime) -> String {
    t.format(INSTANT).unwrap_or_else(|_| t.to_string())
}

impl ReportSpec {
    /// Checks level, filters, statistical parameters and `as_of`, collecting every
    /// problem into `errors` (the period fields are checked by the callers).
    fn parse_into(raw: &ReportParams, errors: &mut Vec<FieldError>) -> Option<ReportSpec> {
        let site = match raw.site.as_deref() {
            Some(s) => match SiteCode::parse_field(s, "site") {
                Ok(code) => Some(code),
                Err(e) => {
                    errors.push(e);
                    None
                }
            },
            None => None,
        };
        let product = match raw.product.as_deref() {
            Some(s) => match ProductCode::parse_field(s, "product") {
                Ok(code) => Some(code),
                Err(e) => {
                    errors.push(e);
                    None
                }
            },
            None => None,
        };
        // A bad site code was reported above; `level=line` with a bad site must not
        // also say "site is required".
        let level = if raw.site.is_some() && site.is_none() {
            if let Some(Err(e)) = raw
                .level
                .as_deref()
                .map(|l| LevelKind::parse_field(l, "level"))
            {
                errors.push(e);
            }
            None
        } else {
            Level::from_query(raw.level.as_deref(), site.as_ref())
                .map_err(|e| errors.push(e))
                .ok()
        };
        let parameters = Parameters::from_text(|name| raw.get(name))
            .map_err(|e| errors.extend(e.into_errors()))
            .ok();
        let as_of = match raw.as_of.as_deref() {
            Some(s) => match parse_as_of(s) {
                Ok(t) => Some(Some(t)),
                Err(e) => {
                    errors.push(e);
                    None
                }
            },
            None => Some(None),
        };
        Some(ReportSpec {
            level: level?,
            filters: Filters { site, product },
            parameters: parameters?,
            as_of: as_of?,
        })
    }

    /// A one-period report request: `period` is required.
    pub fn parse_report(raw: &ReportParams) -> Result<(ReportSpec, Period), Vec<FieldError>> {
        let mut errors = Vec::new();
        let period = parse_period_field(raw.period.as_deref(), "period", "2026-03")
            .map_err(|e| errors.push(e))
            .ok();
        let spec = Self::parse_into(raw, &mut errors);
        match (spec, period) {
            (Some(spec), Some(period)) if errors.is_empty() => Ok((spec, period)),
            _ => Err(errors),
        }
    }

    /// A series request: `from` and `to` of the same kind (day, week, month, quarter,
    /// year), at most [`MAX_SERIES_PERIODS`] periods.
    pub fn parse_series(raw: &ReportParams) -> Result<(ReportSpec, Span), Vec<FieldError>> {
        let mut errors = Vec::new();
        let from = parse_period_field(raw.from.as_deref(), "from", "2026-W01")
            .map_err(|e| errors.push(e))
            .ok();
        let to = parse_period_field(raw.to.as_deref(), "to", "2026-W26")
            .map_err(|e| errors.push(e))
            .ok();
        let periods = match (from, to) {
            (Some(from), Some(to)) => series(from, to)
                .map(|periods| Span { from, to, periods })
                .map_err(|e| errors.push(e))
                .ok(),
            _ => None,
        };
        let spec = Self::parse_into(raw, &mut errors);
        match (spec, periods) {
            (Some(spec), Some(periods)) if errors.is_empty() => Ok((spec, periods)),
            _ => Err(errors),
        }
    }

    /// The normalized parameters as one string: equal strings mean equal reports of
    /// equal data (the cache and ETag key, with the period and the data version).
    pub fn key(&self) -> String {
        let p = &self.parameters;
        let level = match &self.level {
            Level::Site => "site".to_owned(),
            Level::Line { site } => format!("line:{site}"),
            Level::AllLines => "all-lines".to_owned(),
        };
        format!(
            "level={level}&site={}&product={}&alpha={:?}&method={}&pairwise={}&adjust={}&resamples={}&min_difference={}&overdispersion={}&baseline={}&stratify={}&as_of={}",
            self.filters.site.as_ref().map_or("", SiteCode::as_str),
            self.filters
                .product
                .as_ref()
                .map_or("", ProductCode::as_str),
            p.alpha,
            p.method,
            p.pairwise,
            p.adjust,
            p.resamples,
            p.min_difference.map_or(String::new(), |d| format!("{d:?}")),
            p.overdispersion,
            p.baseline
                .map_or_else(|| "off".to_owned(), |n| n.to_string()),
            p.stratify,
            self.as_of.map(format_as_of).unwrap_or_default(),
        )
    }

    /// The store query for `period`.
    pub fn aggregate_query(&self, period: &Period) -> AggregateQuery {
        AggregateQuery {
            from: period.first_day(),
            to: period.last_day(),
            level: match &self.level {
                Level::Site => dispar_store::Level::Site,
                Level::Line { site } => dispar_store::Level::Line { site: site.clone() },
                Level::AllLines => dispar_store::Level::AllLines,
            },
            site: self.filters.site.clone(),
            product: self.filters.product.clone(),
            as_of: self.as_of,
            by_product: false,
        }
    }

    /// The report builder's request for `period`; the statistics give up at
    /// `deadline`.
    pub fn request(&self, period: Period, deadline: Option<std::time::Instant>) -> ReportRequest {
        ReportRequest {
            period: Some(period),
            level: Some(self.level.kind()),
            filters: self.filters.clone(),
            parameters: self.parameters.clone(),
            as_of: self.as_of.map(format_as_of),
            deadline,
            baseline: None,
            gaps: None,
        }
    }
}

/// The periods from `from` to `to`, refusing more than [`MAX_SERIES_PERIODS`].
fn series(from: Period, to: Period) -> Result<Vec<Period>, FieldError> {
    let periods = Period::series(from, to).map_err(|e| {
        // Kind mismatches and ranges are about `to` relative to `from`; a reversed
        // series is about `to` too.
        e.at("to")
    })?;
    if periods.last() != Some(&to) {
        return Err(FieldError::new(
            "to",
            "reversed-range",
            format!("to ({to}) is before from ({from})"),
        ));
    }
    if periods.len() > MAX_SERIES_PERIODS {
        return Err(FieldError::new(
            "to",
            "too-many-periods",
            format!(
                "{from} to {to} is {} periods; a series holds at most {MAX_SERIES_PERIODS} (ask for a coarser period or a shorter span)",
                periods.len()
            ),
        ));
    }
    Ok(periods)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fields(e: &[FieldError]) -> Vec<&str> {
        let mut f: Vec<&str> = e.iter().map(|e| e.field.as_str()).collect();
        f.sort_unstable();
        f
    }

    #[test]
    fn a_report_needs_a_period_and_every_bad_parameter_is_named() {
        let e = ReportSpec::parse_report(&ReportParams::default()).unwrap_err();
        assert_eq!(fields(&e), ["period"]);
        assert_eq!(e[0].reason, "required");
        let raw = ReportParams {
            period: Some("2026-13".to_owned()),
            level: Some("plant".to_owned()),
            alpha: Some("2".to_owned()),
            method: Some("chi".to_owned()),
            as_of: Some("yesterday".to_owned()),
            product: Some("bad product".to_owned()),
            ..ReportParams::default()
        };
        let e = ReportSpec::parse_report(&raw).unwrap_err();
        assert_eq!(
            fields(&e),
            ["alpha", "as_of", "level", "method", "period", "product"]
        );
    }

    #[test]
    fn level_line_needs_a_site_but_a_bad_site_is_reported_once() {
        let raw = ReportParams {
            period: Some("2026-03".to_owned()),
            level: Some("line".to_owned()),
            ..ReportParams::default()
        };
        let e = ReportSpec::parse_report(&raw).unwrap_err();
        assert_eq!(fields(&e), ["site"]);
        assert_eq!(e[0].reason, "required");
        let raw = ReportParams {
            site: Some("no/slash".to_owned()),
            ..raw.clone()
        };
        let e = ReportSpec::parse_report(&raw).unwrap_err();
        assert_eq!(fields(&e), ["site"]);
        assert_eq!(e[0].reason, "invalid-character");
    }

    #[test]
    fn equal_requests_written_differently_have_one_key() {
        let a = ReportParams {
            period: Some("2026-03".to_owned()),
            alpha: Some("0.05".to_owned()),
            as_of: Some("2026-03-14T09:00:00+01:00".to_owned()),
            ..ReportParams::default()
        };
        let b = ReportParams {
            period: Some("2026-03".to_owned()),
            alpha: Some("0.050".to_owned()),
            level: Some("site".to_owned()),
            method: Some("auto".to_owned()),
            as_of: Some("2026-03-14T08:00:00.000000Z".to_owned()),
            ..ReportParams::default()
        };
        let (sa, _) = ReportSpec::parse_report(&a).unwrap();
        let (sb, _) = ReportSpec::parse_report(&b).unwrap();
        assert_eq!(sa.key(), sb.key());
        assert!(
            sa.key().contains("as_of=2026-03-14T08:00:00.000000Z"),
            "{}",
            sa.key()
        );
        let c = ReportParams {
            alpha: Some("0.01".to_owned()),
            ..a.clone()
        };
        let (sc, _) = ReportSpec::parse_report(&c).unwrap();
        assert_ne!(sa.key(), sc.key());
    }

    #[test]
    fn a_series_steps_by_the_period_kind_and_is_capped() {
        let raw = ReportParams {
            from: Some("2026-W01".to_owned()),
            to: Some("2026-W26".to_owned()),
            ..ReportParams::default()
        };
        let (_, span) = ReportSpec::parse_series(&raw).unwrap();
        assert_eq!(span.periods.len(), 26);
        assert_eq!(span.periods[25].to_string(), "2026-W26");
        assert_eq!((span.from, span.to), (span.periods[0], span.periods[25]));
        let mixed = ReportParams {
            to: Some("2026-06".to_owned()),
            ..raw.clone()
        };
        let e = ReportSpec::parse_series(&mixed).unwrap_err();
        assert_eq!(fields(&e), ["to"]);
        assert_eq!(e[0].reason, "mixed-granularity");
        let reversed = ReportParams {
            from: Some("2026-W10".to_owned()),
            to: Some("2026-W02".to_owned()),
            ..raw.clone()
        };
        let e = ReportSpec::parse_series(&reversed).unwrap_err();
        assert_eq!(fields(&e), ["to"]);
        let long = ReportParams {
            from: Some("2025-01-01".to_owned()),
            to: Some("2026-12-31".to_owned()),
            ..raw.clone()
        };
        let e = ReportSpec::parse_series(&long).unwrap_err();
        assert_eq!(e[0].reason, "too-many-periods");
        let days = ReportParams {
            from: Some("2026-01-01".to_owned()),
            to: Some("2026-12-31".to_owned()),
            ..raw.clone()
        };
        assert_eq!(
            ReportSpec::parse_series(&days).unwrap().1.periods.len(),
            365
        );
    }
}
