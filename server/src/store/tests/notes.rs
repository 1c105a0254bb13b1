//! Technicians' notes checked against the tag's notes and stored in one transaction with the
//! re-runs they call for (an out-of-service note marks the periods already run from its time
//! on dirty, as a late reading marks its period); a refused note stores nothing.

use crate::health::MeterPeriod;
use reconcile::ReportStatus;

use super::*;

on_both_backends!(
    an_admitted_note_marks_the_tags_run_periods_from_its_time_on,
    a_refused_note_changes_nothing,
    the_schema_keeps_the_five_kinds_and_as_found_on_recalibrations_only,
);

fn record(start: &str) -> MeterPeriod {
    MeterPeriod {
        period_start: t(start),
        measured: Some(50.0),
        reconciled: Some(50.5),
        sigma: Some(1.0),
        adjustment: Some(0.5),
        adjustment_sigma: Some(0.25),
        normalized: Some(2.0),
        redundant: true,
        flagged: false,
        readings: 1,
        bad_readings: 0,
        out_of_range_readings: 0,
        correlations: BTreeMap::new(),
    }
}

/// `west` with the tee and a run of each of `starts` (both meters' records), its readings
/// stored (one of each meter per period) and every dirty mark settled.
async fn west_with_runs(store: &Store, starts: &[&str]) -> PlantRow {
    let (plant, revision) = west_with_tee(store).await;
    let batch: Vec<Reading> = starts
        .iter()
        .flat_map(|s| {
            [
                reading("FT-1", s, 50.0, Quality::Good),
                reading("FT-2", s, 49.0, Quality::Good),
            ]
        })
        .collect();
    ingest(store, &plant, &batch).await;
    for s in starts {
        let run = NewRun {
            period_start: t(s),
            revision,
            engine_version: reconcile::ENGINE_VERSION.to_string(),
            status: ReportStatus::Solved,
            report: serde_json::json!({}),
            inputs: serde_json::json!({}),
            meters: vec![("FT-1".into(), record(s)), ("FT-2".into(), record(s))],
        };
        store.record_run(&plant, &run).await.unwrap();
        assert!(store
            .clear_dirty(&plant, t(s), t("2100-01-01T00:00:00Z"))
            .await
            .unwrap());
    }
    plant
}

const STARTS: [&str; 4] = [
    "2026-03-02T05:00:00Z",
    "2026-03-02T06:00:00Z",
    "2026-03-02T07:00:00Z",
    "2026-03-02T08:00:00Z",
];

fn draft(kind: NoteKind, at: &str, as_found: Option<f64>) -> NoteDraft<'static> {
    NoteDraft {
        tag: "FT-1",
        kind,
        text: "transmitter removed for repair",
        effective_at: t(at),
        as_found,
        token_id: None,
    }
}

