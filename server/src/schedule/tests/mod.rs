//! The scheduler's passes: which plants a pass plans (here), and a run past its time limit
//! among others that finish (`time_limit`).

use chrono::TimeZone;
use reconcile::{Quality, Reading};

use super::*;
use crate::store::Store;

mod batches;
mod time_limit;

#[tokio::test]
async fn a_pass_plans_the_plants_with_dirty_periods_closed_at_the_time_given() {
    let dir = tempfile::tempdir().unwrap();
    let url = dir.path().join("plans.sqlite");
    let service = Service::new(Store::open(url.to_str().unwrap()).await.unwrap());
    let store = &service.store;
    let t = |h: u32, m: u32| Utc.with_ymd_and_hms(2026, 3, 2, h, m, 0).unwrap();
    let model = crate::test_plants::tee_with_feed_meter();
    let spec = reconcile::ModelSpec::from_toml(&model).unwrap();
    for name in ["quiet", "busy"] {
        let plant = store.create_plant(name).await.unwrap();
        store
            .put_model_revision(&plant, &spec, &model, t(0, 0))
            .await
            .unwrap();
    }
    let busy = store.plant("busy").await.unwrap().unwrap();
    let reading = Reading {
        tag: "F-1".into(),
        time: t(5, 10),
        value: 1.0,
        quality: Quality::Good,
    };
    store
        .ingest_readings(&busy, &[reading], 3600, &|_: &Reading| false)
        .await
        .unwrap();
    let schedule = Schedule {
        grace: Duration::from_secs(300),
        tick: Duration::from_secs(1),
        workers: 1,
    };
    let plans = plans(&service, &schedule, t(7, 0)).await.unwrap();
    assert_eq!(plans.len(), 1, "only the plant with a dirty period");
    assert_eq!(plans[0].plant.name, "busy");
    // Closed at 7:00 with 5 minutes' grace: periods starting up to 5:55.
    assert_eq!(plans[0].starts_up_to, t(5, 55));
}
