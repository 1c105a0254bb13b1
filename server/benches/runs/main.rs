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
//!    with one keep-alive client; then the six requests of the web workspace's loop page and
//!    a year of one figure thinned to 800 points, 20 rounds each.
//!
//! Commands:
//!
//!     cargo bench -p loopbal-server --bench runs
//!     LOOPBAL_BENCH_QUICK=1 cargo bench -p loopbal-server --bench runs    # 3 months, 200 reads
//!     LOOPBAL_BENCH_YEAR_ONLY=1 cargo bench -p loopbal-server --bench runs  # part 2 alone
//!     LOOPBAL_BENCH_KEEP=1 ...                     # and keep the databases (path printed)
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
//! asked for) prints no figure (`testkit::bench::refuse_unless`); those properties are asserted
//! by tests/reliability/runs.rs and instances.rs. The year and the report reads are on SQLite
//! only.
//!
//! The modules: `service` (the service in-process, the readings POSTed, the runs counted in the
//! database), `passes` (timed `run_due` passes and the runs they left), `month` (the month's
//! cases and the engine alone), `processes` (the month by `loopbal serve` processes), `year`
//! (the year, the report reads and what the workspace reads).

mod month;
mod passes;
mod processes;
mod service;
mod year;

use std::time::Duration;

use chrono::{TimeZone, Utc};
use reconcile::equations::Layout;
use reconcile::{ModelSpec, Plant};
use testkit::bench::{self, load_average as load, Db};

use month::{engine_alone, month_cases, print_side_by_side};
use service::{readings, Service};
use year::{meter_reads, report_reads, run_year, workspace_reads, Year};

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

/// The machine, its load before the bench, and the build.
fn machine() -> Vec<String> {
    let [cpu, build]: [String; 2] = bench::machine().try_into().expect("two lines");
    vec![
        cpu,
        format!("load average before: {}", load()),
        format!("{build}; SQLite file in a temporary directory, WAL, synchronous=NORMAL"),
    ]
}

fn main() {
    bench::on_service_runtime(run());
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

    // 1. A month, run by the scheduler in each case on a fresh database, on each backend
    // (skipped with LOOPBAL_BENCH_YEAR_ONLY, for a look at the year's reads alone).
    let year_only = std::env::var_os("LOOPBAL_BENCH_YEAR_ONLY").is_some();
    let month = readings(&plant, &z, start, MONTH_HOURS, per_hour, 1);
    println!();
    println!(
        "1. a month: {MONTH_HOURS} periods, {} readings POSTed in batches of {BATCH}",
        month.len()
    );
    let scratch = bench::from_env();
    let mut backends = vec![Db::Sqlite(dir.path())];
    if let Some(scratch) = &scratch {
        println!("   PostgreSQL: {}", scratch.describe().await);
        backends.push(Db::Postgres(scratch));
    } else {
        println!(
            "   (set {} to measure PostgreSQL as well)",
            bench::POSTGRES_VAR
        );
    }
    let mut months = Vec::new();
    if !year_only {
        for db in backends {
            let cases = month_cases(db, model_text, &plant_name, start, &month).await;
            months.push((db.label(), cases));
        }
        engine_alone(&plant, &month);
    }

    // 2. A year of runs, then report reads.
    println!();
    println!("2. a year: {year_hours} periods, POSTed a month ({MONTH_HOURS} h) at a time, each month run by run_due with 2 workers");
    let year = Year {
        plant: &plant,
        z: &z,
        start,
        hours: year_hours,
        per_hour,
        budget: year_budget,
    };
    let year_url = Db::Sqlite(dir.path()).fresh("year").await;
    let svc = Service::start(year_url, model_text, &plant_name, start).await;
    run_year(&svc, &year).await;
    let median = report_reads(&svc, &year, reads, meters).await;
    workspace_reads(&svc, &year, 20).await;
    meter_reads(&svc, &year, 20).await;
    svc.stop().await;

    if std::env::var_os("LOOPBAL_BENCH_KEEP").is_some() {
        // The databases stay, for a look at them with sqlite3.
        println!("   kept: {}", dir.keep().display());
        return;
    }
    if year_only {
        println!("load average after: {}", load());
        return;
    }
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
