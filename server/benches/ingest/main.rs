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
//! for each raw insert. The counts in every answer are checked, so a fast but wrong store fails
//! the bench.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeZone, Utc};
use loopbal_server::api::{router, AppState, Limits};
use loopbal_server::ingest::{self, Catalogue};
use loopbal_server::readings::Format;
use loopbal_server::store::{outside, PlantRow, Role, Store};
use reconcile::{ModelSpec, Quality, Reading};
use sqlx::postgres::{PgConnection, PgPoolOptions};
use sqlx::sqlite::{SqliteConnectOptions, SqliteJournalMode, SqlitePoolOptions, SqliteSynchronous};
use sqlx::Connection;

#[path = "../scratch/mod.rs"]
mod scratch;
use scratch::{refuse_unless, Db, POSTGRES_VAR};

const BATCH: usize = 10_000;
const DEFAULT_BATCHES: usize = 20;
const QUICK_BATCHES: usize = 3;
/// The first pass (new readings) stops early after this long; later passes use its count.
const TIME_LIMIT: Duration = Duration::from_secs(60);
const TARGET: f64 = 100_000.0;

/// A meter of the model and where its readings sit.
struct Meter {
    tag: String,
    centre: f64,
    spread: f64,
}

/// A typical value and spread for a meter: mid-range for ranged flows, and by unit of
/// measure for the analysers.
fn meter(m: &reconcile::model::MeterSpec) -> Meter {
    let (centre, spread) = match (m.range, m.uom.as_str()) {
        (Some([lo, hi]), _) => (lo + 0.6 * (hi - lo), 0.02 * (hi - lo)),
        (None, "%") => (8.0, 0.3),
        (None, "ppm") => (1500.0, 60.0),
        (None, "fraction") => (0.7, 0.01),
        (None, "t/h") => (32.0, 0.5),
        (None, _) => (100.0, 2.0),
    };
    Meter {
        tag: m.tag.clone(),
        centre,
        spread,
    }
}

/// A small deterministic generator (SplitMix64): the same readings every run.
struct Noise(u64);

impl Noise {
    fn next(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        // Uniform on [-1, 1).
        (z >> 11) as f64 / (1u64 << 52) as f64 - 1.0
    }
}

/// `count` readings from the `first`-th on: reading i is meter i mod m at hour i / m, so a
/// batch covers consecutive hours of every meter. Values are rounded to 4 significant
/// decimals as a historian would send them; `shift` makes a changed resend.
fn readings(
    meters: &[Meter],
    start: DateTime<Utc>,
    first: usize,
    count: usize,
    shift: f64,
) -> Vec<Reading> {
    let mut noise = Noise(first as u64);
    (first..first + count)
        .map(|i| {
            let m = &meters[i % meters.len()];
            let value = m.centre + m.spread * noise.next() + shift * m.spread;
            Reading {
                tag: m.tag.clone(),
                time: start + chrono::Duration::hours((i / meters.len()) as i64),
                value: (value * 1e4).round() / 1e4,
                quality: Quality::Good,
            }
        })
        .collect()
}

fn csv(batch: &[Reading]) -> String {
    let mut out = String::with_capacity(batch.len() * 48);
    out.push_str("tag,time,value,quality\n");
    for r in batch {
        let _ = writeln!(
            out,
            "{},{},{},good",
            r.tag,
            r.time.format("%Y-%m-%dT%H:%M:%SZ"),
            r.value
        );
    }
    out
}

/// One row of the result table.
struct Figure {
    case: &'static str,
    what: &'static str,
    rows: usize,
    elapsed: Duration,
    /// Slowest single batch, where the case is timed per batch.
    slowest: Option<Duration>,
}

impl Figure {
    fn rate(&self) -> f64 {
        self.rows as f64 / self.elapsed.as_secs_f64()
    }
}

#[derive(Debug, serde::Deserialize)]
struct Answer {
    accepted: usize,
    replaced: usize,
    unchanged: usize,
    rejected: usize,
}

struct Client {
    http: reqwest::Client,
    url: String,
    token: String,
}

impl Client {
    async fn post(&self, body: String) -> Answer {
        let res = self
            .http
            .post(&self.url)
            .bearer_auth(&self.token)
            .header("content-type", "text/csv")
            .body(body)
            .send()
            .await
            .expect("POST readings");
        let status = res.status();
        let text = res.text().await.expect("answer body");
        refuse_unless(
            status.is_success(),
            "tests/api.rs a_historians_life",
            || format!("POST readings answered {status}: {text}"),
        );
        serde_json::from_str(&text).expect("answer is an IngestAnswer")
    }
}

