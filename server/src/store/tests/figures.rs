//! Loop figures kept in columns beside each run (`period_figures`, `runs.global_test_passed`):
//! written with the run, replaced by a re-run, read back as series, and filled from the stored
//! reports of a database made before they existed.

use reconcile::ReportStatus;

use super::*;
use crate::store::{FigureCell, FigureKey, PeriodOutcome};

on_both_backends!(
    a_runs_figures_are_kept_in_columns_and_replaced_by_a_re_run,
    a_database_from_before_the_columns_is_filled_from_its_reports,
);

fn figure(name: &str, subject: &str, value: Option<f64>, sigma: Option<f64>) -> serde_json::Value {
    serde_json::json!({
        "name": name, "subject": subject, "uom": "fraction", "value": value, "sigma": sigma,
    })
}

fn run(
    revision: i64,
    start: &str,
    status: &str,
    figures: Option<Vec<serde_json::Value>>,
    passed: Option<bool>,
) -> NewRun {
    let mut report = serde_json::json!({ "status": status });
    if let Some(figures) = figures {
        report["figures"] = serde_json::Value::Array(figures);
    }
    if let Some(passed) = passed {
        report["global_test"] = serde_json::json!({ "passed": passed, "statistic": 3.5 });
    }
    NewRun {
        period_start: t(start),
        revision,
        engine_version: reconcile::ENGINE_VERSION.to_string(),
        status: ReportStatus::parse(status).expect("a status word"),
        report,
        inputs: serde_json::json!([]),
        meters: Vec::new(),
    }
}

fn key(name: &str, subject: &str) -> FigureKey {
    FigureKey {
        name: name.into(),
        subject: subject.into(),
        uom: "fraction".into(),
    }
}

const FIVE: &str = "2026-03-02T05:00:00Z";
const SIX: &str = "2026-03-02T06:00:00Z";
const SEVEN: &str = "2026-03-02T07:00:00Z";
const EIGHT: &str = "2026-03-02T08:00:00Z";

/// Four periods: five re-run with other figures, six without data, seven failing the global
/// test with a figure that is not observable, eight with a figure five does not have.
async fn four_periods(store: &Store) -> (PlantRow, i64) {
    let (plant, revision) = west_with_tee(store).await;
    let runs = [
        run(
            revision,
            FIVE,
            "solved",
            Some(vec![figure("conversion", "r1", Some(0.5), Some(0.01))]),
            Some(true),
        ),
        run(
            revision,
            FIVE,
            "solved",
            Some(vec![
                figure("purge_fraction", "purge", Some(0.045), Some(0.0031)),
                figure("conversion", "r1", Some(0.25), Some(1e-7)),
            ]),
            Some(true),
        ),
        run(revision, SIX, "no_data", None, None),
        run(
            revision,
            SEVEN,
            "solved",
            Some(vec![
                figure("purge_fraction", "purge", Some(0.1), Some(0.02)),
                figure("conversion", "r1", None, None),
            ]),
            Some(false),
        ),
        run(
            revision,
            EIGHT,
            "unobservable",
            Some(vec![
                figure(
                    "inert_fraction",
                    "reactor_in",
                    Some(0.123456789012345),
                    Some(0.004),
                ),
                figure("purge_fraction", "purge", Some(0.05), Some(0.003)),
            ]),
            Some(true),
        ),
    ];
    for r in &runs {
        store.record_run(&plant, r).await.unwrap();
    }
    (plant, revision)
}

type Read = (Vec<PeriodOutcome>, Vec<FigureKey>, Vec<FigureCell>);

async fn read_all(store: &Store, plant: &PlantRow) -> Read {
    let (from, to) = (t("2026-03-02T00:00:00Z"), t("2026-03-03T00:00:00Z"));
    (
        store.period_outcomes(plant, from, to).await.unwrap(),
        store.figure_keys(plant, from, to).await.unwrap(),
        store.figure_cells(plant, from, to, None).await.unwrap(),
    )
}

