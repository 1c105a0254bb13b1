//! Two instances on one database, one killed (SIGKILL) while it is running periods: every
//! closed period still ends with exactly one run, its current one. Nothing is run twice (the
//! claims keep the instances apart; a run and the settling of its claim are one transaction),
//! and nothing is forgotten (the dead instance's claims lapse after their lease and the other
//! instance takes those periods).
//!
//! On PostgreSQL this is the deployment the service is built for (several stateless instances
//! on one database server); on SQLite it is two processes on one file, which the same claims
//! keep correct.

use std::collections::BTreeMap;
use std::time::{Duration, Instant};

use rand::Rng;
use serde_json::Value;

use crate::support::{
    client, json_ok, post_readings, purge_design_csv, put_model, token_on, Server,
};

/// Simulated hours posted: enough periods that both instances are busy for a while.
const HOURS: usize = 240;
/// Claims lapse this long after an instance stops renewing them.
const LEASE_SECONDS: &str = "3";

/// Run `sql` (one text parameter, `$1`) on the database at `url` and return its first column
/// as integers: the test reads claims, which the API does not show.
pub(crate) async fn query_ints(url: &str, sql: &str, param: &str) -> Vec<i64> {
    if url.starts_with("postgres") {
        let pool = sqlx::PgPool::connect(url).await.expect("connect");
        let rows: Vec<i64> = sqlx::query_scalar(sql)
            .bind(param)
            .fetch_all(&pool)
            .await
            .expect("query");
        pool.close().await;
        rows
    } else {
        let options = sqlx::sqlite::SqliteConnectOptions::new().filename(url);
        let pool = sqlx::SqlitePool::connect_with(options)
            .await
            .expect("connect");
        let rows: Vec<i64> = sqlx::query_scalar(sql)
            .bind(param)
            .fetch_all(&pool)
            .await
            .expect("query");
        pool.close().await;
        rows
    }
}

/// The periods of the simulated days: start → (runs, rerun_due, status).
pub(crate) async fn periods(
    c: &reqwest::Client,
    s: &Server,
    tok: &str,
    plant: &str,
) -> BTreeMap<String, (i64, bool, String)> {
    let r = c
        .get(s.url(&format!("/api/v1/plants/{plant}/periods")))
        .query(&[
            ("from", "2026-06-01T00:00:00Z"),
            ("to", "2026-06-11T00:00:00Z"),
        ])
        .bearer_auth(tok)
        .send()
        .await
        .expect("list periods");
    let list = json_ok(r).await;
    list["periods"]
        .as_array()
        .expect("periods")
        .iter()
        .map(|p: &Value| {
            (
                p["start"].as_str().expect("start").to_string(),
                (
                    p["runs"].as_i64().expect("runs"),
                    p["rerun_due"].as_bool().expect("rerun_due"),
                    p["status"].as_str().unwrap_or("").to_string(),
                ),
            )
        })
        .collect()
}

