//! Two live instances on one database running the same dirty periods at once, neither killed:
//! every period runs exactly once (one current run, one run in all), no dirty mark is left,
//! the instances log one "period run" line per period between them and no error, and a report
//! read back is the period asked for with every meter. These are the checks the period-run
//! benchmark (server/benches/runs/) relies on for its figures; they are asserted here.
//! (instances.rs kills one of the two instances; the posts' counts are asserted in
//! tests/api/readings.rs as well.)

use crate::instances::{periods, query_ints};
use crate::support::{client, json_ok, post_readings, purge_design_csv, put_model, token_on};

/// Simulated hours posted: periods enough for both instances to claim some.
const HOURS: usize = 96;

testkit::both_backends! {
    async fn two_live_instances_run_every_period_exactly_once(backend: Backend) {
        let dir = tempfile::tempdir().unwrap();
        let (log_at, url) = backend.fresh(dir.path(), "shared");
        let admin = token_on(&url, "admin", None);
        let options = |name: &'static str| {
            ["--run-grace", "0", "--run-tick", "1", "--run-workers", "2", "--instance-name", name]
        };
        let serve = |at: &std::path::Path, name| {
            crate::support::LOOPBAL.serve_on(at, &url, &options(name), "loopbal=info,warn")
        };
        let (alpha, beta) = (serve(&dir.path().join("alpha"), "alpha"), serve(&log_at, "beta"));
        let c = client();
        let plant = testkit::purge_design::PLANT;
        let (model, csv) = purge_design_csv(HOURS, &|_, _| false);
        let r = put_model(&c, &alpha, &admin, plant, &model, "application/toml").await;
        assert_eq!(r.status(), reqwest::StatusCode::CREATED, "{}", r.text().await.unwrap());
        // One batch to one instance: every reading is new and every period dirty; both
        // instances' schedulers then contend for the same periods.
        let rows = csv.lines().count() - 1;
        let r = post_readings(&c, &beta, &admin, plant, &csv, "text/csv").await;
        let answer = json_ok(r).await;
        assert_eq!(answer["accepted"], rows, "every reading new: {answer}");
        assert_eq!(answer["rejected"], 0, "{answer}");

        let deadline = std::time::Instant::now() + std::time::Duration::from_secs(120);
        let settled = |p: &std::collections::BTreeMap<String, (i64, bool, String)>| {
            p.len() == HOURS && p.values().all(|(runs, due, _)| *runs >= 1 && !*due)
        };
        // The listing covers ten days; the hours after the posted ones have no readings.
        let posted = |all: std::collections::BTreeMap<String, (i64, bool, String)>| {
            all.into_iter()
                .filter(|(_, (_, _, status))| status != "no_readings")
                .collect::<std::collections::BTreeMap<_, _>>()
        };
        let mut seen = posted(periods(&c, &alpha, &admin, plant).await);
        while !settled(&seen) {
            assert!(std::time::Instant::now() < deadline, "periods never settled: {seen:?}");
            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
            seen = posted(periods(&c, &alpha, &admin, plant).await);
        }
        // Another look after both schedulers have passed again: still one run each.
        tokio::time::sleep(std::time::Duration::from_millis(2500)).await;
        let last = posted(periods(&c, &beta, &admin, plant).await);
        assert_eq!(last.len(), HOURS);
        for (start, (runs, due, status)) in &last {
            assert_eq!(*runs, 1, "period {start} ran {runs} times");
            assert!(!due, "period {start} is still due");
            assert_eq!(status, "solved", "period {start}");
        }
        // In the database: one current run per period, one run in all per period (none ran
        // twice), no dirty mark.
        let of_plant = "plant_id IN (SELECT id FROM plants WHERE name = $1)";
        let current = query_ints(
            &url,
            &format!("SELECT COUNT(*) FROM runs WHERE current AND {of_plant} GROUP BY period_start"),
            plant,
        )
        .await;
        assert_eq!(current.len(), HOURS);
        assert!(current.iter().all(|&n| n == 1), "{current:?}");
        let all = query_ints(&url, &format!("SELECT COUNT(*) FROM runs WHERE {of_plant}"), plant).await;
        assert_eq!(all, [HOURS as i64], "one run in all per period: none ran twice");
        assert!(query_ints(&url, "SELECT period_start FROM dirty_periods WHERE $1 = $1", "").await.is_empty());

        // A report read back is the period asked for, with every meter of the model.
        let meters = reconcile::parse_plant(testkit::plants::PURGE_DESIGN).unwrap().meters.len();
        let start = "2026-06-02T05:00:00Z";
        let r = c
            .get(beta.url(&format!("/api/v1/plants/{plant}/periods/{start}")))
            .bearer_auth(&admin)
            .send()
            .await
            .unwrap();
        let period = json_ok(r).await;
        assert_eq!(period["start"], start);
        assert_eq!(period["report"]["meters"].as_array().map(Vec::len), Some(meters), "a whole report");

        // The two logs: one "period run" line per period between them, no error, no panic.
        let logs = [alpha.stop_and_log(), beta.stop_and_log()];
        let ran: usize = logs.iter().map(|l| l.lines().filter(|l| l.contains("period run")).count()).sum();
        assert_eq!(ran, HOURS, "the instances logged one run per period");
        for log in &logs {
            assert!(!log.contains("ERROR") && !log.contains("panicked"), "{log}");
        }
    }
}
