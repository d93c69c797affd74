//! The HTML pages for people: sign in with an API key with read access (read or
//! admin), then the report page and the series page, rendered on the server (SVG charts, no script, no external assets).
//!
//! | path | what |
//! |------|------|
//! | `GET /` | 303 to `/report` |
//! | `GET /sign-in` | the sign-in form (`?next=` a page to return to) |
//! | `POST /sign-in` | form `key=` (and `next=`): checks the key, sets the session cookie, 303 |
//! | `POST /sign-out` | ends the session, clears the cookie, 303 to `/sign-in` |
//! | `GET /report?period=&level=&site=` | the report page (default: the latest complete week with data, sites) |
//! | `GET /series?from=&to=&level=&site=` | verdicts per period (default: the 12 weeks up to that week) |
//! | `GET /favicon.svg` | the pages' icon |
//!
//! Modules: [`view`] (the pages' view models: words and formatted numbers computed
//! from a report), [`render`] (their HTML, through maud, which escapes every value it
//! interpolates), [`charts`] (SVG chart models and their markup, through maud too),
//! [`format`] (numbers), [`session`] (cookies and page sessions), [`state`] (the pages' state in
//! `AppState`), [`data`] (reports from the report service the JSON endpoints use).
//!
//! Security: the key is only ever in the body of the sign-in POST. The session cookie
//! is `HttpOnly; SameSite=Strict; Path=/` (+ `Secure` over https, see
//! [`session::SecureCookies`]); the session itself is a row in the database (only its
//! id's hash), so it survives a restart and every instance knows it. Form posts from another origin are refused. Pages are
//! sent with `Cache-Control: no-store` and a Content-Security-Policy that allows no
//! script and only the page's own style sheet.

pub mod charts;
pub mod data;
pub mod fair;
pub mod format;
pub mod render;
pub mod session;
pub mod state;
pub mod view;

#[cfg(test)]
mod tests;

use axum::Router;
use axum::extract::{Form, State};
use axum::http::header::{self, HeaderValue};
use axum::http::{HeaderMap, StatusCode, Uri};
use axum::response::{IntoResponse, Redirect, Response};
use axum::routing::{get, post};
use axum_extra::extract::cookie::CookieJar;
use dispar_core::period::Period;
use dispar_core::report::LevelKind;
use dispar_store::{KeyRole, NewPageSession};
use serde::Deserialize;

use crate::auth::{parse_token, secret_matches};
use crate::error::ApiError;
use crate::reports::ReportParams;
use crate::state::AppState;

use self::session::{MAX_SESSIONS_PER_KEY, SESSION_TTL, SecureCookies};
use self::view::{PageContext, Selection, SeriesView, SiteChoice, Viewer};

/// The page routes; their state is in the [`AppState`].
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/", get(home))
        .route("/sign-in", get(sign_in_form).post(sign_in))
        .route("/sign-out", post(sign_out))
        .route("/report", get(report_page))
        .route("/series", get(series_page))
        .route("/favicon.svg", get(favicon))
}

/// Most bytes of a page form's body: the sign-in form holds one key and a return path.
pub const FORM_BODY_LIMIT: usize = 8 * 1024;

/// How long a page form's body may take to arrive.
pub const FORM_BODY_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(5);

/// Middleware, outside the pages' concurrency budget: reads a page request's body whole
/// (at most [`FORM_BODY_LIMIT`] bytes within [`FORM_BODY_TIMEOUT`]) before the request
/// may take a slot. A client announcing a large body and sending it a byte at a time
/// is answered 413 at once, or 408 after the timeout, and never holds a slot while it
/// trickles.
pub async fn read_form_body(
    request: axum::extract::Request,
    next: axum::middleware::Next,
) -> Response {
    let (parts, body) = request.into_parts();
    if parts.method == axum::http::Method::GET || parts.method == axum::http::Method::HEAD {
        return next
            .run(axum::extract::Request::from_parts(parts, body))
            .await;
    }
    let too_large = || {
        problem_page(&ApiError::new(
            crate::error::ProblemKind::PayloadTooLarge,
            format!("A page form holds at most {FORM_BODY_LIMIT} bytes."),
        ))
    };
    let announced = parts
        .headers
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.trim().parse::<u64>().ok());
    if announced.is_some_and(|n| n > FORM_BODY_LIMIT as u64) {
        return too_large();
    }
    match tokio::time::timeout(
        FORM_BODY_TIMEOUT,
        axum::body::to_bytes(body, FORM_BODY_LIMIT),
    )
    .await
    {
        Err(_) => problem_page(&ApiError::new(
            crate::error::ProblemKind::BodyTimeout,
            format!(
                "The form did not arrive within {} seconds.",
                FORM_BODY_TIMEOUT.as_secs()
            ),
        )),
        Ok(Err(_)) => too_large(),
        Ok(Ok(bytes)) => {
            next.run(axum::extract::Request::from_parts(
                parts,
                axum::body::Body::from(bytes),
            ))
            .await
        }
    }
}