/// Post every body in turn; check each answer against `expect` (accepted, replaced,
/// unchanged) per batch. Stops after `limit` when given.
async fn post_all(
    client: &Client,
    bodies: &[String],
    expect: (usize, usize, usize),
    limit: Option<Duration>,
    case: &'static str,
    what: &'static str,
) -> Figure {
    let mut elapsed = Duration::ZERO;
    let mut slowest = Duration::ZERO;
    let mut rows = 0;
    for body in bodies {
        // The copy is the client's work, not the service's: made before the clock starts.
        let body = body.clone();
        let t = Instant::now();
        let a = client.post(body).await;
        let dt = t.elapsed();
        refuse_unless(
            (a.accepted, a.replaced, a.unchanged, a.rejected) == (expect.0, expect.1, expect.2, 0),
            "tests/api.rs a_historians_life",
            || format!("{case}: unexpected answer"),
        );
        elapsed += dt;
        slowest = slowest.max(dt);
        rows += BATCH;
        if limit.is_some_and(|l| elapsed >= l) {
            break;
        }
    }
    Figure {
        case,
        what,
        rows,
        elapsed,
        slowest: Some(slowest),
    }
}

/// A migrated database with one plant (the readings table's foreign key needs it).
async fn fresh_store(db: Db<'_>, case: &str) -> (Store, String, PlantRow) {
    let url = db.fresh(case).await;
    let store = Store::open(&url).await.expect("open store");
    let plant = store.create_plant("bulk").await.expect("create plant");
    (store, url, plant)
}

/// The plain bulk insert: the same rows into the same `readings` table, one transaction, no
/// upsert, no checks, on one connection (with the store's pragmas on SQLite). `per_statement`
/// rows go in one INSERT (1 = one statement per row). Stops after [`TIME_LIMIT`]; answers the
/// rows inserted and the time.
async fn raw_insert(
    db: Db<'_>,
    case: &str,
    all: &[Reading],
    per_statement: usize,
) -> (usize, Duration) {
    let (store, url, plant) = fresh_store(db, case).await;
    store.close().await;
    let received_at = Utc::now().timestamp_millis();
    let columns =
        "INSERT INTO readings (plant_id, tag, time, value, quality, received_at, out_of_range) VALUES ";
    // SQLite takes anonymous `?`; PostgreSQL numbered `$n`.
    let statement = |rows: usize| {
        let mut sql = String::from(columns);
        for r in 0..rows {
            if r > 0 {
                sql.push_str(", ");
            }
            match db {
                Db::Sqlite(_) => sql.push_str("(?, ?, ?, ?, ?, ?, ?)"),
                Db::Postgres(_) => {
                    let n = 7 * r;
                    let _ = write!(
                        sql,
                        "(${}, ${}, ${}, ${}, ${}, ${}, ${})",
                        n + 1,
                        n + 2,
                        n + 3,
                        n + 4,
                        n + 5,
                        n + 6,
                        n + 7
                    );
                }
            }
        }
        sql
    };
    let full = statement(per_statement);
    macro_rules! insert_all {
        ($pool:expr) => {{
            let t = Instant::now();
            let mut done = 0;
            let mut tx = $pool.begin().await.expect("begin");
            for chunk in all.chunks(per_statement) {
                let short;
                let text = if chunk.len() == per_statement {
                    full.as_str()
                } else {
                    short = statement(chunk.len());
                    short.as_str()
                };
                let mut q = sqlx::query(text);
                for r in chunk {
                    q = q
                        .bind(plant.id)
                        .bind(&r.tag)
                        .bind(r.time.timestamp_millis())
                        .bind(r.value)
                        .bind("good")
                        .bind(received_at)
                        .bind(false);
                }
                q.execute(&mut *tx).await.expect("raw insert");
                done += chunk.len();
                if t.elapsed() >= TIME_LIMIT {
                    break;
                }
            }
            tx.commit().await.expect("commit");
            let elapsed = t.elapsed();
            let n: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM readings")
                .fetch_one(&$pool)
                .await
                .expect("count");
            refuse_unless(
                n as usize == done,
                "nothing: the raw insert is the bench's own baseline",
                || format!("raw insert stored {n} of {done} rows"),
            );
            $pool.close().await;
            (done, elapsed)
        }};
    }
    match db {
        Db::Sqlite(_) => {
            let options = SqliteConnectOptions::new()
                .filename(&url)
                .journal_mode(SqliteJournalMode::Wal)
                .synchronous(SqliteSynchronous::Normal)
                .foreign_keys(true);
            let pool = SqlitePoolOptions::new()
                .max_connections(1)
                .connect_with(options)
                .await
                .expect("open raw pool");
            insert_all!(pool)
        }
        Db::Postgres(_) => {
            let pool = PgPoolOptions::new()
                .max_connections(1)
                .connect(&url)
                .await
                .expect("open raw pool");
            insert_all!(pool)
        }
    }
}

