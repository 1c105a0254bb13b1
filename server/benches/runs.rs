//! Period runs and report reads through the service, in-process on loopback with a SQLite file:
//!
//! 1. a month (720 hourly periods) of noisy readings of the Fenwick Reach methanol loop is
//!    POSTed over HTTP, then `schedule::run_due` (the scheduler's own pass, grace 0) runs every
//!    period, timed, with 2 workers and again with 1 on a fresh database;
//! 2. a year (8,760 periods) of readings is POSTed a month at a time and the engine runs every
//!    period the same way (bounded: after `LOOPBAL_BENCH_YEAR_BUDGET_S`, 240 s by default, the
//!    periods left get copies of stored runs through `Store::record_run`, and the bench says
//!    so); then `GET /api/v1/plants/{plant}/periods/{start}` is timed for 500 random periods
//!    with one keep-alive client.
//!
//!     cargo bench -p loopbal-server --bench runs
//!     LOOPBAL_BENCH_QUICK=1 cargo bench -p loopbal-server --bench runs    # 3 months, 200 reads
//!     LOOPBAL_BENCH_READS=2000 LOOPBAL_BENCH_PER_HOUR=4 cargo bench -p loopbal-server --bench runs
//!
//! The true state is the loop's steady state by successive substitution
//! (`reconcile/benches/common`, shared with the engine's benchmarks); readings are
//! `reconcile::simulate::readings` of it: the exact meter value plus Gaussian noise of the
//! meter's σ, `LOOPBAL_BENCH_PER_HOUR` readings per meter per hour (1 by default), fixed seeds.
//! No criterion: one timed pass per case, every count checked (each period has exactly one
//! current run afterwards and no dirty mark), every loop bounded in count and in time.

#[path = "../../reconcile/benches/common/mod.rs"]
mod common;

use std::fmt::Write as _;
use std::path::Path;
use std::time::{Duration, Instant};

use chrono::{DateTime, SecondsFormat, TimeDelta, TimeZone, Utc};
use loopbal_server::api::{router, AppState, Limits};
use loopbal_server::schedule::{self, Schedule};
use loopbal_server::store::{NewRun, PlantRow, Role, Store};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use reconcile::equations::Layout;
use reconcile::simulate::{self, ReadingPlan};
use reconcile::solve::Measured;
use reconcile::{ModelSpec, Plant, Quality, Reading};

const BATCH: usize = 10_000;
const MONTH_HOURS: usize = 720;
const YEAR_HOURS: usize = 8_760;
/// The targets.
const MONTH_TARGET: Duration = Duration::from_secs(10);
const READ_TARGET_MS: f64 = 5.0;
/// A run_due pass over one month that takes longer than this is abandoned (the bench fails).
const RUN_DUE_LIMIT: Duration = Duration::from_secs(180);
/// Requests before the timed ones (connection set up, caches warm).
const WARM_UP: usize = 20;
/// The timed reads stop after this long whatever their count.
const READ_LIMIT: Duration = Duration::from_secs(120);

fn env_usize(name: &str) -> Option<usize> {
    std::env::var(name).ok().and_then(|s| s.parse().ok())
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Secs, true)
}

fn load() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

/// CPU seconds of this process so far (user + system, /proc/self/stat at 100 ticks/s).
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/self/stat").ok()?;
    // Fields after the command name (which is in parentheses and may hold spaces).
    let rest = &stat[stat.rfind(')')? + 2..];
    let f: Vec<&str> = rest.split_whitespace().collect();
    let utime: f64 = f.get(11)?.parse().ok()?;
    let stime: f64 = f.get(12)?.parse().ok()?;
    Some((utime + stime) / 100.0)
}

fn machine() -> Vec<String> {
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
        format!("load average before: {}", load()),
        format!("build: {profile}; SQLite file in a temporary directory, WAL, synchronous=NORMAL"),
    ]
}

/// The service in-process: a fresh SQLite file, an admin token, the router on 127.0.0.1:0, and
/// the Fenwick model PUT in effect from `from`.
struct Service {
    state: AppState,
    row: PlantRow,
    base: String,
    token: String,
    http: reqwest::Client,
    server: tokio::task::JoinHandle<()>,
    db: std::path::PathBuf,
}

