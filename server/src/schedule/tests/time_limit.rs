//! A period run that cannot finish within its time limit (crate::run_limit), in a scheduler
//! pass beside a plant whose run does: the big plant's period is abandoned, its claim given up
//! and its failure recorded with a backoff, listed `failed` with the reason, counted in the
//! metrics; the small plant's period is reconciled in the same pass. Once the backoff has
//! passed, a pass with room enough reconciles it and the failure is gone.

use std::time::Duration;

use chrono::{DateTime, TimeDelta, Utc};
use reconcile::{Quality, Reading, ReportStatus};

use super::super::{run_due, run_period, RunError, Schedule};
use crate::results::periods::listing;
use crate::results::PeriodRange;
use crate::run_limit::RunLimit;
use crate::service::Service;
use crate::store::{Claim, PlantRow, Store};

/// Far below what the 500-stream network's period takes (about 0.1 s for the engine when
/// optimised, and as much again for its meters' correlations), far above the tee's (well under
/// a millisecond).
const TIGHT: Duration = Duration::from_millis(20);
/// The generated network of the engine's benchmark: 503 streams × 8 components, 4,140 states,
/// 732 meters.
const STREAMS: usize = 500;

/// The plant `name` with `spec` (written as `source`) in effect from a day before `start`, and
/// `readings` stored.
async fn plant(
    store: &Store,
    name: &str,
    spec: &reconcile::ModelSpec,
    source: &str,
    start: DateTime<Utc>,
    readings: &[Reading],
) -> PlantRow {
    let plant = store.create_plant(name).await.unwrap();
    store
        .put_model_revision(&plant, spec, source, start - TimeDelta::days(1))
        .await
        .unwrap();
    store
        .ingest_readings(&plant, readings, 3600, &|_: &Reading| false)
        .await
        .unwrap();
    plant
}

fn reading(tag: &str, time: DateTime<Utc>, value: f64) -> Reading {
    Reading {
        tag: tag.into(),
        time,
        value,
        quality: Quality::Good,
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_run_past_its_limit_is_abandoned_and_retried_after_its_backoff_while_others_go_on() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("limit.sqlite");
    let store = Store::open(path.to_str().unwrap()).await.unwrap();
    let service = Service::new(store.clone()).with_run_limit(RunLimit::Fixed(TIGHT));
    // An hour closed well before now, whatever the day the test runs.
    let start = reconcile::period::period_start(Utc::now() - TimeDelta::hours(3), 3600);
    let at = start + TimeDelta::minutes(10);

    let net = testkit::network::network(STREAMS, 7);
    let values = testkit::noisy_values(
        &net.plant,
        &testkit::exact_values(&net.plant, &net.layout, &net.z),
        0,
    );
    let readings: Vec<Reading> = values
        .iter()
        .map(|v| reading(&net.plant.meters[v.meter].tag, at, v.value))
        .collect();
    let source = serde_json::to_string(&net.spec).unwrap();
    let big = plant(&store, "big", &net.spec, &source, start, &readings).await;
    let tee = crate::test_plants::tee_with_feed_meter();
    let small = plant(
        &store,
        "small",
        &reconcile::ModelSpec::from_toml(&tee).unwrap(),
        &tee,
        start,
        &[reading("F-1", at, 10.0)],
    )
    .await;

    let schedule = Schedule {
        grace: Duration::ZERO,
        tick: Duration::from_secs(1),
        workers: 2,
    };
    let ran = run_due(&service, &schedule).await.unwrap();
    assert_eq!(
        ran, 1,
        "the small plant's period ran; the big one's was abandoned"
    );

    // The small plant's period is reconciled.
    let small_run = store.current_run(&small, start).await.unwrap().unwrap();
    assert_eq!(small_run.run.status, ReportStatus::Solved);

    // The big plant's period: listed failed, with the reason and a retry to come.
    let range = PeriodRange::new(start, start + TimeDelta::hours(1), 3600).unwrap();
    let listed = listing(&service, &big, &range).await.unwrap();
    let period = &listed.periods[0];
    assert_eq!(period.status, "failed");
    assert!(period.rerun_due);
    assert_eq!(period.runs, 0);
    let failure = period.last_failure.as_ref().expect("the failure is listed");
    assert_eq!(
        failure.reason,
        "the run was abandoned at its time limit of 0.02 s"
    );
    assert_eq!(failure.failures, 1);
    let retry_after = DateTime::parse_from_rfc3339(&failure.retry_after).unwrap();
    assert!(retry_after > Utc::now(), "{retry_after} is still to come");
    assert!(store.current_run(&big, start).await.unwrap().is_none());
    // Its claim was given up (this instance holds none on it), its mark kept.
    let ours = Claim {
        instance: service.claimant.instance.clone(),
        period_start: start,
        marked_at: start,
    };
    assert!(!store.release_claim(&big, &ours).await.unwrap());
    assert_eq!(store.dirty_periods(&big).await.unwrap().len(), 1);
    assert!(service
        .metrics
        .render()
        .contains("\nloopbal_runs_abandoned_total 1\n"));

    // During the backoff a pass leaves the period alone.
    assert_eq!(run_due(&service, &schedule).await.unwrap(), 0);
    // An administrator's re-run is not held back, but is held to the limit too: nothing is
    // stored, and (the period being in its backoff, so unclaimed) no failure is added.
    let rerun = run_period(&service, &big, start).await;
    assert!(
        matches!(&rerun, Err(RunError::TimedOut { plant, period, limit })
            if plant == "big" && *period == start && *limit == TIGHT),
        "{rerun:?}"
    );
    assert!(service
        .metrics
        .render()
        .contains("\nloopbal_runs_abandoned_total 2\n"));
    let failures = store
        .run_failures(&big, start, start + TimeDelta::hours(1))
        .await
        .unwrap();
    assert_eq!(failures.len(), 1);
    assert_eq!(failures[0].failures, 1);

    // The backoff waited out, and room enough: the period is reconciled, its failure gone.
    let pool = sqlx::SqlitePool::connect(&format!("sqlite:{}", path.display()))
        .await
        .unwrap();
    sqlx::query("UPDATE run_failures SET retry_after = 0")
        .execute(&pool)
        .await
        .unwrap();
    pool.close().await;
    let roomy = service
        .clone()
        .with_run_limit(RunLimit::Fixed(Duration::from_secs(600)));
    let began = std::time::Instant::now();
    assert_eq!(run_due(&roomy, &schedule).await.unwrap(), 1);
    println!("the big period's whole run took {:?}", began.elapsed());
    let listed = listing(&roomy, &big, &range).await.unwrap();
    let period = &listed.periods[0];
    assert_eq!(period.status, "solved");
    assert!(!period.rerun_due);
    assert!(period.last_failure.is_none());
    assert!(store
        .run_failures(&big, start, start + TimeDelta::hours(1))
        .await
        .unwrap()
        .is_empty());
}
