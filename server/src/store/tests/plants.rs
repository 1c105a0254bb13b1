//! Plants and their model revisions.

use super::*;

on_both_backends!(
    schema_is_created_on_first_open_and_reopen_changes_nothing,
    revisions_are_numbered_and_immutable,
    concurrent_revisions_take_distinct_numbers,
);

async fn schema_is_created_on_first_open_and_reopen_changes_nothing(db: Scratch) {
    let plant = db.store.create_plant("west").await.unwrap();
    db.store.close().await;
    let store = Store::open(&db.url).await.expect("reopen");
    assert_eq!(store.plant("west").await.unwrap(), Some(plant));
    let count = "SELECT COUNT(*) FROM _sqlx_migrations";
    match &store {
        Store::Sqlite(s) => {
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
            let applied: i64 = sqlx::query_scalar(count).fetch_one(&s.pool).await.unwrap();
            assert_eq!(applied, sqlite::MIGRATOR.iter().count() as i64);
        }
        Store::Postgres(s) => {
            let applied: i64 = sqlx::query_scalar(count).fetch_one(&s.pool).await.unwrap();
            assert_eq!(applied, pg::MIGRATOR.iter().count() as i64);
        }
    }
    assert!(matches!(
        store.create_plant("west").await,
        Err(StoreError::PlantExists(_))
    ));
}

async fn revisions_are_numbered_and_immutable(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let model = tee_model();
    let spec = ModelSpec::from_toml(&model).unwrap();
    let from = [
        "2026-03-01T00:00:00Z",
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
    ];
    for (i, f) in from.iter().enumerate() {
        let n = store
            .put_model_revision(&plant, &spec, &model, t(f))
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
    assert_eq!(listed[0].source, model);
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
    for sql in [
        "UPDATE model_revisions SET source = 'x' WHERE revision = 1",
        "DELETE FROM model_revisions WHERE revision = 1",
    ] {
        let err = execute(store, sql, None).await.expect_err(sql);
        assert!(err.to_string().contains("immutable"), "{err}");
    }
}

async fn concurrent_revisions_take_distinct_numbers(db: Scratch) {
    let store = &db.store;
    let plant = store.create_plant("west").await.unwrap();
    let model = tee_model();
    let spec = ModelSpec::from_toml(&model).unwrap();
    let puts = (0..8).map(|_| {
        let (store, plant, spec) = (store.clone(), plant.clone(), spec.clone());
        let model = model.clone();
        tokio::spawn(async move {
            store
                .put_model_revision(&plant, &spec, &model, t("2026-03-01T00:00:00Z"))
                .await
        })
    });
    let mut numbers = Vec::new();
    for put in puts.collect::<Vec<_>>() {
        numbers.push(put.await.unwrap().unwrap());
    }
    numbers.sort();
    assert_eq!(numbers, (1..=8).collect::<Vec<i64>>());
    for n in numbers {
        assert_eq!(store.meters(&plant, n).await.unwrap().len(), 2);
    }
}
