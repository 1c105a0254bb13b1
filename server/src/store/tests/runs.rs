//! Runs, their listings and reports, and the meter records and notes written beside them.

use crate::health::MeterPeriod;
use reconcile::ReportStatus;

use super::*;

on_both_backends!(
    runs_keep_history_with_one_current_per_period,
    listings_reports_meter_records_and_notes,
);

async fn runs_keep_history_with_one_current_per_period(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = west_with_tee(store).await;
    let run = |start: &str, status: &str| NewRun {
        period_start: t(start),
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: ReportStatus::parse(status).expect("a status word"),
        report: serde_json::json!({ "status": status }),
        inputs: serde_json::json!([{ "tag": "FT-1", "value": 50.0 }]),
        meters: Vec::new(),
    };
    let five = "2026-03-02T05:00:00Z";
    let first = store
        .record_run(&plant, &run(five, "no_data"))
        .await
        .unwrap();
    let second = store
        .record_run(&plant, &run(five, "solved"))
        .await
        .unwrap();
    let other = store
        .record_run(&plant, &run("2026-03-02T06:00:00Z", "solved"))
        .await
        .unwrap();
    let current = store.current_run(&plant, t(five)).await.unwrap().unwrap();
    assert_eq!(current.id, second);
    assert_eq!(current.run, run(five, "solved"));
    let history = store.run_history(&plant, t(five)).await.unwrap();
    let ids: Vec<_> = history.iter().map(|r| (r.id, r.current)).collect();
    assert_eq!(ids, [(first, false), (second, true)]);
    let six = store
        .current_run(&plant, t("2026-03-02T06:00:00Z"))
        .await
        .unwrap();
    assert_eq!(six.map(|r| r.id), Some(other));

    // The database itself refuses a second current run of a period.
    let err = execute(
        store,
        "UPDATE runs SET current = TRUE WHERE id = $1",
        Some(first),
    )
    .await
    .expect_err("unique current run");
    assert!(err.to_string().to_lowercase().contains("unique"), "{err}");
}

fn meter_period(start: &str, measured: f64, flagged: bool) -> MeterPeriod {
    MeterPeriod {
        period_start: t(start),
        measured: Some(measured),
        reconciled: Some(measured + 0.5),
        sigma: Some(1.0),
        adjustment: Some(0.5),
        adjustment_sigma: Some(0.25),
        normalized: None,
        redundant: true,
        flagged,
        readings: 60,
        bad_readings: 1,
        out_of_range_readings: 0,
        correlations: BTreeMap::from([("FT-2".to_string(), -0.75)]),
    }
}

