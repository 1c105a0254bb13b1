//! How values are stored: instants as milliseconds ([`Millis`]), JSON as it was written
//! ([`JsonText`]), and rows decoded the same from either backend.

use super::*;
use crate::store::values::{JsonText, Millis};

on_both_backends!(
    rows_written_alike_decode_alike,
    a_stored_instant_out_of_range_is_corrupt,
    json_is_stored_as_written,
);

#[test]
fn millis_round_trip_and_floor_before_1970() {
    assert_eq!(Millis::from(t("1970-01-01T00:00:00Z")), Millis(0));
    assert_eq!(
        Millis::from(t("2026-03-02T05:37:12.250Z")),
        Millis(1_772_429_832_250)
    );
    // Below the millisecond is dropped towards the past, on both sides of 1970.
    assert_eq!(Millis::from(t("1969-12-31T23:59:59.9995Z")), Millis(-1));
    assert_eq!(Millis::from(t("1970-01-01T00:00:00.0005Z")), Millis(0));
    assert_eq!(Millis(-1).to_utc().unwrap(), t("1969-12-31T23:59:59.999Z"));
    for ms in [0, 1, -1, 1_772_429_832_250, -62_135_596_800_000] {
        let at: DateTime<Utc> = Millis(ms).try_into().unwrap();
        assert_eq!(Millis::from(at), Millis(ms));
    }
    let now = Millis::now();
    assert!(now.to_utc().unwrap() <= Utc::now());
}

#[test]
fn millis_beyond_what_chrono_holds_are_corrupt() {
    let (min, max) = (
        Millis::from(DateTime::<Utc>::MIN_UTC),
        Millis::from(DateTime::<Utc>::MAX_UTC),
    );
    assert_eq!(min.to_utc().unwrap(), DateTime::<Utc>::MIN_UTC);
    assert_eq!(
        Millis::from(max.to_utc().unwrap()),
        max,
        "the latest instant, to the ms"
    );
    for ms in [max.0 + 1, min.0 - 1, i64::MAX, i64::MIN] {
        let err = Millis(ms).to_utc().expect_err("out of range");
        let want = format!("instant {ms} ms is out of range");
        assert!(
            matches!(&err, StoreError::Corrupt(m) if *m == want),
            "{ms}: {err}"
        );
        assert!(matches!(
            DateTime::<Utc>::try_from(Millis(ms)),
            Err(StoreError::Corrupt(_))
        ));
    }
}

#[test]
fn json_text_is_serde_jsons_own_text() {
    let value = serde_json::json!({ "b": [1.0e-300, 1.7e308], "a": null });
    assert_eq!(
        JsonText::of(&value).unwrap(),
        JsonText(serde_json::to_string(&value).unwrap())
    );
}

/// Rows written by SQL, not by the store, come back as the same values from either backend:
/// one decoder per row type serves both.
async fn rows_written_alike_decode_alike(db: Scratch) {
    let store = &db.store;
    execute(
        store,
        "INSERT INTO plants (name, created_at) VALUES ('old', $1)",
        Some(-1),
    )
    .await
    .unwrap();
    let plant = store.plant("old").await.unwrap().unwrap();
    assert_eq!(
        plant,
        PlantRow {
            id: 1,
            name: "old".into(),
            created_at: t("1969-12-31T23:59:59.999Z"),
        }
    );
    assert_eq!(store.plants().await.unwrap(), std::slice::from_ref(&plant));
    for sql in [
        "INSERT INTO readings (plant_id, tag, time, value, quality, received_at, out_of_range)
         VALUES ($1, 'FT-1', -1, 2.5, 'uncertain', 0, TRUE)",
        "INSERT INTO dirty_periods (plant_id, period_start, marked_at) VALUES ($1, -3600000, 5)",
        "INSERT INTO meter_notes (plant_id, tag, kind, text, effective_at, created_at)
         VALUES ($1, 'FT-1', 'recalibrated', 'zero set', 0, 1)",
    ] {
        execute(store, sql, Some(plant.id)).await.unwrap();
    }
    let stored = store
        .readings_in(&plant, t("1969-12-31T00:00:00Z"), t("1970-01-01T00:00:00Z"))
        .await
        .unwrap();
    assert_eq!(
        stored,
        [StoredReading {
            reading: reading("FT-1", "1969-12-31T23:59:59.999Z", 2.5, Quality::Uncertain),
            received_at: t("1970-01-01T00:00:00Z"),
            out_of_range: true,
        }]
    );
    assert_eq!(
        store.dirty_periods(&plant).await.unwrap(),
        [(t("1969-12-31T23:00:00Z"), t("1970-01-01T00:00:00.005Z"))]
    );
    assert!(store.has_dirty_periods(&plant).await.unwrap());
    assert_eq!(
        store.notes(&plant, Some("FT-1")).await.unwrap(),
        [MeterNote {
            id: 1,
            tag: "FT-1".into(),
            kind: NoteKind::Recalibrated,
            text: "zero set".into(),
            effective_at: t("1970-01-01T00:00:00Z"),
            created_at: t("1970-01-01T00:00:00.001Z"),
            as_found: None,
        }]
    );
}

/// An instant chrono cannot hold is reported as corrupt data, not as a database error.
async fn a_stored_instant_out_of_range_is_corrupt(db: Scratch) {
    let store = &db.store;
    execute(
        store,
        "INSERT INTO plants (name, created_at) VALUES ('far', $1)",
        Some(i64::MAX),
    )
    .await
    .unwrap();
    let want = format!("instant {} ms is out of range", i64::MAX);
    let one = store.plant("far").await;
    assert!(
        matches!(&one, Err(StoreError::Corrupt(m)) if *m == want),
        "{one:?}"
    );
    let all = store.plants().await;
    assert!(
        matches!(&all, Err(StoreError::Corrupt(m)) if *m == want),
        "{all:?}"
    );
}

/// A report's JSON is kept as the service wrote it, key order and number spelling included
/// (PostgreSQL's `json`, not `jsonb`, which would rewrite it).
async fn json_is_stored_as_written(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = west_with_tee(store).await;
    let report = serde_json::json!({ "status": "solved", "closures": { "z": 1.5e-7, "a": 1.0 } });
    let run = NewRun {
        period_start: t("2026-03-02T05:00:00Z"),
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: reconcile::ReportStatus::Solved,
        report: report.clone(),
        inputs: serde_json::json!([]),
        meters: Vec::new(),
    };
    store.record_run(&plant, &run).await.unwrap();
    const SQL: &str = "SELECT CAST(report_json AS TEXT) FROM runs";
    let text: String = on_backend!(store, s => sqlx::query_scalar(SQL)
        .fetch_one(&s.pool)
        .await
        .unwrap());
    assert_eq!(text, serde_json::to_string(&report).unwrap());
}
