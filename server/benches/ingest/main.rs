//! Ingestion throughput: CSV batches of 10,000 readings posted over HTTP to the service running
//! in-process on loopback with a SQLite file, beside the store called directly and a plain bulk
//! insert into the same `readings` schema, all in one run on one machine. With
//! `LOOPBAL_BENCH_POSTGRES_URL` set, the same cases again on PostgreSQL (each on a scratch
//! database made on that server and dropped at the end), then both side by side.
//!
//!     cargo bench -p loopbal-server --bench ingest
//!     LOOPBAL_BENCH_QUICK=1 cargo bench -p loopbal-server --bench ingest     # 3 batches
//!     LOOPBAL_BENCH_BATCHES=50 cargo bench -p loopbal-server --bench ingest
//!     LOOPBAL_BENCH_POSTGRES_URL=postgres://postgres@127.0.0.1:5432/test \
//!         cargo bench -p loopbal-server --bench ingest
//!
//! No criterion: one timed pass per case (a batch is 10,000 rows, so the pass is long enough
//! for `Instant` to be accurate), bounded by a batch count and by 60 s for the first pass and
//! for each raw insert. The counts in every answer are checked, so a fast but wrong store prints
//! no figure (`testkit::bench::refuse_unless` names the test that asserts them).
//!
//! The modules: `readings` (what is posted), `http` (the service over HTTP, and its check of
//! a batch without the store), `direct` (the store called directly, the plain bulk inserts),
//! `figures` (the result table).

mod direct;
mod figures;
mod http;
mod readings;

use std::time::Duration;

use chrono::{TimeZone, Utc};
use reconcile::{ModelSpec, Reading};
use testkit::bench::{self, csv_batch, load_average, machine, Db, POSTGRES_VAR};

use figures::{print_figures, print_side_by_side, Figure};
use readings::{meter, readings, Meter};

const BATCH: usize = 10_000;
const DEFAULT_BATCHES: usize = 20;
const QUICK_BATCHES: usize = 3;
/// The first pass (new readings) stops early after this long; later passes use its count.
const TIME_LIMIT: Duration = Duration::from_secs(60);
const TARGET: f64 = 100_000.0;

fn batches_wanted() -> usize {
    if let Some(n) = std::env::var("LOOPBAL_BENCH_BATCHES")
        .ok()
        .and_then(|s| s.parse().ok())
    {
        return std::cmp::max(n, 1);
    }
    if std::env::var_os("LOOPBAL_BENCH_QUICK").is_some() {
        QUICK_BATCHES
    } else {
        DEFAULT_BATCHES
    }
}

fn main() {
    bench::on_service_runtime(run());
}

/// Everything the cases post or insert, made before any clock starts.
pub struct Data {
    pub model_text: String,
    pub spec: ModelSpec,
    pub meters: usize,
    pub new: Vec<Vec<Reading>>,
    pub new_csv: Vec<String>,
    pub changed_csv: Vec<String>,
}

async fn run() {
    let batches = batches_wanted();
    let dir = tempfile::tempdir().expect("temporary directory");
    let model_text = testkit::plants::VANTLE.to_string();
    let spec = ModelSpec::from_toml(&model_text).expect("Vantle model parses");
    let meters: Vec<Meter> = spec.meters.iter().map(meter).collect();
    let start = Utc.with_ymd_and_hms(2026, 1, 1, 0, 0, 0).unwrap();
    let new: Vec<Vec<Reading>> = (0..batches)
        .map(|b| readings(&meters, start, b * BATCH, BATCH, 0.0))
        .collect();
    let changed: Vec<Vec<Reading>> = (0..batches)
        .map(|b| readings(&meters, start, b * BATCH, BATCH, 0.5))
        .collect();
    let data = Data {
        new_csv: new.iter().map(|b| csv_batch(b)).collect(),
        changed_csv: changed.iter().map(|b| csv_batch(b)).collect(),
        new,
        model_text,
        meters: meters.len(),
        spec,
    };

    println!();
    println!(
        "ingest: up to {batches} batch(es) of {BATCH} readings, {} meters of {}, hourly",
        data.meters, data.spec.name
    );
    for line in machine() {
        println!("  {line}");
    }
    let mut results = Vec::new();
    let sqlite = measure(Db::Sqlite(dir.path()), &data).await;
    print_figures(
        "SQLite file in a temporary directory, WAL, synchronous=NORMAL",
        &sqlite,
    );
    results.push(("SQLite", sqlite));
    if let Some(scratch) = bench::from_env() {
        let settings = scratch.describe().await;
        let pg = measure(Db::Postgres(&scratch), &data).await;
        print_figures(
            &format!("PostgreSQL, a scratch database per case ({settings})"),
            &pg,
        );
        results.push(("PostgreSQL", pg));
        drop(scratch);
    } else {
        println!("\n(set {POSTGRES_VAR} to measure PostgreSQL as well)");
    }
    if results.len() > 1 {
        print_side_by_side(&results);
    }
}

/// Every case on fresh databases of `db`.
async fn measure(db: Db<'_>, data: &Data) -> Vec<Figure> {
    let load_before = load_average();
    let (mut figures, done) = http::http_cases(db, data).await;
    figures.push(direct::store_direct(db, data, done).await);
    figures.extend(direct::bulk_inserts(db, data, done).await);
    let label = db.label();
    println!(
        "\n{label}: load average {load_before} before, {} after",
        load_average()
    );
    figures
}
