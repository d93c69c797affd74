//! The one owner of report computation: [`ReportService`] holds the store, the cache
//! of computed reports and the CPU slots, and answers [`ReportService::report`] and
//! [`ReportService::series`] for the JSON endpoints, the pages and `dispar report`
//! alike. So a page and the JSON endpoint asked the same thing share one cache entry,
//! and every caller gets the same report of the same data.
//!
//! Each answer carries the report as a value (for the pages and the command line)
//! and as its JSON body (for the API), both kept in the cache; an entry is counted as
//! twice its JSON, the value in memory being about as large as its text.
//! `dispar_report_cache_total{result="hit|miss"}` counts the cache outcomes.

use std::fmt;
use std::sync::Arc;
use std::time::{Duration, Instant};

use axum::body::Bytes;
use dispar_core::period::{Granularity, Period};
use dispar_core::report::baseline::series_headline_with_trends;
use dispar_core::report::model::ParametersEcho;
use dispar_core::report::trend::{GroupTrend, series_trends};
use dispar_core::report::{Filters, LevelKind, Report, SeriesPoint};
use dispar_store::{AggregateQuery, Store, StoreError, VersionScope};
use serde::Serialize;
use time::Date;
use tokio::sync::Semaphore;

use super::cache::ReportCache;
use super::compute::{self, Detail};
use super::spec::{ReportSpec, Span};
use crate::error::{ApiError, ProblemKind};
use crate::telemetry::CACHE_TOTAL;

/// The body of `GET /v1/reports/series`: one verdict per period.
#[derive(Debug, Clone, Serialize)]
pub struct Series {
    /// The first period.
    pub from: Period,
    /// The last period.
    pub to: Period,
    /// The kind of every period.
    pub granularity: Granularity,
    /// What is compared.
    pub level: LevelKind,
    /// Site and product filters.
    #[serde(skip_serializing_if = "Filters::is_empty")]
    pub filters: Filters,
    /// The statistical choices.
    pub parameters: ParametersEcho,
    /// The series in words: the changes over the range ("KES worse than its usual in
    /// 2026-W15–W18"), or, with `baseline=off`, how many periods differ; then the
    /// rising trends ("KES getting steadily worse over 2026-W01–W12").
    pub headline: String,
    /// One verdict per period, in order.
    pub periods: Vec<SeriesPoint>,
    /// Each group's trend over the periods: the groups of the last period in its
    /// order, then the others by code.
    pub trends: Vec<GroupTrend>,
    /// The cautions every series carries.
    pub cautions: Vec<String>,
}

/// A report or series as the service answers it.
#[derive(Debug, Clone)]
pub struct Answer<T> {
    /// The report (or series) itself.
    pub value: Arc<T>,
    /// Its JSON body, as the API sends it.
    pub body: Bytes,
    /// The store's data version it was computed from.
    pub version: u64,
    /// Where a computed answer spent its time; `None` when it came from the cache.
    pub timing: Option<Timing>,
}

/// Where a computed answer spent its time, in milliseconds: `db` (sums and names from
/// the store), `stats` (the report builder), `json` (serialization).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Timing {
    /// Reading the sums and names.
    pub db: f64,
    /// Computing the statistics.
    pub stats: f64,
    /// Serializing the body.
    pub json: f64,
}

/// Why a report could not be given.
#[derive(Debug)]
pub enum ReportError {
    /// The store refused or failed (an unknown site, a busy or broken database).
    Store(StoreError),
    /// The statistics ran past the time limit; the cut-short report is dropped.
    TimedOut,
    /// The computation itself failed (a worker panicked, the JSON could not be
    /// written); the cause is for the log.
    Failed(String),
    /// The request's Monte Carlo work would exceed the bound ([`super::cost`]); the
    /// words say how many resamples would fit.
    TooCostly(String),
}

impl fmt::Display for ReportError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ReportError::Store(e) => e.fmt(f),
            ReportError::TimedOut => f.write_str("the report took longer than allowed"),
            ReportError::Failed(cause) => write!(f, "the report computation failed: {cause}"),
            ReportError::TooCostly(why) => f.write_str(why),
        }
    }
}

impl std::error::Error for ReportError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            ReportError::Store(e) => Some(e),
            _ => None,
        }
    }
}

impl From<StoreError> for ReportError {
    fn from(e: StoreError) -> Self {
        ReportError::Store(e)
    }
}

