//! Ingestion throughput: CSV batches of 10,000 readings posted over HTTP to the service running
//! in-process on loopback with a SQLite file, beside the store called directly and a plain bulk
//! insert into the same `readings` schema, all in one run on one machine.
//!
//!     cargo bench -p loopbal-server --bench ingest
//!     LOOPBAL_BENCH_QUICK=1 cargo bench -p loopbal-server --bench ingest     # 3 batches
//!     LOOPBAL_BENCH_BATCHES=50 cargo bench -p loopbal-server --bench ingest
//!
//! No criterion: one timed pass per case (a batch is 10,000 rows, so the pass is long enough
//! for `Instant` to be accurate), bounded by a batch count and by 60 s for the first pass.
//! The counts in every answer are checked, so a fast but wrong store fails the bench.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::Path;
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeZone, Utc};
use loopbal_server::api::{router, AppState, Limits};
use loopbal_server::ingest::{self, Catalogue};
use loopbal_server::readings::Format;
use loopbal_server::store::{outside, Role, Store};
use reconcile::{ModelSpec, Quality, Reading};
use sqlx::sqlite::{SqliteConnectOptions, SqliteJournalMode, SqlitePoolOptions, SqliteSynchronous};

const BATCH: usize = 10_000;
const DEFAULT_BATCHES: usize = 20;
const QUICK_BATCHES: usize = 3;
/// The first pass (new readings) stops early after this long; later passes use its count.
const TIME_LIMIT: Duration = Duration::from_secs(60);
const TARGET: f64 = 100_000.0;
const MODEL_PATH: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/../tests/data/fenwick-methanol.toml"
);

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
        assert!(
            status.is_success(),
            "POST readings answered {status}: {text}"
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
        assert_eq!(
            (a.accepted, a.replaced, a.unchanged, a.rejected),
            (expect.0, expect.1, expect.2, 0),
            "{case}: unexpected answer"
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

/// A migrated database file with one plant (the readings table's foreign key needs it).
async fn fresh_store(dir: &Path, name: &str) -> (Store, loopbal_server::store::PlantRow) {
    let path = dir.join(name).to_string_lossy().into_owned();
    let store = Store::open(&path).await.expect("open store");
    let plant = store.create_plant("bulk").await.expect("create plant");
    (store, plant)
}

/// The plain bulk insert: the same rows into the same `readings` table on a connection with
/// the store's pragmas, one transaction, no upsert, no checks. `per_statement` rows go in
/// one INSERT (1 = one statement per row).
async fn raw_insert(dir: &Path, name: &str, all: &[Reading], per_statement: usize) -> Duration {
    let (store, plant) = fresh_store(dir, name).await;
    store.close().await;
    let options = SqliteConnectOptions::new()
        .filename(dir.join(name))
        .journal_mode(SqliteJournalMode::Wal)
        .synchronous(SqliteSynchronous::Normal)
        .foreign_keys(true);
    let pool = SqlitePoolOptions::new()
        .max_connections(1)
        .connect_with(options)
        .await
        .expect("open raw pool");
    let received_at = Utc::now().timestamp_millis();
    let mut sql = String::from(
        "INSERT INTO readings (plant_id, tag, time, value, quality, received_at, out_of_range) VALUES ",
    );
    let row = "(?, ?, ?, ?, ?, ?, ?)";
    let full = {
        let mut s = sql.clone();
        s.push_str(&vec![row; per_statement].join(", "));
        s
    };
    let t = Instant::now();
    let mut tx = pool.begin().await.expect("begin");
    for chunk in all.chunks(per_statement) {
        let text = if chunk.len() == per_statement {
            full.as_str()
        } else {
            sql.push_str(&vec![row; chunk.len()].join(", "));
            sql.as_str()
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
    }
    tx.commit().await.expect("commit");
    let elapsed = t.elapsed();
    let n: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM readings")
        .fetch_one(&pool)
        .await
        .expect("count");
    assert_eq!(n as usize, all.len(), "raw insert stored every row");
    pool.close().await;
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
    let load = std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into());
    let profile = if cfg!(debug_assertions) {
        "debug (not optimised!)"
    } else {
        "optimised (bench/release)"
    };
    vec![
        format!("cpu: {cpu}, {cores} cores available"),
        format!("load average before: {load}"),
        format!("build: {profile}; SQLite file in a temporary directory, WAL, synchronous=NORMAL"),
    ]
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

async fn run() {
    let batches = batches_wanted();
    let context = machine();
    let dir = tempfile::tempdir().expect("temporary directory");
    let model_text = std::fs::read_to_string(MODEL_PATH).expect("read the Fenwick model");
    let spec = ModelSpec::from_toml(&model_text).expect("Fenwick model parses");
    let plant_name = spec.name.clone();
    let meters: Vec<Meter> = spec.meters.iter().map(meter).collect();
    let start = Utc.with_ymd_and_hms(2026, 1, 1, 0, 0, 0).unwrap();

    // Every batch's readings and bodies, made before any clock starts.
    let new: Vec<Vec<Reading>> = (0..batches)
        .map(|b| readings(&meters, start, b * BATCH, BATCH, 0.0))
        .collect();
    let changed: Vec<Vec<Reading>> = (0..batches)
        .map(|b| readings(&meters, start, b * BATCH, BATCH, 0.5))
        .collect();
    let new_csv: Vec<String> = new.iter().map(|b| csv(b)).collect();
    let changed_csv: Vec<String> = changed.iter().map(|b| csv(b)).collect();

    // The service, in-process on an ephemeral loopback port.
    let db = dir.path().join("http.db").to_string_lossy().into_owned();
    let store = Store::open(&db).await.expect("open store");
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
        .body(model_text.clone())
        .send()
        .await
        .expect("PUT model");
    assert!(
        res.status().is_success(),
        "PUT model answered {}",
        res.status()
    );
    let client = Client {
        http,
        url: format!("http://{addr}/api/v1/plants/{plant_name}/readings"),
        token: token.token.clone(),
    };

    let mut figures = Vec::new();
    let first = post_all(
        &client,
        &new_csv,
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
            &new_csv[..done],
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
            &changed_csv[..done],
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
    for body in &new_csv[..done] {
        let checked = ingest::check_batch(body.as_bytes(), Format::Csv, &catalogue).expect("check");
        assert_eq!(checked.good.len(), BATCH);
    }
    figures.push(Figure {
        case: "check only",
        what: "ingest::check_batch on the CSV bodies (no store, no HTTP)",
        rows: done * BATCH,
        elapsed: t.elapsed(),
        slowest: None,
    });
    drop(server);
    store.close().await;

    // The store called directly with readings already checked, into a fresh database.
    let (direct, plant) = fresh_store(dir.path(), "direct.db").await;
    let ranges: BTreeMap<String, [f64; 2]> = spec
        .meters
        .iter()
        .filter_map(|m| m.range.map(|r| (m.tag.clone(), r)))
        .collect();
    let mut elapsed = Duration::ZERO;
    let mut slowest = Duration::ZERO;
    for batch in &new[..done] {
        let t = Instant::now();
        let counts = direct
            .ingest_readings(&plant, batch, 3600, &outside(&ranges))
            .await
            .expect("ingest directly");
        let dt = t.elapsed();
        assert_eq!(counts.accepted, BATCH, "store direct: every reading new");
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
    let all: Vec<Reading> = new[..done].iter().flatten().cloned().collect();
    let raw_one = raw_insert(dir.path(), "raw-1.db", &all, 1).await;
    figures.push(Figure {
        case: "raw insert",
        what: "sqlx, one INSERT per row, one transaction, no upsert",
        rows: all.len(),
        elapsed: raw_one,
        slowest: None,
    });
    let raw_multi = raw_insert(dir.path(), "raw-500.db", &all, 500).await;
    figures.push(Figure {
        case: "raw insert, 500/stmt",
        what: "sqlx, 500 rows per INSERT, one transaction, no upsert",
        rows: all.len(),
        elapsed: raw_multi,
        slowest: None,
    });

    println!();
    println!(
        "ingest: {done} batch(es) of {BATCH} readings, {} meters of {plant_name}, hourly",
        meters.len()
    );
    for line in &context {
        println!("  {line}");
    }
    println!();
    println!(
        "{:<22} {:>9} {:>10} {:>14} {:>13}  what",
        "case", "readings", "seconds", "readings/s", "slowest batch"
    );
    for f in &figures {
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
    let http_new = figures[0].rate();
    println!();
    println!(
        "target: HTTP ingestion of new readings >= {TARGET:.0} readings/s: {} ({http_new:.0}/s; \
         {:.0} % of the store called directly, {:.0} % of the raw 500-row INSERT)",
        if http_new >= TARGET { "met" } else { "NOT met" },
        100.0 * http_new / figures[4].rate(),
        100.0 * http_new / figures[6].rate()
    );
    if let Ok(load) = std::fs::read_to_string("/proc/loadavg") {
        println!(
            "load average after: {}",
            load.split_whitespace()
                .take(3)
                .collect::<Vec<_>>()
                .join(" ")
        );
    }
}
