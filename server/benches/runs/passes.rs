//! Scheduler passes over everything dirty, timed with the CPU they took, and the runs they
//! left checked and tallied.

use std::time::{Duration, Instant};

use chrono::{DateTime, TimeDelta, Utc};
use loopbal_server::api::AppState;
use loopbal_server::schedule::{self, Schedule};
use loopbal_server::store::PlantRow;
use testkit::bench::{cpu_seconds, refuse, refuse_unless};

use crate::service::Service;
use crate::{MAX_ROUNDS, RUN_DUE_LIMIT};

/// Scheduler passes over everything dirty, timed, with the CPU time over them: this process's
/// and, on PostgreSQL, the database server's.
pub struct Pass {
    pub ran: usize,
    /// Periods run by each instance.
    pub each: Vec<usize>,
    /// Rounds of concurrent passes until nothing was dirty.
    pub rounds: usize,
    pub wall: Duration,
    pub cpu: Option<f64>,
    pub server_cpu: Option<f64>,
}

impl Pass {
    pub fn rate(&self) -> f64 {
        self.ran as f64 / self.wall.as_secs_f64()
    }
    pub fn cores(&self) -> String {
        self.cpu.map_or("?".into(), |c| {
            format!("{:.2}", c / self.wall.as_secs_f64())
        })
    }
    pub fn server_cores(&self) -> String {
        self.server_cpu.map_or("-".into(), |c| {
            format!("{:.2}", c / self.wall.as_secs_f64())
        })
    }
}

/// CPU seconds of every `postgres` process on the machine so far (the server and its
/// backends; other users' queries included, if any).
pub fn postgres_cpu_seconds() -> Option<f64> {
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
pub async fn run_passes(
    states: &[AppState],
    row: &PlantRow,
    workers: usize,
    postgres: bool,
) -> Pass {
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
        refuse(
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("periods still dirty after {MAX_ROUNDS} rounds of run_due"),
        )
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
pub async fn check_runs(
    svc: &Service,
    start: DateTime<Utc>,
    hours: usize,
) -> (Vec<(String, usize)>, usize) {
    let store = &svc.state().store;
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

pub fn tally(statuses: &[(String, usize)]) -> String {
    statuses
        .iter()
        .map(|(s, n)| format!("{s} {n}"))
        .collect::<Vec<_>>()
        .join(", ")
}
