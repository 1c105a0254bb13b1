//! Claims on dirty periods (`store::claims`), on both backends: each due period is claimed by
//! one instance at a time, a lapsed claim is taken over and its holder's late run refused, and
//! a run recorded under a claim settles it in the same transaction.

use std::collections::BTreeSet;
use std::time::Duration;

use super::*;

on_both_backends!(
    a_due_period_is_claimed_by_one_instance_until_its_lease_lapses,
    a_claimed_run_settles_its_mark_or_leaves_it_for_a_rerun,
    concurrent_claimers_share_the_periods_without_overlap,
);

pub(super) const LONG: Duration = Duration::from_secs(60);

/// A plant with the tee model and one reading in each of `hours` hourly periods from
/// 2026-03-02T00:00Z; its revision number.
pub(super) async fn plant_with_dirty_hours(store: &Store, hours: u32) -> (PlantRow, i64) {
    let (plant, revision) = west_with_tee(store).await;
    let batch: Vec<Reading> = (0..hours)
        .map(|h| {
            reading(
                "FT-1",
                &format!("2026-03-02T{h:02}:10:00Z"),
                50.0,
                Quality::Good,
            )
        })
        .collect();
    ingest(store, &plant, &batch).await;
    (plant, revision)
}

pub(super) fn hour(h: u32) -> DateTime<Utc> {
    t(&format!("2026-03-02T{h:02}:00:00Z"))
}

pub(super) fn stand_in_run(start: DateTime<Utc>, revision: i64, instance: &str) -> NewRun {
    NewRun {
        period_start: start,
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: reconcile::ReportStatus::Solved,
        report: serde_json::json!({ "by": instance }),
        inputs: serde_json::json!([]),
        meters: Vec::new(),
    }
}

/// Every period start up to `t`.
pub(super) fn before(t: DateTime<Utc>) -> std::ops::RangeInclusive<DateTime<Utc>> {
    DateTime::<Utc>::MIN_UTC..=t
}

pub(super) fn starts(claims: &[Claim]) -> Vec<DateTime<Utc>> {
    claims.iter().map(|c| c.period_start).collect()
}

async fn a_due_period_is_claimed_by_one_instance_until_its_lease_lapses(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = plant_with_dirty_hours(store, 5).await;

    // Only periods starting at or before the cut-off are due; the oldest come first.
    let a = store
        .claim_due(&plant, "a", before(hour(1)), LONG, 10)
        .await
        .unwrap();
    assert_eq!(starts(&a), [hour(0), hour(1)]);
    assert!(a.iter().all(|c| c.instance == "a"));
    // A live claim is not taken by another instance, nor twice by the same one.
    assert!(store
        .claim_due(&plant, "b", before(hour(1)), LONG, 10)
        .await
        .unwrap()
        .is_empty());
    assert!(store
        .claim_due(&plant, "a", before(hour(1)), LONG, 10)
        .await
        .unwrap()
        .is_empty());
    // The limit is kept.
    let b = store
        .claim_due(&plant, "b", before(hour(3)), LONG, 1)
        .await
        .unwrap();
    assert_eq!(starts(&b), [hour(2)]);
    // A range claims only within it, older free periods notwithstanding (an
    // administrator's re-run claims its one period).
    let one = store
        .claim_due(&plant, "b", hour(4)..=hour(4), LONG, 10)
        .await
        .unwrap();
    assert_eq!(starts(&one), [hour(4)]);

    // Only the holder renews; a released period is free again.
    assert!(store.renew_claim(&plant, &a[0], LONG).await.unwrap());
    let forged = Claim {
        instance: "b".into(),
        ..a[0].clone()
    };
    assert!(!store.renew_claim(&plant, &forged, LONG).await.unwrap());
    assert!(!store.release_claim(&plant, &forged).await.unwrap());
    assert!(store.release_claim(&plant, &a[1]).await.unwrap());
    let b2 = store
        .claim_due(&plant, "b", before(hour(1)), LONG, 10)
        .await
        .unwrap();
    assert_eq!(starts(&b2), [hour(1)]);

    // A claim whose lease lapsed (its instance died or stalled) is taken over, and the first
    // holder's late run is refused whole: nothing of it is recorded.
    let short = store
        .claim_due(&plant, "c", before(hour(3)), Duration::from_millis(1), 10)
        .await
        .unwrap();
    assert_eq!(starts(&short), [hour(3)]);
    tokio::time::sleep(Duration::from_millis(30)).await;
    let taken = store
        .claim_due(&plant, "d", before(hour(3)), LONG, 10)
        .await
        .unwrap();
    assert_eq!(starts(&taken), [hour(3)]);
    assert!(!store.renew_claim(&plant, &short[0], LONG).await.unwrap());
    let late = store
        .record_claimed_run(&plant, &stand_in_run(hour(3), revision, "c"), &short[0])
        .await;
    assert!(
        matches!(late, Err(StoreError::ClaimLost(s)) if s == hour(3)),
        "{late:?}"
    );
    assert!(store.current_run(&plant, hour(3)).await.unwrap().is_none());
    assert!(store.run_history(&plant, hour(3)).await.unwrap().is_empty());
    let (id, settled) = store
        .record_claimed_run(&plant, &stand_in_run(hour(3), revision, "d"), &taken[0])
        .await
        .unwrap();
    assert_eq!(settled, Settled::Cleared);
    assert_eq!(
        store
            .current_run(&plant, hour(3))
            .await
            .unwrap()
            .map(|r| r.id),
        Some(id)
    );
    assert_eq!(
        dirty_starts(store, &plant).await,
        [hour(0), hour(1), hour(2), hour(4)]
    );
}

