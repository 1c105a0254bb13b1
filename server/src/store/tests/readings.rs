//! Readings, their dirty marks, and batches longer than one statement (chunk edges must not
//! change what a batch does).

use chrono::TimeZone;
use reconcile::period::period_start;

use super::*;
use crate::store::sqlite::{MARKS_PER_STATEMENT, READINGS_PER_STATEMENT};

on_both_backends!(
    readings_are_idempotent_and_changes_mark_their_period,
    out_of_range_and_bad_readings_are_stored_and_flagged,
    a_failing_batch_leaves_nothing_written,
    concurrent_batches_over_the_same_readings_in_any_order_both_succeed,
    long_batches_count_and_mark_as_one_statement_per_reading_would,
    periods_are_marked_as_the_engine_floors_them_before_1970_too,
    readings_later_than_everything_stored_count_and_mark_as_any_other,
);

async fn readings_are_idempotent_and_changes_mark_their_period(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 50.0, Quality::Good),
        reading("FT-2", "2026-03-02T05:00:00Z", 49.0, Quality::Good),
        reading("FT-1", "2026-03-02T06:10:00Z", 51.0, Quality::Good),
    ];
    assert_eq!(ingest(store, &plant, &batch).await, counts(3, 0, 0));
    assert_eq!(
        dirty_starts(store, &plant).await,
        [t("2026-03-02T05:00:00Z"), t("2026-03-02T06:00:00Z")]
    );
    clear_all_dirty(store, &plant).await;

    // The same batch again (one instant spelled with another offset) changes nothing.
    let mut again = batch.clone();
    again[0].time = t("2026-03-02T07:00:00+02:00");
    assert_eq!(ingest(store, &plant, &again).await, counts(0, 0, 3));
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());

    // A late correction replaces the value and marks only its own period.
    let mut fixed = batch.clone();
    fixed[2].value = 52.5;
    assert_eq!(ingest(store, &plant, &fixed).await, counts(0, 1, 2));
    let dirty = store.dirty_periods(&plant).await.unwrap();
    assert_eq!(dirty.len(), 1);
    assert_eq!(dirty[0].0, t("2026-03-02T06:00:00Z"));
    let stored = store
        .readings_in(&plant, t("2026-03-02T06:00:00Z"), t("2026-03-02T07:00:00Z"))
        .await
        .unwrap();
    assert_eq!(stored.len(), 1);
    assert_eq!(stored[0].reading.value, 52.5);

    // A mark newer than the one a run started from survives that run's clear (and a run
    // recorded under a claim settles it the same way: tests/claims.rs).
    let stale = dirty[0].1;
    fixed[2].quality = Quality::Uncertain;
    ingest(store, &plant, &fixed).await;
    assert!(!store.clear_dirty(&plant, dirty[0].0, stale).await.unwrap());
    assert_eq!(store.dirty_periods(&plant).await.unwrap().len(), 1);
}

async fn out_of_range_and_bad_readings_are_stored_and_flagged(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 140.0, Quality::Good),
        reading("FT-1", "2026-03-02T05:01:00Z", 100.0, Quality::Good),
        reading("FT-2", "2026-03-02T05:00:00Z", -3.0, Quality::Bad),
    ];
    assert_eq!(ingest(store, &plant, &batch).await.accepted, 3);
    let stored = store
        .readings_in(&plant, t("2026-03-02T00:00:00Z"), t("2026-03-03T00:00:00Z"))
        .await
        .unwrap();
    let flags: Vec<_> = stored
        .iter()
        .map(|s| {
            (
                s.reading.tag.as_str(),
                s.reading.value,
                s.reading.quality,
                s.out_of_range,
            )
        })
        .collect();
    assert_eq!(
        flags,
        [
            ("FT-1", 140.0, Quality::Good, true),
            ("FT-2", -3.0, Quality::Bad, false),
            ("FT-1", 100.0, Quality::Good, false),
        ]
    );
}

async fn a_failing_batch_leaves_nothing_written(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    // The boundary rejects NaN; here it stands for any failure mid-batch: SQLite stores NaN
    // as NULL and the NOT NULL constraint refuses the third row after two were written;
    // PostgreSQL's check readings_value_is_a_number refuses it.
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 50.0, Quality::Good),
        reading("FT-2", "2026-03-02T06:00:00Z", 49.0, Quality::Good),
        reading("FT-1", "2026-03-02T07:00:00Z", f64::NAN, Quality::Good),
        reading("FT-2", "2026-03-02T07:00:00Z", 48.0, Quality::Good),
    ];
    let err = store
        .ingest_readings(&plant, &batch, 3600, &outside(&ranges()))
        .await
        .expect_err("the schema must refuse NaN");
    let refusal = match store {
        Store::Sqlite(_) => "NOT NULL",
        Store::Postgres(_) => "readings_value_is_a_number",
    };
    assert!(err.to_string().contains(refusal), "{err}");
    let stored = store
        .readings_in(&plant, t("2026-03-01T00:00:00Z"), t("2026-03-04T00:00:00Z"))
        .await
        .unwrap();
    assert!(stored.is_empty());
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());
}

