//! `loopbal serve`: open (or create) the database, bind, serve until SIGINT or SIGTERM, then
//! finish the requests in flight, close the database and exit.

use std::future::Future;
use std::net::SocketAddr;
use std::time::Duration;

use anyhow::Context;
use axum::Router;
use hyper_util::rt::{TokioIo, TokioTimer};
use hyper_util::server::graceful::GracefulShutdown;
use hyper_util::service::TowerToHyperService;
use tokio::net::TcpListener;

use crate::api::{self, AppState, Limits};
use crate::schedule::{self, Claimant, Schedule};
use crate::service::Service;
use crate::store::{redacted, Store};

pub struct Options {
    pub listen: SocketAddr,
    pub database: String,
    pub limits: Limits,
    pub schedule: Schedule,
    pub claimant: Claimant,
}

/// Log lines go to stderr; `RUST_LOG` chooses what (default: info for loopbal, warn for the
/// libraries).
pub fn init_tracing() {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env().unwrap_or_else(|_| {
        tracing_subscriber::EnvFilter::new("loopbal=info,tower_http=warn,warn")
    });
    let _ = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .try_init();
}

pub async fn serve(opts: Options) -> anyhow::Result<()> {
    let store = Store::open(&opts.database)
        .await
        .with_context(|| format!("opening the database {}", redacted(&opts.database)))?;
    let service = Service::new(store.clone()).with_claimant(opts.claimant);
    let instance = service.claimant.instance.clone();
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let worker = tokio::spawn(schedule::worker(service.clone(), opts.schedule, stop_rx));
    let (router, _) = api::router(AppState::with_service(service, opts.limits));
    let listener = TcpListener::bind(opts.listen)
        .await
        .with_context(|| format!("listening on {}", opts.listen))?;
    let addr = listener.local_addr()?;
    // One plain line on stdout for scripts and tests that started us on port 0.
    println!("loopbal: listening on http://{addr}");
    tracing::info!(%addr, database = %redacted(&opts.database), instance = %instance, "serving");
    serve_http(listener, router, &opts.limits, shutdown_signal()).await;
    // The worker finishes the run it is in (its report is stored whole) and stops.
    let _ = stop_tx.send(true);
    if let Err(e) = worker.await {
        tracing::error!(error = %e, "the scheduler ended abnormally");
    }
    // Every request has been answered and every transaction committed or rolled back; close
    // the pool so SQLite checkpoints its write-ahead log.
    store.close().await;
    tracing::info!("stopped");
    Ok(())
}

/// Serve `router` over HTTP/1 on `listener` until `shutdown` completes; then accept no more
/// connections, let each finish the request it is in (idle ones close at once) and return when
/// all have.
///
/// Served by hand rather than by `axum::serve` for hyper's header read timeout: a client that
/// has not sent its whole request head within `limits.header_timeout` is cut off, and the
/// timer only costs a wake-up, never a thread.
pub async fn serve_http(
    listener: TcpListener,
    router: Router,
    limits: &Limits,
    shutdown: impl Future<Output = ()>,
) {
    let mut http = hyper::server::conn::http1::Builder::new();
    http.timer(TokioTimer::new())
        .header_read_timeout(limits.header_timeout);
    let connections = GracefulShutdown::new();
    let mut shutdown = std::pin::pin!(shutdown);
    loop {
        let stream = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok((stream, _)) => stream,
                Err(e) => {
                    refused_accept(e).await;
                    continue;
                }
            },
            () = &mut shutdown => break,
        };
        let service = TowerToHyperService::new(router.clone());
        let connection = connections.watch(http.serve_connection(TokioIo::new(stream), service));
        tokio::spawn(async move {
            // A client that went away or was cut off is its own business, not an error of ours.
            if let Err(e) = connection.await {
                tracing::debug!(error = %e, "connection ended");
            }
        });
    }
    drop(listener);
    connections.shutdown().await;
}

/// A failed accept: a connection reset before it was taken is nothing; anything else (out of
/// file descriptors, say) is logged and retried after a pause, so the loop does not spin.
async fn refused_accept(e: std::io::Error) {
    use std::io::ErrorKind::{ConnectionAborted, ConnectionRefused, ConnectionReset};
    if matches!(
        e.kind(),
        ConnectionAborted | ConnectionRefused | ConnectionReset
    ) {
        return;
    }
    tracing::error!(error = %e, "cannot accept a connection");
    tokio::time::sleep(Duration::from_secs(1)).await;
}

async fn shutdown_signal() {
    let interrupt = async {
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::error!(error = %e, "cannot listen for SIGINT");
            std::future::pending::<()>().await;
        }
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(e) => {
                tracing::error!(error = %e, "cannot listen for SIGTERM");
                std::future::pending::<()>().await;
            }
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        _ = interrupt => {},
        _ = terminate => {},
    }
    tracing::info!("shutting down: finishing requests in flight");
}
