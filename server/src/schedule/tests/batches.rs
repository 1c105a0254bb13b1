//! A scheduler pass runs claimed periods in batches (`record::record_batch`): one read of the
//! batch's readings, the runs on one blocking thread, one transaction. Its reports must be
//! those of each period run alone, whether a batch's periods are consecutive (read as one
//! range and split) or far apart (read one by one).

use chrono::{DateTime, TimeDelta, TimeZone, Utc};
use reconcile::equations::Layout;
use reconcile::simulate::{self, MeterFault, ReadingPlan};
use reconcile::{ModelSpec, Plant, Reading};

use super::super::{batch_size, run_due, run_period, Schedule};
use crate::service::Service;
use crate::store::{PlantRow, Store};

/// The Vantle loop's plant on a fresh database with `readings` stored.
async fn vantle(dir: &std::path::Path, name: &str, readings: &[Reading]) -> (Service, PlantRow) {
    let url = dir.join(format!("{name}.sqlite"));
    let service = Service::new(Store::open(url.to_str().unwrap()).await.unwrap());
    let spec = ModelSpec::from_toml(testkit::plants::VANTLE).unwrap();
    let plant = service.store.create_plant("vantle").await.unwrap();
    let from = Utc.with_ymd_and_hms(2025, 1, 1, 0, 0, 0).unwrap();
    service
        .store
        .put_model_revision(&plant, &spec, testkit::plants::VANTLE, from)
        .await
        .unwrap();
    service
        .store
        .ingest_readings(&plant, readings, 3600, &|_: &Reading| false)
        .await
        .unwrap();
    (service, plant)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_pass_in_batches_reports_as_each_period_run_alone() {
    let plant = Plant::new(ModelSpec::from_toml(testkit::plants::VANTLE).unwrap()).unwrap();
    let layout = Layout::new(&plant);
    let z = testkit::vantle_true_state(&plant, &layout, &testkit::VantleConditions::default());
    let start = Utc.with_ymd_and_hms(2025, 3, 1, 0, 0, 0).unwrap();
    // The first meter reads high by several of its σ from the 60th hour on, so that the
    // later periods fail their global test and identify it.
    let meter = &plant.meters[0];
    let truth = testkit::exact_values(&plant, &layout, &z)[0].value;
    let bias = 6.0 * meter.sigma_for(truth).expect("a σ at the true value");
    let plan = |start: DateTime<Utc>, hours: usize, seed: u64| ReadingPlan {
        start,
        hours,
        per_hour: 2,
        seed,
        faults: vec![MeterFault::Bias {
            tag: meter.tag.clone(),
            from_hour: 60,
            value: bias,
        }],
    };
    // More consecutive hours than two workers' batches hold, and two hours far later.
    let hours = 2 * batch_size(&plant) + 7;
    let mut readings = simulate::readings(&plant, &z, &plan(start, hours, 3));
    let far = start + TimeDelta::days(40);
    readings.extend(simulate::readings(&plant, &z, &plan(far, 2, 4)));

    let dir = tempfile::tempdir().unwrap();
    let (batched, plant_a) = vantle(dir.path(), "batched", &readings).await;
    let (alone, plant_b) = vantle(dir.path(), "alone", &readings).await;
    let schedule = Schedule {
        grace: std::time::Duration::ZERO,
        tick: std::time::Duration::from_secs(1),
        workers: 2,
    };
    let ran = run_due(&batched, &schedule).await.unwrap();
    assert_eq!(ran, hours + 2);
    assert!(!batched.store.has_dirty_periods(&plant_a).await.unwrap());

    let starts: Vec<DateTime<Utc>> = (0..hours as i64)
        .map(|h| start + TimeDelta::hours(h))
        .chain([far, far + TimeDelta::hours(1)])
        .collect();
    for s in &starts {
        run_period(&alone, &plant_b, *s).await.unwrap();
    }
    let mut failed_tests = 0;
    for s in &starts {
        let a = batched
            .store
            .current_run(&plant_a, *s)
            .await
            .unwrap()
            .expect("batched run");
        let b = alone
            .store
            .current_run(&plant_b, *s)
            .await
            .unwrap()
            .expect("run alone");
        assert_eq!(a.run.report, b.run.report, "period {s}");
        assert_eq!(a.run.inputs, b.run.inputs, "period {s}");
        let meters = |store: &Store, p: &PlantRow| {
            let store = store.clone();
            let p = p.clone();
            let s = *s;
            async move {
                store
                    .meter_periods(&p, None, s, s + TimeDelta::hours(1))
                    .await
                    .unwrap()
            }
        };
        assert_eq!(
            meters(&batched.store, &plant_a).await,
            meters(&alone.store, &plant_b).await,
            "period {s}"
        );
        if a.run.report["global_test"]["passed"] == false {
            failed_tests += 1;
        }
        assert_eq!(a.run.report["status"], "solved", "period {s}");
    }
    // The comparison covers periods whose identification ran, not only quiet ones.
    assert!(
        failed_tests > 0 || hours < 40,
        "no period failed its global test"
    );
}
