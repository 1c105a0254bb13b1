//! SIGKILL while a historian posts. On each backend the server is killed at a random moment,
//! several times over, while client tasks post batches without pause: CSV and JSON, from three
//! readings to twelve thousand (so a kill often lands inside a long transaction), batches of
//! new readings, batches that replace stored readings with new values or quality (with a few
//! identical resends among them), and batches that do both. The kill comes at a random moment,
//! or on about half the cycles at the first moment after a random delay when the database shows
//! a write transaction of the server open. After each kill the server is
//! started again on the same database, and the test reads the database directly, in one
//! snapshot, to check that:
//!
//! - every acknowledged batch is there in full, with exactly its values and qualities (and its
//!   answer counted exactly its new, replaced and unchanged readings);
//! - every batch in flight at the kill (sent, no answer) is there entirely or not at all: a
//!   replacing batch shows all its new values or all the old ones;
//! - nothing else is stored: the readings table equals, key for key, what the test knows was
//!   acknowledged or resolved, so nothing never sent or half-written appears;
//! - the database is healthy: SQLite's `integrity_check` and `foreign_key_check` pass; on
//!   PostgreSQL no session of the dead server lingers (no lock of it survives);
//! - the dirty marks agree with the readings: every period with readings is either marked to
//!   be run or has a current run whose inputs are the period's stored readings (count and each
//!   meter's mean), and no mark or current run exists for a period without readings;
//! - the scheduler (grace 0 s, tick 1 s) runs every marked period after the restart, within a
//!   deadline, after which every period's current run matches its readings;
//! - the service answers GET readings with what the database holds.
//!
//! The batches, the kill moments and the replacements come from a seeded RNG; the seed is
//! printed, and `LOOPBAL_CRASH_SEED=N` repeats a run (the interleaving of the clients and
//! the kill is still the machine's, so a repeat follows the same plan, not the same timing).

mod database;
mod historian;

use std::collections::BTreeMap;
use std::path::Path;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use chrono::DateTime;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::Value;

use crate::support::{self, Backend, Server, OMBRASK_TAGS};
use database::{
    copy_sqlite, dead_sessions_gone, drained, marks_problems, readings_problems, resolve, snapshot,
    write_open,
};
use historian::{historian, rfc3339, Batch, Key, Ledger, Outcome, PERIOD_MS};

/// The ombrask model's own name (a model is stored under its name).
const PLANT: &str = "ombrask-ob2";

/// Overrides the random seed of the run.
const SEED_VAR: &str = "LOOPBAL_CRASH_SEED";

/// Kills per backend.
const CYCLES: usize = 8;

/// Historians posting at once.
const CLIENTS: u64 = 2;

/// The kill comes this long after the clients start, drawn uniformly (ms); on about half the
/// cycles, at the first moment after it when a write transaction is open ([`write_open`]).
const KILL_AFTER_MS: std::ops::Range<u64> = 20..1_500;

/// How long the killer waits, after its delay, for a write transaction to kill inside.
const WRITE_WAIT: Duration = Duration::from_secs(2);

/// Every wait on the server or the database ends by this deadline.
const DEADLINE: Duration = Duration::from_secs(30);

/// The answer of an acknowledged batch counts exactly what it did.
fn answer_problem(batch: &Batch, answer: &Value) -> Option<String> {
    let new = batch.writes.iter().filter(|w| w.prior.is_none()).count();
    let changed = batch.writes.iter().filter(|w| w.changes()).count() - new;
    let unchanged = batch.writes.len() - new - changed;
    let counts = [
        ("accepted", new),
        ("replaced", changed),
        ("unchanged", unchanged),
        ("rejected", 0),
    ];
    counts
        .iter()
        .any(|(name, n)| answer[*name].as_u64() != Some(*n as u64))
        .then(|| format!("{} was answered {answer}", batch.describe()))
}

/// The server as each cycle starts it. A killed server's claims on the periods it was running
/// lapse only with their lease, and the restarted one (a new instance) waits for that before
/// running those periods; a short lease keeps the cycles short (the default is 60 s).
async fn start(log_at: &Path, url: &str) -> Server {
    let (log_at, url) = (log_at.to_path_buf(), url.to_string());
    tokio::task::spawn_blocking(move || {
        support::LOOPBAL.serve_on(
            &log_at,
            &url,
            &["--run-grace", "0", "--run-tick", "1", "--run-lease", "2"],
            "warn",
        )
    })
    .await
    .expect("the server starts")
}