/// PostgreSQL's own bulk path: the same rows as CSV through `COPY readings FROM STDIN`, one
/// statement (the text is made before the clock starts).
async fn raw_copy(db: Db<'_>, all: &[Reading]) -> Duration {
    let (store, url, plant) = fresh_store(db, "copy").await;
    store.close().await;
    let received_at = Utc::now().timestamp_millis();
    let mut text = String::with_capacity(all.len() * 64);
    for r in all {
        let _ = writeln!(
            text,
            "{},{},{},{},good,{received_at},false",
            plant.id,
            r.tag,
            r.time.timestamp_millis(),
            r.value
        );
    }
    let mut c = PgConnection::connect(&url).await.expect("connect");
    let t = Instant::now();
    let mut copy = c
        .copy_in_raw(
            "COPY readings (plant_id, tag, time, value, quality, received_at, out_of_range) \
             FROM STDIN (FORMAT csv)",
        )
        .await
        .expect("COPY");
    copy.send(text.as_bytes()).await.expect("COPY data");
    let rows = copy.finish().await.expect("COPY finished");
    let elapsed = t.elapsed();
    refuse_unless(
        rows as usize == all.len(),
        "nothing: COPY is the bench's own baseline",
        || format!("COPY stored {rows} of {} rows", all.len()),
    );
    c.close().await.expect("close");
    elapsed
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
        format!("build: {profile}"),
    ]
}

fn loadavg() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

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
    // The service's own runtime, as `loopbal serve` would have it on this machine; the client
    // shares it (both on loopback, in one process, on the same 2 cores).
    let rt = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .expect("tokio runtime");
    rt.block_on(run());
}