testkit::both_backends! {
    async fn one_of_two_instances_killed_during_runs_leaves_exactly_one_run_per_period(backend: Backend) {
        let dir = tempfile::tempdir().unwrap();
        let (log_at, url) = backend.fresh(dir.path(), "shared");
        let admin = token_on(&url, "admin", None);
        let options = |name: &'static str| {
            [
                "--run-grace", "0", "--run-tick", "1", "--run-workers", "2",
                "--run-lease", LEASE_SECONDS, "--instance-name", name,
            ]
        };
        let alpha = crate::support::LOOPBAL.serve_on(&dir.path().join("alpha"), &url, &options("alpha"), "loopbal=info,warn");
        let beta = crate::support::LOOPBAL.serve_on(&log_at, &url, &options("beta"), "loopbal=info,warn");
        let c = client();
        let plant = "purge-design";
        let (model, csv) = purge_design_csv(HOURS, &|_, _| false);
        let r = put_model(&c, &alpha, &admin, plant, &model, "application/toml").await;
        assert_eq!(r.status(), reqwest::StatusCode::CREATED, "{}", r.text().await.unwrap());
        // Two historians post half the readings each, one to each instance, at once; both
        // instances are woken and claim from the same dirty periods.
        let lines: Vec<&str> = csv.lines().collect();
        let (header, rows) = lines.split_first().expect("a header");
        let half = rows.len() / 2;
        let batch = |rows: &[&str]| format!("{header}\n{}\n", rows.join("\n"));
        let (first, second) = (batch(&rows[..half]), batch(&rows[half..]));
        let (a, b) = tokio::join!(
            post_readings(&c, &alpha, &admin, plant, &first, "text/csv"),
            post_readings(&c, &beta, &admin, plant, &second, "text/csv"),
        );
        for r in [a, b] {
            let answer = json_ok(r).await;
            assert_eq!(answer["rejected"], 0, "{answer}");
        }

        // Kill alpha while it holds claims, that is while it is running periods: wait until it
        // holds one, then a random moment more.
        let claims_of = "SELECT period_start FROM dirty_periods WHERE claimed_by LIKE $1 ORDER BY period_start";
        let deadline = Instant::now() + Duration::from_secs(60);
        while query_ints(&url, claims_of, "alpha/%").await.is_empty() {
            assert!(Instant::now() < deadline, "alpha never claimed a period");
            tokio::time::sleep(Duration::from_millis(5)).await;
        }
        let pause = rand::thread_rng().gen_range(0..50);
        tokio::time::sleep(Duration::from_millis(pause)).await;
        // A run can end between a look at the claims and the kill: freeze alpha, look, and
        // kill it only while it holds a claim (else let it go on and look again).
        let signal = |name: &str| {
            let status = std::process::Command::new("kill")
                .args([name, &alpha.pid().to_string()])
                .status()
                .expect("kill runs");
            assert!(status.success(), "kill {name}");
        };
        let deadline = Instant::now() + Duration::from_secs(30);
        loop {
            signal("-STOP");
            if !query_ints(&url, claims_of, "alpha/%").await.is_empty() {
                break;
            }
            signal("-CONT");
            assert!(Instant::now() < deadline, "alpha held no claim again");
            tokio::time::sleep(Duration::from_millis(1)).await;
        }
        alpha.kill9();
        let orphaned = query_ints(&url, claims_of, "alpha/%").await;
        eprintln!("alpha killed {pause} ms after its first claim, holding periods {orphaned:?} (ms)");
        assert!(!orphaned.is_empty(), "alpha was killed between runs; no claim of it was left to lapse");

        // beta alone finishes: every period has exactly one run and nothing left to run.
        let deadline = Instant::now() + Duration::from_secs(90);
        let settled = |p: &BTreeMap<String, (i64, bool, String)>| {
            p.len() == HOURS && p.values().all(|(runs, due, _)| *runs >= 1 && !*due)
        };
        let mut seen = periods(&c, &beta, &admin, plant).await;
        while !settled(&seen) {
            assert!(Instant::now() < deadline, "periods never settled: {seen:?}");
            tokio::time::sleep(Duration::from_millis(250)).await;
            seen = periods(&c, &beta, &admin, plant).await;
        }
        // Another look after beta's scheduler has passed again: still one run each.
        tokio::time::sleep(Duration::from_millis(2500)).await;
        let last = periods(&c, &beta, &admin, plant).await;
        for (start, (runs, due, status)) in &last {
            assert_eq!(*runs, 1, "period {start} ran {runs} times");
            assert!(!due, "period {start} is still due");
            assert_eq!(status, "solved", "period {start}");
        }
        // The database holds exactly one current run per period, and the periods alpha held
        // when it died are among them (taken over by beta once the claims lapsed).
        let current = query_ints(
            &url,
            "SELECT COUNT(*) FROM runs WHERE current AND plant_id IN (SELECT id FROM plants WHERE name = $1) GROUP BY period_start",
            plant,
        )
        .await;
        assert_eq!(current.len(), HOURS);
        assert!(current.iter().all(|&n| n == 1), "{current:?}");
        let orphans_run = query_ints(
            &url,
            "SELECT period_start FROM runs WHERE current AND plant_id IN (SELECT id FROM plants WHERE name = $1)",
            plant,
        )
        .await;
        for start in &orphaned {
            assert!(orphans_run.contains(start), "period {start} of the dead instance never ran");
        }
        assert!(query_ints(&url, "SELECT period_start FROM dirty_periods WHERE $1 = $1", "").await.is_empty());
        let beta_log = beta.stop_and_log();
        assert!(beta_log.contains("period run"), "beta ran nothing");
        assert!(!beta_log.contains("panicked"), "{beta_log}");
    }
}