/// The pages' own concurrency budget: a quarter of the API's, at least 2, so page views
/// (which anyone can reach without a key) never take the slots of `/v1`.
pub fn concurrency_budget(api: usize) -> usize {
    (api / 4).max(2)
}

/// An HTML page with the headers every page carries.
pub(crate) fn html(status: StatusCode, body: String) -> Response {
    let csp = format!(
        "default-src 'none'; style-src {}; img-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'",
        render::style_hash()
    );
    let mut response = (status, body).into_response();
    let h = response.headers_mut();
    h.insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/html; charset=utf-8"),
    );
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    if let Ok(v) = HeaderValue::from_str(&csp) {
        h.insert(header::CONTENT_SECURITY_POLICY, v);
    }
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("same-origin"),
    );
    response
}

/// 303 to `location`, with the cookies of `jar` when given.
fn see_other(location: &str, jar: Option<CookieJar>) -> Response {
    let mut response = match jar {
        Some(jar) => (jar, Redirect::to(location)).into_response(),
        None => Redirect::to(location).into_response(),
    };
    response
        .headers_mut()
        .insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    response
}

async fn favicon() -> Response {
    (
        [
            (
                header::CONTENT_TYPE,
                HeaderValue::from_static("image/svg+xml"),
            ),
            (
                header::CACHE_CONTROL,
                HeaderValue::from_static("public, max-age=86400"),
            ),
        ],
        render::FAVICON,
    )
        .into_response()
}

async fn home() -> Response {
    see_other("/report", None)
}

/// The signed-in viewer of a request, or the redirect to the sign-in page.
async fn viewer(state: &AppState, headers: &HeaderMap, uri: &Uri) -> Result<Viewer, Response> {
    let to_sign_in = || {
        let mut q = form_urlencoded::Serializer::new(String::new());
        let here = uri
            .path_and_query()
            .map_or_else(|| uri.path().to_owned(), |pq| pq.as_str().to_owned());
        q.append_pair("next", &here);
        see_other(&format!("/sign-in?{}", q.finish()), None)
    };
    let Some(hash) = session::session_hash(&CookieJar::from_headers(headers)) else {
        return Err(to_sign_in());
    };
    let found = state
        .store()
        .find_page_session(&hash, time::OffsetDateTime::now_utc())
        .await;
    let s = match found {
        Ok(Some(s)) => s,
        Ok(None) => return Err(to_sign_in()),
        Err(e) => return Err(problem_page(&ApiError::from(e))),
    };
    // The key is looked up again: a revoked key ends its sessions.
    match state.store().find_key(s.key_id).await {
        Ok(Some(key)) if !key.is_revoked() && key.role != KeyRole::Ingest => {
            tracing::Span::current().record("key_id", key.id);
            Ok(Viewer {
                key_id: key.id,
                role: key.role.to_string(),
            })
        }
        Ok(_) => {
            if let Err(e) = state.store().delete_page_session(&hash).await {
                tracing::warn!(error = %e, "page: could not end the session of a refused key");
            }
            Err(to_sign_in())
        }
        Err(e) => Err(problem_page(&ApiError::from(e))),
    }
}

/// A bare error page for failures before a report page can be laid out.
fn problem_page(e: &ApiError) -> Response {
    let (message, details) = words(e);
    let body = render::render_sign_in(Some(&format!("{message} {}", details.join(" "))), None);
    html(e.status(), body)
}

/// The words of an API error for a page: its detail and each item's message; for a
/// 5xx a fixed sentence (the cause is logged, never shown).
fn words(e: &ApiError) -> (String, Vec<String>) {
    if e.status().is_server_error() {
        tracing::error!(error = ?e, "page failed");
        return (
            "The server could not compute this page; the cause is in the server log.".to_owned(),
            Vec::new(),
        );
    }
    let detail = e.body()["detail"].as_str().unwrap_or("").to_owned();
    let details = e
        .errors()
        .iter()
        .map(|i| match &i.parameter {
            Some(p) => format!("{p}: {}", i.message),
            None => i.message.clone(),
        })
        .collect();
    (detail, details)
}

#[derive(Debug, Default, Deserialize)]
struct NextQuery {
    next: Option<String>,
}

