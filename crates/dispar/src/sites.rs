//! The site and line registry: `PUT /v1/sites/{site}`, `PUT
//! /v1/sites/{site}/lines/{line}` (admin), `GET /v1/sites` (read), `GET
//! /v1/sites/{site}` (read, or an ingest key of that site).
//!
//! A `PUT` answers 201 when it created the site or line (with `Location`), 200 when it
//! updated or found it unchanged; the body's `outcome` says which (`created`,
//! `updated`, `unchanged`).

use axum::extract::State;
use axum::http::StatusCode;
use axum::http::header::{self, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::routing::{get, put};
use axum::{Json, Router};
use dispar_core::code::SiteCode;
use dispar_core::site::{Line, LineInput, Site, SiteInput};
use dispar_store::{StoreError, Upserted};
use serde::Serialize;

use crate::auth::Caller;
use crate::error::{ApiError, ErrorItem, Result, validation_with_params};
use crate::extract::Body;
use crate::extract::Segments;
use crate::state::AppState;

/// The registry routes.
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/v1/sites", get(list_sites))
        .route("/v1/sites/{site}", put(put_site).get(get_site))
        .route("/v1/sites/{site}/lines/{line}", put(put_line))
}

/// A site as the API shows it.
#[derive(Debug, Serialize)]
pub struct SiteView {
    /// Site code.
    pub code: String,
    /// Display name.
    pub name: String,
    /// IANA time zone, or null.
    pub time_zone: Option<String>,
}

impl From<&Site> for SiteView {
    fn from(s: &Site) -> Self {
        Self {
            code: s.code.as_str().to_owned(),
            name: s.name.as_str().to_owned(),
            time_zone: s.time_zone.as_ref().map(|t| t.as_str().to_owned()),
        }
    }
}

/// A line as the API shows it.
#[derive(Debug, Serialize)]
pub struct LineView {
    /// Site code.
    pub site: String,
    /// Line code.
    pub code: String,
    /// Display name, or null.
    pub name: Option<String>,
}

impl From<&Line> for LineView {
    fn from(l: &Line) -> Self {
        Self {
            site: l.site.as_str().to_owned(),
            code: l.code.as_str().to_owned(),
            name: l.name.as_ref().map(|n| n.as_str().to_owned()),
        }
    }
}

fn outcome_word(u: Upserted) -> &'static str {
    match u {
        Upserted::Created => "created",
        Upserted::Updated => "updated",
        Upserted::Unchanged => "unchanged",
    }
}

#[derive(Serialize)]
struct Written<T> {
    outcome: &'static str,
    #[serde(flatten)]
    view: T,
}

/// 201 + Location for created, else 200; the body gets `outcome`.
fn upsert_response(outcome: Upserted, location: &str, view: impl Serialize) -> Response {
    let status = if outcome == Upserted::Created {
        StatusCode::CREATED
    } else {
        StatusCode::OK
    };
    let body = Written {
        outcome: outcome_word(outcome),
        view,
    };
    let mut response = (status, Json(body)).into_response();
    if outcome == Upserted::Created
        && let Ok(v) = HeaderValue::from_str(location)
    {
        response.headers_mut().insert(header::LOCATION, v);
    }
    response
}

async fn put_site(
    State(state): State<AppState>,
    caller: Caller,
    Segments(code): Segments<String>,
    body: Body,
) -> Result<Response> {
    caller.require_admin()?;
    let input: SiteInput = body.json()?;
    let site = Site::from_input(&code, input).map_err(|e| validation_with_params(e, &["site"]))?;
    let outcome = state
        .store()
        .upsert_site(&site)
        .await
        .map_err(ApiError::from)?;
    tracing::info!(site = %site.code, outcome = outcome_word(outcome), "site written");
    Ok(upsert_response(
        outcome,
        &format!("/v1/sites/{}", site.code),
        SiteView::from(&site),
    ))
}

async fn put_line(
    State(state): State<AppState>,
    caller: Caller,
    Segments((site, line)): Segments<(String, String)>,
    body: Body,
) -> Result<Response> {
    caller.require_admin()?;
    let input: LineInput = body.json()?;
    let line = Line::from_input(&site, &line, input)
        .map_err(|e| validation_with_params(e, &["site", "line"]))?;
    let outcome = state
        .store()
        .upsert_line(&line)
        .await
        .map_err(|e| match e {
            StoreError::UnknownSite { site } => ApiError::validation(
                format!(
                    "Site {site} is not registered; register it with PUT /v1/sites/{site} first."
                ),
                vec![ErrorItem::parameter(
                    "site",
                    "unknown-site",
                    format!("site {site} is not registered"),
                )],
            ),
            other => ApiError::from(other),
        })?;
    tracing::info!(site = %line.site, line = %line.code, outcome = outcome_word(outcome), "line written");
    Ok(upsert_response(
        outcome,
        &format!("/v1/sites/{}", line.site),
        LineView::from(&line),
    ))
}

#[derive(Serialize)]
struct SiteList {
    sites: Vec<SiteView>,
}

async fn list_sites(State(state): State<AppState>, caller: Caller) -> Result<Json<SiteList>> {
    caller.require_read_all()?;
    let sites = state.store().list_sites().await.map_err(ApiError::from)?;
    Ok(Json(SiteList {
        sites: sites.iter().map(SiteView::from).collect(),
    }))
}

#[derive(Serialize)]
struct SiteDetail {
    #[serde(flatten)]
    site: SiteView,
    lines: Vec<LineView>,
}

async fn get_site(
    State(state): State<AppState>,
    caller: Caller,
    Segments(code): Segments<String>,
) -> Result<Json<SiteDetail>> {
    caller.require_read_site(&code)?;
    let code = parse_site_param(&code)?;
    let found = state
        .store()
        .get_site(&code)
        .await
        .map_err(ApiError::from)?;
    Ok(Json(SiteDetail {
        site: SiteView::from(&found.site),
        lines: found.lines.iter().map(LineView::from).collect(),
    }))
}

/// A site code from the path; an invalid one cannot exist, so it is 404.
pub fn parse_site_param(code: &str) -> Result<SiteCode> {
    SiteCode::parse(code).map_err(|_| ApiError::not_found(format!("There is no site {code:?}.")))
}
