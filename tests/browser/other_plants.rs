//! Every page of the workspace on the other test plants than the demo's (the purge-design loop
//! and the Ombrask loop), each put and fed twelve hours of readings through the API.

use super::support::{client, post_readings, purge_design_csv, put_model, token, wait_for_periods};
use super::support::{Server, LOOPBAL, OMBRASK_TAGS};
use super::{csp_violations, main_text, no_alerts, open, shot, sign_in};
use testkit::webdriver::Browser;

/// Another plant than the demo's: its model put, and its readings of the twelve hours from
/// 2026-06-01T00:00Z posted and run.
async fn plant_with_readings(
    s: &Server,
    admin: &str,
    ingest: &str,
    read: &str,
    name: &str,
    model: &str,
    csv: &str,
) {
    let c = client();
    let r = put_model(&c, s, admin, name, model, "application/toml").await;
    assert!(r.status().is_success(), "{}", r.text().await.unwrap());
    let r = post_readings(&c, s, ingest, name, csv, "text/csv").await;
    assert!(r.status().is_success(), "{}", r.text().await.unwrap());
    let (from, to) = ("2026-06-01T00:00:00Z", "2026-06-01T12:00:00Z");
    wait_for_periods(&c, s, read, name, from, to, |ps| {
        ps.len() == 12 && ps.iter().all(|p| p["runs"] == 1 && p["rerun_due"] == false)
    })
    .await;
}

#[tokio::test]
#[ignore = "needs chromium and chromium-driver (run by .ci/run)"]
async fn every_page_works_on_the_other_test_plants() {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = dir.path().join("plants.sqlite");
    let admin = token(&db, "admin", None);
    let ingest = token(&db, "ingest", None);
    let read = token(&db, "read", None);
    let server = LOOPBAL.serve(&db, &[]);

    let (purge_model, purge_csv) = purge_design_csv(12, &|_, _| false);
    plant_with_readings(
        &server,
        &admin,
        &ingest,
        &read,
        "purge-design",
        &purge_model,
        &purge_csv,
    )
    .await;
    let mut ombrask_csv = String::from("tag,time,value,quality\n");
    for hour in 0..12 {
        for (tag, value) in OMBRASK_TAGS {
            // A little scatter from hour to hour, so that no two periods are alike.
            let v = value * (1.0 + 0.002 * ((hour * 7 + tag.len()) % 5) as f64);
            ombrask_csv += &format!("{tag},2026-06-01T{hour:02}:30:00Z,{v},good\n");
        }
    }
    plant_with_readings(
        &server,
        &admin,
        &ingest,
        &read,
        "ombrask-ob2",
        testkit::plants::OMBRASK,
        &ombrask_csv,
    )
    .await;

    let b = Browser::start(1280, 800).await;
    sign_in(&b, &server, &read).await;
    open(&b, &server, "/plants").await;
    assert_eq!(b.find_all("[data-plant]").await.len(), 2);
    for (name, model) in [
        ("purge-design", purge_model.as_str()),
        ("ombrask-ob2", testkit::plants::OMBRASK),
    ] {
        let plant = reconcile::parse_plant(model).expect("the test plant parses");
        open(&b, &server, &format!("/plant/{name}/loop")).await;
        assert_eq!(
            b.find_all("svg#flowsheet [data-unit]").await.len(),
            plant.units.len(),
            "{name}"
        );
        assert_eq!(
            b.find_all("svg#flowsheet [data-stream]").await.len(),
            plant.streams.len(),
            "{name}"
        );
        assert_eq!(
            b.find_all("svg#flowsheet [data-meter]").await.len(),
            plant.spec.meters.len(),
            "{name}"
        );
        no_alerts(&b, name).await;
        b.screenshot(&shot(&format!("{name}-loop.png"))).await;
        for page in [
            "balances",
            "figures",
            "meters",
            "what-if",
            "report?month=2026-06",
        ] {
            open(&b, &server, &format!("/plant/{name}/{page}")).await;
            no_alerts(&b, &format!("{name} {page}")).await;
            let text = main_text(&b).await;
            assert!(text.len() > 100, "{name} {page}: {text}");
            b.screenshot(&shot(&format!(
                "{name}-{}.png",
                page.split('?').next().unwrap()
            )))
            .await;
        }
        let meters = reconcile::parse_plant(model).unwrap().spec.meters;
        open(
            &b,
            &server,
            &format!("/plant/{name}/meters/{}", meters[0].tag),
        )
        .await;
        no_alerts(&b, &format!("{name} meter")).await;
        b.wait_for("#notes", 10).await;
    }
    assert_eq!(csp_violations(&b).await, "");
}
