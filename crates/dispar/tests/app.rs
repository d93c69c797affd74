//! In-process tests of the router and `serve` (no binary): the parts the black-box
//! tests cannot reach deterministically — readiness during shutdown, the request
//! timeout, and `serve` on port 0 stopping when told.

#![allow(clippy::unwrap_used)] // tests: a panic is the failure report

use std::time::Duration;

use axum::Router;
use axum::body::Body;
use axum::http::{Request, StatusCode};
use axum::middleware::from_fn_with_state;
use axum::routing::get;
use dispar::{AppState, Limits};
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tower::ServiceExt;

async fn state(dir: &tempfile::TempDir, limits: Limits) -> AppState {
    let url = format!("sqlite:{}", dir.path().join("app.db").display());
    let store = dispar_store::open(&url).await.unwrap();
    AppState::new(store, limits)
}

async fn body_json(response: axum::response::Response) -> serde_json::Value {
    let bytes = axum::body::to_bytes(response.into_body(), 1 << 20)
        .await
        .unwrap();
    serde_json::from_slice(&bytes).unwrap()
}

#[tokio::test]
async fn readyz_is_503_once_shutdown_has_begun() {
    let dir = tempfile::tempdir().unwrap();
    let state = state(&dir, Limits::default()).await;
    let app = dispar::app(state.clone());
    let ready = app
        .clone()
        .oneshot(Request::get("/readyz").body(Body::empty()).unwrap())
        .await
        .unwrap();
    assert_eq!(ready.status(), StatusCode::OK);
    state.begin_shutdown();
    let draining = app
        .clone()
        .oneshot(Request::get("/readyz").body(Body::empty()).unwrap())
        .await
        .unwrap();
    assert_eq!(draining.status(), StatusCode::SERVICE_UNAVAILABLE);
    assert_eq!(
        draining.headers()["content-type"],
        "application/problem+json"
    );
    assert!(draining.headers().contains_key("retry-after"));
    assert_eq!(body_json(draining).await["type"], "/problems/unavailable");
    let live = app
        .oneshot(Request::get("/livez").body(Body::empty()).unwrap())
        .await
        .unwrap();
    assert_eq!(
        live.status(),
        StatusCode::OK,
        "livez stays 200 while draining"
    );
}

#[tokio::test]
async fn a_request_slower_than_the_timeout_gets_a_timeout_problem() {
    let dir = tempfile::tempdir().unwrap();
    let limits = Limits {
        request_timeout: Duration::from_millis(50),
        ..Limits::default()
    };
    let state = state(&dir, limits).await;
    let app: Router = Router::new()
        .route(
            "/slow",
            get(|| async {
                tokio::time::sleep(Duration::from_secs(5)).await;
                "late"
            }),
        )
        .layer(from_fn_with_state(state.clone(), dispar::ops::timeout))
        .with_state(state);
    let response = app
        .oneshot(Request::get("/slow").body(Body::empty()).unwrap())
        .await
        .unwrap();
    assert_eq!(response.status(), StatusCode::SERVICE_UNAVAILABLE);
    let v = body_json(response).await;
    assert_eq!(v["type"], "/problems/timeout");
    assert!(v["detail"].as_str().unwrap().contains("50 ms"), "{v}");
}

#[tokio::test]
async fn serve_on_port_0_answers_and_stops_when_told() {
    let dir = tempfile::tempdir().unwrap();
    let state = state(&dir, Limits::default()).await;
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
    let server = tokio::spawn(dispar::serve(listener, state, async {
        let _ = stopped.await;
    }));
    let mut stream = tokio::net::TcpStream::connect(addr).await.unwrap();
    stream
        .write_all(b"GET /livez HTTP/1.1\r\nhost: x\r\nconnection: close\r\n\r\n")
        .await
        .unwrap();
    let mut reply = String::new();
    stream.read_to_string(&mut reply).await.unwrap();
    assert!(reply.starts_with("HTTP/1.1 200"), "{reply}");
    stop.send(()).unwrap();
    let result = tokio::time::timeout(Duration::from_secs(10), server).await;
    assert!(
        matches!(result, Ok(Ok(Ok(())))),
        "serve returns after shutdown: {result:?}"
    );
}