async fn sign_in_form(uri: Uri) -> Response {
    let q: NextQuery = serde_urlencoded::from_str(uri.query().unwrap_or("")).unwrap_or_default();
    html(
        StatusCode::OK,
        render::render_sign_in(None, session::safe_next(q.next.as_deref())),
    )
}

/// The sign-in form's fields.
#[derive(Deserialize)]
struct SignInForm {
    #[serde(default)]
    key: String,
    next: Option<String>,
}

async fn sign_in(
    State(state): State<AppState>,
    jar: CookieJar,
    headers: HeaderMap,
    form: Result<Form<SignInForm>, axum::extract::rejection::FormRejection>,
) -> Response {
    let refuse = |status: StatusCode, message: &str, next: Option<&str>| {
        let mut response = html(status, render::render_sign_in(Some(message), next));
        if status == StatusCode::UNAUTHORIZED {
            // RFC 9110 section 15.5.2: a 401 names a scheme; browsers show no dialog
            // for Bearer, so the form stays what the person sees.
            response.headers_mut().insert(
                header::WWW_AUTHENTICATE,
                HeaderValue::from_static("Bearer realm=\"dispar\""),
            );
        }
        response
    };
    if session::cross_site(&headers) {
        return refuse(
            StatusCode::FORBIDDEN,
            "Sign in from this server's own sign-in page.",
            None,
        );
    }
    let Ok(Form(form)) = form else {
        return refuse(
            StatusCode::BAD_REQUEST,
            "The sign-in form could not be read; send it again.",
            None,
        );
    };
    let next = session::safe_next(form.next.as_deref());
    let Some(token) = parse_token(form.key.trim()) else {
        return refuse(
            StatusCode::UNAUTHORIZED,
            "That is not a dispar key. A key looks like `dsp_12_` followed by 64 hexadecimal digits (0-9 and a-f).",
            next,
        );
    };
    let key = match state.store().find_key(token.id).await {
        Ok(k) => k,
        Err(e) => return problem_page(&ApiError::from(e)),
    };
    let key = match key {
        Some(k) if secret_matches(&token.secret, &k.secret_hash) => k,
        _ => {
            return refuse(StatusCode::UNAUTHORIZED, "That key is not valid.", next);
        }
    };
    if key.is_revoked() {
        return refuse(StatusCode::UNAUTHORIZED, "That key has been revoked.", next);
    }
    if key.role == KeyRole::Ingest {
        return refuse(
            StatusCode::FORBIDDEN,
            "An ingest key cannot open reports; sign in with an API key with read access (read or admin).",
            next,
        );
    }
    let id = match session::new_session_id() {
        Ok(id) => id,
        Err(e) => {
            return problem_page(&ApiError::internal(format!(
                "no randomness for a session: {e}"
            )));
        }
    };
    let now = time::OffsetDateTime::now_utc();
    let ttl = time::Duration::try_from(SESSION_TTL).unwrap_or(time::Duration::HOUR);
    let new = NewPageSession {
        id_hash: id.hash,
        key_id: key.id,
        created_at: now,
        expires_at: now + ttl,
    };
    if let Err(e) = state
        .store()
        .create_page_session(&new, MAX_SESSIONS_PER_KEY)
        .await
    {
        return problem_page(&ApiError::from(e));
    }
    tracing::Span::current().record("key_id", key.id);
    tracing::info!(key_id = key.id, role = %key.role, "signed in to the pages");
    let secure = SecureCookies::Auto.secure_for(&headers);
    see_other(
        next.unwrap_or("/report"),
        Some(jar.add(session::session_cookie(id.cookie_value, secure))),
    )
}

async fn sign_out(State(state): State<AppState>, jar: CookieJar, headers: HeaderMap) -> Response {
    if session::cross_site(&headers) {
        return html(
            StatusCode::FORBIDDEN,
            render::render_sign_in(Some("Sign out from this server's own pages."), None),
        );
    }
    if let Some(hash) = session::session_hash(&jar)
        && let Err(e) = state.store().delete_page_session(&hash).await
    {
        // The cookie is removed below all the same; the row expires on its own.
        tracing::warn!(error = %e, "page: could not delete a session at sign-out");
    }
    let secure = SecureCookies::Auto.secure_for(&headers);
    see_other("/sign-in", Some(jar.add(session::removal_cookie(secure))))
}

/// What the page shows as chosen.
fn selection(params: &ReportParams) -> Selection {
    Selection {
        period: String::new(),
        level: level_kind(params.level.as_deref()),
        site: params.site.clone(),
        extra: data::pass_through(params),
    }
}

