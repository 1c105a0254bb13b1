//! Abandoned runs (`store::failures`), on both backends: the failure is recorded as the claim
//! is given up, claims skip the period until its backoff has passed, each failure in a row
//! counts, a recorded run forgets them and a changed reading does not, and a claim that lapsed
//! records nothing.

use std::time::Duration;

use super::claims::{before, hour, plant_with_dirty_hours, stand_in_run, starts, LONG};
use super::*;

on_both_backends!(
    an_abandoned_run_gives_its_claim_up_and_holds_its_period_back,
    a_recorded_run_forgets_the_failures_and_a_changed_reading_does_not,
    a_claim_that_lapsed_records_no_failure,
);

/// The service's rule (crate::run_limit::backoff): a minute, doubling.
fn backoff(failures: i64) -> Duration {
    crate::run_limit::backoff(failures)
}

const REASON: &str = "the run was abandoned at its time limit of 0.02 s";

/// Every failure's `retry_after` moved into the past, as if the backoff had been waited out.
async fn wait_out_backoffs(store: &Store, plant: &PlantRow) {
    execute(
        store,
        "UPDATE run_failures SET retry_after = 0 WHERE plant_id = $1",
        Some(plant.id),
    )
    .await
    .unwrap();
}

/// Claim `start` alone for `instance`, asserting it was free.
async fn claim(store: &Store, plant: &PlantRow, instance: &str, start: DateTime<Utc>) -> Claim {
    let mut claims = store
        .claim_due(plant, instance, start..=start, LONG, 1)
        .await
        .unwrap();
    assert_eq!(starts(&claims), [start], "{start} is free to claim");
    claims.remove(0)
}

async fn an_abandoned_run_gives_its_claim_up_and_holds_its_period_back(db: Scratch) {
    let store = &db.store;
    let (plant, _) = plant_with_dirty_hours(store, 2).await;
    let first = claim(store, &plant, "a", hour(0)).await;
    let failure = store
        .record_run_failure(&plant, &first, REASON, backoff)
        .await
        .unwrap()
        .expect("the claim was held");
    assert_eq!(failure.period_start, hour(0));
    assert_eq!(failure.failures, 1);
    assert_eq!(failure.reason, REASON);
    assert_eq!(
        (failure.retry_after - failure.failed_at).to_std().unwrap(),
        Duration::from_secs(60)
    );
    assert!(failure.retry_after > Utc::now());
    assert_eq!(
        store.run_failures(&plant, hour(0), hour(2)).await.unwrap(),
        std::slice::from_ref(&failure)
    );
    // The claim is given up and the mark kept, but no instance takes the period during its
    // backoff, whether in a pass over every due period or alone (an administrator's re-run).
    assert_eq!(dirty_starts(store, &plant).await, [hour(0), hour(1)]);
    assert!(!store.release_claim(&plant, &first).await.unwrap());
    let pass = store
        .claim_due(&plant, "b", before(hour(1)), LONG, 10)
        .await
        .unwrap();
    assert_eq!(
        starts(&pass),
        [hour(1)],
        "the other period is not held back"
    );
    assert!(store
        .claim_due(&plant, "b", hour(0)..=hour(0), LONG, 1)
        .await
        .unwrap()
        .is_empty());

    // Once the backoff has passed it is claimed again, and a second failure in a row waits
    // twice as long.
    wait_out_backoffs(store, &plant).await;
    let second = claim(store, &plant, "b", hour(0)).await;
    let again = store
        .record_run_failure(&plant, &second, "the second time", backoff)
        .await
        .unwrap()
        .expect("the claim was held");
    assert_eq!(again.failures, 2);
    assert_eq!(again.reason, "the second time");
    assert_eq!(
        (again.retry_after - again.failed_at).to_std().unwrap(),
        Duration::from_secs(120)
    );
    assert_eq!(
        store.run_failures(&plant, hour(0), hour(1)).await.unwrap(),
        [again]
    );
    // Only the range asked for.
    assert!(store
        .run_failures(&plant, hour(1), hour(5))
        .await
        .unwrap()
        .is_empty());
}

async fn a_recorded_run_forgets_the_failures_and_a_changed_reading_does_not(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = plant_with_dirty_hours(store, 2).await;
    for h in [0, 1] {
        let c = claim(store, &plant, "a", hour(h)).await;
        store
            .record_run_failure(&plant, &c, REASON, backoff)
            .await
            .unwrap()
            .expect("the claim was held");
    }
    let held = store.run_failures(&plant, hour(0), hour(2)).await.unwrap();
    assert_eq!(held.len(), 2);

    // A changed reading marks the period again but leaves its failure and its backoff: the
    // engine's work on the period is what failed.
    let changed = reading("FT-1", "2026-03-02T00:10:00Z", 51.0, Quality::Good);
    assert_eq!(ingest(store, &plant, &[changed]).await, counts(0, 1, 0));
    assert_eq!(
        store.run_failures(&plant, hour(0), hour(2)).await.unwrap(),
        held
    );
    assert!(store
        .claim_due(&plant, "a", before(hour(1)), LONG, 10)
        .await
        .unwrap()
        .is_empty());

    // A run recorded under a claim forgets its period's failures, in its transaction ...
    wait_out_backoffs(store, &plant).await;
    let c = claim(store, &plant, "a", hour(0)).await;
    store
        .record_claimed_run(&plant, &stand_in_run(hour(0), revision, "a"), &c)
        .await
        .unwrap();
    let left = store.run_failures(&plant, hour(0), hour(2)).await.unwrap();
    assert_eq!(
        left.iter().map(|f| f.period_start).collect::<Vec<_>>(),
        [hour(1)]
    );
    // ... and so does one recorded without (an administrator's re-run).
    store
        .record_run(&plant, &stand_in_run(hour(1), revision, "admin"))
        .await
        .unwrap();
    assert!(store
        .run_failures(&plant, hour(0), hour(2))
        .await
        .unwrap()
        .is_empty());
    // Without a failure, the next one counts from one again.
    let c = claim(store, &plant, "a", hour(1)).await;
    let fresh = store
        .record_run_failure(&plant, &c, REASON, backoff)
        .await
        .unwrap()
        .expect("the claim was held");
    assert_eq!(fresh.failures, 1);
}

async fn a_claim_that_lapsed_records_no_failure(db: Scratch) {
    let store = &db.store;
    let (plant, _) = plant_with_dirty_hours(store, 1).await;
    let short = store
        .claim_due(&plant, "a", before(hour(0)), Duration::from_millis(1), 1)
        .await
        .unwrap();
    assert_eq!(starts(&short), [hour(0)]);
    tokio::time::sleep(Duration::from_millis(30)).await;
    let taken = claim(store, &plant, "b", hour(0)).await;
    // The first holder's run is abandoned late: the period is another instance's now, and
    // neither its claim nor a failure is written.
    assert_eq!(
        store
            .record_run_failure(&plant, &short[0], REASON, backoff)
            .await
            .unwrap(),
        None
    );
    assert!(store
        .run_failures(&plant, hour(0), hour(1))
        .await
        .unwrap()
        .is_empty());
    assert!(store.renew_claim(&plant, &taken, LONG).await.unwrap());
}
