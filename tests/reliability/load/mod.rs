//! Sustained load: several historians posting and several engineers reading at once, for 60 s
//! (`LOOPBAL_LOAD_SECONDS` to change it), with the scheduler running periods all the while.
//!
//! One `loopbal serve` (`--run-grace 0 --run-tick 1`, so every posted hour is due at once and
//! period runs go on beside the requests) with three plants of the ombrask model under invented
//! names. Time is compressed: a historian posts the next hour of its plant every
//! [`HISTORIAN_PAUSE`] (one batch: every tag of the plant at :00, :15, :30 and :45, CSV or JSON),
//! and now and then replaces an hour it posted earlier (a late correction) or resends the hour
//! it just posted (a retry). Two historians share one plant, taking alternate hours. Engineers
//! read what engineers read: the period list, a period's report, figures, balances, meter
//! health, one meter's history, stored readings.
//!
//! Asserted: every answer is the expected 2xx with the expected counts (a transport error or
//! any other status stops the load and fails the test with the body), the server logs no
//! error and no panic and exits 0 on SIGTERM, every reading posted is stored with its last
//! value and quality, some periods were run during the load and every posted period has a
//! current run afterwards. Speed is printed (p50, p99 and max per kind of request; `--nocapture`
//! shows it), never asserted: docs/performance.md has the figures.
//!
//!     LOOPBAL_LOAD_SECONDS=10 cargo test -p loopbal-server --test reliability -- --nocapture load

use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::sync::atomic::{AtomicBool, AtomicI64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeDelta, TimeZone, Utc};
use rand::{Rng, SeedableRng};
use reqwest::{Client, StatusCode};
use serde_json::{json, Value};

use crate::support::{client, ombrask_model, token_on, Backend, Server, OMBRASK_TAGS};

// The clients of the load, and what is read back after it.
mod clients;
mod readback;

use clients::*;
use readback::*;

/// The environment variable giving the load's length in seconds.
const SECONDS_VAR: &str = "LOOPBAL_LOAD_SECONDS";
const DEFAULT_SECONDS: u64 = 60;
const PLANTS: [&str; 3] = ["ombrask-ob5", "ombrask-ob6", "ombrask-ob7"];
const HISTORIANS: usize = 4;
const ENGINEERS: usize = 4;
/// A historian's pause between batches; an engineer's between reads.
const HISTORIAN_PAUSE: Duration = Duration::from_millis(50);
const ENGINEER_PAUSE: Duration = Duration::from_millis(50);
/// Readings of one tag in one hour (every 15 minutes).
const SAMPLES_PER_HOUR: usize = 4;
/// After the load, how long the scheduler gets to run every posted period.
const SETTLE_LIMIT: Duration = Duration::from_secs(180);

/// The two tests of the pair take turns, so each has the machine (and its latencies) to itself
/// within this suite.
static ONE_AT_A_TIME: tokio::sync::Mutex<()> = tokio::sync::Mutex::const_new(());

fn load_seconds() -> u64 {
    match std::env::var(SECONDS_VAR) {
        Ok(s) => s
            .trim()
            .parse::<u64>()
            .ok()
            .filter(|&n| n > 0)
            .unwrap_or_else(|| panic!("{SECONDS_VAR}={s:?}: expected a whole number of seconds")),
        Err(_) => DEFAULT_SECONDS,
    }
}

/// Hour 0 of every plant: the load posts hours from here on.
fn base() -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2025, 3, 1, 0, 0, 0).unwrap()
}

fn hour_start(hour: i64) -> DateTime<Utc> {
    base() + TimeDelta::hours(hour)
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%dT%H:%M:%SZ").to_string()
}

testkit::both_backends! {
    /// Historians and engineers at once for 60 s: no error, nothing lost, periods run.
    async fn sustained_load(backend: Backend) {
        let _turn = ONE_AT_A_TIME.lock().await;
        let seconds = load_seconds();
        // Everything, the settling included, ends within this time or the test fails.
        let deadline = Duration::from_secs(seconds) + SETTLE_LIMIT + Duration::from_secs(120);
        tokio::time::timeout(deadline, load(backend, seconds))
            .await
            .unwrap_or_else(|_| panic!("the load test did not finish within {deadline:?}"));
    }
}

