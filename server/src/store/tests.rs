//! The store against a real SQLite file in a temporary directory.

use std::collections::BTreeMap;

use reconcile::Quality;

use super::*;

const MODEL: &str = r#"
name = "tee"
period = "1h"
[[component]]
id = "A"
molar_mass = 2.0
[[unit]]
id = "n"
kind = "node"
[[stream]]
id = "in"
from = "outside"
to = "n"
[[stream]]
id = "out"
from = "n"
to = "outside"
[[meter]]
tag = "FT-1"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
range = [0.0, 100.0]
[[meter]]
tag = "FT-2"
stream = "out"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#;

async fn fresh() -> (tempfile::TempDir, String, Store) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let path = dir.path().join("loopbal.db").to_string_lossy().into_owned();
    let store = Store::open(&path).await.expect("open");
    (dir, path, store)
}

fn t(text: &str) -> DateTime<Utc> {
    DateTime::parse_from_rfc3339(text)
        .expect("test time")
        .with_timezone(&Utc)
}

fn reading(tag: &str, time: &str, value: f64, quality: Quality) -> Reading {
    Reading {
        tag: tag.into(),
        time: t(time),
        value,
        quality,
    }
}

fn ranges() -> BTreeMap<String, [f64; 2]> {
    BTreeMap::from([("FT-1".to_string(), [0.0, 100.0])])
}

#[tokio::test]
async fn schema_is_created_on_first_open_and_reopen_changes_nothing() {
    let (_dir, path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    store.close().await;
    let store = Store::open(&path).await.expect("reopen");
    assert_eq!(store.plant("west").await.unwrap(), Some(plant));
    let Store::Sqlite(s) = &store;
    let mode: String = sqlx::query_scalar("PRAGMA journal_mode")
        .fetch_one(&s.pool)
        .await
        .unwrap();
    assert_eq!(mode, "wal");
    let fk: i64 = sqlx::query_scalar("PRAGMA foreign_keys")
        .fetch_one(&s.pool)
        .await
        .unwrap();
    assert_eq!(fk, 1);
    let applied: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM _sqlx_migrations")
        .fetch_one(&s.pool)
        .await
        .unwrap();
    assert_eq!(applied, MIGRATOR.iter().count() as i64);
    assert!(matches!(
        store.create_plant("west").await,
        Err(StoreError::PlantExists(_))
    ));
}

#[tokio::test]
async fn revisions_are_numbered_and_immutable() {
    let (_dir, _path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    let spec = ModelSpec::from_toml(MODEL).unwrap();
    let from = [
        "2026-03-01T00:00:00Z",
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
    ];
    for (i, f) in from.iter().enumerate() {
        let n = store
            .put_model_revision(&plant, &spec, MODEL, t(f))
            .await
            .unwrap();
        assert_eq!(n, i as i64 + 1);
    }
    let listed = store.list_revisions(&plant).await.unwrap();
    assert_eq!(
        listed.iter().map(|r| r.revision).collect::<Vec<_>>(),
        [1, 2, 3]
    );
    assert_eq!(listed[0].spec, spec);
    assert_eq!(listed[0].source, MODEL);
    let at = |s| store.current_model(&plant, t(s));
    assert_eq!(
        at("2026-03-02T12:00:00Z").await.unwrap().unwrap().revision,
        2
    );
    assert_eq!(
        at("2026-03-09T00:00:00Z").await.unwrap().unwrap().revision,
        3
    );
    assert!(at("2026-02-01T00:00:00Z").await.unwrap().is_none());
    let meters = store.meters(&plant, 2).await.unwrap();
    assert_eq!(meters.len(), 2);
    assert_eq!(meters[0].tag, "FT-1");
    assert_eq!(meters[0].range, Some([0.0, 100.0]));
    assert_eq!(meters[1].range, None);
    let Store::Sqlite(s) = &store;
    for sql in [
        "UPDATE model_revisions SET source = 'x' WHERE revision = 1",
        "DELETE FROM model_revisions WHERE revision = 1",
    ] {
        let err = sqlx::query(sql).execute(&s.pool).await.expect_err(sql);
        assert!(err.to_string().contains("immutable"), "{err}");
    }
}

#[tokio::test]
async fn readings_are_idempotent_and_changes_mark_their_period() {
    let (_dir, _path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 50.0, Quality::Good),
        reading("FT-2", "2026-03-02T05:00:00Z", 49.0, Quality::Good),
        reading("FT-1", "2026-03-02T06:10:00Z", 51.0, Quality::Good),
    ];
    let first = store
        .ingest_readings(&plant, &batch, 3600, &outside(&ranges()))
        .await
        .unwrap();
    assert_eq!(
        first,
        IngestCounts {
            accepted: 3,
            replaced: 0,
            unchanged: 0
        }
    );
    let dirty = store.dirty_periods(&plant).await.unwrap();
    let starts: Vec<_> = dirty.iter().map(|d| d.0).collect();
    assert_eq!(
        starts,
        [t("2026-03-02T05:00:00Z"), t("2026-03-02T06:00:00Z")]
    );
    for (start, marked) in &dirty {
        assert!(store.clear_dirty(&plant, *start, *marked).await.unwrap());
    }

    // The same batch again (one instant spelled with another offset) changes nothing.
    let mut again = batch.clone();
    again[0].time = t("2026-03-02T07:00:00+02:00");
    let second = store
        .ingest_readings(&plant, &again, 3600, &outside(&ranges()))
        .await
        .unwrap();
    assert_eq!(
        second,
        IngestCounts {
            accepted: 0,
            replaced: 0,
            unchanged: 3
        }
    );
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());

    // A late correction replaces the value and marks only its own period.
    let mut fixed = batch.clone();
    fixed[2].value = 52.5;
    let third = store
        .ingest_readings(&plant, &fixed, 3600, &outside(&ranges()))
        .await
        .unwrap();
    assert_eq!(
        third,
        IngestCounts {
            accepted: 0,
            replaced: 1,
            unchanged: 2
        }
    );
    let dirty = store.dirty_periods(&plant).await.unwrap();
    assert_eq!(dirty.len(), 1);
    assert_eq!(dirty[0].0, t("2026-03-02T06:00:00Z"));
    let stored = store
        .readings_in(&plant, t("2026-03-02T06:00:00Z"), t("2026-03-02T07:00:00Z"))
        .await
        .unwrap();
    assert_eq!(stored.len(), 1);
    assert_eq!(stored[0].reading.value, 52.5);

    // A mark newer than the one a run started from survives that run's clear.
    let stale = dirty[0].1;
    fixed[2].quality = Quality::Uncertain;
    store
        .ingest_readings(&plant, &fixed, 3600, &outside(&ranges()))
        .await
        .unwrap();
    assert!(!store.clear_dirty(&plant, dirty[0].0, stale).await.unwrap());
    assert_eq!(store.dirty_periods(&plant).await.unwrap().len(), 1);
}

