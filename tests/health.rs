//! End-to-end: a simulated week of the purge-design loop posted through HTTP as a historian
//! would, reconciled hour by hour by the service, and the meters' health as a technician sees
//! it: a small bias that no single hour flags is found within two days, its size estimated,
//! no other meter blamed; a recalibration note starts a fresh history; a frozen transmitter,
//! an out-of-range value and a missing tag are reported as such.

mod support;

use std::time::Duration;

use chrono::{DateTime, TimeDelta, Utc};
use reconcile::simulate::{steady_state, MeterFault, ReadingPlan};
use reqwest::{Client, StatusCode};
use serde_json::{json, Value};
use support::{post_readings, put_model, token, Server};

const PLANT: &str = "purge-design";

/// The purge-design loop with a second purge flow meter in series with FI-4: with it the meter
/// set tells a bias in FI-4 from one in the argon analysers (without it the purge flow and the
/// feed's argon analyser are correlated at 0.91 through the argon balance, and a week of
/// evidence sometimes cannot separate them).
fn model_text() -> String {
    testkit::plants::PURGE_DESIGN.to_string()
        + r#"
[[meter]]
tag = "FI-6"
stream = "purge"
quantity = "molar_flow"
uom = "mol/s"
sigma = 1.0
"#
}

fn week_start() -> DateTime<Utc> {
    DateTime::parse_from_rfc3339("2026-06-01T00:00:00Z")
        .unwrap()
        .with_timezone(&Utc)
}

/// The loop's readings as CSV: `hours` hours from `start_hour` after the week's start, one
/// reading per meter per hour, noise at each meter's σ from `seed`, with `faults`.
fn simulated_csv(start_hour: usize, hours: usize, seed: u64, faults: Vec<MeterFault>) -> String {
    let plant = reconcile::parse_plant(&model_text()).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let plan = ReadingPlan {
        start: week_start() + TimeDelta::hours(start_hour as i64),
        hours,
        per_hour: 1,
        seed,
        faults,
    };
    testkit::readings_csv(&plant, &z, &plan, &|_, _| false)
}

struct Service {
    _dir: tempfile::TempDir,
    server: Server,
    client: Client,
    admin: String,
    ingest: String,
    read: String,
    maintain: String,
}

impl Service {
    async fn start() -> Service {
        let dir = tempfile::tempdir().unwrap();
        let db = dir.path().join("loopbal.sqlite");
        let s = Service {
            admin: token(&db, "admin", None),
            ingest: token(&db, "ingest", None),
            read: token(&db, "read", None),
            maintain: token(&db, "maintain", None),
            server: support::LOOPBAL.serve(&db, &["--run-grace", "0", "--run-tick", "1"]),
            client: Client::builder()
                .timeout(Duration::from_secs(60))
                .build()
                .unwrap(),
            _dir: dir,
        };
        let (c, model) = (&s.client, model_text());
        let r = put_model(c, &s.server, &s.admin, PLANT, &model, "application/toml").await;
        assert_eq!(r.status(), StatusCode::CREATED);
        s
    }

    async fn post(&self, csv: String) -> Value {
        let (c, s) = (&self.client, &self.server);
        let r = post_readings(c, s, &self.ingest, PLANT, &csv, "text/csv").await;
        assert_eq!(r.status(), StatusCode::OK);
        let answer: Value = r.json().await.unwrap();
        assert_eq!(answer["rejected"], 0, "{answer}");
        answer
    }

    async fn get(&self, path: &str) -> Value {
        self.get_from(&self.server, path).await
    }

    /// The same from another instance on the same database: its own memo of meter health.
    async fn get_from(&self, server: &support::Server, path: &str) -> Value {
        let r = self
            .client
            .get(server.url(&format!("/api/v1/plants/{PLANT}{path}")))
            .bearer_auth(&self.read)
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), StatusCode::OK, "{path}");
        r.json().await.unwrap()
    }

    /// Wait until every period of the first `hours` hours has a current run and none is due.
    async fn wait_until_run(&self, hours: i64) {
        let from = week_start();
        let to = from + TimeDelta::hours(hours);
        let deadline = std::time::Instant::now() + Duration::from_secs(120);
        loop {
            let list = self
                .get(&format!(
                    "/periods?from={}&to={}",
                    from.to_rfc3339().replace('+', "%2B"),
                    to.to_rfc3339().replace('+', "%2B")
                ))
                .await;
            let periods = list["periods"].as_array().unwrap();
            let done = periods
                .iter()
                .all(|p| p["runs"].as_i64().unwrap() >= 1 && p["rerun_due"] == false);
            if done {
                return;
            }
            assert!(std::time::Instant::now() < deadline, "runs did not finish");
            tokio::time::sleep(Duration::from_millis(250)).await;
        }
    }
}

fn meter<'a>(list: &'a Value, tag: &str) -> &'a Value {
    list["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == tag)
        .unwrap_or_else(|| panic!("no meter {tag}"))
}

/// The biased meter: the purge flow meter FI-4 (σ 1 mol/s). The meter set can tell a bias in
/// it from one elsewhere (unlike the feed flow FI-1 and the product flow FI-3, which see the
/// loop's throughput almost alike: those two are reported together).
const BIASED: &str = "FI-4";
const SIGMA: f64 = 1.0;
/// Day 3 starts at hour 48.
const BIAS_FROM_HOUR: usize = 48;

