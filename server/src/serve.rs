//! `loopbal serve`: open (or create) the database, bind, serve until SIGINT or SIGTERM, then
//! finish the requests in flight, close the database and exit.

use std::net::SocketAddr;

use anyhow::Context;
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
    axum::serve(listener, router)
        .with_graceful_shutdown(shutdown_signal())
        .await
        .context("serving HTTP")?;
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