/// Everything the cases post or insert, made before any clock starts.
struct Data {
    model_text: String,
    spec: ModelSpec,
    meters: usize,
    new: Vec<Vec<Reading>>,
    new_csv: Vec<String>,
    changed_csv: Vec<String>,
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
        new_csv: new.iter().map(|b| csv(b)).collect(),
        changed_csv: changed.iter().map(|b| csv(b)).collect(),
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
    if let Some(scratch) = scratch::from_env() {
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
    let load_before = loadavg();
    let plant_name = data.spec.name.clone();
    // The service, in-process on an ephemeral loopback port.
    let url = db.fresh("http").await;
    let store = Store::open(&url).await.expect("open store");
    let token = store
        .create_token(Role::Admin, None)
        .await
        .expect("admin token");
    let (app, _) = router(AppState::new(store.clone(), Limits::default()));
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
        .await
        .expect("bind");
    let addr = listener.local_addr().expect("local address");
    let server = tokio::spawn(async move {
        axum::serve(listener, app).await.expect("serve");
    });
    let http = reqwest::Client::new();
    let res = http
        .put(format!("http://{addr}/api/v1/plants/{plant_name}/model"))
        .bearer_auth(&token.token)
        .header("content-type", "application/toml")
        .body(data.model_text.clone())
        .send()
        .await
        .expect("PUT model");
    let status = res.status();
    refuse_unless(status.is_success(), "tests/api.rs", || {
        format!("PUT model answered {status}")
    });
    let client = Client {
        http,
        url: format!("http://{addr}/api/v1/plants/{plant_name}/readings"),
        token: token.token.clone(),
    };

    let mut figures = Vec::new();
    let first = post_all(
        &client,
        &data.new_csv,
        (BATCH, 0, 0),
        Some(TIME_LIMIT),
        "HTTP, new",
        "POST text/csv, every reading new",
    )
    .await;
    let done = first.rows / BATCH;
    figures.push(first);
    figures.push(
        post_all(
            &client,
            &data.new_csv[..done],
            (0, 0, BATCH),
            None,
            "HTTP, unchanged",
            "the same batches again: identical resends",
        )
        .await,
    );
    figures.push(
        post_all(
            &client,
            &data.changed_csv[..done],
            (0, BATCH, 0),
            None,
            "HTTP, replaced",
            "the same (tag, time), every value changed",
        )
        .await,
    );

    // Where the HTTP time goes: checking the body (parse, tag, time, value, quality, repeats)
    // without the store, on the service's own catalogue.
    let row = store
        .plant(&plant_name)
        .await
        .expect("plant")
        .expect("plant exists");
    let catalogue = Catalogue::load(&store, &row)
        .await
        .expect("catalogue")
        .expect("a model");
    let t = Instant::now();
    for body in &data.new_csv[..done] {
        let checked = ingest::check_batch(body.as_bytes(), Format::Csv, &catalogue).expect("check");
        refuse_unless(
            checked.good.len() == BATCH,
            "tests/api.rs a_historians_life",
            || format!("check_batch found {} good of {BATCH}", checked.good.len()),
        );
    }
    figures.push(Figure {
        case: "check only",
        what: "ingest::check_batch on the CSV bodies (no store, no HTTP)",
        rows: done * BATCH,
        elapsed: t.elapsed(),
        slowest: None,
    });
    server.abort();
    let _ = server.await;
    store.close().await;

    // The store called directly with readings already checked, into a fresh database.
    let (direct, _, plant) = fresh_store(db, "direct").await;
    let ranges: BTreeMap<String, [f64; 2]> = data
        .spec
        .meters
        .iter()
        .filter_map(|m| m.range.map(|r| (m.tag.clone(), r)))
        .collect();
    let mut elapsed = Duration::ZERO;
    let mut slowest = Duration::ZERO;
    for batch in &data.new[..done] {
        let t = Instant::now();
        let counts = direct
            .ingest_readings(&plant, batch, 3600, &outside(&ranges))
            .await
            .expect("ingest directly");
        let dt = t.elapsed();
        refuse_unless(
            counts.accepted == BATCH,
            "tests/api.rs a_historians_life",
            || format!("store direct: {} of {BATCH} readings new", counts.accepted),
        );
        elapsed += dt;
        slowest = slowest.max(dt);
    }
    figures.push(Figure {
        case: "store direct",
        what: "Store::ingest_readings per batch, every reading new (no HTTP, no CSV)",
        rows: done * BATCH,
        elapsed,
        slowest: Some(slowest),
    });
    direct.close().await;

    // The plain bulk insert of the same rows, one transaction for them all.
    let all: Vec<Reading> = data.new[..done].iter().flatten().cloned().collect();
    let (rows, elapsed) = raw_insert(db, "raw1", &all, 1).await;
    figures.push(Figure {
        case: "raw insert",
        what: "sqlx, one INSERT per row, one transaction, no upsert",
        rows,
        elapsed,
        slowest: None,
    });
    let (rows, elapsed) = raw_insert(db, "raw500", &all, 500).await;
    figures.push(Figure {
        case: "raw insert, 500/stmt",
        what: "sqlx, 500 rows per INSERT, one transaction, no upsert",
        rows,
        elapsed,
        slowest: None,
    });
    if let Db::Postgres(_) = db {
        figures.push(Figure {
            case: "raw COPY",
            what: "COPY readings FROM STDIN (CSV), one statement, no upsert",
            rows: all.len(),
            elapsed: raw_copy(db, &all).await,
            slowest: None,
        });
    }
    let label = db.label();
    println!(
        "\n{label}: load average {load_before} before, {} after",
        loadavg()
    );
    figures
}

fn print_figures(title: &str, figures: &[Figure]) {
    println!("{title}");
    println!(
        "{:<22} {:>9} {:>10} {:>14} {:>13}  what",
        "case", "readings", "seconds", "readings/s", "slowest batch"
    );
    for f in figures {
        println!(
            "{:<22} {:>9} {:>10.3} {:>14.0} {:>13}  {}",
            f.case,
            f.rows,
            f.elapsed.as_secs_f64(),
            f.rate(),
            f.slowest
                .map_or("-".into(), |d| format!("{:.1} ms", d.as_secs_f64() * 1e3)),
            f.what
        );
    }
    let rate = |case: &str| figures.iter().find(|f| f.case == case).map(Figure::rate);
    let http_new = figures[0].rate();
    println!(
        "target: HTTP ingestion of new readings >= {TARGET:.0} readings/s: {} ({http_new:.0}/s; \
         {:.0} % of the store called directly, {:.0} % of the raw 500-row INSERT)",
        if http_new >= TARGET { "met" } else { "NOT met" },
        100.0 * http_new / rate("store direct").unwrap_or(f64::NAN),
        100.0 * http_new / rate("raw insert, 500/stmt").unwrap_or(f64::NAN)
    );
}

/// The readings per second of every case, one column per backend.
fn print_side_by_side(results: &[(&str, Vec<Figure>)]) {
    println!();
    print!("{:<22}", "readings/s");
    for (label, _) in results {
        print!(" {label:>12}");
    }
    println!(" {:>8}", "ratio");
    let mut cases: Vec<&str> = Vec::new();
    for (_, figures) in results {
        for f in figures {
            if !cases.contains(&f.case) {
                cases.push(f.case);
            }
        }
    }
    for case in cases {
        print!("{case:<22}");
        let rates: Vec<Option<f64>> = results
            .iter()
            .map(|(_, figures)| figures.iter().find(|f| f.case == case).map(Figure::rate))
            .collect();
        for r in &rates {
            match r {
                Some(r) => print!(" {r:>12.0}"),
                None => print!(" {:>12}", "-"),
            }
        }
        match (
            rates.first().copied().flatten(),
            rates.last().copied().flatten(),
        ) {
            (Some(a), Some(b)) if rates.len() > 1 => println!(" {:>8.2}", b / a),
            _ => println!(" {:>8}", "-"),
        }
    }
    println!("(ratio: last column over the first)");
}
