//! Below HTTP: the store called directly with readings already checked, and the plain bulk
//! insert of the same rows (and PostgreSQL's `COPY`), each into a fresh database.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::time::{Duration, Instant};

use chrono::Utc;
use loopbal_server::store::{outside, PlantRow, Store};
use reconcile::Reading;
use sqlx::postgres::{PgConnection, PgPoolOptions};
use sqlx::sqlite::{SqliteConnectOptions, SqliteJournalMode, SqlitePoolOptions, SqliteSynchronous};
use sqlx::Connection;
use testkit::bench::{refuse_unless, Db};

use crate::figures::Figure;
use crate::{Data, BATCH, TIME_LIMIT};

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

/// The store called directly with the first `done` batches of new readings, already checked,
/// into a fresh database of `db`.
pub async fn store_direct(db: Db<'_>, data: &Data, done: usize) -> Figure {
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
            "server/src/store/tests/readings.rs readings_are_idempotent_and_changes_mark_their_period",
            || format!("store direct: {} of {BATCH} readings new", counts.accepted),
        );
        elapsed += dt;
        slowest = slowest.max(dt);
    }
    direct.close().await;
    Figure {
        case: "store direct",
        what: "Store::ingest_readings per batch, every reading new (no HTTP, no CSV)",
        rows: done * BATCH,
        elapsed,
        slowest: Some(slowest),
    }
}

/// The plain bulk inserts of the first `done` batches (one row per INSERT, 500 per INSERT, and
/// on PostgreSQL `COPY`), each into a fresh database of `db`.
pub async fn bulk_inserts(db: Db<'_>, data: &Data, done: usize) -> Vec<Figure> {
    let mut figures = Vec::new();
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
    figures
}
