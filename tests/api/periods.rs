//! Period runs: closed periods reconciled, run again when a reading changes, and on an
//! administrator's demand.

use super::*;

#[tokio::test]
async fn closed_periods_are_reconciled_and_run_again_when_a_reading_changes() {
    let (_dir, s, t) = fresh(&["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let plant = "purge-design";
    // Hour 3 has no reading of the purge flow meter FI-4: it is unmeasured that hour.
    let (model, csv) = purge_design_csv(4, &|tag, hour| tag == "FI-4" && hour == 3);
    let r = put_model(&c, &s, &t.admin, plant, &model, "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let r = post_readings(&c, &s, &t.ingest, plant, &csv, "text/csv").await;
    let answer = json_ok(r).await;
    assert_eq!(answer["rejected"], 0, "{answer}");

    let (from, to) = ("2026-05-31T23:00:00Z", "2026-06-01T05:00:00Z");
    let periods = wait_for_periods(&c, &s, &t.read, plant, from, to, |p| {
        p[1..5]
            .iter()
            .all(|x| x["runs"] == 1 && x["rerun_due"] == false)
    })
    .await;
    assert_eq!(periods.len(), 6);
    assert_eq!(periods[0]["status"], "no_readings");
    assert_eq!(periods[5]["status"], "no_readings");
    for p in &periods[1..5] {
        assert_eq!(p["status"], "solved", "{p}");
        assert_eq!(p["revision"], 1);
    }

    let get = |start: &'static str| {
        c.get(s.url(&format!("/api/v1/plants/{plant}/periods/{start}")))
            .bearer_auth(&t.read)
            .send()
    };
    let hour0 = json_ok(get("2026-06-01T00:00:00Z").await.unwrap()).await;
    assert_eq!(hour0["report"]["status"], "solved");
    assert_eq!(hour0["report"]["plant"], plant);
    assert!(hour0["report"]["caution"]
        .as_str()
        .unwrap()
        .contains("procedures"));
    assert_eq!(hour0["inputs"]["meters"].as_array().unwrap().len(), 9);
    let hour3 = json_ok(get("2026-06-01T03:00:00Z").await.unwrap()).await;
    assert_eq!(
        hour3["inputs"]["missing"],
        json!(["FI-4"]),
        "{}",
        hour3["inputs"]
    );
    let fi4 = hour3["report"]["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == "FI-4")
        .expect("FI-4 in the report");
    assert!(fi4["measured"].is_null(), "{fi4}");

    // A correction of hour 1 makes it run again; the first report stays as history.
    let correction = "tag,time,value\nFI-4,2026-06-01T01:00:00Z,150.0\nFI-4,2026-06-01T01:20:00Z,150.0\nFI-4,2026-06-01T01:40:00Z,150.0\n";
    let r = post_readings(&c, &s, &t.ingest, plant, correction, "text/csv").await;
    let answer = json_ok(r).await;
    assert_eq!(answer["replaced"], 3, "{answer}");
    wait_for_periods(&c, &s, &t.read, plant, from, to, |p| {
        p[2]["runs"] == 2 && p[2]["rerun_due"] == false
    })
    .await;
    // Exactly one new run, of that period only, even after the worker has looked again.
    tokio::time::sleep(Duration::from_millis(2500)).await;
    let periods = wait_for_periods(&c, &s, &t.read, plant, from, to, |_| true).await;
    let runs: Vec<i64> = periods
        .iter()
        .map(|p| p["runs"].as_i64().unwrap())
        .collect();
    assert_eq!(runs, [0, 1, 2, 1, 1, 0]);
    let hour1 = json_ok(get("2026-06-01T01:00:00Z").await.unwrap()).await;
    assert_eq!(hour1["runs"], 2);
    // The new report differs as it should: the measured purge flow is the corrected one, and
    // the reconciled flow moved towards it.
    let before = json_ok(get("2026-06-01T02:00:00Z").await.unwrap()).await;
    let purge = |r: &Value| {
        r["report"]["meters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|m| m["tag"] == "FI-4")
            .unwrap()["reconciled"]
            .as_f64()
            .unwrap()
    };
    assert!(
        purge(&hour1) > purge(&before),
        "{} vs {}",
        purge(&hour1),
        purge(&before)
    );
    let fi4 = hour1["report"]["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == "FI-4")
        .unwrap();
    assert_eq!(fi4["measured"], 150.0);

    // An administrator runs hour 0 again on demand.
    let r = c
        .post(s.url(&format!(
            "/api/v1/plants/{plant}/periods/2026-06-01T00:00:00Z/reconcile"
        )))
        .bearer_auth(&t.admin)
        .send()
        .await
        .unwrap();
    let rerun = json_ok(r).await;
    assert_eq!(rerun["runs"], 2);
    assert_ne!(rerun["run_id"], hour0["run_id"]);

    // Not a period start, and a period never run.
    let r = get("2026-06-01T00:30:00Z").await.unwrap();
    let body = problem(r, StatusCode::BAD_REQUEST).await;
    assert!(
        body["detail"]
            .as_str()
            .unwrap()
            .contains("2026-06-01T00:00:00Z"),
        "{body}"
    );
    let r = get("2026-06-02T00:00:00Z").await.unwrap();
    problem(r, StatusCode::NOT_FOUND).await;

    let metrics = metrics(&c, &s).await;
    let solved: u64 = metrics
        .lines()
        .find_map(|l| l.strip_prefix("loopbal_runs_total{status=\"solved\"} "))
        .and_then(|n| n.parse().ok())
        .unwrap_or(0);
    assert!(solved >= 6, "{metrics}");
}

#[tokio::test]
async fn an_absurd_reading_is_kept_flagged_and_costs_no_other_meter_its_period() {
    let (_dir, s, t) = fresh(&["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let plant = "purge-design";
    let (model, csv) = purge_design_csv(2, &|_, _| false);
    let r = put_model(&c, &s, &t.admin, plant, &model, "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    // A reading near the largest double, as a historian's transmission fault might send.
    let csv = format!("{csv}FI-4,2026-06-01T00:30:00Z,1.7e308,good\n");
    let answer = json_ok(post_readings(&c, &s, &t.ingest, plant, &csv, "text/csv").await).await;
    assert_eq!(answer["rejected"], 0, "stored as sent: {answer}");
    assert_eq!(
        (
            answer["implausible"].as_i64(),
            answer["out_of_range"].as_i64()
        ),
        (Some(1), Some(1)),
        "{answer}"
    );
    let (from, to) = ("2026-06-01T00:00:00Z", "2026-06-01T02:00:00Z");
    let periods = wait_for_periods(&c, &s, &t.read, plant, from, to, |p| {
        p.iter().all(|x| x["runs"] == 1 && x["rerun_due"] == false)
    })
    .await;
    assert_eq!(periods[0]["status"], "solved", "{}", periods[0]);
    let url = s.url(&format!("/api/v1/plants/{plant}/periods/{from}"));
    let hour0 = json_ok(c.get(url).bearer_auth(&t.read).send().await.unwrap()).await;
    let implausible = &hour0["inputs"]["implausible"];
    assert_eq!(implausible[0]["tag"], "FI-4", "{implausible}");
    assert_eq!(implausible[0]["readings"], 1);
    let fi4 = hour0["report"]["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == "FI-4")
        .unwrap();
    assert!(fi4["measured"].as_f64().unwrap() < 1e4, "{fi4}");
    assert!(hour0["report"]["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .any(|w| w
            .as_str()
            .unwrap()
            .starts_with("implausible: meter \"FI-4\"")));
    // The reading itself is kept as stored.
    let url = s.url(&format!(
        "/api/v1/plants/{plant}/readings?from={from}&to={to}&tag=FI-4"
    ));
    let stored = json_ok(c.get(url).bearer_auth(&t.read).send().await.unwrap()).await;
    assert_eq!(stored["readings"][2]["value"], 1.7e308, "{stored}");
    assert_eq!(stored["readings"][2]["out_of_range"], true, "flagged");
    assert_eq!(stored["readings"][1]["out_of_range"], false);
}

/// A run past `--run-timeout`: the 2,000-stream generated network (16,478 states, 2,904
/// meters), whose run takes far more than the 1 s allowed (its meters' correlations alone are
/// one solve per meter), re-run on demand: 503 `run-timed-out` naming the plant, the period and
/// the limit, nothing stored, the period listed `failed` with the reason and its retry, the
/// abandoned run counted. The grace keeps the scheduler off the period.
#[tokio::test]
async fn a_run_past_its_time_limit_is_503_and_its_period_is_listed_failed() {
    let (_dir, s, t) = fresh(&["--run-timeout", "1", "--run-grace", "100000000"]);
    let c = client();
    let net = testkit::network::network(2000, 7);
    let plant = net.spec.name.clone();
    let model = serde_json::to_string(&net.spec).unwrap();
    let r = put_model(&c, &s, &t.admin, &plant, &model, "application/json").await;
    assert_eq!(
        r.status(),
        StatusCode::CREATED,
        "{}",
        r.text().await.unwrap()
    );
    let values = testkit::noisy_values(
        &net.plant,
        &testkit::exact_values(&net.plant, &net.layout, &net.z),
        0,
    );
    let mut csv = String::from("tag,time,value,quality\n");
    for v in &values {
        let tag = &net.plant.meters[v.meter].tag;
        csv += &format!("{tag},2026-06-01T05:10:00Z,{},good\n", v.value);
    }
    let answer = json_ok(post_readings(&c, &s, &t.ingest, &plant, &csv, "text/csv").await).await;
    assert_eq!(answer["accepted"], values.len(), "{answer}");

    let start = "2026-06-01T05:00:00Z";
    let r = c
        .post(s.url(&format!("/api/v1/plants/{plant}/periods/{start}/reconcile")))
        .bearer_auth(&t.admin)
        .send()
        .await
        .unwrap();
    let p = problem(r, StatusCode::SERVICE_UNAVAILABLE).await;
    assert_eq!(p["type"], "urn:loopbal:problem:run-timed-out", "{p}");
    let detail = p["detail"].as_str().unwrap();
    for named in [
        plant.as_str(),
        start,
        "time limit of 1 s",
        "nothing was stored",
    ] {
        assert!(detail.contains(named), "{detail} names {named}");
    }

    let r = c
        .get(s.url(&format!(
            "/api/v1/plants/{plant}/periods?from={start}&to=2026-06-01T06:00:00Z"
        )))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    let listed = json_ok(r).await;
    let period = &listed["periods"][0];
    assert_eq!(period["status"], "failed", "{period}");
    assert_eq!(period["rerun_due"], true);
    assert_eq!(period["runs"], 0);
    assert!(period.get("run_id").is_none(), "{period}");
    let failure = &period["last_failure"];
    assert_eq!(
        failure["reason"],
        "the run was abandoned at its time limit of 1 s"
    );
    assert_eq!(failure["failures"], 1);
    let at = chrono::DateTime::parse_from_rfc3339(failure["at"].as_str().unwrap()).unwrap();
    let retry =
        chrono::DateTime::parse_from_rfc3339(failure["retry_after"].as_str().unwrap()).unwrap();
    assert_eq!(retry - at, chrono::TimeDelta::minutes(1), "{failure}");
    let r = c
        .get(s.url(&format!("/api/v1/plants/{plant}/periods/{start}")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
    assert!(metrics(&c, &s)
        .await
        .contains("\nloopbal_runs_abandoned_total 1\n"));
}
