//! The database read directly, in one snapshot, and judged against the ledger: the readings,
//! the dirty marks, the current runs and the database's own health checks.

use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use serde_json::Value;
use sqlx::Connection;

use super::historian::{period_of, rfc3339, Batch, Key, Ledger, Val};
use super::{DEADLINE, WRITE_WAIT};
use crate::support::{Backend, OMBRASK_TAGS};

/// The database as one consistent snapshot.
#[derive(Debug, Default)]
pub(super) struct Snapshot {
    pub(super) readings: HashMap<Key, Val>,
    pub(super) dirty: BTreeSet<i64>,
    /// Inputs of each period's current run, by period start.
    pub(super) runs: HashMap<i64, Value>,
    /// Problems found by the database's own checks.
    pub(super) health: Vec<String>,
}

pub(super) type Rows = (
    Vec<(String, i64, f64, String)>,
    Vec<(i64,)>,
    Vec<(i64, String)>,
);

/// The same reads on either backend's transaction.
macro_rules! read_tables {
    ($tx:expr) => {{
        let readings: Vec<(String, i64, f64, String)> =
            sqlx::query_as("SELECT tag, time, value, quality FROM readings")
                .fetch_all(&mut *$tx)
                .await
                .expect("read readings");
        let dirty: Vec<(i64,)> = sqlx::query_as("SELECT period_start FROM dirty_periods")
            .fetch_all(&mut *$tx)
            .await
            .expect("read dirty_periods");
        let runs: Vec<(i64, String)> = sqlx::query_as(
            "SELECT period_start, CAST(inputs_json AS TEXT) FROM runs WHERE current",
        )
        .fetch_all(&mut *$tx)
        .await
        .expect("read runs");
        (readings, dirty, runs)
    }};
}

pub(super) fn sqlite_options(path: &str) -> sqlx::sqlite::SqliteConnectOptions {
    // As the server opens it (store::Store::open), so this connection never changes the
    // journal mode under it.
    sqlx::sqlite::SqliteConnectOptions::new()
        .filename(path)
        .create_if_missing(false)
        .journal_mode(sqlx::sqlite::SqliteJournalMode::Wal)
        .busy_timeout(DEADLINE)
}

pub(super) async fn snapshot(backend: Backend, url: &str) -> Snapshot {
    let mut health = Vec::new();
    let rows: Rows = match backend {
        Backend::Sqlite => {
            let mut c = sqlx::SqliteConnection::connect_with(&sqlite_options(url))
                .await
                .expect("open the SQLite file");
            let check: Vec<(String,)> = sqlx::query_as("PRAGMA integrity_check")
                .fetch_all(&mut c)
                .await
                .expect("integrity_check");
            if check.len() != 1 || check[0].0 != "ok" {
                health.push(format!("integrity_check: {check:?}"));
            }
            let orphans = sqlx::query("PRAGMA foreign_key_check")
                .fetch_all(&mut c)
                .await
                .expect("foreign_key_check");
            if !orphans.is_empty() {
                health.push(format!("{} rows fail foreign_key_check", orphans.len()));
            }
            // A deferred transaction: one snapshot from its first read.
            let mut tx = c.begin().await.expect("begin");
            let rows = read_tables!(tx);
            tx.rollback().await.expect("rollback");
            c.close().await.expect("close");
            rows
        }
        Backend::Postgres => {
            let mut c = sqlx::PgConnection::connect(url)
                .await
                .expect("connect to the scratch database");
            let mut tx = c.begin().await.expect("begin");
            sqlx::query("SET TRANSACTION ISOLATION LEVEL REPEATABLE READ")
                .execute(&mut *tx)
                .await
                .expect("repeatable read");
            let rows = read_tables!(tx);
            tx.rollback().await.expect("rollback");
            c.close().await.expect("close");
            rows
        }
    };
    let (readings, dirty, runs) = rows;
    let tag_index: HashMap<&str, usize> = OMBRASK_TAGS
        .iter()
        .enumerate()
        .map(|(i, (t, _))| (*t, i))
        .collect();
    let mut snap = Snapshot {
        health,
        ..Snapshot::default()
    };
    for (tag, time, value, quality) in readings {
        let quality = match quality.as_str() {
            "good" => "good",
            "uncertain" => "uncertain",
            "bad" => "bad",
            other => {
                snap.health.push(format!("stored quality {other:?}"));
                continue;
            }
        };
        let Some(&i) = tag_index.get(tag.as_str()) else {
            snap.health
                .push(format!("a reading of unknown tag {tag:?}"));
            continue;
        };
        snap.readings.insert((i, time), Val { value, quality });
    }
    snap.dirty = dirty.into_iter().map(|(p,)| p).collect();
    for (period, inputs) in runs {
        let inputs = serde_json::from_str(&inputs).expect("a run's inputs are JSON");
        if snap.runs.insert(period, inputs).is_some() {
            snap.health
                .push(format!("two current runs for period {}", rfc3339(period)));
        }
    }
    snap
}