/// The settled readings of the two hours up to the latest one: a range for
/// [`service_agrees`].
fn latest(ledger: &Ledger) -> (i64, i64, BTreeMap<Key, (f64, String)>) {
    let last = ledger
        .values
        .keys()
        .map(|k| k.1)
        .max()
        .unwrap_or(ledger.first_ms);
    // Whole seconds, as the range travels in RFC 3339 without fractions.
    let (from, to) = (last - 2 * PERIOD_MS, last + 1_000);
    let want = ledger
        .values
        .iter()
        .filter(|(k, _)| (from..to).contains(&k.1))
        .map(|(k, v)| (*k, (v.value, v.quality.to_string())))
        .collect();
    (from, to, want)
}

/// GET readings over `[from, to)` answers `want`, the readings the ledger holds there.
async fn service_agrees(
    http: &reqwest::Client,
    s: &Server,
    token: &str,
    (from, to, want): (i64, i64, BTreeMap<Key, (f64, String)>),
) {
    let r = http
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .query(&[("from", rfc3339(from)), ("to", rfc3339(to))])
        .bearer_auth(token)
        .send()
        .await
        .expect("GET readings");
    let body = support::json_ok(r).await;
    let mut got = BTreeMap::new();
    for r in body["readings"].as_array().expect("readings") {
        let tag = OMBRASK_TAGS
            .iter()
            .position(|(t, _)| Some(*t) == r["tag"].as_str())
            .expect("a ombrask tag");
        let time = DateTime::parse_from_rfc3339(r["time"].as_str().expect("time"))
            .expect("RFC 3339")
            .timestamp_millis();
        let quality = r["quality"].as_str().expect("quality").to_string();
        got.insert((tag, time), (r["value"].as_f64().expect("value"), quality));
    }
    assert_eq!(got, want, "GET readings over {from}..{to} ms");
}