impl From<ReportError> for ApiError {
    fn from(e: ReportError) -> Self {
        match e {
            ReportError::Store(e) => ApiError::from(e),
            ReportError::TimedOut => ApiError::new(
                ProblemKind::Timeout,
                "The report took longer than this server allows; ask for a shorter period, fewer resamples or method=auto.",
            ),
            e @ ReportError::Failed(_) => ApiError::internal(e),
            ReportError::TooCostly(why) => ApiError::validation(
                "The report would take too much computing.",
                vec![crate::error::ErrorItem::parameter(
                    "resamples",
                    "too-costly",
                    why,
                )],
            ),
        }
    }
}

/// What the cache holds: the value and its JSON body.
#[derive(Debug, Clone)]
enum Cached {
    Report(Arc<Report>, Bytes),
    Series(Arc<Series>, Bytes),
}

/// What a report of `period` reads: its days widened to its baseline window (the first
/// day of the earliest earlier period; for a day, the candidate days a baseline of days
/// with production is drawn from) and to the history its gaps in the data are judged
/// against, and its site (line level, or a site filter).
pub fn report_scope(spec: &ReportSpec, period: Period) -> VersionScope {
    VersionScope {
        from: window_start(spec, period).min(compute::gaps_start(&period)),
        to: period.last_day(),
        site: scope_site(spec),
    }
}

/// What a series reads: its periods and the baseline window before the first.
pub fn series_scope(spec: &ReportSpec, span: &Span) -> VersionScope {
    VersionScope {
        from: window_start(spec, span.from),
        to: span
            .periods
            .last()
            .map_or(span.to.last_day(), Period::last_day),
        site: scope_site(spec),
    }
}

fn window_start(spec: &ReportSpec, first: Period) -> Date {
    spec.parameters
        .baseline
        .and_then(|n| first.earlier(n).first().map(Period::first_day))
        .unwrap_or(first.first_day())
}

fn scope_site(spec: &ReportSpec) -> Option<dispar_core::code::SiteCode> {
    match &spec.level {
        dispar_core::report::Level::Line { site } => Some(site.clone()),
        _ => spec.filters.site.clone(),
    }
}

/// The cache and entity-tag key of a one-period report.
pub fn report_key(spec: &ReportSpec, period: Period) -> String {
    format!("report&period={period}&{}", spec.key())
}

/// The cache and entity-tag key of a series.
pub fn series_key(spec: &ReportSpec, span: &Span) -> String {
    format!("series&from={}&to={}&{}", span.from, span.to, spec.key())
}

fn ms_since(t: Instant) -> f64 {
    t.elapsed().as_secs_f64() * 1e3
}

fn count(result: &'static str) {
    metrics::counter!(CACHE_TOTAL, "result" => result).increment(1);
}

/// Reports from the store, computed at most one per core at a time and kept in a
/// bounded cache. Cheap to share behind an `Arc`.
#[derive(Debug)]
pub struct ReportService {
    store: Arc<dyn Store>,
    cache: ReportCache<Cached>,
    slots: Arc<Semaphore>,
    /// One heavy job per API key at a time: a key's second uncached report waits for
    /// its first, so one key cannot hold every CPU slot.
    per_key: std::sync::Mutex<std::collections::HashMap<dispar_store::KeyId, Arc<Semaphore>>>,
    time_limit: Option<Duration>,
}

impl ReportService {
    /// A service over `store` whose statistics give up `time_limit` after a
    /// computation starts (`None`: never), with one CPU slot per core.
    pub fn new(store: Arc<dyn Store>, time_limit: Option<Duration>) -> Self {
        let cores = std::thread::available_parallelism().map_or(2, std::num::NonZeroUsize::get);
        Self {
            store,
            cache: ReportCache::default(),
            slots: Arc::new(Semaphore::new(cores)),
            per_key: std::sync::Mutex::default(),
            time_limit,
        }
    }

    /// The store's data version now (every write bumps it).
    pub async fn data_version(&self) -> Result<u64, ReportError> {
        Ok(self.store.data_version().await?)
    }

    /// The data version of what a report of `period` reads ([`report_scope`]): what
    /// its cache entry and entity tag are keyed by, so a write elsewhere leaves both
    /// alone. Held in the database, so every instance on it agrees.
    pub async fn report_version(
        &self,
        spec: &ReportSpec,
        period: Period,
    ) -> Result<u64, ReportError> {
        Ok(self
            .store
            .scoped_version(&report_scope(spec, period))
            .await?)
    }

    /// [`Self::report_version`] for a series ([`series_scope`]).
    pub async fn series_version(&self, spec: &ReportSpec, span: &Span) -> Result<u64, ReportError> {
        Ok(self.store.scoped_version(&series_scope(spec, span)).await?)
    }