#[tokio::test]
async fn a_small_bias_turns_its_meter_suspect_within_two_days_and_no_other() {
    let s = Service::start().await;
    let bias = 1.5 * SIGMA;
    s.post(simulated_csv(
        0,
        168,
        2026,
        vec![MeterFault::Bias {
            tag: BIASED.into(),
            from_hour: BIAS_FROM_HOUR,
            value: bias,
        }],
    ))
    .await;
    s.wait_until_run(168).await;

    // No single hour need flag it: the bias is 1.5 σ.
    let detail = s.get(&format!("/meters/{BIASED}")).await;
    let history = detail["history"].as_array().unwrap();
    assert_eq!(history.len(), 168);
    let first_suspect = history
        .iter()
        .position(|p| p["level"] == "suspect")
        .expect("the biased meter's CUSUM reaches suspect");
    assert!(
        (BIAS_FROM_HOUR..=BIAS_FROM_HOUR + 48).contains(&first_suspect),
        "suspect from hour {first_suspect}, the bias from hour {BIAS_FROM_HOUR}"
    );
    assert!(
        history[..BIAS_FROM_HOUR]
            .iter()
            .all(|p| p["level"] != "suspect"),
        "suspect before the bias"
    );

    let list = s.get("/meters").await;
    let biased = meter(&list, BIASED);
    assert_eq!(biased["status"], "suspect", "{biased}");
    // What the first instance kept in its memo (assessed when its runs landed, or at the
    // first request) is what a second instance, assessing afresh, answers.
    let db = s._dir.path().join("loopbal.sqlite");
    let other = support::LOOPBAL.serve(&db, &["--run-tick", "3600"]);
    assert_eq!(s.get_from(&other, "/meters").await, list);
    assert_eq!(s.get("/meters").await, list, "asked again, the same");
    assert_eq!(list["meters"][0]["tag"], BIASED, "the suspect ranks first");
    let (b, sb) = (
        biased["bias"].as_f64().unwrap(),
        biased["bias_sigma"].as_f64().unwrap(),
    );
    assert!(
        (b - bias).abs() <= 2.0 * sb,
        "pooled bias {b} ± {sb} mol/s, true {bias}"
    );
    let since: DateTime<Utc> = biased["evidence_since"].as_str().unwrap().parse().unwrap();
    let since_hour = (since - week_start()).num_hours();
    assert!(
        (BIAS_FROM_HOUR as i64 - 24..=BIAS_FROM_HOUR as i64 + 48).contains(&since_hour),
        "evidence from hour {since_hour}"
    );
    for m in list["meters"].as_array().unwrap() {
        if m["tag"] != BIASED {
            assert_ne!(m["status"], "suspect", "unbiased meter blamed: {m}");
        }
    }

    // A recalibration at the end of the week starts a fresh history.
    let end = week_start() + TimeDelta::hours(168);
    let r = s
        .client
        .post(s.server.url(&format!("/api/v1/plants/{PLANT}/meters/{BIASED}/notes")))
        .bearer_auth(&s.maintain)
        .json(&json!({"kind": "recalibrated", "text": "zero and span reset; transmitter was reading high", "effective_at": end.to_rfc3339()}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    // The readings role may not write notes.
    let r = s
        .client
        .post(
            s.server
                .url(&format!("/api/v1/plants/{PLANT}/meters/{BIASED}/notes")),
        )
        .bearer_auth(&s.read)
        .json(&json!({"kind": "checked"}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::FORBIDDEN);
    s.post(simulated_csv(168, 24, 7, vec![])).await;
    s.wait_until_run(192).await;
    let detail = s.get(&format!("/meters/{BIASED}")).await;
    assert_eq!(detail["history"].as_array().unwrap().len(), 24);
    assert_eq!(detail["status"], "ok", "{}", detail["reason"]);
    // The note and the new runs made both memos stale: each instance answers the new state.
    let after = s.get("/meters").await;
    assert_eq!(meter(&after, BIASED)["status"], "ok");
    assert_eq!(s.get_from(&other, "/meters").await, after);
    assert_eq!(detail["notes"][0]["kind"], "recalibrated");
    assert_eq!(
        detail["history_since"],
        end.to_rfc3339().replace("+00:00", "Z")
    );
}

#[tokio::test]
async fn frozen_out_of_range_and_missing_meters_are_reported_as_such() {
    let s = Service::start().await;
    // FI-5 freezes from hour 2; AI-4 drops out in the last two hours; FI-3 reads wildly high
    // (out of its range) in the last hour.
    let mut csv = simulated_csv(
        0,
        12,
        5,
        vec![
            MeterFault::Frozen {
                tag: "FI-5".into(),
                from_hour: 2,
            },
            MeterFault::Dropout {
                tag: "AI-4".into(),
                from_hour: 10,
                to_hour: 12,
            },
        ],
    );
    csv += "FI-3,2026-06-01T11:30:00Z,1000000,good\n";
    let answer = s.post(csv).await;
    assert_eq!(answer["out_of_range"], 1, "FI-3 has a range: {answer}");
    s.wait_until_run(12).await;
    let list = s.get("/meters").await;
    assert_eq!(
        meter(&list, "FI-5")["status"],
        "frozen",
        "{}",
        meter(&list, "FI-5")
    );
    assert_eq!(
        meter(&list, "AI-4")["status"],
        "missing",
        "{}",
        meter(&list, "AI-4")
    );
    assert_eq!(
        meter(&list, "FI-3")["status"],
        "out_of_range",
        "{}",
        meter(&list, "FI-3")
    );
    // The hour without AI-4 was still reconciled.
    let hour = s.get("/periods/2026-06-01T11:00:00Z").await;
    assert_ne!(hour["report"]["status"], "no_data");
    assert!(hour["inputs"]["missing"]
        .as_array()
        .unwrap()
        .iter()
        .any(|t| t == "AI-4"));
}