/// The dirty marks and current runs against the stored readings: every period with readings is
/// marked (unless `drained`) or has a current run on exactly its readings; no mark and no
/// current run belongs to a period without readings. The problems found, if any.
pub(super) fn marks_problems(snap: &Snapshot, drained: bool) -> Vec<String> {
    // Per period, per tag: the readings.
    let mut periods: BTreeMap<i64, BTreeMap<usize, Vec<Val>>> = BTreeMap::new();
    for (&(tag, time), &val) in &snap.readings {
        periods
            .entry(period_of(time))
            .or_default()
            .entry(tag)
            .or_default()
            .push(val);
    }
    let mut problems = Vec::new();
    for (&p, tags) in &periods {
        let at = rfc3339(p);
        if snap.dirty.contains(&p) {
            if drained {
                problems.push(format!("period {at} is still marked after the drain"));
            }
            continue;
        }
        let Some(inputs) = snap.runs.get(&p) else {
            problems.push(format!(
                "period {at} has readings but neither a mark nor a current run"
            ));
            continue;
        };
        let count: usize = tags.values().map(Vec::len).sum();
        if inputs["readings"].as_u64() != Some(count as u64) {
            problems.push(format!(
                "period {at} is not marked, but its current run saw {} readings of the {count} \
                 stored",
                inputs["readings"]
            ));
            continue;
        }
        let mut expected: BTreeMap<&str, (f64, usize)> = BTreeMap::new();
        for (&tag, vals) in tags {
            let used: Vec<f64> = vals
                .iter()
                .filter(|v| v.quality != "bad")
                .map(|v| v.value)
                .collect();
            if !used.is_empty() {
                let mean = used.iter().sum::<f64>() / used.len() as f64;
                expected.insert(OMBRASK_TAGS[tag].0, (mean, used.len()));
            }
        }
        let mut seen: BTreeMap<&str, (f64, usize)> = BTreeMap::new();
        for m in inputs["meters"].as_array().into_iter().flatten() {
            seen.insert(
                m["tag"].as_str().unwrap_or("?"),
                (
                    m["value"].as_f64().unwrap_or(f64::NAN),
                    m["readings"].as_u64().unwrap_or(0) as usize,
                ),
            );
        }
        let same = expected.len() == seen.len()
            && expected.iter().all(|(tag, (mean, n))| {
                seen.get(tag).is_some_and(|(v, m)| {
                    m == n && (v - mean).abs() <= 1e-9 * mean.abs().max(1e-12)
                })
            });
        if !same {
            problems.push(format!(
                "period {at} is not marked, but its current run's meters {seen:?} are not the \
                 stored readings' {expected:?}"
            ));
        }
    }
    for p in &snap.dirty {
        if !periods.contains_key(p) {
            problems.push(format!(
                "period {} is marked but has no readings",
                rfc3339(*p)
            ));
        }
    }
    for p in snap.runs.keys() {
        if !periods.contains_key(p) {
            problems.push(format!(
                "period {} has a current run but no readings",
                rfc3339(*p)
            ));
        }
    }
    problems
}

/// The stored readings against the ledger: what is missing, foreign or different.
pub(super) fn readings_problems(snap: &Snapshot, ledger: &Ledger) -> Vec<String> {
    let mut problems = Vec::new();
    for (key, want) in &ledger.values {
        match snap.readings.get(key) {
            None => problems.push(format!(
                "{} at {} is missing (want {want:?})",
                OMBRASK_TAGS[key.0].0,
                rfc3339(key.1)
            )),
            Some(got) if got != want => problems.push(format!(
                "{} at {} holds {got:?}, want {want:?}",
                OMBRASK_TAGS[key.0].0,
                rfc3339(key.1)
            )),
            Some(_) => {}
        }
    }
    for (key, got) in &snap.readings {
        if !ledger.values.contains_key(key) {
            problems.push(format!(
                "{} at {} holds {got:?}, never acknowledged nor in flight",
                OMBRASK_TAGS[key.0].0,
                rfc3339(key.1)
            ));
        }
    }
    problems
}