    /// True when any site inspected a unit from `first` to `last` (both included).
    pub async fn has_data(&self, first: Date, last: Date) -> Result<bool, ReportError> {
        let a = self
            .store
            .aggregate(&AggregateQuery {
                from: first,
                to: last,
                level: dispar_store::Level::Site,
                site: None,
                product: None,
                as_of: None,
                by_product: false,
            })
            .await?;
        Ok(a.groups.iter().any(|g| g.inspected > 0))
    }

    /// The report of `period`, from the cache when the data have not changed since it
    /// was computed.
    pub async fn report(
        &self,
        spec: &ReportSpec,
        period: Period,
    ) -> Result<Answer<Report>, ReportError> {
        let version = self.report_version(spec, period).await?;
        self.report_at(version, spec, period, None).await
    }

    /// [`Self::report`] for a caller that has just read the data `version` itself
    /// (to answer a conditional request without computing).
    /// `who` is the API key asking (one heavy job per key at a time; `None` for the
    /// command line and the pages, which have their own budget).
    pub async fn report_at(
        &self,
        version: u64,
        spec: &ReportSpec,
        period: Period,
        who: Option<dispar_store::KeyId>,
    ) -> Result<Answer<Report>, ReportError> {
        let key = report_key(spec, period);
        if let Some(Cached::Report(value, body)) = self.cache.get(&key, version) {
            count("hit");
            return Ok(Answer {
                value,
                body,
                version,
                timing: None,
            });
        }
        count("miss");
        let deadline = self.deadline();
        let started = Instant::now();
        // Three reads on their own connections at once: the day-by-day read of the gaps
        // in the data costs most, and the others overlap it.
        let store = self.store.as_ref();
        let (loaded, window, gaps) = tokio::try_join!(
            compute::load(store, spec, &period, Detail::Report),
            compute::load_window(store, spec, &period),
            compute::load_gaps(store, spec, &period),
        )?;
        let db = ms_since(started);
        // Keyed by the scoped version the caller read before the sums: the data read
        // are at least that new, so an entry is never older than its tag (a write in
        // between only makes the next request miss).
        let window = window.map(|w| w.0);
        let resamples = spec.parameters.resamples;
        let cells = super::cost::period_cells(spec.parameters.method, resamples, &loaded.groups);
        if let Some(why) = super::cost::refusal(cells, resamples) {
            return Err(ReportError::TooCostly(why));
        }
        let spec = spec.clone();
        let (report, body, stats, json) = self
            .blocking(deadline, who, move || {
                let started = Instant::now();
                let report = compute::build(&spec, period, &loaded.groups, window, gaps, deadline);
                let stats = ms_since(started);
                let started = Instant::now();
                let body = compute::to_json(&report)?;
                Ok((report, body, stats, ms_since(started)))
            })
            .await?;
        let value = Arc::new(report);
        let body = Bytes::from(body);
        self.cache.insert(
            &key,
            version,
            Cached::Report(value.clone(), body.clone()),
            2 * body.len(),
        );
        Ok(Answer {
            value,
            body,
            version,
            timing: Some(Timing { db, stats, json }),
        })
    }

    /// The verdict of every period of `span`, from the cache when the data have not
    /// changed since it was computed.
    pub async fn series(
        &self,
        spec: &ReportSpec,
        span: &Span,
    ) -> Result<Answer<Series>, ReportError> {
        let version = self.series_version(spec, span).await?;
        self.series_at(version, spec, span, None).await
    }