async fn an_admitted_note_marks_the_tags_run_periods_from_its_time_on(db: Scratch) {
    let store = &db.store;
    let plant = west_with_runs(store, &STARTS).await;
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());
    let stored_readings = store
        .readings_in(&plant, t(STARTS[0]), t("2026-03-03T00:00:00Z"))
        .await
        .unwrap();
    assert_eq!(stored_readings.len(), 8);

    // A note that calls for no re-run marks nothing; its as_found reads back.
    let seen = std::sync::Mutex::new(Vec::new());
    let recal = draft(NoteKind::Recalibrated, "2026-03-02T04:00:00Z", Some(1.8));
    let outcome = store
        .add_note(&plant, &recal, &|notes| {
            seen.lock().unwrap().push(notes.len());
            Ok(None)
        })
        .await
        .unwrap();
    let NoteOutcome::Stored { note, marked } = outcome else {
        panic!("refused: {outcome:?}");
    };
    assert_eq!((note.as_found, marked), (Some(1.8), 0));
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());

    // An out-of-service note from 06:30 re-runs the periods starting at or after the instant
    // the check answers (07:00 and 08:00), and only those.
    let out = draft(NoteKind::OutOfService, "2026-03-02T06:30:00Z", None);
    let outcome = store
        .add_note(&plant, &out, &|notes| {
            seen.lock().unwrap().push(notes.len());
            Ok(Some(t("2026-03-02T06:30:00Z")))
        })
        .await
        .unwrap();
    assert!(
        matches!(outcome, NoteOutcome::Stored { marked: 2, .. }),
        "{outcome:?}"
    );
    assert_eq!(
        *seen.lock().unwrap(),
        [0, 1],
        "the check saw the tag's notes"
    );
    let dirty: Vec<DateTime<Utc>> = store
        .dirty_periods(&plant)
        .await
        .unwrap()
        .into_iter()
        .map(|(s, _)| s)
        .collect();
    assert_eq!(dirty, [t(STARTS[2]), t(STARTS[3])]);

    // Marking again moves a mark forward, never back, as a late reading's mark does.
    let before = store.dirty_periods(&plant).await.unwrap();
    let back = draft(NoteKind::BackInService, "2026-03-02T08:00:00Z", None);
    let outcome = store
        .add_note(&plant, &back, &|_| Ok(Some(t("2026-03-02T08:00:00Z"))))
        .await
        .unwrap();
    assert!(matches!(outcome, NoteOutcome::Stored { marked: 1, .. }));
    let after = store.dirty_periods(&plant).await.unwrap();
    assert_eq!(after[0], before[0]);
    assert!(after[1].1 > before[1].1, "{before:?} then {after:?}");

    // The readings are never touched.
    assert_eq!(
        store
            .readings_in(&plant, t(STARTS[0]), t("2026-03-03T00:00:00Z"))
            .await
            .unwrap(),
        stored_readings
    );
    let kinds: Vec<NoteKind> = store
        .notes(&plant, Some("FT-1"))
        .await
        .unwrap()
        .iter()
        .map(|n| n.kind)
        .collect();
    assert_eq!(
        kinds,
        [
            NoteKind::Recalibrated,
            NoteKind::OutOfService,
            NoteKind::BackInService
        ]
    );
}

async fn a_refused_note_changes_nothing(db: Scratch) {
    let store = &db.store;
    let plant = west_with_runs(store, &STARTS).await;
    let first = draft(NoteKind::OutOfService, "2026-03-02T05:00:00Z", None);
    let note = stored(
        store
            .add_note(&plant, &first, &|_| Ok(Some(t(STARTS[0]))))
            .await
            .unwrap(),
    );
    let dirty = store.dirty_periods(&plant).await.unwrap();
    assert_eq!(dirty.len(), 4);

    let overlapping = draft(NoteKind::OutOfService, "2026-03-02T07:00:00Z", None);
    let outcome = store
        .add_note(&plant, &overlapping, &|_| Err("overlaps".to_string()))
        .await
        .unwrap();
    assert_eq!(outcome, NoteOutcome::Refused("overlaps".into()));
    assert_eq!(store.notes(&plant, None).await.unwrap(), [note]);
    assert_eq!(store.dirty_periods(&plant).await.unwrap(), dirty);
}

async fn the_schema_keeps_the_five_kinds_and_as_found_on_recalibrations_only(db: Scratch) {
    let store = &db.store;
    let (plant, _) = west_with_tee(store).await;
    let insert = |kind: &str, as_found: &str| {
        format!(
            "INSERT INTO meter_notes (plant_id, tag, kind, text, effective_at, created_at, as_found)
             VALUES ($1, 'FT-1', '{kind}', '', 0, 0, {as_found})"
        )
    };
    for kind in NoteKind::ALL {
        execute(store, &insert(kind.as_str(), "NULL"), Some(plant.id))
            .await
            .unwrap_or_else(|e| panic!("{}: {e}", kind.as_str()));
    }
    execute(store, &insert("recalibrated", "1.5"), Some(plant.id))
        .await
        .unwrap();
    for (kind, as_found) in [
        ("broken", "NULL"),
        ("checked", "1.5"),
        ("out_of_service", "2"),
    ] {
        assert!(
            execute(store, &insert(kind, as_found), Some(plant.id))
                .await
                .is_err(),
            "{kind} with as_found {as_found} was stored"
        );
    }
    let notes = store.notes(&plant, None).await.unwrap();
    assert_eq!(notes.len(), 6);
    assert_eq!(notes[5].as_found, Some(1.5));
}