/// Decide from the database whether a batch in flight at the kill was stored: all its changes
/// or none of them, never a mix, never another value. `Ok(stored)` or the problem.
pub(super) fn resolve(batch: &Batch, snap: &Snapshot) -> Result<bool, String> {
    let (mut new, mut old) = (0, 0);
    for w in batch.writes.iter().filter(|w| w.changes()) {
        let got = snap.readings.get(&w.key).copied();
        if got == Some(w.val) {
            new += 1;
        } else if got == w.prior {
            old += 1;
        } else {
            return Err(format!(
                "{}: {} at {} holds {got:?}, neither the batch's {:?} nor the earlier {:?}",
                batch.describe(),
                OMBRASK_TAGS[w.key.0].0,
                rfc3339(w.key.1),
                w.val,
                w.prior
            ));
        }
    }
    if new > 0 && old > 0 {
        return Err(format!(
            "{} is half-written: {new} readings changed, {old} not",
            batch.describe()
        ));
    }
    Ok(new > 0)
}

/// Wait, at most [`WRITE_WAIT`], for a moment when the server has a write transaction open:
/// on SQLite, its write lock is taken (our `BEGIN IMMEDIATE` finds it busy); on PostgreSQL, one
/// of its sessions holds a transaction id while it writes readings or marks. Whether it came.
pub(super) async fn write_open(backend: Backend, url: &str) -> bool {
    let until = Instant::now() + WRITE_WAIT;
    match backend {
        Backend::Sqlite => {
            let options = sqlite_options(url).busy_timeout(Duration::ZERO);
            let mut probe = sqlx::SqliteConnection::connect_with(&options)
                .await
                .expect("open the SQLite file");
            let mut seen = false;
            while !seen && Instant::now() < until {
                match sqlx::query("BEGIN IMMEDIATE").execute(&mut probe).await {
                    Ok(_) => {
                        sqlx::query("ROLLBACK")
                            .execute(&mut probe)
                            .await
                            .expect("rollback");
                        tokio::time::sleep(Duration::from_millis(2)).await;
                    }
                    Err(e) if e.to_string().contains("database is locked") => seen = true,
                    Err(e) => panic!("probing the write lock: {e}"),
                }
            }
            // Closed while the server lives: the last connection to close would checkpoint the
            // write-ahead log that the restarted server must meet as the kill left it.
            probe.close().await.expect("close");
            seen
        }
        Backend::Postgres => {
            let mut probe = sqlx::PgConnection::connect(url).await.expect("connect");
            let mut seen = false;
            while !seen && Instant::now() < until {
                let (n,): (i64,) = sqlx::query_as(
                    "SELECT COUNT(*) FROM pg_stat_activity
                     WHERE datname = current_database() AND pid <> pg_backend_pid()
                       AND backend_xid IS NOT NULL
                       AND (query LIKE '%INTO readings%' OR query LIKE '%INTO dirty_periods%')",
                )
                .fetch_one(&mut probe)
                .await
                .expect("pg_stat_activity");
                seen = n > 0;
                if !seen {
                    tokio::time::sleep(Duration::from_millis(2)).await;
                }
            }
            probe.close().await.expect("close");
            seen
        }
    }
}

/// Copy an SQLite database with its write-ahead log and index, as they lie.
pub(super) fn copy_sqlite(from: &Path, to: &Path) {
    for suffix in ["", "-wal", "-shm"] {
        let source = PathBuf::from(format!("{}{suffix}", from.display()));
        if source.exists() {
            std::fs::copy(&source, format!("{}{suffix}", to.display()))
                .unwrap_or_else(|e| panic!("copy {}: {e}", source.display()));
        }
    }
}

/// On PostgreSQL, the dead server's sessions end (their transactions roll back and their
/// locks go) within the deadline.
pub(super) async fn dead_sessions_gone(url: &str) {
    let mut c = sqlx::PgConnection::connect(url).await.expect("connect");
    let deadline = Instant::now() + DEADLINE;
    loop {
        let (n,): (i64,) = sqlx::query_as(
            "SELECT COUNT(*) FROM pg_stat_activity
             WHERE datname = current_database() AND pid <> pg_backend_pid()",
        )
        .fetch_one(&mut c)
        .await
        .expect("pg_stat_activity");
        if n == 0 {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "{n} sessions of the killed server still open after {DEADLINE:?}"
        );
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    c.close().await.expect("close");
}

/// Wait until the scheduler has run every marked period; the snapshot then.
pub(super) async fn drained(backend: Backend, url: &str) -> Snapshot {
    let deadline = Instant::now() + DEADLINE;
    loop {
        let snap = snapshot(backend, url).await;
        if snap.dirty.is_empty() {
            return snap;
        }
        assert!(
            Instant::now() < deadline,
            "{} periods still marked {DEADLINE:?} after the restart",
            snap.dirty.len()
        );
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
}