/// Two historians correcting the same readings at once, one sending them in the opposite order
/// to the other: both batches are stored, one after the other, never refused. (On PostgreSQL
/// each batch locks the rows it writes as it goes; in the batch's own order, two such batches
/// deadlocked and one was aborted.)
async fn concurrent_batches_over_the_same_readings_in_any_order_both_succeed(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let start = t("2026-03-01T00:00:00Z");
    let batch = |value: f64| -> Vec<Reading> {
        (0..2500)
            .flat_map(|minute| {
                ["FT-1", "FT-2"].map(|tag| Reading {
                    tag: tag.into(),
                    time: start + chrono::TimeDelta::minutes(minute),
                    value,
                    quality: Quality::Good,
                })
            })
            .collect()
    };
    let ingest = |readings: Vec<Reading>| {
        let (store, plant) = (store.clone(), plant.clone());
        tokio::spawn(async move {
            store
                .ingest_readings(&plant, &readings, 3600, &outside(&ranges()))
                .await
        })
    };
    let n = batch(0.0).len();
    ingest(batch(0.0)).await.unwrap().unwrap();
    for round in 1..=4 {
        let forward = batch(f64::from(round));
        let mut backward = batch(-f64::from(round));
        backward.reverse();
        let (a, b) = (ingest(forward), ingest(backward));
        for done in [a.await.unwrap(), b.await.unwrap()] {
            let counts = done.unwrap_or_else(|e| panic!("round {round}: {e}"));
            assert_eq!(counts.replaced, n, "round {round}: {counts:?}");
        }
        // One batch wrote after the other: every reading holds the later one's value.
        let stored = store
            .readings_in(&plant, start, start + chrono::TimeDelta::days(2))
            .await
            .unwrap();
        assert_eq!(stored.len(), n);
        let last = stored[0].reading.value;
        assert!(last.abs() == f64::from(round), "round {round}: {last}");
        assert!(
            stored.iter().all(|s| s.reading.value == last),
            "round {round}: the batches interleaved"
        );
    }
}

fn hourly(n: usize, tags: &[&str]) -> Vec<Reading> {
    let start = Utc.with_ymd_and_hms(2026, 3, 1, 0, 0, 0).unwrap();
    (0..n)
        .map(|i| Reading {
            tag: tags[i % tags.len()].to_string(),
            time: start + chrono::Duration::hours((i / tags.len()) as i64),
            value: 10.0 + i as f64 / 8.0,
            quality: Quality::Good,
        })
        .collect()
}

async fn long_batches_count_and_mark_as_one_statement_per_reading_would(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let n = 2 * READINGS_PER_STATEMENT + 203;
    let batch = hourly(n, &["FT-1", "FT-2"]);
    let periods = n.div_ceil(2);
    assert!(periods > MARKS_PER_STATEMENT);

    assert_eq!(ingest(store, &plant, &batch).await, counts(n, 0, 0));
    assert_eq!(dirty_starts(store, &plant).await.len(), periods);
    clear_all_dirty(store, &plant).await;
    let stored = store
        .readings_in(
            &plant,
            batch[0].time,
            batch[n - 1].time + chrono::Duration::hours(1),
        )
        .await
        .unwrap();
    assert_eq!(stored.len(), n);
    // FT-1 from 100 on is outside its range [0, 100]; FT-2 has none.
    let flagged = stored.iter().filter(|s| s.out_of_range).count();
    let expected = batch
        .iter()
        .filter(|r| r.tag == "FT-1" && r.value > 100.0)
        .count();
    assert!(expected > 0);
    assert_eq!(flagged, expected);

    // Changes on both sides of each chunk edge, one quality change, the rest resent.
    let mut again = batch.clone();
    let edges = [0, READINGS_PER_STATEMENT - 1, READINGS_PER_STATEMENT, n - 1];
    for &i in &edges {
        again[i].value += 1.0;
    }
    again[7].quality = Quality::Uncertain;
    assert_eq!(ingest(store, &plant, &again).await, counts(0, 5, n - 5));
    let marked = dirty_starts(store, &plant).await;
    let mut want: Vec<_> = edges.iter().chain([&7]).map(|&i| batch[i].time).collect();
    want.sort();
    want.dedup();
    assert_eq!(marked, want);

    // Repeats of one (tag, instant) within a batch, in different statements, act in
    // order: the first new, an identical repeat unchanged, a different one replaced.
    let mut repeats = hourly(3, &["FT-3"]);
    for r in &mut repeats {
        r.time += chrono::Duration::days(365);
    }
    let mut batch = hourly(READINGS_PER_STATEMENT + 10, &["FT-4"]);
    batch[3] = repeats[0].clone();
    batch[READINGS_PER_STATEMENT + 1] = repeats[0].clone();
    batch[READINGS_PER_STATEMENT + 2] = Reading {
        value: repeats[0].value + 1.0,
        ..repeats[0].clone()
    };
    let m = batch.len();
    assert_eq!(ingest(store, &plant, &batch).await, counts(m - 2, 1, 1));
}