async fn a_claimed_run_settles_its_mark_or_leaves_it_for_a_rerun(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = plant_with_dirty_hours(store, 1).await;
    let first = store
        .claim_due(&plant, "a", before(hour(0)), LONG, 1)
        .await
        .unwrap()
        .remove(0);
    // A reading of the period arrives while it runs: the run is recorded, but the period
    // stays dirty, unclaimed, and is claimed again for a second run.
    let late = reading("FT-2", "2026-03-02T00:20:00Z", 49.0, Quality::Good);
    ingest(store, &plant, &[late]).await;
    let (run1, settled) = store
        .record_claimed_run(&plant, &stand_in_run(hour(0), revision, "a"), &first)
        .await
        .unwrap();
    assert_eq!(settled, Settled::StillDirty);
    assert_eq!(store.dirty_periods(&plant).await.unwrap().len(), 1);
    assert!(store.has_dirty_periods(&plant).await.unwrap());
    let second = store
        .claim_due(&plant, "b", before(hour(0)), LONG, 1)
        .await
        .unwrap()
        .remove(0);
    assert!(second.marked_at > first.marked_at);
    let (run2, settled) = store
        .record_claimed_run(&plant, &stand_in_run(hour(0), revision, "b"), &second)
        .await
        .unwrap();
    assert_eq!(settled, Settled::Cleared);
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());
    assert!(!store.has_dirty_periods(&plant).await.unwrap());
    let history: Vec<_> = store
        .run_history(&plant, hour(0))
        .await
        .unwrap()
        .iter()
        .map(|r| (r.id, r.current))
        .collect();
    assert_eq!(history, [(run1, false), (run2, true)]);
    // A settled claim is gone: recording under it again is refused.
    let again = store
        .record_claimed_run(&plant, &stand_in_run(hour(0), revision, "b"), &second)
        .await;
    assert!(matches!(again, Err(StoreError::ClaimLost(_))), "{again:?}");
}

async fn concurrent_claimers_share_the_periods_without_overlap(db: Scratch) {
    let store = &db.store;
    let (plant, _) = plant_with_dirty_hours(store, 24).await;
    let mut claimers = tokio::task::JoinSet::new();
    for i in 0..6 {
        let store = store.clone();
        let plant = plant.clone();
        claimers.spawn(async move {
            let name = format!("instance-{i}");
            let mut mine = Vec::new();
            // Bounded: 24 periods, at least one per round while any is left.
            for _ in 0..30 {
                let got = store
                    .claim_due(&plant, &name, before(hour(23)), LONG, 2)
                    .await
                    .unwrap();
                if got.is_empty() {
                    break;
                }
                mine.extend(got);
                tokio::task::yield_now().await;
            }
            mine
        });
    }
    let mut all = Vec::new();
    while let Some(mine) = claimers.join_next().await {
        all.extend(mine.unwrap());
    }
    let distinct: BTreeSet<_> = all.iter().map(|c| c.period_start).collect();
    assert_eq!(all.len(), 24, "every period claimed exactly once");
    assert_eq!(distinct.len(), 24);
}
