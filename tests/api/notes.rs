//! Technicians' notes (docs/api.md, "Meter health"): a meter taken out of service is left out
//! of the estimate of every period from the note's time until it is back in service, its
//! readings kept and reported; the periods already run re-run by the scheduler; what the loop
//! loses meanwhile; `as_found` beside loopbal's own bias estimate; every bad note refused with
//! nothing stored.

use chrono::{DateTime, TimeDelta, Utc};
use reconcile::simulate::{steady_state, MeterFault, ReadingPlan};

use super::*;

const LOOP: &str = "purge-design";
/// The purge flow meter, redundant in the purge-design loop.
const FI4: &str = "FI-4";
const HOURS: i64 = 8;

fn day() -> DateTime<Utc> {
    "2026-06-01T00:00:00Z".parse().unwrap()
}

fn at(hour: i64) -> String {
    rfc3339(day() + TimeDelta::hours(hour))
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
}

/// The purge-design loop's readings of `hours` hours from the day's start, with `faults`.
fn loop_csv(hours: usize, faults: Vec<MeterFault>) -> String {
    let plant = reconcile::parse_plant(testkit::plants::PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let plan = ReadingPlan {
        start: day(),
        hours,
        per_hour: 2,
        seed: 11,
        faults,
    };
    testkit::readings_csv(&plant, &z, &plan, &|_, _| false)
}

/// A service running every closed period at once, with the purge-design loop and `csv`
/// stored and every period of its `hours` run.
async fn loop_service(csv: &str, hours: i64) -> (tempfile::TempDir, Server, Tokens, Client) {
    let (dir, s, tok) = fresh(&["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let model = testkit::plants::PURGE_DESIGN;
    let r = put_model(&c, &s, &tok.admin, LOOP, model, "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let answer = json_ok(post_readings(&c, &s, &tok.ingest, LOOP, csv, "text/csv").await).await;
    assert_eq!(answer["rejected"], 0, "{answer}");
    runs_reach(&c, &s, &tok.read, &vec![1; hours as usize]).await;
    (dir, s, tok, c)
}

/// Wait until period h of the day has at least `runs[h]` runs and none is due again; the
/// periods as listed.
async fn runs_reach(c: &Client, s: &Server, read: &str, runs: &[i64]) -> Vec<Value> {
    let to = at(runs.len() as i64);
    wait_for_periods(c, s, read, LOOP, &at(0), &to, |periods| {
        periods
            .iter()
            .zip(runs)
            .all(|(p, &n)| p["runs"].as_i64().unwrap_or(0) >= n && p["rerun_due"] == false)
    })
    .await
}

async fn get(c: &Client, s: &Server, read: &str, path: &str) -> Value {
    let r = c
        .get(s.url(&format!("/api/v1/plants/{LOOP}{path}")))
        .bearer_auth(read)
        .send()
        .await
        .unwrap();
    json_ok(r).await
}

async fn post_note(
    c: &Client,
    s: &Server,
    tok: &str,
    plant: &str,
    tag: &str,
    note: Value,
) -> reqwest::Response {
    c.post(s.url(&format!("/api/v1/plants/{plant}/meters/{tag}/notes")))
        .bearer_auth(tok)
        .json(&note)
        .send()
        .await
        .unwrap()
}

async fn report(c: &Client, s: &Server, read: &str, hour: i64) -> Value {
    get(c, s, read, &format!("/periods/{}", at(hour))).await["report"].clone()
}

fn meter_entry<'a>(report: &'a Value, tag: &str) -> &'a Value {
    report["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == tag)
        .unwrap_or_else(|| panic!("no meter {tag} in {report}"))
}

fn figure_sigma(report: &Value, name: &str, subject: &str) -> Option<f64> {
    report["figures"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["name"] == name && f["subject"] == subject)
        .and_then(|f| f["sigma"].as_f64())
}

async fn stored_readings(c: &Client, s: &Server, read: &str) -> usize {
    let r = c
        .get(s.url(&format!("/api/v1/plants/{LOOP}/readings")))
        .query(&[("from", at(0)), ("to", at(HOURS))])
        .bearer_auth(read)
        .send()
        .await
        .unwrap();
    json_ok(r).await["readings"].as_array().unwrap().len()
}

fn listed<'a>(list: &'a Value, tag: &str) -> (usize, &'a Value) {
    list["meters"]
        .as_array()
        .unwrap()
        .iter()
        .enumerate()
        .find(|(_, m)| m["tag"] == tag)
        .unwrap_or_else(|| panic!("{tag} not listed: {list}"))
}

#[tokio::test]
async fn a_meter_out_of_service_is_left_out_until_back_in_service_and_its_readings_kept() {
    let (_dir, s, tok, c) = loop_service(&loop_csv(HOURS as usize, vec![]), HOURS).await;
    let readings_before = stored_readings(&c, &s, &tok.read).await;
    assert_eq!(
        readings_before,
        9 * 2 * HOURS as usize,
        "9 meters, 2 a period"
    );
    let with = report(&c, &s, &tok.read, 3).await;
    assert_eq!(meter_entry(&with, FI4)["used"], true);
    assert_eq!(meter_entry(&with, FI4)["not_used_reason"], Value::Null);
    let meter = get(&c, &s, &tok.read, &format!("/meters/{FI4}")).await;
    assert_eq!(meter["out_of_service_since"], Value::Null);

    let text = "transmitter removed for repair";
    let r = post_note(
        &c,
        &s,
        &tok.maintain,
        LOOP,
        FI4,
        json!({"kind": "out_of_service", "text": text, "effective_at": at(3)}),
    )
    .await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let note: Value = r.json().await.unwrap();
    assert_eq!(note["kind"], "out_of_service");

    // The periods from 03:00 on run again; the earlier ones do not.
    let periods = runs_reach(&c, &s, &tok.read, &[1, 1, 1, 2, 2, 2, 2, 2]).await;
    for p in &periods[..3] {
        assert_eq!(p["runs"], 1, "{p}");
    }
    assert_eq!(stored_readings(&c, &s, &tok.read).await, readings_before);

    let without = report(&c, &s, &tok.read, 3).await;
    let fi4 = meter_entry(&without, FI4);
    assert_eq!(fi4["used"], false, "{fi4}");
    let reason = format!("out of service since {}: {text}", at(3));
    assert_eq!(fi4["not_used_reason"], reason.as_str());
    assert_eq!(
        fi4["measured"],
        meter_entry(&with, FI4)["measured"],
        "still reported"
    );
    assert_eq!(fi4["readings"], 2);
    assert_eq!(fi4["adjustment"], Value::Null);
    assert_eq!(fi4["normalized_adjustment"], Value::Null);
    assert_eq!(fi4["testable"], false);
    for m in without["meters"].as_array().unwrap() {
        if m["tag"] != FI4 {
            assert_eq!(m["used"], true, "{m}");
            assert!(m["reconciled"].is_number(), "{m}");
        }
    }
    assert_eq!(
        without["redundancy"].as_i64().unwrap(),
        with["redundancy"].as_i64().unwrap() - 1,
        "one redundant meter fewer"
    );

    // The meter list says so, and what the loop loses, judged on 02:00 (the last period
    // with the meter in).
    let list = get(&c, &s, &tok.read, "/meters").await;
    let (place, listed_fi4) = listed(&list, FI4);
    assert_eq!(listed_fi4["status"], "out_of_service", "{listed_fi4}");
    assert_eq!(listed_fi4["out_of_service_since"], at(3).as_str());
    assert_eq!(listed_fi4["out_of_service_note"], text);
    assert_eq!(listed_fi4["loses_judged_on"], at(2).as_str());
    assert!(
        listed_fi4["reason"].as_str().unwrap().starts_with(&reason),
        "{listed_fi4}"
    );
    for (i, m) in list["meters"].as_array().unwrap().iter().enumerate() {
        let before =
            ["suspect", "frozen", "out_of_range", "watch"].contains(&m["status"].as_str().unwrap());
        assert_eq!(i < place, before, "ranked: {list}");
    }
    let loses = listed_fi4["loses"].as_array().unwrap();
    assert!(
        !loses.is_empty(),
        "the purge flow meter is worth something: {listed_fi4}"
    );
    // The re-run period's σ grew as sigma_if_lost predicted. The prediction is of 02:00, a
    // period of the same steady state with other noise, so the σ agree to about 1 %; the
    // growth σ without / σ with, 2 to 4 % here, agrees to within 0.3 % of a σ.
    for loss in loses {
        let (name, subject) = (
            loss["name"].as_str().unwrap(),
            loss["subject"].as_str().unwrap(),
        );
        let sigma = loss["sigma"].as_f64().unwrap();
        let had = figure_sigma(&with, name, subject).unwrap();
        assert!(
            (had - sigma).abs() <= 0.02 * sigma,
            "{name} {subject}: {had} vs {sigma}"
        );
        match loss["sigma_if_lost"].as_f64() {
            Some(predicted) => {
                let got = figure_sigma(&without, name, subject).unwrap();
                assert!(predicted > 1.01 * sigma, "{loss}");
                assert!(
                    (got - predicted).abs() <= 0.02 * predicted,
                    "{name} {subject}: σ {got} without the meter, {predicted} predicted"
                );
                let (grew, foretold) = (got / had, predicted / sigma);
                assert!(
                    (grew - foretold).abs() <= 0.003,
                    "{name} {subject}: σ grew {grew}, predicted {foretold}"
                );
            }
            None => assert_eq!(figure_sigma(&without, name, subject), None, "{loss}"),
        }
    }
    let detail = get(&c, &s, &tok.read, &format!("/meters/{FI4}")).await;
    assert_eq!(detail["status"], "out_of_service");
    assert_eq!(detail["loses"], listed_fi4["loses"]);

    // Back in service from 06:00: those periods run again with the meter.
    let r = post_note(
        &c,
        &s,
        &tok.maintain,
        LOOP,
        FI4,
        json!({"kind": "back_in_service", "text": "refitted", "effective_at": at(6)}),
    )
    .await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let periods = runs_reach(&c, &s, &tok.read, &[1, 1, 1, 2, 2, 2, 3, 3]).await;
    assert_eq!(periods[5]["runs"], 2, "05:00 is still out: {}", periods[5]);
    assert_eq!(
        meter_entry(&report(&c, &s, &tok.read, 5).await, FI4)["used"],
        false
    );
    let back = report(&c, &s, &tok.read, 6).await;
    assert_eq!(meter_entry(&back, FI4)["used"], true);
    assert_eq!(meter_entry(&back, FI4)["not_used_reason"], Value::Null);
    assert!(meter_entry(&back, FI4)["normalized_adjustment"].is_number());
    assert_eq!(back["redundancy"], with["redundancy"]);
    let list = get(&c, &s, &tok.read, "/meters").await;
    let (_, fi4) = listed(&list, FI4);
    assert_ne!(fi4["status"], "out_of_service", "{fi4}");
    assert_eq!(fi4["out_of_service_since"], Value::Null);
    assert!(fi4.get("loses").is_none(), "{fi4}");
    assert_eq!(stored_readings(&c, &s, &tok.read).await, readings_before);
}

#[tokio::test]
async fn as_found_is_shown_beside_the_bias_loopbal_estimated_before_the_recalibration() {
    let hours = 24;
    let bias = 3.0; // mol/s, three times FI-4's σ
    let faults = vec![MeterFault::Bias {
        tag: FI4.into(),
        from_hour: 0,
        value: bias,
    }];
    let (_dir, s, tok, c) = loop_service(&loop_csv(hours, faults), hours as i64).await;
    let listed_bias = {
        let list = get(&c, &s, &tok.read, "/meters").await;
        let (_, fi4) = listed(&list, FI4);
        (
            fi4["bias"].as_f64().unwrap(),
            fi4["bias_sigma"].as_f64().unwrap(),
        )
    };
    let note = json!({"kind": "recalibrated", "text": "zero and span reset", "as_found": 2.9, "effective_at": at(hours as i64)});
    let r = post_note(&c, &s, &tok.maintain, LOOP, FI4, note).await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let answered: Value = r.json().await.unwrap();
    assert_eq!(answered["as_found"], 2.9);

    let detail = get(&c, &s, &tok.read, &format!("/meters/{FI4}")).await;
    let notes = detail["notes"].as_array().unwrap();
    assert_eq!(notes.len(), 1);
    assert_eq!(notes[0]["as_found"], 2.9);
    let (b, sb) = (
        notes[0]["estimated_bias"].as_f64().unwrap(),
        notes[0]["estimated_bias_sigma"].as_f64().unwrap(),
    );
    // The bias the meter list showed just before the note, which finds the simulated one.
    assert_eq!((b, sb), listed_bias);
    assert!(
        sb > 0.0 && (b - bias).abs() <= 3.0 * sb,
        "{b} ± {sb}, true {bias}"
    );
    // The history starts afresh after the recalibration.
    assert_eq!(detail["history"].as_array().unwrap().len(), 0);
}

#[tokio::test]
async fn bad_notes_are_refused_naming_the_item_and_nothing_is_stored() {
    let (_dir, s, tok) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &tok.admin).await;
    let (tag, other) = ("OB2-FI-101", "OB2-FI-201");
    let note = |kind: &str, hour: u32, extra: Value| {
        let mut n = json!({"kind": kind, "text": "isolated for a leak check", "effective_at": format!("2026-03-02T{hour:02}:00:00Z")});
        if let (Some(n), Some(extra)) = (n.as_object_mut(), extra.as_object()) {
            n.extend(extra.clone());
        }
        n
    };
    let created = post_note(
        &c,
        &s,
        &tok.maintain,
        PLANT,
        tag,
        note("out_of_service", 5, json!({})),
    )
    .await;
    assert_eq!(created.status(), StatusCode::CREATED);
    let notes_now = || async {
        let r = c
            .get(s.url(&format!("/api/v1/plants/{PLANT}/meters/{tag}")))
            .bearer_auth(&tok.read)
            .send()
            .await
            .unwrap();
        json_ok(r).await["notes"].clone()
    };
    let stored = notes_now().await;
    assert_eq!(stored.as_array().unwrap().len(), 1);

    let cases: Vec<(&str, Value, StatusCode, Vec<&str>)> = vec![
        (
            tag,
            note("broken", 6, json!({})),
            StatusCode::BAD_REQUEST,
            vec![
                "\"broken\"",
                "checked",
                "recalibrated",
                "replaced",
                "out_of_service",
                "back_in_service",
            ],
        ),
        (
            tag,
            note("checked", 6, json!({"as_found": 1.5})),
            StatusCode::BAD_REQUEST,
            vec!["as_found", "checked"],
        ),
        (
            tag,
            note("out_of_service", 6, json!({"as_found": 1.5})),
            StatusCode::BAD_REQUEST,
            vec!["as_found"],
        ),
        (
            tag,
            note("recalibrated", 6, json!({"as_found": "high"})),
            StatusCode::BAD_REQUEST,
            vec!["as_found"],
        ),
        (
            other,
            note("back_in_service", 6, json!({})),
            StatusCode::BAD_REQUEST,
            vec![other, "not out of service"],
        ),
        (
            tag,
            note("back_in_service", 4, json!({})),
            StatusCode::BAD_REQUEST,
            vec![tag, "not out of service", "2026-03-02T05:00:00Z"],
        ),
        (
            tag,
            note("back_in_service", 5, json!({})),
            StatusCode::BAD_REQUEST,
            vec!["not out of service"],
        ),
        (
            tag,
            note("out_of_service", 7, json!({})),
            StatusCode::BAD_REQUEST,
            vec![tag, "2026-03-02T05:00:00Z", "overlap"],
        ),
        (
            tag,
            note("out_of_service", 2, json!({})),
            StatusCode::BAD_REQUEST,
            vec!["2026-03-02T05:00:00Z", "overlap"],
        ),
        (
            "OB2-FI-999",
            note("out_of_service", 6, json!({})),
            StatusCode::NOT_FOUND,
            vec!["OB2-FI-999"],
        ),
    ];
    for (t, body, status, words) in cases {
        let p = problem(
            post_note(&c, &s, &tok.maintain, PLANT, t, body.clone()).await,
            status,
        )
        .await;
        let detail = p["detail"].as_str().unwrap();
        for w in words {
            assert!(detail.contains(w), "{body}: \"{w}\" not in {detail}");
        }
    }
    // A non-finite number is not JSON; as text it is refused as the field it is.
    let r = c
        .post(s.url(&format!("/api/v1/plants/{PLANT}/meters/{tag}/notes")))
        .bearer_auth(&tok.maintain)
        .header("content-type", "application/json")
        .body(r#"{"kind": "recalibrated", "as_found": 1e999}"#)
        .send()
        .await
        .unwrap();
    let p = problem(r, StatusCode::BAD_REQUEST).await;
    assert!(p["detail"].as_str().unwrap().contains("as_found"), "{p}");
    assert_eq!(notes_now().await, stored, "nothing stored");

    // Closed, the interval refuses an overlap naming both its ends; after it, a new one is fine.
    let back = post_note(
        &c,
        &s,
        &tok.maintain,
        PLANT,
        tag,
        note("back_in_service", 9, json!({})),
    )
    .await;
    assert_eq!(back.status(), StatusCode::CREATED);
    let p = problem(
        post_note(
            &c,
            &s,
            &tok.maintain,
            PLANT,
            tag,
            note("out_of_service", 8, json!({})),
        )
        .await,
        StatusCode::BAD_REQUEST,
    )
    .await;
    let detail = p["detail"].as_str().unwrap();
    assert!(
        detail.contains("2026-03-02T05:00:00Z") && detail.contains("2026-03-02T09:00:00Z"),
        "{detail}"
    );
    let again = post_note(
        &c,
        &s,
        &tok.maintain,
        PLANT,
        tag,
        note("out_of_service", 9, json!({})),
    )
    .await;
    assert_eq!(again.status(), StatusCode::CREATED);
    let kinds: Vec<Value> = notes_now()
        .await
        .as_array()
        .unwrap()
        .iter()
        .map(|n| n["kind"].clone())
        .collect();
    assert_eq!(
        kinds,
        [
            json!("out_of_service"),
            json!("back_in_service"),
            json!("out_of_service")
        ]
    );
}