async fn site_choices(state: &AppState) -> Vec<SiteChoice> {
    match state.store().list_sites().await {
        Ok(sites) => sites
            .into_iter()
            .map(|s| SiteChoice {
                code: s.code.to_string(),
                name: s.name.to_string(),
            })
            .collect(),
        Err(e) => {
            tracing::warn!(error = %e, "page: cannot list sites for the picker");
            Vec::new()
        }
    }
}

fn level_kind(level: Option<&str>) -> LevelKind {
    level
        .and_then(|l| l.parse::<LevelKind>().ok())
        .unwrap_or(LevelKind::Site)
}

async fn report_page(State(state): State<AppState>, headers: HeaderMap, uri: Uri) -> Response {
    let viewer = match viewer(&state, &headers, &uri).await {
        Ok(v) => v,
        Err(r) => return r,
    };
    let mut params = data::page_params(uri.query().unwrap_or(""));
    let mut ctx = PageContext {
        viewer: Some(viewer),
        selection: selection(&params),
        sites: site_choices(&state).await,
        previous: None,
        next: None,
        notice: None,
    };
    let period_text = match params.period.clone() {
        Some(p) => p,
        None => match data::default_week(&state).await {
            Ok(p) => {
                ctx.notice = Some(format!(
                    "Showing {p}, the latest complete week with data. Choose another period above."
                ));
                p.to_string()
            }
            Err(e) => {
                let (message, details) = words(&e);
                return html(
                    e.status(),
                    render::render_report_problem(&ctx, &message, &details),
                );
            }
        },
    };
    ctx.selection.period = period_text.clone();
    if let Ok(p) = period_text.parse::<Period>() {
        ctx.previous = data::previous(p).map(|x| x.to_string());
        ctx.next = p.next().map(|x| x.to_string());
    }
    params.period = Some(period_text);
    match data::report(&state, &params).await {
        Ok(report) => html(StatusCode::OK, render::render_report(&report, &ctx)),
        Err(e) => {
            let (message, details) = words(&e);
            html(
                e.status(),
                render::render_report_problem(&ctx, &message, &details),
            )
        }
    }
}

async fn series_page(State(state): State<AppState>, headers: HeaderMap, uri: Uri) -> Response {
    let viewer = match viewer(&state, &headers, &uri).await {
        Ok(v) => v,
        Err(r) => return r,
    };
    let params = data::page_params(uri.query().unwrap_or(""));
    let ctx = PageContext {
        viewer: Some(viewer),
        selection: selection(&params),
        sites: site_choices(&state).await,
        previous: None,
        next: None,
        notice: None,
    };
    let result = async {
        let (from, to) =
            series_bounds(&state, params.from.as_deref(), params.to.as_deref()).await?;
        let asked = ReportParams {
            from: Some(from.clone()),
            to: Some(to.clone()),
            ..params.clone()
        };
        let series = data::series(&state, &asked).await?;
        Ok::<_, ApiError>(SeriesView {
            from,
            to,
            alpha: series.parameters.alpha,
            points: series.periods.clone(),
            headline: Some(series.headline.clone()),
            trends: series.trends.clone(),
        })
    }
    .await;
    match result {
        Ok(view) => html(StatusCode::OK, render::render_series(&view, &ctx)),
        Err(e) => {
            let (message, details) = words(&e);
            html(
                e.status(),
                render::render_series_problem(
                    params.from.as_deref().unwrap_or(""),
                    params.to.as_deref().unwrap_or(""),
                    &ctx,
                    &message,
                    &details,
                ),
            )
        }
    }
}

/// The series' first and last period as given, with the defaults filled in: `to`
/// the default week (or the period of `from`'s kind holding it), `from` eleven
/// periods before `to`.
async fn series_bounds(
    state: &AppState,
    from: Option<&str>,
    to: Option<&str>,
) -> Result<(String, String), ApiError> {
    if let (Some(f), Some(t)) = (from, to) {
        return Ok((f.to_owned(), t.to_owned()));
    }
    let from_p = from.map(|f| data::parse_period(f, "from")).transpose()?;
    let to_p = match to {
        Some(t) => data::parse_period(t, "to")?,
        None => {
            let week = data::default_week(state).await?;
            match from_p {
                Some(f) if f.granularity() != week.granularity() => {
                    Period::containing(f.granularity(), week.last_day()).unwrap_or(week)
                }
                _ => week,
            }
        }
    };
    let from_text = match from {
        Some(f) => f.to_owned(),
        None => data::back(to_p, 11).to_string(),
    };
    Ok((
        from_text,
        to.map_or_else(|| to_p.to_string(), str::to_owned),
    ))
}
