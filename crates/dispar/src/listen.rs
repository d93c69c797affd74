//! The accept loop: every connection through hyper-util's builder with a timer, so the
//! header read timeout applies (axum's own `serve` sets no timer, and hyper ignores its
//! timeouts without one), under a cap on open connections.
//!
//! - **Header timeout** ([`Limits::header_timeout`]): a client has that long to send a
//!   request's headers, and an idle keep-alive connection that long to start its next
//!   request; then hyper closes the connection. A client trickling header lines cannot
//!   hold a connection open.
//! - **Connection cap** ([`Limits::max_connections`]): a permit per open connection,
//!   taken before `accept`. Past the cap new connections wait in the kernel's listen
//!   backlog until one closes, instead of being accepted and starving the process of
//!   file descriptors. An accept error (for example too many open files) is logged and
//!   retried after a short pause rather than ending the server.
//! - **Graceful shutdown**: when `shutdown` completes, the loop stops accepting, every
//!   connection finishes the request it is serving (keep-alive connections close after
//!   it), and the loop waits for them, at most [`DRAIN_LIMIT`].

use std::future::Future;
use std::sync::Arc;
use std::time::Duration;

use axum::Router;
use hyper_util::rt::{TokioExecutor, TokioIo, TokioTimer};
use hyper_util::server::conn::auto::Builder;
use hyper_util::server::graceful::GracefulShutdown;
use hyper_util::service::TowerToHyperService;
use tokio::net::TcpListener;
use tokio::sync::Semaphore;

use crate::state::Limits;

/// The longest a shutdown waits for open connections to finish their requests.
pub const DRAIN_LIMIT: Duration = Duration::from_secs(30);

/// Serves `router` on `listener` until `shutdown` completes, then drains (module docs).
pub async fn serve_connections<F>(
    listener: TcpListener,
    router: Router,
    limits: &Limits,
    shutdown: F,
) -> std::io::Result<()>
where
    F: Future<Output = ()> + Send + 'static,
{
    let mut builder = Builder::new(TokioExecutor::new());
    builder
        .http1()
        .timer(TokioTimer::new())
        .header_read_timeout(limits.header_timeout);
    builder.http2().timer(TokioTimer::new());
    let builder = Arc::new(builder);
    let permits = Arc::new(Semaphore::new(limits.max_connections));
    let graceful = GracefulShutdown::new();
    tokio::pin!(shutdown);
    loop {
        let permit = tokio::select! {
            permit = permits.clone().acquire_owned() => match permit {
                Ok(p) => p,
                Err(_) => break, // the semaphore is never closed
            },
            () = &mut shutdown => break,
        };
        let stream = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok((stream, _peer)) => stream,
                Err(e) => {
                    tracing::warn!(error = %e, "accept failed; retrying shortly");
                    tokio::time::sleep(Duration::from_millis(50)).await;
                    continue;
                }
            },
            () = &mut shutdown => break,
        };
        // Small JSON answers: send them at once rather than waiting for more to coalesce.
        let _ = stream.set_nodelay(true);
        let service = TowerToHyperService::new(router.clone());
        let builder = builder.clone();
        let connection = graceful.watch(
            builder
                .serve_connection_with_upgrades(TokioIo::new(stream), service)
                .into_owned(),
        );
        tokio::spawn(async move {
            // A client that goes away or times out ends its connection with an error; that
            // is the client's business, not the server's.
            let _ = connection.await;
            drop(permit);
        });
    }
    drop(listener);
    if tokio::time::timeout(DRAIN_LIMIT, graceful.shutdown())
        .await
        .is_err()
    {
        tracing::warn!(
            limit_s = DRAIN_LIMIT.as_secs(),
            "connections still open after the drain limit; stopping anyway"
        );
    }
    Ok(())
}
