//! Period runs and report reads through the service, in-process on loopback with a SQLite file
//! (and, for the month, on PostgreSQL too when `LOOPBAL_BENCH_POSTGRES_URL` is set):
//!
//! 1. a month (720 hourly periods) of noisy readings of the Vantle Cross methanol loop is
//!    POSTed over HTTP, then `schedule::run_due` (the scheduler's own pass, grace 0) runs every
//!    period, timed, on a fresh database per case: one instance with 2 workers, with 1 and
//!    with 4; two instances (two `AppState`s with their own claimant and their own
//!    `Store::open` of the same database) with 2 workers each and with 1 each, their passes
//!    concurrent until no dirty period is left; and one and two real `loopbal serve`
//!    processes (this build's binary) with 2 workers each. With `LOOPBAL_BENCH_POSTGRES_URL`
//!    set, every case again on a scratch PostgreSQL database (`scratch/mod.rs`, shared with
//!    the ingestion bench), then both side by side;
//! 2. a year (8,760 periods) of readings is POSTed a month at a time and the engine runs every
//!    period the same way (bounded: after `LOOPBAL_BENCH_YEAR_BUDGET_S`, 240 s by default, the
//!    periods left get copies of stored runs through `Store::record_run`, and the bench says
//!    so); then `GET /api/v1/plants/{plant}/periods/{start}` is timed for 500 random periods
//!    with one keep-alive client.
//!
//! Commands:
//!
//!     cargo bench -p loopbal-server --bench runs
//!     LOOPBAL_BENCH_QUICK=1 cargo bench -p loopbal-server --bench runs    # 3 months, 200 reads
//!     LOOPBAL_BENCH_READS=2000 LOOPBAL_BENCH_PER_HOUR=4 cargo bench -p loopbal-server --bench runs
//!     LOOPBAL_BENCH_POSTGRES_URL=postgres://postgres@127.0.0.1:5432/test \
//!         cargo bench -p loopbal-server --bench runs
//!
//! The true state is the loop's steady state by successive substitution
//! (`testkit::vantle`, shared with the engine's benchmarks and tests); readings are
//! `reconcile::simulate::readings` of it: the exact meter value plus Gaussian noise of the
//! meter's σ, `LOOPBAL_BENCH_PER_HOUR` readings per meter per hour (1 by default), fixed seeds.
//! No criterion: one timed pass per case, every loop bounded in count and in time. A case whose
//! result is wrong (a period without exactly one run, a dirty mark left, a report not the one
//! asked for) prints no figure (`scratch::refuse_unless`); those properties are asserted by
//! tests/reliability/runs.rs and instances.rs. The year and the report reads are on SQLite only.

#[path = "../scratch/mod.rs"]
mod scratch;

use std::fmt::Write as _;
use std::time::{Duration, Instant};

use chrono::{DateTime, SecondsFormat, TimeDelta, TimeZone, Utc};
use loopbal_server::api::{router, AppState, Limits};
use loopbal_server::schedule::{self, Claimant, Schedule};
use loopbal_server::store::{NewRun, PlantRow, Role, Store};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use reconcile::equations::Layout;
use reconcile::simulate::{self, ReadingPlan};
use reconcile::solve::Measured;
use reconcile::{ModelSpec, Plant, Quality, Reading};
use scratch::{refuse_unless, Db};
use sqlx::Connection;

const BATCH: usize = 10_000;
const MONTH_HOURS: usize = 720;
const YEAR_HOURS: usize = 8_760;
/// The targets.
const MONTH_TARGET: Duration = Duration::from_secs(10);
const READ_TARGET_MS: f64 = 5.0;
/// A run_due pass over one month that takes longer than this is abandoned (the bench fails).
const RUN_DUE_LIMIT: Duration = Duration::from_secs(180);
/// Rounds of concurrent `run_due` passes before a case with periods still dirty fails.
const MAX_ROUNDS: usize = 5;
/// The claims' lease: far longer than a run, so no claim lapses in the bench.
const LEASE: Duration = Duration::from_secs(60);
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

/// The service in-process on a fresh database (a SQLite file or a scratch PostgreSQL database),
/// claiming periods as instance `bench-a`: an admin token, the router on 127.0.0.1:0, and the
/// Vantle model PUT in effect from `from`.
struct Service {
    state: AppState,
    row: PlantRow,
    base: String,
    token: String,
    http: reqwest::Client,
    server: tokio::task::JoinHandle<()>,
    /// The database's URL (a file path for SQLite).
    url: String,
}