async fn load(backend: Backend, seconds: u64) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let (log_at, url) = backend.fresh(dir.path(), "load");
    let admin = token_on(&url, "admin", None);
    let ingest = token_on(&url, "ingest", None);
    let read = token_on(&url, "read", None);
    let s = crate::support::LOOPBAL.serve_on(
        &log_at,
        &url,
        &["--run-grace", "0", "--run-tick", "1"],
        "warn",
    );
    let http = client();
    for plant in PLANTS {
        let model =
            ombrask_model().replacen("name = \"ombrask-ob2\"", &format!("name = \"{plant}\""), 1);
        let r = http
            .put(s.url(&format!("/api/v1/plants/{plant}/model")))
            .bearer_auth(&admin)
            .header("content-type", "application/toml")
            .body(model)
            .send()
            .await
            .expect("PUT model");
        let status = r.status();
        assert_eq!(status, StatusCode::CREATED, "{}", r.text().await.unwrap());
    }

    let load_before = loadavg();
    let shared = Arc::new(Shared {
        base: s.base.clone(),
        http: http.clone(),
        ingest,
        read: read.clone(),
        stop: AtomicBool::new(false),
        end: Instant::now() + Duration::from_secs(seconds),
        latest: PLANTS.iter().map(|_| AtomicI64::new(-1)).collect(),
        latencies: Mutex::new(BTreeMap::new()),
        seen_run: Mutex::new(BTreeSet::new()),
        errors: Mutex::new(Vec::new()),
    });
    let began = Instant::now();
    let mut historians = Vec::new();
    for id in 0..HISTORIANS {
        let plant = id % PLANTS.len();
        // The historians of one plant take alternate hours.
        let lanes = (0..HISTORIANS)
            .filter(|h| h % PLANTS.len() == plant)
            .count() as i64;
        let lane = (id / PLANTS.len()) as i64;
        historians.push(tokio::spawn(historian(
            shared.clone(),
            id,
            plant,
            lane,
            lanes,
        )));
    }
    let engineers: Vec<_> = (0..ENGINEERS)
        .map(|id| tokio::spawn(engineer(shared.clone(), id)))
        .collect();
    let mut expected: Vec<Posted> = vec![Posted::new(); PLANTS.len()];
    for (id, h) in historians.into_iter().enumerate() {
        expected[id % PLANTS.len()].extend(h.await.expect("historian task"));
    }
    for e in engineers {
        e.await.expect("engineer task");
    }
    let elapsed = began.elapsed();
    let errors = shared.errors.lock().unwrap().clone();
    assert!(
        errors.is_empty(),
        "{} error(s) under load on {backend:?}, first:\n{}\nserver log:\n{}",
        errors.len(),
        errors.join("\n"),
        s.log()
    );

    // Periods were run while the load went on: the engineers' listings showed runs.
    let run_during = shared.seen_run.lock().unwrap().len();
    assert!(
        run_during > 0,
        "no listing showed a period run during the load"
    );
    let mut last_hour = Vec::new();
    for (p, plant) in PLANTS.iter().enumerate() {
        let last = shared.latest[p].load(Ordering::Relaxed);
        assert!(last >= 0, "no hour of {plant} was posted");
        last_hour.push(last);
    }

    // Nothing lost: every reading posted is stored, with its last value and quality.
    let mut readings = 0;
    for (p, plant) in PLANTS.iter().enumerate() {
        let got = stored(&http, &s, &read, plant, last_hour[p]).await;
        assert_eq!(
            got.len(),
            expected[p].len(),
            "{plant}: {} readings stored, {} posted",
            got.len(),
            expected[p].len()
        );
        for (key, want) in &expected[p] {
            assert_eq!(got.get(key), Some(want), "{plant}: reading {key:?}");
        }
        readings += got.len();
    }

    // Every posted hour gets its current run, and no run stays due (bounded wait).
    let settle = Instant::now();
    let mut hours_posted = 0;
    let mut runs = 0;
    for (p, plant) in PLANTS.iter().enumerate() {
        let posted_hours: BTreeSet<String> = expected[p]
            .keys()
            .map(|(_, t)| rfc3339(hour_start((*t - base()).num_hours())))
            .collect();
        hours_posted += posted_hours.len();
        loop {
            let list = periods(&http, &s, &read, plant, last_hour[p]).await;
            let waiting: Vec<&Value> = list
                .iter()
                .filter(|x| {
                    let start = x["start"].as_str().unwrap_or_default();
                    posted_hours.contains(start)
                        && (!x["run_id"].is_i64() || x["rerun_due"] != false)
                })
                .collect();
            if waiting.is_empty() {
                runs += list
                    .iter()
                    .map(|x| x["runs"].as_i64().unwrap_or(0))
                    .sum::<i64>();
                let never = list
                    .iter()
                    .filter(|x| x["run_id"].is_i64())
                    .filter(|x| !posted_hours.contains(x["start"].as_str().unwrap_or_default()))
                    .count();
                assert_eq!(never, 0, "{plant}: a period without readings was run");
                break;
            }
            assert!(
                settle.elapsed() < SETTLE_LIMIT,
                "{plant}: {} posted period(s) still without a current run {SETTLE_LIMIT:?} \
                 after the load, e.g. {}",
                waiting.len(),
                waiting[0]
            );
            tokio::time::sleep(Duration::from_millis(500)).await;
        }
    }
    let settled_in = settle.elapsed();

    let load_after = loadavg();
    let log_path = log_at.with_extension("log");
    let exited_cleanly = s.stop();
    let log = std::fs::read_to_string(&log_path).unwrap_or_default();
    let bad: Vec<&str> = log
        .lines()
        .filter(|l| l.contains("ERROR") || l.contains("panicked"))
        .collect();
    assert!(
        bad.is_empty(),
        "the server logged errors:\n{}",
        bad.join("\n")
    );
    assert!(
        exited_cleanly,
        "the server did not exit 0 on SIGTERM:\n{log}"
    );
    let warnings: Vec<&str> = log.lines().filter(|l| l.contains("WARN")).collect();

    let mut table = String::new();
    let _ = writeln!(
        table,
        "\nsustained load on {backend:?}: {:.1} s, {} plants, {HISTORIANS} historians, \
         {ENGINEERS} engineers; server: the `loopbal` binary `cargo test` built; load average \
         {load_before} before, {load_after} after",
        elapsed.as_secs_f64(),
        PLANTS.len()
    );
    let _ = writeln!(
        table,
        "{readings} readings stored and checked, {hours_posted} hours posted, {run_during} \
         periods seen run during the load, {runs} runs in all once settled (in {:.1} s); \
         {} warning line(s) in the log",
        settled_in.as_secs_f64(),
        warnings.len()
    );
    for w in warnings.iter().take(5) {
        let _ = writeln!(table, "  {w}");
    }
    let _ = writeln!(
        table,
        "{:<34} {:>7} {:>9} {:>9} {:>9}",
        "kind", "count", "p50 ms", "p99 ms", "max ms"
    );
    let latencies = shared.latencies.lock().unwrap();
    for (kind, times) in latencies.iter() {
        let mut sorted = times.clone();
        sorted.sort();
        let _ = writeln!(
            table,
            "{:<34} {:>7} {:>9.1} {:>9.1} {:>9.1}",
            kind.label(),
            sorted.len(),
            percentile(&sorted, 50.0),
            percentile(&sorted, 99.0),
            percentile(&sorted, 100.0)
        );
    }
    println!("{table}");
    for kind in [Kind::PostCsv, Kind::PostJson, Kind::Periods, Kind::Report] {
        assert!(
            latencies.get(&kind).is_some_and(|t| !t.is_empty()),
            "no {} request was made: the load did not do what it should",
            kind.label()
        );
    }
}
