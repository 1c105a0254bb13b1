//! A batch of claimed periods recorded in one transaction (`Store::record_claimed_runs`), on
//! both backends: each run whose claim is held is recorded as its period's current run, with
//! its meters' records and figures and its period's failures forgotten; a run whose claim
//! lapsed and was taken by another instance is refused alone.

use std::time::Duration;

use reconcile::ReportStatus;

use super::claims::{before, hour, plant_with_dirty_hours, LONG};
use super::*;
use crate::health::MeterPeriod;
use crate::store::PreparedRun;

on_both_backends!(a_batch_records_every_held_claim_and_refuses_only_a_lapsed_one,);

/// A run of the period at `start` with one figure and one meter record, each carrying `value`.
fn run_of(start: DateTime<Utc>, revision: i64, value: f64) -> PreparedRun {
    let report = serde_json::json!({
        "status": "solved",
        "figures": [{ "name": "purge_fraction", "subject": "loop", "uom": "fraction",
                      "value": value, "sigma": 0.001 }],
        "global_test": { "passed": true, "statistic": 1.0 },
    });
    let meter = MeterPeriod {
        period_start: start,
        measured: Some(value),
        reconciled: Some(value),
        sigma: Some(1.0),
        adjustment: Some(0.0),
        adjustment_sigma: Some(0.5),
        normalized: Some(0.0),
        redundant: true,
        flagged: false,
        readings: 1,
        bad_readings: 0,
        out_of_range_readings: 0,
        correlations: Default::default(),
    };
    NewRun {
        period_start: start,
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: ReportStatus::Solved,
        report,
        inputs: serde_json::json!([]),
        meters: vec![("FT-1".into(), meter)],
    }
    .prepare()
    .unwrap()
}

async fn a_batch_records_every_held_claim_and_refuses_only_a_lapsed_one(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = plant_with_dirty_hours(store, 3).await;
    // Instance a holds hours 0 and 1 for long, and hour 2 for a lease that lapses; instance
    // b then takes hour 2 over.
    let mut held = store
        .claim_due(&plant, "a", before(hour(1)), LONG, 2)
        .await
        .unwrap();
    let short = store
        .claim_due(&plant, "a", before(hour(2)), Duration::from_millis(1), 1)
        .await
        .unwrap();
    assert_eq!(short.len(), 1);
    tokio::time::sleep(Duration::from_millis(30)).await;
    let taken = store
        .claim_due(&plant, "b", before(hour(2)), LONG, 5)
        .await
        .unwrap();
    assert_eq!(
        taken.iter().map(|c| c.period_start).collect::<Vec<_>>(),
        [hour(2)]
    );
    held.extend(short);
    // Hour 0 had an abandoned run: recording it forgets the failure.
    store
        .record_run_failure(&plant, &held[0], "abandoned", |_| Duration::ZERO)
        .await
        .unwrap()
        .expect("the claim is held");
    tokio::time::sleep(Duration::from_millis(5)).await;
    held[0] = store
        .claim_due(&plant, "a", before(hour(0)), LONG, 1)
        .await
        .unwrap()
        .remove(0);

    let runs: Vec<PreparedRun> = (0..3)
        .map(|h| run_of(hour(h), revision, 10.0 + h as f64))
        .collect();
    let rows: Vec<(&PreparedRun, &Claim)> = runs.iter().zip(&held).collect();
    let recorded = store.record_claimed_runs(&plant, &rows).await.unwrap();

    assert_eq!(recorded.len(), 3);
    let (id0, s0) = recorded[0].as_ref().expect("hour 0 recorded");
    let (id1, s1) = recorded[1].as_ref().expect("hour 1 recorded");
    assert_eq!((*s0, *s1), (Settled::Cleared, Settled::Cleared));
    assert_ne!(id0, id1);
    assert!(
        matches!(&recorded[2], Err(StoreError::ClaimLost(s)) if *s == hour(2)),
        "{:?}",
        recorded[2]
    );
    for (h, id) in [(0, *id0), (1, *id1)] {
        let current = store
            .current_run(&plant, hour(h))
            .await
            .unwrap()
            .expect("a current run");
        assert_eq!(current.id, id);
        assert_eq!(current.run.report["figures"][0]["value"], 10.0 + h as f64);
    }
    assert!(store.current_run(&plant, hour(2)).await.unwrap().is_none());
    // Only hour 2 is still dirty (b's to run); the failure of hour 0 is gone.
    let dirty: Vec<_> = store.dirty_periods(&plant).await.unwrap();
    assert_eq!(dirty.iter().map(|d| d.0).collect::<Vec<_>>(), [hour(2)]);
    assert!(store
        .run_failures(&plant, hour(0), hour(3))
        .await
        .unwrap()
        .is_empty());
    // Each recorded run's meter record and figure, under its own run.
    let meters = store
        .meter_periods(&plant, None, hour(0), hour(3))
        .await
        .unwrap();
    let measured: Vec<_> = meters
        .iter()
        .map(|(tag, p)| (tag.as_str(), p.period_start, p.measured))
        .collect();
    assert_eq!(
        measured,
        [("FT-1", hour(0), Some(10.0)), ("FT-1", hour(1), Some(11.0))]
    );
    let cells = store
        .figure_cells(&plant, hour(0), hour(3), None)
        .await
        .unwrap();
    let values: Vec<_> = cells.iter().map(|c| (c.period_start, c.value)).collect();
    assert_eq!(values, [(hour(0), Some(10.0)), (hour(1), Some(11.0))]);
}