async fn a_runs_figures_are_kept_in_columns_and_replaced_by_a_re_run(db: Scratch) {
    let store = &db.store;
    let (plant, revision) = four_periods(store).await;
    let (outcomes, keys, cells) = read_all(store, &plant).await;
    let got: Vec<_> = outcomes
        .iter()
        .map(|o| (o.period_start, o.status, o.global_test_passed))
        .collect();
    assert_eq!(
        got,
        [
            (t(FIVE), ReportStatus::Solved, Some(true)),
            (t(SIX), ReportStatus::NoData, None),
            (t(SEVEN), ReportStatus::Solved, Some(false)),
            (t(EIGHT), ReportStatus::Unobservable, Some(true)),
        ]
    );
    // In the order the reports first list them: five's list (its re-run's, the first run's
    // is gone), then the one eight adds.
    assert_eq!(
        keys,
        [
            key("purge_fraction", "purge"),
            key("conversion", "r1"),
            key("inert_fraction", "reactor_in")
        ]
    );
    let got: Vec<_> = cells
        .iter()
        .map(|c| (c.period_start, c.key.name.as_str(), c.value, c.sigma))
        .collect();
    assert_eq!(
        got,
        [
            (t(FIVE), "purge_fraction", Some(0.045), Some(0.0031)),
            (t(FIVE), "conversion", Some(0.25), Some(1e-7)),
            (t(SEVEN), "purge_fraction", Some(0.1), Some(0.02)),
            (t(SEVEN), "conversion", None, None),
            (
                t(EIGHT),
                "inert_fraction",
                Some(0.123456789012345),
                Some(0.004)
            ),
            (t(EIGHT), "purge_fraction", Some(0.05), Some(0.003)),
        ]
    );
    // One figure; a range that leaves out the first period.
    let (from, to) = (t(SIX), t("2026-03-03T00:00:00Z"));
    let purge = store
        .figure_cells(&plant, from, to, Some(&key("purge_fraction", "purge")))
        .await
        .unwrap();
    assert_eq!(
        purge
            .iter()
            .map(|c| (c.period_start, c.value))
            .collect::<Vec<_>>(),
        [(t(SEVEN), Some(0.1)), (t(EIGHT), Some(0.05))]
    );
    let none = store
        .figure_cells(&plant, from, to, Some(&key("purge_fraction", "r1")))
        .await
        .unwrap();
    assert!(none.is_empty());
    assert_eq!(
        store.figure_keys(&plant, from, to).await.unwrap(),
        [
            key("purge_fraction", "purge"),
            key("conversion", "r1"),
            key("inert_fraction", "reactor_in")
        ]
    );
    assert_eq!(
        store.figure_keys(&plant, t(EIGHT), to).await.unwrap(),
        [
            key("inert_fraction", "reactor_in"),
            key("purge_fraction", "purge")
        ]
    );

    // A re-run without data leaves the period without figures.
    store
        .record_run(&plant, &run(revision, SEVEN, "no_data", None, None))
        .await
        .unwrap();
    let (outcomes, _, cells) = read_all(store, &plant).await;
    assert!(cells.iter().all(|c| c.period_start != t(SEVEN)));
    assert_eq!(outcomes[2].status, ReportStatus::NoData);
    assert_eq!(outcomes[2].global_test_passed, None);
}

async fn a_database_from_before_the_columns_is_filled_from_its_reports(db: Scratch) {
    let (plant, _) = four_periods(&db.store).await;
    let written = read_all(&db.store, &plant).await;
    // Back to the schema before the columns: without the table, the column, its index and the
    // record of the migration that made them.
    for sql in [
        "DROP TABLE period_figures",
        "DROP INDEX runs_current_outcome",
        "ALTER TABLE runs DROP COLUMN global_test_passed",
        "DELETE FROM _sqlx_migrations WHERE version = 5",
    ] {
        execute(&db.store, sql, None).await.expect(sql);
    }
    db.store.close().await;
    let store = Store::open(&db.url).await.expect("reopen and migrate");
    let filled = read_all(&store, &plant).await;
    assert_eq!(filled, written);
    assert_eq!(filled.2.len(), 6, "{:?}", filled.2);
}