testkit::both_backends! {
    /// Acknowledged batches survive SIGKILL whole, batches in flight are all or nothing, the
    /// database stays healthy and its dirty marks consistent, on every cycle.
    async fn acknowledged_batches_survive_sigkill_whole(backend: Backend) {
        let seed: u64 = match std::env::var(SEED_VAR) {
            Ok(s) => s.parse().unwrap_or_else(|_| panic!("{SEED_VAR}={s:?} is not a u64")),
            Err(_) => rand::random(),
        };
        eprintln!("crash ({backend:?}): seed {seed} (set {SEED_VAR}={seed} to repeat)");
        let began = Instant::now();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let dir = tempfile::tempdir().unwrap();
        let (log_at, url) = backend.fresh(dir.path(), "crash");
        let admin = support::token_on(&url, "admin", None);
        let ingest = support::token_on(&url, "ingest", Some(PLANT));
        let read = support::token_on(&url, "read", Some(PLANT));
        let http = reqwest::Client::builder()
            .timeout(DEADLINE)
            .build()
            .expect("http client");

        let mut server = start(&log_at, &url).await;
        let r = http
            .put(server.url(&format!("/api/v1/plants/{PLANT}/model")))
            .bearer_auth(&admin)
            .header("content-type", "application/toml")
            .body(support::ombrask_model())
            .send()
            .await
            .expect("PUT model");
        assert_eq!(r.status(), reqwest::StatusCode::CREATED);

        let ledger = Arc::new(Mutex::new(Ledger::new()));
        let (mut acked, mut stored_in_flight, mut lost_in_flight) = (0, 0, 0);
        let mut kills_inside_writes = 0;
        for cycle in 0..CYCLES {
            let post_url = server.url(&format!("/api/v1/plants/{PLANT}/readings"));
            let clients: Vec<_> = (0..CLIENTS)
                .map(|c| {
                    let rng = ChaCha8Rng::seed_from_u64(
                        seed ^ (cycle as u64 * CLIENTS + c + 1).wrapping_mul(0x9e37_79b9_7f4a_7c15),
                    );
                    tokio::spawn(historian(
                        http.clone(),
                        post_url.clone(),
                        ingest.clone(),
                        Arc::clone(&ledger),
                        rng,
                    ))
                })
                .collect();
            let kill_after = rng.gen_range(KILL_AFTER_MS);
            let inside = rng.gen_bool(0.5);
            tokio::time::sleep(Duration::from_millis(kill_after)).await;
            let caught = if inside {
                write_open(backend, &url).await
            } else {
                false
            };
            server.kill9();
            kills_inside_writes += usize::from(caught);

            let mut in_flight = Vec::new();
            let mut cycle_acked = 0;
            for client in clients {
                let log = tokio::time::timeout(DEADLINE, client)
                    .await
                    .expect("a historian stops once the server is dead")
                    .expect("the historian task");
                for (batch, outcome) in log {
                    match outcome {
                        Outcome::Acked(answer) => {
                            if let Some(p) = answer_problem(&batch, &answer) {
                                panic!("cycle {cycle}, seed {seed}: {p}");
                            }
                            cycle_acked += 1;
                        }
                        Outcome::InFlight(e) => in_flight.push((batch, e)),
                        Outcome::Refused(status, body) => panic!(
                            "cycle {cycle}, seed {seed}: {} refused with {status}: {body}",
                            batch.describe()
                        ),
                    }
                }
            }
            acked += cycle_acked;

            // The database as the dead server left it, before anything opens it again: on
            // SQLite a copy of its files (so the restarted server still meets the crash's
            // write-ahead log itself), on PostgreSQL the database once the dead sessions end.
            let at_kill = match backend {
                Backend::Sqlite => {
                    let copy = dir.path().join(format!("at-kill-{cycle}.sqlite"));
                    copy_sqlite(&log_at, &copy);
                    snapshot(backend, copy.to_str().expect("UTF-8 path")).await
                }
                Backend::Postgres => {
                    dead_sessions_gone(&url).await;
                    snapshot(backend, &url).await
                }
            };
            let context = format!(
                "cycle {cycle} (kill after {kill_after} ms{}), seed {seed}",
                if caught { ", inside a write transaction" } else { "" }
            );
            assert!(at_kill.health.is_empty(), "{context}: {:?}", at_kill.health);
            let mut outcomes = Vec::new();
            {
                let mut ledger = ledger.lock().unwrap();
                for (batch, error) in &in_flight {
                    let stored =
                        resolve(batch, &at_kill).unwrap_or_else(|p| panic!("{context}: {p}"));
                    if stored {
                        ledger.apply(batch);
                        stored_in_flight += 1;
                    } else {
                        ledger.discard(batch);
                        lost_in_flight += 1;
                    }
                    ledger.release(batch);
                    outcomes.push(format!(
                        "{} {}",
                        batch.describe(),
                        if stored { "stored" } else { "not stored" }
                    ));
                    if !error.contains("error sending request") {
                        outcomes.push(format!("({error})"));
                    }
                }
                let problems = readings_problems(&at_kill, &ledger);
                assert!(
                    problems.is_empty(),
                    "{context}: {} problems, the first: {:#?}",
                    problems.len(),
                    &problems[..problems.len().min(10)]
                );
            }
            let problems = marks_problems(&at_kill, false);
            assert!(problems.is_empty(), "{context}: {problems:#?}");
            eprintln!(
                "crash ({backend:?}) {context}: {cycle_acked} batches acknowledged; in flight: \
                 {outcomes:?}; {} readings, {} periods marked at the kill",
                at_kill.readings.len(),
                at_kill.dirty.len()
            );

            // Restarted on the crashed database, the service recovers it, keeps every reading
            // and runs every marked period.
            server = start(&log_at, &url).await;
            let snap = drained(backend, &url).await;
            assert!(snap.health.is_empty(), "{context}: {:?}", snap.health);
            let problems = readings_problems(&snap, &ledger.lock().unwrap());
            assert!(problems.is_empty(), "{context}, after the runs: {problems:#?}");
            let problems = marks_problems(&snap, true);
            assert!(problems.is_empty(), "{context}, after the runs: {problems:#?}");
            let range = latest(&ledger.lock().unwrap());
            service_agrees(&http, &server, &read, range).await;
        }
        let stopped = tokio::task::spawn_blocking(move || server.stop()).await.unwrap();
        assert!(stopped, "the server exits 0 on SIGTERM after the last cycle");
        eprintln!(
            "crash ({backend:?}): seed {seed}, {CYCLES} kills, {acked} batches acknowledged, \
             {stored_in_flight} in flight stored whole, {lost_in_flight} not stored, \
             {kills_inside_writes} kills inside a write transaction, {:.1} s",
            began.elapsed().as_secs_f64()
        );
        assert!(acked > 0, "no batch was acknowledged in {CYCLES} cycles");
    }
}