    /// [`Self::series`] for a caller that has just read the data `version` itself.
    pub async fn series_at(
        &self,
        version: u64,
        spec: &ReportSpec,
        span: &Span,
        who: Option<dispar_store::KeyId>,
    ) -> Result<Answer<Series>, ReportError> {
        let key = series_key(spec, span);
        if let Some(Cached::Series(value, body)) = self.cache.get(&key, version) {
            count("hit");
            return Ok(Answer {
                value,
                body,
                version,
                timing: None,
            });
        }
        count("miss");
        let deadline = self.deadline();
        let started = Instant::now();
        // One read: the periods of the series and the baseline window before them.
        let load = compute::load_series(self.store.as_ref(), spec, &span.periods).await?;
        let db = ms_since(started);
        let resamples = spec.parameters.resamples;
        let cells: u128 = load
            .groups
            .iter()
            .map(|g| super::cost::period_cells(spec.parameters.method, resamples, g))
            .sum();
        if let Some(why) = super::cost::refusal(cells, resamples) {
            return Err(ReportError::TooCostly(why));
        }
        let spec = spec.clone();
        let span = span.clone();
        let (series, body, stats, json) = self
            .blocking(deadline, who, move || {
                let started = Instant::now();
                // Before the points consume the groups; the same data as the points, so
                // the series' cache entry and tag cover the trends too.
                let trends = series_trends(&span.periods, &load.groups, spec.parameters.alpha);
                let points: Vec<SeriesPoint> = span
                    .periods
                    .iter()
                    .zip(load.groups)
                    .zip(load.windows)
                    .map(|((p, groups), window)| {
                        compute::summary(&spec, *p, &groups, window, deadline)
                    })
                    .collect();
                let headline = series_headline_with_trends(
                    &points,
                    spec.level.kind(),
                    spec.parameters.baseline.is_some(),
                    &trends,
                );
                let stats = ms_since(started);
                let started = Instant::now();
                let series = Series {
                    from: span.from,
                    to: span.to,
                    granularity: span.from.granularity(),
                    level: spec.level.kind(),
                    filters: spec.filters.clone(),
                    parameters: compute::echo(&spec),
                    headline,
                    periods: points,
                    trends,
                    cautions: compute::cautions(),
                };
                let body = serde_json::to_vec(&series)?;
                Ok((series, body, stats, ms_since(started)))
            })
            .await?;
        let value = Arc::new(series);
        let body = Bytes::from(body);
        self.cache.insert(
            &key,
            version,
            Cached::Series(value.clone(), body.clone()),
            2 * body.len(),
        );
        Ok(Answer {
            value,
            body,
            version,
            timing: Some(Timing { db, stats, json }),
        })
    }

    fn deadline(&self) -> Option<Instant> {
        self.time_limit
            .and_then(|limit| Instant::now().checked_add(limit))
    }

    /// Runs CPU-bound report work (statistics, serialization) on the blocking pool, at
    /// most one job per core at a time (a queue of expensive requests waits here,
    /// cancellably, instead of piling up threads), and refuses a result finished past
    /// its deadline: the statistics give up at the deadline, and a cut-short report is
    /// never shown or cached.
    async fn blocking<T: Send + 'static>(
        &self,
        deadline: Option<Instant>,
        who: Option<dispar_store::KeyId>,
        work: impl FnOnce() -> serde_json::Result<T> + Send + 'static,
    ) -> Result<T, ReportError> {
        let key_slot = match who {
            Some(id) => {
                let sem = match self.per_key.lock() {
                    Ok(mut map) => map
                        .entry(id)
                        .or_insert_with(|| Arc::new(Semaphore::new(1)))
                        .clone(),
                    Err(_) => Arc::new(Semaphore::new(1)),
                };
                Some(
                    sem.acquire_owned()
                        .await
                        .map_err(|e| ReportError::Failed(e.to_string()))?,
                )
            }
            None => None,
        };
        let permit = self
            .slots
            .clone()
            .acquire_owned()
            .await
            .map_err(|e| ReportError::Failed(e.to_string()))?;
        let out = tokio::task::spawn_blocking(move || {
            let out = work();
            drop(permit);
            drop(key_slot);
            out
        })
        .await
        .map_err(|e| ReportError::Failed(e.to_string()))?;
        // Forget the semaphores no job holds, so the map does not grow with every key.
        if let Ok(mut map) = self.per_key.lock() {
            map.retain(|_, sem| Arc::strong_count(sem) > 1 || sem.available_permits() == 0);
        }
        if deadline.is_some_and(|d| Instant::now() >= d) {
            return Err(ReportError::TimedOut);
        }
        out.map_err(|e| ReportError::Failed(e.to_string()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn report_errors_become_the_problems_the_api_always_gave() {
        let e = ApiError::from(ReportError::TimedOut);
        assert_eq!(e.kind(), ProblemKind::Timeout);
        assert!(
            e.body()["detail"]
                .as_str()
                .unwrap()
                .contains("fewer resamples"),
            "{}",
            e.body()
        );
        let e = ApiError::from(ReportError::Store(StoreError::UnknownSite {
            site: "NOPE".to_owned(),
        }));
        assert_eq!(e.status().as_u16(), 422);
        assert_eq!(e.errors()[0].parameter.as_deref(), Some("site"));
        assert_eq!(e.errors()[0].reason, "unknown-site");
        let e = ApiError::from(ReportError::Failed("worker panicked".to_owned()));
        assert_eq!(e.status().as_u16(), 500);
        assert!(!e.body().to_string().contains("panicked"));
    }
}