async fn periods_are_marked_as_the_engine_floors_them_before_1970_too(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let times = [
        "1969-12-31T23:59:59.999Z",
        "1969-12-31T22:15:00Z",
        "1970-01-01T00:00:00Z",
        "1970-01-01T00:14:59.999Z",
        "2026-03-02T05:37:12.250Z",
    ];
    let batch: Vec<Reading> = times
        .iter()
        .map(|s| Reading {
            tag: "FT-1".into(),
            time: DateTime::parse_from_rfc3339(s).unwrap().with_timezone(&Utc),
            value: 1.0,
            quality: Quality::Good,
        })
        .collect();
    for period in [900, 3600, 7 * 86_400] {
        let mut batch = batch.clone();
        for r in &mut batch {
            r.value += period as f64;
        }
        store
            .ingest_readings(&plant, &batch, period, &|_: &Reading| false)
            .await
            .unwrap();
        let mut want: Vec<_> = batch.iter().map(|r| period_start(r.time, period)).collect();
        want.sort();
        want.dedup();
        assert_eq!(dirty_starts(store, &plant).await, want, "period {period} s");
        clear_all_dirty(store, &plant).await;
    }
}

/// A batch whose every reading is later than its tag's stored ones is stored without the
/// probe (sqlite/readings.rs); it must count and mark as one that needs it.
async fn readings_later_than_everything_stored_count_and_mark_as_any_other(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let at =
        |h: i64| Utc.with_ymd_and_hms(2026, 3, 1, 0, 0, 0).unwrap() + chrono::Duration::hours(h);
    let r = |tag: &str, h: i64, v: f64| Reading {
        tag: tag.to_string(),
        time: at(h),
        value: v,
        quality: Quality::Good,
    };
    // Hours 0 to 4 of FT-1 and FT-2.
    assert_eq!(
        ingest(store, &plant, &hourly(10, &["FT-1", "FT-2"])).await,
        counts(10, 0, 0)
    );
    clear_all_dirty(store, &plant).await;

    // Later hours of FT-1 beside a correction of FT-2's hour 2.
    let mixed = [r("FT-1", 5, 1.0), r("FT-1", 6, 2.0), r("FT-2", 2, 99.0)];
    assert_eq!(ingest(store, &plant, &mixed).await, counts(2, 1, 0));
    assert_eq!(dirty_starts(store, &plant).await, [at(2), at(5), at(6)]);
    clear_all_dirty(store, &plant).await;

    // Only later hours, one of a tag never stored before.
    let later = [r("FT-1", 8, 3.0), r("FT-2", 7, 4.0), r("FT-9", 0, 5.0)];
    assert_eq!(ingest(store, &plant, &later).await, counts(3, 0, 0));
    assert_eq!(dirty_starts(store, &plant).await, [at(0), at(7), at(8)]);
    clear_all_dirty(store, &plant).await;

    // The same again, and a reading between two stored ones of its tag: each as it is.
    assert_eq!(ingest(store, &plant, &later).await, counts(0, 0, 3));
    let between = [r("FT-1", 7, 6.0), r("FT-1", 9, 7.0)];
    assert_eq!(ingest(store, &plant, &between).await, counts(2, 0, 0));
    assert_eq!(dirty_starts(store, &plant).await, [at(7), at(9)]);
    let stored = store.readings_in(&plant, at(0), at(10)).await.unwrap();
    assert_eq!(stored.len(), 10 + 2 + 3 + 2);
}