impl Service {
    async fn start(
        dir: &Path,
        file: &str,
        model_text: &str,
        plant: &str,
        from: DateTime<Utc>,
    ) -> Service {
        let db = dir.join(file);
        let store = Store::open(&db.to_string_lossy())
            .await
            .expect("open store");
        let token = store
            .create_token(Role::Admin, None)
            .await
            .expect("admin token")
            .token;
        let state = AppState::new(store.clone(), Limits::default());
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
        let res = http
            .put(format!("{base}/model?effective_from={}", rfc3339(from)))
            .bearer_auth(&token)
            .header("content-type", "application/toml")
            .body(model_text.to_string())
            .send()
            .await
            .expect("PUT model");
        let status = res.status();
        assert!(
            status.is_success(),
            "PUT model answered {status}: {}",
            res.text().await.unwrap_or_default()
        );
        let row = store
            .plant(plant)
            .await
            .expect("plant")
            .expect("the PUT created the plant");
        Service {
            state,
            row,
            base,
            token,
            http,
            server,
            db,
        }
    }

    /// POST the readings as CSV batches of BATCH; every one must be new.
    async fn post(&self, readings: &[Reading]) -> Duration {
        let bodies: Vec<(usize, String)> =
            readings.chunks(BATCH).map(|b| (b.len(), csv(b))).collect();
        let t = Instant::now();
        for (n, body) in bodies {
            let res = self
                .http
                .post(format!("{}/readings", self.base))
                .bearer_auth(&self.token)
                .header("content-type", "text/csv")
                .body(body)
                .send()
                .await
                .expect("POST readings");
            let status = res.status();
            let text = res.text().await.expect("answer body");
            assert!(
                status.is_success(),
                "POST readings answered {status}: {text}"
            );
            let answer: serde_json::Value = serde_json::from_str(&text).expect("JSON answer");
            assert_eq!(
                answer["accepted"].as_u64(),
                Some(n as u64),
                "every reading new: {text}"
            );
        }
        t.elapsed()
    }

    async fn stop(self) {
        self.server.abort();
        self.state.store.close().await;
    }

    fn db_bytes(&self) -> u64 {
        let mut total = 0;
        for suffix in ["", "-wal", "-shm"] {
            let mut p = self.db.clone().into_os_string();
            p.push(suffix);
            total += std::fs::metadata(&p).map_or(0, |m| m.len());
        }
        total
    }
}