#[tokio::test]
async fn out_of_range_and_bad_readings_are_stored_and_flagged() {
    let (_dir, _path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 140.0, Quality::Good),
        reading("FT-1", "2026-03-02T05:01:00Z", 100.0, Quality::Good),
        reading("FT-2", "2026-03-02T05:00:00Z", -3.0, Quality::Bad),
    ];
    let counts = store
        .ingest_readings(&plant, &batch, 3600, &outside(&ranges()))
        .await
        .unwrap();
    assert_eq!(counts.accepted, 3);
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

#[tokio::test]
async fn a_failing_batch_leaves_nothing_written() {
    let (_dir, _path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    // The boundary rejects NaN; here it stands for any failure mid-batch: SQLite stores NaN
    // as NULL and the NOT NULL constraint refuses the third row after two were written.
    let batch = vec![
        reading("FT-1", "2026-03-02T05:00:00Z", 50.0, Quality::Good),
        reading("FT-2", "2026-03-02T06:00:00Z", 49.0, Quality::Good),
        reading("FT-1", "2026-03-02T07:00:00Z", f64::NAN, Quality::Good),
        reading("FT-2", "2026-03-02T07:00:00Z", 48.0, Quality::Good),
    ];
    let err = store
        .ingest_readings(&plant, &batch, 3600, &outside(&ranges()))
        .await
        .expect_err("NOT NULL must refuse NaN");
    assert!(err.to_string().contains("NOT NULL"), "{err}");
    let stored = store
        .readings_in(&plant, t("2026-03-01T00:00:00Z"), t("2026-03-04T00:00:00Z"))
        .await
        .unwrap();
    assert!(stored.is_empty());
    assert!(store.dirty_periods(&plant).await.unwrap().is_empty());
}

#[tokio::test]
async fn tokens_are_stored_hashed_and_verify_by_role_and_plant() {
    let (dir, _path, store) = fresh().await;
    let ingest = store
        .create_token(Role::Ingest, Some("west"))
        .await
        .unwrap();
    let admin = store.create_token(Role::Admin, None).await.unwrap();
    assert_ne!(ingest.token, admin.token);

    let grant = store.verify_token(&ingest.token).await.unwrap().unwrap();
    assert_eq!(grant.role, Role::Ingest);
    assert!(grant.permits(Role::Ingest, "west"));
    assert!(!grant.permits(Role::Ingest, "east"));
    assert!(!grant.permits(Role::Read, "west"));
    let grant = store.verify_token(&admin.token).await.unwrap().unwrap();
    assert!(grant.permits(Role::Maintain, "east"));
    assert!(store.verify_token("lb_nonsense").await.unwrap().is_none());

    assert!(store.revoke_token(ingest.id).await.unwrap());
    assert!(store.verify_token(&ingest.token).await.unwrap().is_none());

    // Neither the database nor its write-ahead log holds a plaintext token.
    store.close().await;
    for entry in std::fs::read_dir(dir.path()).unwrap() {
        let bytes = std::fs::read(entry.unwrap().path()).unwrap();
        for token in [&ingest.token, &admin.token] {
            let secret = token.as_bytes();
            assert!(!bytes.windows(secret.len()).any(|w| w == secret));
        }
    }
}

#[tokio::test]
async fn runs_keep_history_with_one_current_per_period() {
    let (_dir, _path, store) = fresh().await;
    let plant = store.create_plant("west").await.unwrap();
    let spec = ModelSpec::from_toml(MODEL).unwrap();
    let revision = store
        .put_model_revision(&plant, &spec, MODEL, t("2026-03-01T00:00:00Z"))
        .await
        .unwrap();
    let run = |start: &str, status: &str| NewRun {
        period_start: t(start),
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: status.to_string(),
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
    let Store::Sqlite(s) = &store;
    let err = sqlx::query("UPDATE runs SET current = 1 WHERE id = ?")
        .bind(first)
        .execute(&s.pool)
        .await
        .expect_err("unique current run");
    assert!(err.to_string().contains("UNIQUE"), "{err}");
}
