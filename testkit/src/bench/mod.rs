//! What the service's benchmarks (`server/benches/ingest/`, `server/benches/runs/`) share:
//! their answer to a wrong result ([`refuse_unless`]), the machine they ran on and its load,
//! CPU time read from `/proc`, readings as a CSV batch, the service in-process on loopback
//! ([`InProcess`]) and fresh databases on either backend ([`Db`], [`Scratch`]).
//!
//! Benches time; tests assert. Nothing here is timed: a bench starts its clock after it.

mod scratch;

use std::fmt::Write as _;

use chrono::{DateTime, SecondsFormat, Utc};
use loopbal_server::api::{router, AppState};
use loopbal_server::store::Role;
use reconcile::{Quality, Reading};

pub use scratch::{from_env, Db, Scratch, POSTGRES_VAR};

/// `main` of a service bench: `bench` on the service's own runtime, as `loopbal serve` would
/// have it on this machine (one worker thread per core; solves on the blocking pool), which
/// the bench's clients share.
pub fn on_service_runtime<F: std::future::Future>(bench: F) -> F::Output {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .expect("tokio runtime")
        .block_on(bench)
}

/// Benches time; tests assert. A bench that meets a wrong result prints no figure for it: it
/// says why and which test asserts the property it relies on, and exits 1.
pub fn refuse_unless(ok: bool, asserted_by: &str, why: impl FnOnce() -> String) {
    if !ok {
        refuse(asserted_by, why);
    }
}

/// [`refuse_unless`] where the bench already knows the result is wrong.
pub fn refuse(asserted_by: &str, why: impl FnOnce() -> String) -> ! {
    eprintln!("bench: no figure: {} (asserted by {asserted_by})", why());
    std::process::exit(1);
}

/// The processor, the cores available and whether this build is optimised.
pub fn machine() -> Vec<String> {
    let cpu = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split(':').nth(1))
                .map(|m| m.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into());
    let cores = std::thread::available_parallelism().map_or(0, |n| n.get());
    let profile = if cfg!(debug_assertions) {
        "debug (not optimised!)"
    } else {
        "optimised (bench/release)"
    };
    vec![
        format!("cpu: {cpu}, {cores} cores available"),
        format!("build: {profile}"),
    ]
}

/// The load average over 1, 5 and 15 minutes, as `/proc/loadavg` gives it.
pub fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

/// CPU seconds of this process so far (user + system, /proc/self/stat at 100 ticks/s).
pub fn cpu_seconds() -> Option<f64> {
    cpu_seconds_in(&std::fs::read_to_string("/proc/self/stat").ok()?)
}

/// CPU seconds of process `pid` so far.
pub fn cpu_seconds_of(pid: u32) -> Option<f64> {
    cpu_seconds_in(&std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?)
}

/// User + system time of a `/proc/<pid>/stat` line, at 100 ticks/s.
fn cpu_seconds_in(stat: &str) -> Option<f64> {
    // Fields after the command name (which is in parentheses and may hold spaces).
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let utime: f64 = f.get(11)?.parse().ok()?;
    let stime: f64 = f.get(12)?.parse().ok()?;
    Some((utime + stime) / 100.0)
}

/// An instant as RFC 3339 to the second, `Z` for UTC.
pub fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// A batch of readings as the body of `POST …/readings` in CSV (`tag,time,value,quality`).
pub fn csv_batch(batch: &[Reading]) -> String {
    let mut out = String::with_capacity(batch.len() * 48);
    out.push_str("tag,time,value,quality\n");
    for r in batch {
        let quality = match r.quality {
            Quality::Good => "good",
            Quality::Uncertain => "uncertain",
            Quality::Bad => "bad",
        };
        let _ = writeln!(out, "{},{},{},{quality}", r.tag, rfc3339(r.time), r.value);
    }
    out
}

/// The service in-process on an ephemeral loopback port (`api::router` served by
/// `axum::serve`), with an admin token from its store and one plant's model PUT.
pub struct InProcess {
    pub state: AppState,
    /// `http://{addr}/api/v1/plants/{plant}`.
    pub base: String,
    pub token: String,
    pub http: reqwest::Client,
    /// `{base}/readings`, made once.
    readings: String,
    server: tokio::task::JoinHandle<()>,
}

impl InProcess {
    /// Serve `state` and PUT `model_text` as plant `plant`, in effect from `from` when given.
    pub async fn start(
        state: AppState,
        model_text: &str,
        plant: &str,
        from: Option<DateTime<Utc>>,
    ) -> InProcess {
        let token = state
            .store
            .create_token(Role::Admin, None)
            .await
            .expect("admin token")
            .token;
        let (app, _) = router(state.clone());
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
            .await
            .expect("bind");
        let addr = listener.local_addr().expect("local address");
        let server = tokio::spawn(async move {
            axum::serve(listener, app).await.expect("serve");
        });
        let http = reqwest::Client::new();
        let base = format!("http://{addr}/api/v1/plants/{plant}");
        let mut put = format!("{base}/model");
        if let Some(from) = from {
            put += &format!("?effective_from={}", rfc3339(from));
        }
        let res = http
            .put(put)
            .bearer_auth(&token)
            .header("content-type", "application/toml")
            .body(model_text.to_string())
            .send()
            .await
            .expect("PUT model");
        let status = res.status();
        let text = res.text().await.unwrap_or_default();
        refuse_unless(status.is_success(), "tests/api/models.rs", || {
            format!("PUT model answered {status}: {text}")
        });
        InProcess {
            state,
            readings: format!("{base}/readings"),
            base,
            token,
            http,
            server,
        }
    }

    /// `POST …/readings` of a CSV batch as the admin: the answer's status and text.
    pub async fn post_csv(&self, body: String) -> (reqwest::StatusCode, String) {
        let res = self
            .http
            .post(&self.readings)
            .bearer_auth(&self.token)
            .header("content-type", "text/csv")
            .body(body)
            .send()
            .await
            .expect("POST readings");
        let status = res.status();
        (status, res.text().await.expect("answer body"))
    }

    /// Stop serving and close the store.
    pub async fn stop(self) {
        self.server.abort();
        let _ = self.server.await;
        self.state.store.close().await;
    }
}