fn csv(batch: &[Reading]) -> String {
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

/// Noisy readings of the true state z for `hours` hours from `start`.
fn readings(
    plant: &Plant,
    z: &[f64],
    start: DateTime<Utc>,
    hours: usize,
    per_hour: usize,
    seed: u64,
) -> Vec<Reading> {
    simulate::readings(
        plant,
        z,
        &ReadingPlan {
            start,
            hours,
            per_hour,
            seed,
            faults: Vec::new(),
        },
    )
}

/// One scheduler pass over everything dirty, timed, with the process's CPU time over it.
struct Pass {
    ran: usize,
    wall: Duration,
    cpu: Option<f64>,
}

impl Pass {
    fn rate(&self) -> f64 {
        self.ran as f64 / self.wall.as_secs_f64()
    }
    fn cores(&self) -> String {
        self.cpu.map_or("?".into(), |c| {
            format!("{:.2}", c / self.wall.as_secs_f64())
        })
    }
}

async fn run_pass(svc: &Service, workers: usize) -> Pass {
    let schedule = Schedule {
        grace: Duration::ZERO,
        tick: Duration::from_secs(1),
        workers,
    };
    let cpu0 = cpu_seconds();
    let t = Instant::now();
    let ran = tokio::time::timeout(RUN_DUE_LIMIT, schedule::run_due(&svc.state, &schedule))
        .await
        .unwrap_or_else(|_| panic!("run_due did not finish within {RUN_DUE_LIMIT:?}"))
        .expect("run_due");
    let wall = t.elapsed();
    let cpu = cpu_seconds().zip(cpu0).map(|(b, a)| b - a);
    Pass { ran, wall, cpu }
}

/// Every period of [start, start + hours) has exactly one current run and no dirty mark;
/// returns the tally of report statuses and how many failed the global test.
async fn check_runs(
    svc: &Service,
    start: DateTime<Utc>,
    hours: usize,
) -> (Vec<(String, usize)>, usize) {
    let store = &svc.state.store;
    let end = start + TimeDelta::hours(hours as i64);
    let runs = store
        .current_runs(&svc.row, start, end)
        .await
        .expect("current runs");
    assert_eq!(runs.len(), hours, "every period has a current run");
    assert!(runs.iter().all(|r| r.runs == 1), "one run per period");
    let dirty = store.dirty_periods(&svc.row).await.expect("dirty periods");
    assert!(dirty.is_empty(), "{} periods still dirty", dirty.len());
    let parts = store
        .current_reports(&svc.row, start, end, &["status", "global_test"])
        .await
        .expect("current reports");
    let mut statuses: Vec<(String, usize)> = Vec::new();
    let mut failed = 0;
    for (_, p) in &parts {
        let s = p["status"].as_str().unwrap_or("?").to_string();
        match statuses.iter_mut().find(|(k, _)| *k == s) {
            Some((_, n)) => *n += 1,
            None => statuses.push((s, 1)),
        }
        failed += usize::from(p["global_test"]["passed"] == serde_json::Value::Bool(false));
    }
    (statuses, failed)
}

fn tally(statuses: &[(String, usize)]) -> String {
    statuses
        .iter()
        .map(|(s, n)| format!("{s} {n}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The engine's share of a run, without the service: for each period, the report
/// (`reconcile_period`) and the second estimate whose adjustment covariance gives the meter
/// health correlations, as `schedule::run_period` does, one period after another on this
/// thread. Returns the wall time.
fn engine_only(plant: &Plant, readings: &[Reading]) -> (usize, Duration) {
    let inputs = reconcile::group_readings(plant, readings);
    let t = Instant::now();
    for input in &inputs {
        let report = reconcile::reconcile_period(plant, input);
        std::hint::black_box(&report);
        let measured: Vec<Measured> = input
            .values
            .iter()
            .filter(|v| v.value.is_finite())
            .filter_map(|v| {
                let sigma = plant.meters[v.meter].sigma_for(v.value)?;
                Some(Measured {
                    meter: v.meter,
                    value: v.value,
                    sigma,
                })
            })
            .collect();
        let estimate = reconcile::estimate(plant, measured);
        std::hint::black_box(estimate.classification.scaled_adjustment_covariance());
    }
    (inputs.len(), t.elapsed())
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    // Nearest rank.
    let rank = ((p / 100.0) * sorted.len() as f64).ceil().max(1.0) as usize;
    sorted[rank.min(sorted.len()) - 1]
}

fn main() {
    // The service's own runtime, as `loopbal serve` would have it on this machine (one worker
    // thread per core; solves on the blocking pool). Client and service share the process.
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .expect("tokio runtime");
    rt.block_on(run());
}

async fn run() {
    let quick = std::env::var_os("LOOPBAL_BENCH_QUICK").is_some();
    let per_hour = env_usize("LOOPBAL_BENCH_PER_HOUR")
        .unwrap_or(1)
        .clamp(1, 60);
    let year_hours = if quick { 3 * MONTH_HOURS } else { YEAR_HOURS };
    let reads = env_usize("LOOPBAL_BENCH_READS")
        .unwrap_or(if quick { 200 } else { 500 })
        .clamp(1, 100_000);
    let year_budget =
        Duration::from_secs(env_usize("LOOPBAL_BENCH_YEAR_BUDGET_S").unwrap_or(240) as u64);
    let context = machine();
    let dir = tempfile::tempdir().expect("temporary directory");

    let model_text = common::FENWICK;
    let spec = ModelSpec::from_toml(model_text).expect("Fenwick model parses");
    let plant_name = spec.name.clone();
    let plant = Plant::new(spec).expect("Fenwick model is valid");
    let layout = Layout::new(&plant);
    let z = common::fenwick_true_state(&plant, &layout, &common::FenwickConditions::default());
    let meters = plant.meters.len();
    let start = Utc.with_ymd_and_hms(2025, 1, 1, 0, 0, 0).unwrap();

    println!();
    println!(
        "runs: {plant_name}, {} streams, {meters} meters, {per_hour} reading(s) per meter per hour",
        plant.streams.len()
    );
    for line in &context {
        println!("  {line}");
    }

    // 1. A month, run by the scheduler with 2 workers and with 1, each on a fresh database.
    let month = readings(&plant, &z, start, MONTH_HOURS, per_hour, 1);
    println!();
    println!(
        "1. a month: {MONTH_HOURS} periods, {} readings POSTed in batches of {BATCH}",
        month.len()
    );
    println!(
        "{:>7} {:>10} {:>10} {:>10} {:>11} {:>11}  {}",
        "workers", "POST s", "run s", "periods/s", "ms/period", "CPU cores", "reports"
    );
    let mut month_seconds = Vec::new();
    for workers in [2, 1] {
        let svc = Service::start(
            dir.path(),
            &format!("month-{workers}.db"),
            model_text,
            &plant_name,
            start,
        )
        .await;
        let posted = svc.post(&month).await;
        let dirty = svc
            .state
            .store
            .dirty_periods(&svc.row)
            .await
            .expect("dirty")
            .len();
        assert_eq!(dirty, MONTH_HOURS, "every period marked by the POST");
        let load_before = load();
        let pass = run_pass(&svc, workers).await;
        assert_eq!(pass.ran, MONTH_HOURS, "run_due ran every period");
        let (statuses, failed) = check_runs(&svc, start, MONTH_HOURS).await;
        println!(
            "{:>7} {:>10.2} {:>10.2} {:>10.0} {:>11.2} {:>11}  {} (global test failed in {failed}); load {load_before} -> {}",
            workers,
            posted.as_secs_f64(),
            pass.wall.as_secs_f64(),
            pass.rate(),
            1e3 * pass.wall.as_secs_f64() / pass.ran as f64,
            pass.cores(),
            tally(&statuses),
            load()
        );
        month_seconds.push((workers, pass.wall));
        svc.stop().await;
    }
    let load_before = load();
    let (periods, engine) = engine_only(&plant, &month);
    assert_eq!(periods, MONTH_HOURS, "a period input per hour");
    println!(
        "engine only (no service, no store, one thread): {:.2} s, {:.2} ms/period; load {load_before} -> {}",
        engine.as_secs_f64(),
        1e3 * engine.as_secs_f64() / periods as f64,
        load()
    );

    // 2. A year of runs, then report reads.
    println!();
    println!("2. a year: {year_hours} periods, POSTed a month ({MONTH_HOURS} h) at a time, each month run by run_due with 2 workers");
    let svc = Service::start(dir.path(), "year.db", model_text, &plant_name, start).await;
    let year_began = Instant::now();
    let mut engine_hours = 0;
    let mut run_time = Duration::ZERO;
    let mut post_time = Duration::ZERO;
    let mut rates = Vec::new();
    while engine_hours < year_hours && year_began.elapsed() < year_budget {
        let hours = MONTH_HOURS.min(year_hours - engine_hours);
        let from = start + TimeDelta::hours(engine_hours as i64);
        let chunk = readings(&plant, &z, from, hours, per_hour, 100 + engine_hours as u64);
        post_time += svc.post(&chunk).await;
        let pass = run_pass(&svc, 2).await;
        assert_eq!(pass.ran, hours, "run_due ran every period of the month");
        run_time += pass.wall;
        rates.push(pass.rate());
        engine_hours += hours;
    }
    let (statuses, failed) = check_runs(&svc, start, engine_hours).await;
    println!(
        "   engine runs: {engine_hours} periods in {:.1} s of run_due ({:.0} periods/s; per month {}), POST {:.1} s",
        run_time.as_secs_f64(),
        engine_hours as f64 / run_time.as_secs_f64(),
        rates.iter().map(|r| format!("{r:.0}")).collect::<Vec<_>>().join(" "),
        post_time.as_secs_f64()
    );
    println!(
        "   reports: {} (global test failed in {failed})",
        tally(&statuses)
    );
    if engine_hours < year_hours {
        // Over budget: the remaining periods get copies of the stored runs (report and inputs
        // of period h mod engine_hours, with their own start and end), through the store's
        // own record_run. Their reports are as large as real ones; they have no readings and
        // no meter records.
        let t = Instant::now();
        let store = &svc.state.store;
        for h in engine_hours..year_hours {
            let src = start + TimeDelta::hours((h % engine_hours) as i64);
            let dst = start + TimeDelta::hours(h as i64);
            let history = store.run_history(&svc.row, src).await.expect("run history");
            let row = history
                .iter()
                .rev()
                .find(|r| r.current)
                .expect("a current run");
            let mut report = row.run.report.clone();
            report["period_start"] = rfc3339(dst).into();
            report["period_end"] = rfc3339(dst + TimeDelta::hours(1)).into();
            let run = NewRun {
                period_start: dst,
                report,
                meters: Vec::new(),
                ..row.run.clone()
            };
            store.record_run(&svc.row, &run).await.expect("record run");
        }
        println!(
            "   NOTE: the engine budget ({} s) ran out; periods {engine_hours}..{year_hours} got copies of stored runs by Store::record_run ({:.1} s)",
            year_budget.as_secs(),
            t.elapsed().as_secs_f64()
        );
    }
    let runs = svc
        .state
        .store
        .current_runs(&svc.row, start, start + TimeDelta::hours(year_hours as i64))
        .await
        .expect("current runs");
    assert_eq!(
        runs.len(),
        year_hours,
        "a current run for every period of the year"
    );
    println!(
        "   database: {:.1} MB (file, WAL and shared memory)",
        svc.db_bytes() as f64 / 1e6
    );

    // Report reads: one keep-alive client, one request at a time, random periods of the year.
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let client = reqwest::Client::builder()
        .pool_max_idle_per_host(1)
        .build()
        .expect("client");
    let mut times = Vec::with_capacity(reads);
    let mut bytes = Vec::with_capacity(reads);
    let load_before = load();
    let reads_began = Instant::now();
    for i in 0..WARM_UP + reads {
        if reads_began.elapsed() > READ_LIMIT {
            break;
        }
        let h = rng.gen_range(0..year_hours);
        let period = rfc3339(start + TimeDelta::hours(h as i64));
        let url = format!("{}/periods/{period}", svc.base);
        let t = Instant::now();
        let res = client
            .get(&url)
            .bearer_auth(&svc.token)
            .send()
            .await
            .expect("GET period");
        let status = res.status();
        let body = res.bytes().await.expect("body");
        let dt = t.elapsed();
        assert!(status.is_success(), "GET {url} answered {status}");
        let v: serde_json::Value = serde_json::from_slice(&body).expect("JSON report");
        assert_eq!(
            v["start"].as_str(),
            Some(period.as_str()),
            "the period asked for"
        );
        assert!(
            v["report"]["meters"]
                .as_array()
                .is_some_and(|m| m.len() == meters),
            "a whole report"
        );
        if i >= WARM_UP {
            times.push(dt.as_secs_f64() * 1e3);
            bytes.push(body.len());
        }
    }
    let load_after = load();
    assert!(!times.is_empty(), "no timed reads within {READ_LIMIT:?}");
    let mean = times.iter().sum::<f64>() / times.len() as f64;
    times.sort_by(f64::total_cmp);
    bytes.sort_unstable();
    let median = percentile(&times, 50.0);
    println!(
        "   GET /periods/{{start}}: {} timed reads (after {WARM_UP} warm-up), median {:.2} ms, p90 {:.2} ms, p99 {:.2} ms, max {:.2} ms, mean {:.2} ms; body {} bytes (median); load {load_before} -> {load_after}",
        times.len(),
        median,
        percentile(&times, 90.0),
        percentile(&times, 99.0),
        times[times.len() - 1],
        mean,
        bytes[bytes.len() / 2],
    );
    svc.stop().await;

    println!();
    let (_, two) = month_seconds[0];
    let (_, one) = month_seconds[1];
    println!(
        "target: a month ({MONTH_HOURS} periods) re-reconciled in < {} s with both cores: {} ({:.2} s with 2 workers; {:.2} s with 1, speed-up {:.2})",
        MONTH_TARGET.as_secs(),
        if two < MONTH_TARGET { "met" } else { "NOT met" },
        two.as_secs_f64(),
        one.as_secs_f64(),
        one.as_secs_f64() / two.as_secs_f64()
    );
    println!(
        "target: one period's report over HTTP < {READ_TARGET_MS} ms median with {year_hours} periods stored: {} ({median:.2} ms)",
        if median < READ_TARGET_MS { "met" } else { "NOT met" }
    );
    println!("load average after: {}", load());
}