/// A claimant for the bench's instance `label`.
fn claimant(label: &str) -> Claimant {
    Claimant {
        instance: schedule::instance_name(Some(label)),
        lease: LEASE,
    }
}

impl Service {
    async fn start(url: String, model_text: &str, plant: &str, from: DateTime<Utc>) -> Service {
        let store = Store::open(&url).await.expect("open store");
        let token = store
            .create_token(Role::Admin, None)
            .await
            .expect("admin token")
            .token;
        let state =
            AppState::new(store.clone(), Limits::default()).with_claimant(claimant("bench-a"));
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
        let text = res.text().await.unwrap_or_default();
        refuse_unless(status.is_success(), "tests/api.rs", || {
            format!("PUT model answered {status}: {text}")
        });
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
            url,
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
            let answer: serde_json::Value = serde_json::from_str(&text).unwrap_or_default();
            refuse_unless(
                status.is_success() && answer["accepted"].as_u64() == Some(n as u64),
                "tests/api.rs a_historians_life",
                || format!("POST readings answered {status}, not every reading new: {text}"),
            );
        }
        t.elapsed()
    }

    async fn stop(self) {
        self.server.abort();
        self.state.store.close().await;
    }

    /// Another instance on the same database: its own `Store::open` (its own connection pool)
    /// and its own claimant, no HTTP.
    async fn other_instance(&self, label: &str) -> AppState {
        let store = Store::open(&self.url).await.expect("open store again");
        AppState::new(store, Limits::default()).with_claimant(claimant(label))
    }

    /// Every run stored for the plant, counted in SQL on a connection of its own.
    async fn total_runs(&self) -> i64 {
        let sql = "SELECT COUNT(*) FROM runs WHERE plant_id = ";
        if self.url.starts_with("postgres") {
            let mut c = sqlx::PgConnection::connect(&self.url)
                .await
                .expect("connect");
            let n = sqlx::query_scalar(&format!("{sql}$1"))
                .bind(self.row.id)
                .fetch_one(&mut c)
                .await
                .expect("count runs");
            let _ = c.close().await;
            n
        } else {
            let options = sqlx::sqlite::SqliteConnectOptions::new().filename(&self.url);
            let mut c = sqlx::SqliteConnection::connect_with(&options)
                .await
                .expect("connect");
            let n = sqlx::query_scalar(&format!("{sql}?"))
                .bind(self.row.id)
                .fetch_one(&mut c)
                .await
                .expect("count runs");
            let _ = c.close().await;
            n
        }
    }

    /// The SQLite file with its WAL and shared memory.
    fn db_bytes(&self) -> u64 {
        let mut total = 0;
        for suffix in ["", "-wal", "-shm"] {
            let mut p = std::ffi::OsString::from(&self.url);
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

/// Scheduler passes over everything dirty, timed, with the CPU time over them: this process's
/// and, on PostgreSQL, the database server's.
struct Pass {
    ran: usize,
    /// Periods run by each instance.
    each: Vec<usize>,
    /// Rounds of concurrent passes until nothing was dirty.
    rounds: usize,
    wall: Duration,
    cpu: Option<f64>,
    server_cpu: Option<f64>,
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
    fn server_cores(&self) -> String {
        self.server_cpu.map_or("-".into(), |c| {
            format!("{:.2}", c / self.wall.as_secs_f64())
        })
    }
}

/// CPU seconds of every `postgres` process on the machine so far (the server and its
/// backends; other users' queries included, if any).
fn postgres_cpu_seconds() -> Option<f64> {
    let mut ticks = 0.0;
    for entry in std::fs::read_dir("/proc").ok()?.flatten() {
        if !entry
            .file_name()
            .to_string_lossy()
            .bytes()
            .all(|b| b.is_ascii_digit())
        {
            continue;
        }
        let Ok(stat) = std::fs::read_to_string(entry.path().join("stat")) else {
            continue; // the process ended meanwhile
        };
        let (Some(open), Some(close)) = (stat.find('('), stat.rfind(')')) else {
            continue;
        };
        if &stat[open + 1..close] != "postgres" {
            continue;
        }
        let f: Vec<&str> = stat[close + 2..].split_whitespace().collect();
        let utime: f64 = f.get(11).and_then(|v| v.parse().ok()).unwrap_or(0.0);
        let stime: f64 = f.get(12).and_then(|v| v.parse().ok()).unwrap_or(0.0);
        ticks += utime + stime;
    }
    Some(ticks / 100.0)
}

/// `run_due` on every instance at once, `workers` each, in rounds until the plant has no dirty
/// period (at most [`MAX_ROUNDS`], within [`RUN_DUE_LIMIT`]).
async fn run_passes(states: &[AppState], row: &PlantRow, workers: usize, postgres: bool) -> Pass {
    let schedule = Schedule {
        grace: Duration::ZERO,
        tick: Duration::from_secs(1),
        workers,
    };
    let cpu0 = cpu_seconds();
    let server0 = postgres.then(postgres_cpu_seconds).flatten();
    let t = Instant::now();
    let rounds = async {
        let mut each = vec![0; states.len()];
        for round in 1..=MAX_ROUNDS {
            let passes: Vec<_> = states
                .iter()
                .cloned()
                .map(|state| {
                    tokio::spawn(async move { schedule::run_due(&state, &schedule).await })
                })
                .collect();
            for (i, pass) in passes.into_iter().enumerate() {
                each[i] += pass.await.expect("run_due task").expect("run_due");
            }
            let dirty = states[0]
                .store
                .dirty_periods(row)
                .await
                .expect("dirty periods");
            if dirty.is_empty() {
                return (each, round);
            }
        }
        panic!("periods still dirty after {MAX_ROUNDS} rounds of run_due");
    };
    let (each, rounds) = tokio::time::timeout(RUN_DUE_LIMIT, rounds)
        .await
        .unwrap_or_else(|_| panic!("run_due did not finish within {RUN_DUE_LIMIT:?}"));
    let wall = t.elapsed();
    let cpu = cpu_seconds().zip(cpu0).map(|(b, a)| b - a);
    let server_cpu = postgres
        .then(postgres_cpu_seconds)
        .flatten()
        .zip(server0)
        .map(|(b, a)| b - a);
    Pass {
        ran: each.iter().sum(),
        each,
        rounds,
        wall,
        cpu,
        server_cpu,
    }
}

/// Every period of [start, start + hours) has exactly one current run, the plant has exactly
/// `hours` runs in all (no period ran twice) and no dirty mark; returns the tally of report statuses and how many failed the global test.
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
    let total = svc.total_runs().await;
    let dirty = store.dirty_periods(&svc.row).await.expect("dirty periods");
    refuse_unless(
        runs.len() == hours
            && runs.iter().all(|r| r.runs == 1)
            && total == hours as i64
            && dirty.is_empty(),
        "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
        || {
            format!(
                "{} of {hours} periods with a current run, {total} runs in all, {} still dirty",
                runs.len(),
                dirty.len()
            )
        },
    );
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

    let model_text = testkit::plants::VANTLE;
    let spec = ModelSpec::from_toml(model_text).expect("Vantle model parses");
    let plant_name = spec.name.clone();
    let plant = Plant::new(spec).expect("Vantle model is valid");
    let layout = Layout::new(&plant);
    let z = testkit::vantle_true_state(&plant, &layout, &testkit::VantleConditions::default());
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

    // 1. A month, run by the scheduler in each case on a fresh database, on each backend.
    let month = readings(&plant, &z, start, MONTH_HOURS, per_hour, 1);
    println!();
    println!(
        "1. a month: {MONTH_HOURS} periods, {} readings POSTed in batches of {BATCH}",
        month.len()
    );
    let scratch = scratch::from_env();
    let mut backends = vec![Db::Sqlite(dir.path())];
    if let Some(scratch) = &scratch {
        println!("   PostgreSQL: {}", scratch.describe().await);
        backends.push(Db::Postgres(scratch));
    } else {
        println!(
            "   (set {} to measure PostgreSQL as well)",
            scratch::POSTGRES_VAR
        );
    }
    let mut months = Vec::new();
    for db in backends {
        let cases = month_cases(db, model_text, &plant_name, start, &month).await;
        months.push((db.label(), cases));
    }
    let load_before = load();
    let (periods, engine) = engine_only(&plant, &month);
    refuse_unless(
        periods == MONTH_HOURS,
        "tests/results.rs and reconcile/src/period.rs periods_align_to_utc",
        || format!("{periods} period inputs for {MONTH_HOURS} hours"),
    );
    println!(
        "engine only (no service, no store, one thread): {:.2} s, {:.2} ms/period; load {load_before} -> {}",
        engine.as_secs_f64(),
        1e3 * engine.as_secs_f64() / periods as f64,
        load()
    );

    // 2. A year of runs, then report reads.
    println!();
    println!("2. a year: {year_hours} periods, POSTed a month ({MONTH_HOURS} h) at a time, each month run by run_due with 2 workers");
    let year_url = Db::Sqlite(dir.path()).fresh("year").await;
    let svc = Service::start(year_url, model_text, &plant_name, start).await;
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
        let pass = run_passes(std::slice::from_ref(&svc.state), &svc.row, 2, false).await;
        refuse_unless(
            pass.ran == hours,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("run_due ran {} of the month's {hours} periods", pass.ran),
        );
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
    refuse_unless(
        runs.len() == year_hours,
        "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
        || {
            format!(
                "{} of the year's {year_hours} periods have a current run",
                runs.len()
            )
        },
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
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        refuse_unless(
            status.is_success()
                && v["start"].as_str() == Some(period.as_str())
                && v["report"]["meters"]
                    .as_array()
                    .is_some_and(|m| m.len() == meters),
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("GET {url} answered {status} without the whole report of that period"),
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
    print_side_by_side(&months);
    println!();
    let sqlite = &months[0].1;
    let two = sqlite[0].pass.wall;
    let one = sqlite[1].pass.wall;
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
    drop(scratch);
}

/// A month's case: how many instances share the database, and each one's workers.
#[derive(Clone, Copy)]
struct Case {
    instances: usize,
    workers: usize,
    /// Real `loopbal serve` processes, not `AppState`s in this process.
    processes: bool,
}

impl Case {
    fn label(self) -> String {
        let s = |n: usize| if n == 1 { "" } else { "s" };
        if self.processes {
            format!(
                "{} × loopbal serve, {} workers",
                self.instances, self.workers
            )
        } else if self.instances == 1 {
            format!("1 instance, {} worker{}", self.workers, s(self.workers))
        } else {
            format!(
                "{} instances, {} worker{} each",
                self.instances,
                self.workers,
                s(self.workers)
            )
        }
    }
}

/// One instance with 2 workers and with 1, two instances with 2 each and 1 each, and one
/// instance with 4.
const CASES: [Case; 5] = [
    Case {
        instances: 1,
        workers: 2,
        processes: false,
    },
    Case {
        instances: 1,
        workers: 1,
        processes: false,
    },
    Case {
        instances: 2,
        workers: 2,
        processes: false,
    },
    Case {
        instances: 2,
        workers: 1,
        processes: false,
    },
    // As many runs in flight as two instances with 2 workers each, in one instance.
    Case {
        instances: 1,
        workers: 4,
        processes: false,
    },
];

struct MonthFigure {
    case: Case,
    posted: Duration,
    pass: Pass,
    load: String,
}

/// Every case of the month on a fresh database of `db`: the readings POSTed, then the timed
/// passes, then the counts checked.
async fn month_cases(
    db: Db<'_>,
    model_text: &str,
    plant_name: &str,
    start: DateTime<Utc>,
    month: &[Reading],
) -> Vec<MonthFigure> {
    println!();
    println!("   {}", db.label());
    println!(
        "   {:<28} {:>7} {:>8} {:>10} {:>10} {:>10} {:>10}  reports",
        "case", "POST s", "run s", "periods/s", "ms/period", "CPU cores", "PG cores"
    );
    let postgres = matches!(db, Db::Postgres(_));
    let mut figures = Vec::new();
    for case in CASES {
        let url = db
            .fresh(&format!("month_{}x{}", case.instances, case.workers))
            .await;
        let svc = Service::start(url, model_text, plant_name, start).await;
        let posted = svc.post(month).await;
        let dirty = svc
            .state
            .store
            .dirty_periods(&svc.row)
            .await
            .expect("dirty")
            .len();
        refuse_unless(
            dirty == MONTH_HOURS,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("{dirty} of {MONTH_HOURS} periods marked by the POST"),
        );
        let mut states = vec![svc.state.clone()];
        for i in 1..case.instances {
            let label = format!("bench-{}", char::from(b'a' + i as u8));
            states.push(svc.other_instance(&label).await);
        }
        let load_before = load();
        let pass = run_passes(&states, &svc.row, case.workers, postgres).await;
        let load_after = load();
        refuse_unless(
            pass.ran == MONTH_HOURS,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("the instances ran {} of {MONTH_HOURS} periods", pass.ran),
        );
        let (statuses, failed) = check_runs(&svc, start, MONTH_HOURS).await;
        let split = if case.instances > 1 {
            format!(
                "; periods per instance {} in {} round(s)",
                pass.each
                    .iter()
                    .map(usize::to_string)
                    .collect::<Vec<_>>()
                    .join(" + "),
                pass.rounds
            )
        } else {
            String::new()
        };
        println!(
            "   {:<28} {:>7.2} {:>8.2} {:>10.0} {:>10.2} {:>10} {:>10}  {} (global test failed in {failed}){split}; load {load_before} -> {load_after}",
            case.label(),
            posted.as_secs_f64(),
            pass.wall.as_secs_f64(),
            pass.rate(),
            1e3 * pass.wall.as_secs_f64() / pass.ran as f64,
            pass.cores(),
            pass.server_cores(),
            tally(&statuses),
        );
        for other in &states[1..] {
            other.store.close().await;
        }
        svc.stop().await;
        figures.push(MonthFigure {
            case,
            posted,
            pass,
            load: load_before,
        });
    }
    for instances in [1, 2] {
        let case = Case {
            instances,
            workers: 2,
            processes: true,
        };
        let url = db.fresh(&format!("procs_{instances}x2")).await;
        let svc = Service::start(url, model_text, plant_name, start).await;
        let posted = svc.post(month).await;
        let load_before = load();
        let (pass, logs) = run_processes(&svc, case, postgres).await;
        let load_after = load();
        let (statuses, failed) = check_runs(&svc, start, MONTH_HOURS).await;
        println!(
            "   {:<28} {:>7.2} {:>8.2} {:>10.0} {:>10.2} {:>10} {:>10}  {} (global test failed in {failed}); runs logged per process {logs}; load {load_before} -> {load_after}",
            case.label(),
            posted.as_secs_f64(),
            pass.wall.as_secs_f64(),
            pass.rate(),
            1e3 * pass.wall.as_secs_f64() / pass.ran as f64,
            pass.cores(),
            pass.server_cores(),
            tally(&statuses),
        );
        svc.stop().await;
        figures.push(MonthFigure {
            case,
            posted,
            pass,
            load: load_before,
        });
    }
    figures
}

/// A `loopbal serve` child, killed if still running when dropped (a failed bench leaves none).
struct Child {
    child: std::process::Child,
    log: std::path::PathBuf,
}

impl Drop for Child {
    fn drop(&mut self) {
        if matches!(self.child.try_wait(), Ok(None)) {
            let _ = self.child.kill();
            let _ = self.child.wait();
        }
    }
}

/// CPU seconds of process `pid` so far.
fn cpu_seconds_of(pid: u32) -> Option<f64> {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    let f: Vec<&str> = stat[stat.rfind(')')? + 2..].split_whitespace().collect();
    let utime: f64 = f.get(11)?.parse().ok()?;
    let stime: f64 = f.get(12)?.parse().ok()?;
    Some((utime + stime) / 100.0)
}

/// The month run by `case.instances` real `loopbal serve` processes (the binary of this build,
/// `--run-grace 0 --run-tick 1 --run-workers W`, each its own `--instance-name`) on the
/// service's database, which has every period dirty: timed from their start until no dirty
/// mark is left (polled every 20 ms by the in-process service's store, which runs nothing),
/// then stopped with SIGTERM. CPU is the processes' own. Answers the pass and how many
/// "period run" lines each process logged.
async fn run_processes(svc: &Service, case: Case, postgres: bool) -> (Pass, String) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let server0 = postgres.then(postgres_cpu_seconds).flatten();
    let t = Instant::now();
    let mut children = Vec::new();
    for i in 0..case.instances {
        let log = dir.path().join(format!("serve-{i}.log"));
        let child = std::process::Command::new(env!("CARGO_BIN_EXE_loopbal"))
            .args(["serve", "--listen", "127.0.0.1:0", "--database", &svc.url])
            .args(["--run-grace", "0", "--run-tick", "1", "--run-workers"])
            .arg(case.workers.to_string())
            .arg("--instance-name")
            .arg(format!("bench-proc-{i}"))
            .env_remove("RUST_LOG")
            .stdout(std::process::Stdio::null())
            .stderr(std::fs::File::create(&log).expect("log file"))
            .spawn()
            .expect("start loopbal serve");
        children.push(Child { child, log });
    }
    let mut cpu = Some(0.0);
    loop {
        assert!(
            t.elapsed() < RUN_DUE_LIMIT,
            "the processes did not run the month within {RUN_DUE_LIMIT:?}"
        );
        for c in &mut children {
            if let Ok(Some(status)) = c.child.try_wait() {
                panic!(
                    "loopbal serve exited ({status}): {}",
                    std::fs::read_to_string(&c.log).unwrap_or_default()
                );
            }
        }
        let dirty = svc
            .state
            .store
            .dirty_periods(&svc.row)
            .await
            .expect("dirty periods");
        if dirty.is_empty() {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let wall = t.elapsed();
    for c in &children {
        cpu = cpu.zip(cpu_seconds_of(c.child.id())).map(|(a, b)| a + b);
    }
    let server_cpu = postgres
        .then(postgres_cpu_seconds)
        .flatten()
        .zip(server0)
        .map(|(b, a)| b - a);
    let mut logged = Vec::new();
    for mut c in children {
        let _ = std::process::Command::new("kill")
            .args(["-TERM", &c.child.id().to_string()])
            .status();
        let stop = Instant::now();
        while matches!(c.child.try_wait(), Ok(None)) && stop.elapsed() < Duration::from_secs(10) {
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
        let log = std::fs::read_to_string(&c.log).unwrap_or_default();
        refuse_unless(
            !log.contains("ERROR"),
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("the log has an error: {log}"),
        );
        logged.push(log.lines().filter(|l| l.contains("period run")).count());
        drop(c);
    }
    let ran = logged.iter().sum();
    refuse_unless(
        ran == MONTH_HOURS,
        "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
        || format!("the processes logged {ran} runs for {MONTH_HOURS} periods"),
    );
    let pass = Pass {
        ran,
        each: logged.clone(),
        rounds: 1,
        wall,
        cpu,
        server_cpu,
    };
    let logs = logged
        .iter()
        .map(usize::to_string)
        .collect::<Vec<_>>()
        .join(" + ");
    (pass, logs)
}

/// The month's cases of every backend measured, side by side.
fn print_side_by_side(months: &[(&str, Vec<MonthFigure>)]) {
    println!();
    println!("month side by side: run_due wall time (periods/s; process CPU cores + PostgreSQL server cores)");
    print!("   {:<28}", "case");
    for (label, _) in months {
        print!(" {label:>36}");
    }
    println!();
    for (i, case) in months[0].1.iter().map(|f| f.case).enumerate() {
        print!("   {:<28}", case.label());
        for (_, figures) in months {
            let f = &figures[i];
            let cell = format!(
                "{:.2} s ({:.0}/s; {} + {})",
                f.pass.wall.as_secs_f64(),
                f.pass.rate(),
                f.pass.cores(),
                f.pass.server_cores()
            );
            print!(" {cell:>36}");
        }
        println!();
    }
    for (label, figures) in months {
        let one = figures[0].pass.wall.as_secs_f64();
        let two = figures[2].pass.wall.as_secs_f64();
        println!(
            "   {label}: two instances × 2 workers take {:.2}× the time of one instance × 2 workers (POST {:.2} s; load at the cases' starts {})",
            two / one,
            figures[0].posted.as_secs_f64(),
            figures.iter().map(|f| f.load.as_str()).collect::<Vec<_>>().join(" | ")
        );
        if let (Some(one), Some(two)) = (figures.get(5), figures.get(6)) {
            println!(
                "   {label}: two loopbal serve processes take {:.2}× the time of one",
                two.pass.wall.as_secs_f64() / one.pass.wall.as_secs_f64()
            );
        }
    }
}
