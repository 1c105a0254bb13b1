//! `loopbal serve`: open (or create) the database, bind, serve until SIGINT or SIGTERM, then
//! finish the requests in flight, close the database and exit.

use std::future::Future;
use std::net::SocketAddr;
use std::pin::Pin;
use std::time::Duration;

use anyhow::Context;
use axum::Router;
use hyper_util::rt::{TokioIo, TokioTimer};
use tokio::net::TcpListener;
use tower::ServiceExt;

use crate::api::{self, AppState, Limits};
use crate::run_limit::RunLimit;
use crate::schedule::{self, Claimant, Schedule};
use crate::service::Service;
use crate::store::{redacted, Store};

pub struct Options {
    pub listen: SocketAddr,
    pub database: String,
    pub limits: Limits,
    pub schedule: Schedule,
    /// How long a period run may take (the scheduler's and an administrator's re-run).
    pub run_limit: RunLimit,
    pub claimant: Claimant,
    /// How far back meter health looks from the plant's latest period.
    pub health_window: chrono::TimeDelta,
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
    let service = Service::new(store.clone())
        .with_claimant(opts.claimant)
        .with_run_limit(opts.run_limit)
        .with_health_window(opts.health_window);
    let instance = service.claimant.instance.clone();
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let worker = tokio::spawn(schedule::worker(service.clone(), opts.schedule, stop_rx));
    let (router, _) = api::router(AppState::with_service(service, opts.limits));
    let listener = TcpListener::bind(opts.listen)
        .await
        .with_context(|| format!("listening on {}", opts.listen))?;
    let addr = listener.local_addr()?;
    let shutdown = shutdown_signal();
    // One plain line on stdout for scripts and tests that started us on port 0.
    println!("loopbal: listening on http://{addr}");
    tracing::info!(%addr, database = %redacted(&opts.database), instance = %instance, "serving");
    serve_http(listener, router, &opts.limits, shutdown).await;
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
    // `stop` tells every connection to finish; each holds a `done` receiver, so all of them
    // have ended once the sender sees none left.
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let (done_tx, done_rx) = tokio::sync::watch::channel(());
    let linger = Linger::of(limits);
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
        let router = router.clone();
        // Boxed so that the connection can be polled without being pinned, and so handed back.
        let service = hyper::service::service_fn(move |req| {
            let router = router.clone();
            Box::pin(async move { router.oneshot(req).await })
                as Pin<Box<dyn Future<Output = _> + Send>>
        });
        let mut connection = http.serve_connection(TokioIo::new(stream), service);
        let mut stop = stop_rx.clone();
        let done = done_rx.clone();
        tokio::spawn(async move {
            let mut stopping = false;
            let ended = loop {
                tokio::select! {
                    ended = std::future::poll_fn(|cx| connection.poll_without_shutdown(cx)) => {
                        break ended;
                    }
                    _ = stop.wait_for(|stop| *stop), if !stopping => {
                        stopping = true;
                        Pin::new(&mut connection).graceful_shutdown();
                    }
                }
            };
            match ended {
                Ok(()) => linger.close(connection.into_parts().io.into_inner()).await,
                // A client that went away or was cut off is its own business, not an error.
                Err(e) => tracing::debug!(error = %e, "connection ended"),
            }
            drop(done);
        });
    }
    drop(listener);
    let _ = stop_tx.send(true);
    drop(done_rx);
    done_tx.closed().await;
}

/// How a connection is closed after its last answer: the service stops sending, then reads
/// and drops what the client still sends, for a while, before closing. Closing a socket with
/// unread bytes makes the kernel reset the connection, and the reset can destroy the answer
/// before the client reads it: a client still sending a body that was refused (413 for its
/// declared length, 408 for its pace) would see a broken connection instead of the refusal.
#[derive(Debug, Clone, Copy)]
struct Linger {
    most: usize,
    within: Duration,
}

impl Linger {
    fn of(limits: &Limits) -> Linger {
        Linger {
            // What a client may reasonably still be sending: a body up to the limit, and at
            // least 64 MiB, so that a small limit does not cut off an ordinary upload's answer.
            most: limits.max_body_bytes.max(64 << 20),
            within: Duration::from_secs(2),
        }
    }

    async fn close(self, mut stream: tokio::net::TcpStream) {
        use tokio::io::{AsyncReadExt, AsyncWriteExt};
        if stream.shutdown().await.is_err() {
            return;
        }
        let deadline = tokio::time::Instant::now() + self.within;
        let mut buf = vec![0u8; 64 * 1024];
        let mut read = 0;
        while read < self.most {
            match tokio::time::timeout_at(deadline, stream.read(&mut buf)).await {
                Ok(Ok(n)) if n > 0 => read += n,
                _ => break,
            }
        }
    }
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

/// The shutdown request: SIGINT or SIGTERM. The handlers are installed here, when it is
/// called, not when it is first awaited: a signal sent as soon as the service says it listens
/// must find them (else the default action ends the process with no graceful stop).
fn shutdown_signal() -> impl Future<Output = ()> {
    #[cfg(unix)]
    let (interrupt, terminate) = {
        use tokio::signal::unix::{signal, SignalKind};
        let listen = |kind: SignalKind, name: &'static str| {
            signal(kind)
                .map_err(|e| tracing::error!(error = %e, "cannot listen for {name}"))
                .ok()
        };
        (
            listen(SignalKind::interrupt(), "SIGINT"),
            listen(SignalKind::terminate(), "SIGTERM"),
        )
    };
    async move {
        #[cfg(unix)]
        {
            let wait = |s: Option<tokio::signal::unix::Signal>| async move {
                match s {
                    Some(mut s) => {
                        s.recv().await;
                    }
                    None => std::future::pending::<()>().await,
                }
            };
            tokio::select! {
                _ = wait(interrupt) => {},
                _ = wait(terminate) => {},
            }
        }
        #[cfg(not(unix))]
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::error!(error = %e, "cannot listen for Ctrl-C");
            std::future::pending::<()>().await;
        }
        tracing::info!("shutting down: finishing requests in flight");
    }
}