async fn listings_reports_meter_records_and_notes(db: Scratch) {
    let store = &db.store;
    // Plants list by name, bytewise (upper case before lower), whatever the locale.
    for name in ["west", "East", "east", "Z-1"] {
        store.create_plant(name).await.unwrap();
    }
    let names: Vec<_> = store
        .plants()
        .await
        .unwrap()
        .into_iter()
        .map(|p| p.name)
        .collect();
    assert_eq!(names, ["East", "Z-1", "east", "west"]);
    let plant = store.plant("west").await.unwrap().unwrap();
    let revision = put_tee(store, &plant).await;
    let spec = ModelSpec::from_toml(&tee_model()).unwrap();
    assert_eq!(
        store
            .model_revision(&plant, revision)
            .await
            .unwrap()
            .map(|r| r.spec),
        Some(spec)
    );
    assert!(store.model_revision(&plant, 9).await.unwrap().is_none());

    let five = "2026-03-02T05:00:00Z";
    let six = "2026-03-02T06:00:00Z";
    let run = |start: &str, status: &str, measured: f64| NewRun {
        period_start: t(start),
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: ReportStatus::parse(status).expect("a status word"),
        report: serde_json::json!({
            "status": status,
            "closures": { "closure": measured / 3.0, "tiny": 1.0e-300, "huge": 1.7e308 },
            "meters": [{ "tag": "FT-1" }],
        }),
        inputs: serde_json::json!([{ "tag": "FT-1", "value": measured }]),
        meters: vec![
            ("FT-1".to_string(), meter_period(start, measured, false)),
            (
                "FT-2".to_string(),
                meter_period(start, measured - 1.0, true),
            ),
        ],
    };
    store
        .record_run(&plant, &run(five, "no_data", 1.0))
        .await
        .unwrap();
    let rerun = store
        .record_run(&plant, &run(five, "solved", 50.0))
        .await
        .unwrap();
    let later = store
        .record_run(&plant, &run(six, "solved", 51.0))
        .await
        .unwrap();

    // The report as stored comes back exactly, numbers at the ends of the range included.
    let current = store.current_run(&plant, t(five)).await.unwrap().unwrap();
    assert_eq!(current.run.report, run(five, "solved", 50.0).report);

    let summaries = store
        .current_runs(&plant, t(five), t("2026-03-02T07:00:00Z"))
        .await
        .unwrap();
    let listed: Vec<_> = summaries
        .iter()
        .map(|s| (s.id, s.period_start, s.status.as_str(), s.runs, s.revision))
        .collect();
    assert_eq!(
        listed,
        [
            (rerun, t(five), "solved", 2, revision),
            (later, t(six), "solved", 1, revision)
        ]
    );

    // Only the named fields, a missing one as null; the period bounds are [from, to).
    let parts = store
        .current_reports(&plant, t(five), t(six), &["status", "closures", "absent"])
        .await
        .unwrap();
    assert_eq!(parts.len(), 1);
    assert_eq!(parts[0].0, t(five));
    assert_eq!(
        parts[0].1,
        serde_json::json!({
            "status": "solved",
            "closures": { "closure": 50.0 / 3.0, "tiny": 1.0e-300, "huge": 1.7e308 },
            "absent": null,
        })
    );
    let none = store
        .current_reports(&plant, t(five), t("2026-03-02T07:00:00Z"), &[])
        .await
        .unwrap();
    assert_eq!(
        none.iter().map(|p| &p.1).collect::<Vec<_>>(),
        [&serde_json::json!({}), &serde_json::json!({})]
    );

    // A re-run replaced the period's meter rows; by tag, then period.
    let to = t("2026-03-03T00:00:00Z");
    let records = store
        .meter_periods(&plant, None, t(five), to)
        .await
        .unwrap();
    let want = vec![
        ("FT-1".to_string(), meter_period(five, 50.0, false)),
        ("FT-1".to_string(), meter_period(six, 51.0, false)),
        ("FT-2".to_string(), meter_period(five, 49.0, true)),
        ("FT-2".to_string(), meter_period(six, 50.0, true)),
    ];
    assert_eq!(records, want);
    let one = store
        .meter_periods(&plant, Some("FT-2"), t(six), to)
        .await
        .unwrap();
    assert_eq!(one, want[3..]);

    let token = store
        .create_token(Role::Maintain, Some("west"))
        .await
        .unwrap();
    let late = stored(
        store
            .add_note(
                &plant,
                &NoteDraft {
                    tag: "FT-1",
                    kind: NoteKind::Replaced,
                    text: "new transmitter",
                    effective_at: t(six),
                    as_found: None,
                    token_id: Some(token.id),
                },
                &|_| Ok(None),
            )
            .await
            .unwrap(),
    );
    let early = stored(
        store
            .add_note(
                &plant,
                &NoteDraft {
                    tag: "FT-2",
                    kind: NoteKind::Checked,
                    text: "zero checked",
                    effective_at: t(five),
                    as_found: None,
                    token_id: None,
                },
                &|_| Ok(None),
            )
            .await
            .unwrap(),
    );
    assert_eq!(
        store.notes(&plant, None).await.unwrap(),
        [early, late.clone()]
    );
    assert_eq!(store.notes(&plant, Some("FT-1")).await.unwrap(), [late]);
    assert!(store.notes(&plant, Some("FT-9")).await.unwrap().is_empty());
}
