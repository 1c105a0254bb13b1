//! The same model and readings through `loopbal reconcile` (files, no server) and through the
//! service (POSTed over HTTP, run by its scheduler) give equal reports, field for field,
//! warnings included: both run a period with `period_run::run_period`. The readings hold
//! every case the two paths could treat differently: uncertain, bad and out-of-range readings,
//! a corrected reading (the later line of the file; a later batch for the service), a meter
//! that moved within its period, a meter missing for an hour, and an hour of bad readings only.

mod support;

use std::process::Command;
use std::time::{Duration, Instant};

use reqwest::StatusCode;
use serde_json::Value;
use support::{client, conforms, json_ok, purge_design_csv, put_model, token, BIN, LOOPBAL};

const PLANT: &str = "purge-design";
const HOURS: usize = 5;
const FROM: &str = "2026-06-01T00:00:00Z";
const TO: &str = "2026-06-01T05:00:00Z";

/// The readings file's lines (after the header) edited into the cases above, and the
/// correction that a later line of the file (or a later batch) makes.
fn readings() -> (String, Vec<String>, String) {
    // FI-4 has no reading in hour 3: missing that hour.
    let (model, csv) = purge_design_csv(HOURS, &|tag, hour| tag == "FI-4" && hour == 3);
    let mut lines: Vec<String> = csv.lines().skip(1).map(str::to_string).collect();
    let at = |lines: &[String], tag: &str, hour: usize, nth: usize| -> usize {
        let prefix = format!("{tag},2026-06-01T{hour:02}:");
        lines
            .iter()
            .enumerate()
            .filter(|(_, l)| l.starts_with(&prefix))
            .nth(nth)
            .unwrap_or_else(|| panic!("reading {nth} of {tag} in hour {hour}"))
            .0
    };
    let set = |line: &str, value: Option<&str>, quality: &str| -> String {
        let f: Vec<&str> = line.split(',').collect();
        format!("{},{},{},{quality}", f[0], f[1], value.unwrap_or(f[2]))
    };
    // Hour 1: an uncertain purge flow reading and a bad argon analysis (neither out of the
    // ordinary in value, but the bad one is far off and must not count).
    let i = at(&lines, "FI-4", 1, 1);
    lines[i] = set(&lines[i], None, "uncertain");
    let i = at(&lines, "AI-1", 1, 0);
    lines[i] = set(&lines[i], Some("9.5"), "bad");
    // Hour 2: a product flow reading beyond its range [0, 20000] kg/h, good quality: used, and
    // it makes the meter unsteady; a bad loop flow reading far out.
    let i = at(&lines, "FI-3", 2, 1);
    lines[i] = set(&lines[i], Some("25000"), "good");
    let i = at(&lines, "FI-2", 2, 0);
    lines[i] = set(&lines[i], Some("1000000"), "bad");
    // Hour 4: every reading bad, so no data.
    for line in lines.iter_mut() {
        if line.contains(",2026-06-01T04:") {
            *line = set(line, None, "bad");
        }
    }
    // Hour 1's last product flow reading, corrected.
    let i = at(&lines, "FI-3", 1, 2);
    let f: Vec<&str> = lines[i].split(',').collect();
    let value: f64 = f[2].parse().expect("a number");
    let correction = format!("{},{},{},good", f[0], f[1], value + 150.0);
    (model, lines, correction)
}

const HEADER: &str = "tag,time,value,quality\n";

fn cli_reports(
    dir: &std::path::Path,
    model: &str,
    lines: &[String],
    correction: &str,
) -> Vec<Value> {
    let model_path = dir.join("purge-design.toml");
    std::fs::write(&model_path, model).expect("write the model");
    let readings_path = dir.join("readings.csv");
    let text = format!("{HEADER}{}\n{correction}\n", lines.join("\n"));
    std::fs::write(&readings_path, text).expect("write the readings");
    let out = Command::new(BIN)
        .arg("reconcile")
        .arg("--model")
        .arg(&model_path)
        .arg("--readings")
        .arg(&readings_path)
        .output()
        .expect("run loopbal reconcile");
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(
        stderr.contains("replaces"),
        "the correction is noted: {stderr}"
    );
    serde_json::from_slice::<Vec<Value>>(&out.stdout).expect("a JSON array of reports")
}

async fn service_reports(
    dir: &std::path::Path,
    model: &str,
    lines: &[String],
    correction: &str,
) -> Vec<Value> {
    let db = dir.join("loopbal.sqlite");
    let admin = token(&db, "admin", None);
    let ingest = token(&db, "ingest", None);
    let read = token(&db, "read", None);
    let s = LOOPBAL.serve(&db, &["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let r = put_model(&c, &s, &admin, PLANT, model, "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let post = |body: String| {
        c.post(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
            .bearer_auth(&ingest)
            .header("content-type", "text/csv")
            .body(body)
            .send()
    };
    let answer = json_ok(
        post(format!("{HEADER}{}\n", lines.join("\n")))
            .await
            .unwrap(),
    )
    .await;
    assert_eq!(answer["rejected"], 0, "{answer}");
    // Two bad readings in hours 1 and 2, and the 27 of hour 4 (nine meters, three each).
    assert_eq!(answer["bad_quality"].as_u64(), Some(2 + 27), "{answer}");
    assert_eq!(answer["out_of_range"], 1, "{answer}");
    // A batch may not say one reading twice: the correction is a later batch, as a
    // historian sends it.
    let answer = json_ok(post(format!("{HEADER}{correction}\n")).await.unwrap()).await;
    assert_eq!(answer["replaced"], 1, "{answer}");

    // Every hour run, none due again (the corrected hour may have run twice).
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let r = c
            .get(s.url(&format!("/api/v1/plants/{PLANT}/periods")))
            .query(&[("from", FROM), ("to", TO)])
            .bearer_auth(&read)
            .send()
            .await
            .unwrap();
        let list = json_ok(r).await;
        let periods = list["periods"].as_array().expect("periods").clone();
        assert_eq!(periods.len(), HOURS);
        if periods
            .iter()
            .all(|p| p["runs"].as_i64() > Some(0) && p["rerun_due"] == false)
        {
            break;
        }
        assert!(
            Instant::now() < deadline,
            "periods never settled: {periods:?}"
        );
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
    let mut reports = Vec::new();
    for hour in 0..HOURS {
        let r = c
            .get(s.url(&format!(
                "/api/v1/plants/{PLANT}/periods/2026-06-01T{hour:02}:00:00Z"
            )))
            .bearer_auth(&read)
            .send()
            .await
            .unwrap();
        let run = json_ok(r).await;
        conforms(
            &c,
            &s,
            "get",
            "/api/v1/plants/{plant}/periods/{start}",
            &run,
        )
        .await;
        reports.push(run["report"].clone());
    }
    reports
}

fn warnings(report: &Value) -> Vec<&str> {
    report["warnings"]
        .as_array()
        .expect("warnings")
        .iter()
        .filter_map(Value::as_str)
        .collect()
}

fn meter<'a>(report: &'a Value, tag: &str) -> &'a Value {
    report["meters"]
        .as_array()
        .expect("meters")
        .iter()
        .find(|m| m["tag"] == tag)
        .unwrap_or_else(|| panic!("{tag} in the report"))
}

#[tokio::test]
async fn the_cli_and_the_service_give_equal_reports_on_the_same_readings() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (model, lines, correction) = readings();
    let cli = cli_reports(dir.path(), &model, &lines, &correction);
    let service = service_reports(dir.path(), &model, &lines, &correction).await;

    assert_eq!(cli.len(), HOURS, "one report per hour with readings");
    // The cases are in the reports as intended, so equality below is not vacuous.
    let [h0, h1, h2, h3, h4] = [0, 1, 2, 3, 4].map(|h| &cli[h]);
    assert_eq!(h0["status"], "solved", "{h0}");
    assert!(meter(h1, "FI-4")["used_uncertain"] == true, "{h1}");
    assert_eq!(
        meter(h1, "AI-1")["readings"],
        2,
        "the bad reading is not used"
    );
    // The product flow of hour 1 is the mean of its readings with the corrected one, summed
    // in time order.
    let mut fi3: Vec<(String, f64)> = lines
        .iter()
        .chain([&correction])
        .filter(|l| l.starts_with("FI-3,2026-06-01T01:"))
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            (f[1].to_string(), f[2].parse::<f64>().expect("a number"))
        })
        .collect();
    fi3.sort_by(|a, b| a.0.cmp(&b.0));
    fi3.dedup_by(|later, earlier| {
        let same = later.0 == earlier.0;
        if same {
            earlier.1 = later.1;
        }
        same
    });
    let mean = fi3.iter().map(|(_, v)| v).sum::<f64>() / fi3.len() as f64;
    assert_eq!(meter(h1, "FI-3")["measured"].as_f64(), Some(mean), "{h1}");
    assert_eq!(
        meter(h1, "FI-3")["readings"],
        3,
        "the correction replaces, it does not add"
    );
    assert!(
        warnings(h2)
            .iter()
            .any(|w| w.starts_with("unsteady: meter \"FI-3\"")),
        "the steadiness screen runs on files too: {:?}",
        warnings(h2)
    );
    assert_eq!(
        meter(h2, "FI-2")["readings"],
        2,
        "the bad reading is not used"
    );
    assert!(meter(h3, "FI-4")["measured"].is_null(), "{h3}");
    assert_eq!(h4["status"], "no_data", "{h4}");

    // Nothing of a report is particular to the run that made it (no run time, no run id: those
    // are beside the report in the service's answer), so the reports are compared whole.
    for (hour, (c, s)) in cli.iter().zip(&service).enumerate() {
        assert_eq!(c, s, "hour {hour}: the CLI's report, then the service's");
    }
}

/// `loopbal COMMAND` (`what-if`, `meter-value`) on the model and readings written as files,
/// its JSON answer.
fn cli_json(dir: &std::path::Path, command: &str, model: &str, csv: &str, args: &[&str]) -> Value {
    let model_path = dir.join("purge-design.toml");
    std::fs::write(&model_path, model).expect("write the model");
    let readings_path = dir.join(format!("{command}-readings.csv"));
    std::fs::write(&readings_path, csv).expect("write the readings");
    let out = Command::new(BIN)
        .arg(command)
        .arg("--model")
        .arg(&model_path)
        .arg("--readings")
        .arg(&readings_path)
        .args(args)
        .output()
        .unwrap_or_else(|e| panic!("run loopbal {command}: {e}"));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    serde_json::from_slice(&out.stdout).expect("a JSON answer")
}

/// Three hours of the purge-design loop's readings, as a model and CSV, stored in a running
/// service: the service, a client and a read token.
async fn purge_design_served(
    dir: &std::path::Path,
) -> (
    String,
    String,
    testkit::e2e::Server,
    reqwest::Client,
    String,
) {
    let (model, csv) = purge_design_csv(3, &|_, _| false);
    let db = dir.join("loopbal.sqlite");
    let admin = token(&db, "admin", None);
    let ingest = token(&db, "ingest", None);
    let read = token(&db, "read", None);
    let s = LOOPBAL.serve(&db, &["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let r = put_model(&c, &s, &admin, PLANT, &model, "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let r = c
        .post(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .bearer_auth(&ingest)
        .header("content-type", "text/csv")
        .body(csv.clone())
        .send()
        .await
        .unwrap();
    assert_eq!(json_ok(r).await["rejected"], 0);
    (model, csv, s, c, read)
}

#[tokio::test]
async fn the_cli_and_the_service_give_equal_what_ifs_on_the_same_readings() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (model, csv, s, c, read) = purge_design_served(dir.path()).await;
    let what_if = |body: Value| {
        c.post(s.url(&format!("/api/v1/plants/{PLANT}/what-if")))
            .bearer_auth(&read)
            .json(&body)
            .send()
    };

    // One period, a sweep of the purge split and an optimum at given values.
    let service = json_ok(
        what_if(serde_json::json!({
            "period": "2026-06-01T01:00:00Z",
            "sweep": {"name": "split:purge", "from": 0.05, "to": 0.2, "points": 4},
            "economics": {"product_price": {"NH3": 10.0}, "loss_value": {"H2": 2.0, "N2": 1.0},
                          "recycle_cost": 0.05},
        }))
        .await
        .unwrap(),
    )
    .await;
    let cli = cli_json(
        dir.path(),
        "what-if",
        &model,
        &csv,
        &[
            "--period",
            "2026-06-01T01:00:00Z",
            "--sweep",
            "split:purge=0.05..0.2:4",
            "--price",
            "NH3=10",
            "--loss-value",
            "H2=2",
            "--loss-value",
            "N2=1",
            "--recycle-cost",
            "0.05",
        ],
    );
    // Not vacuous: four solved points with σ, an optimum, the base period named.
    assert_eq!(service["base"]["period_start"], "2026-06-01T01:00:00Z");
    let points = service["points"].as_array().expect("points");
    assert_eq!(points.len(), 4);
    assert!(points.iter().all(|p| p["status"] == "solved"), "{service}");
    assert!(points[0]["figures"]
        .as_array()
        .unwrap()
        .iter()
        .any(|f| f["sigma"].as_f64().is_some_and(|s| s > 0.0)));
    assert!(service["optimum"].is_object(), "{service}");
    assert_eq!(cli, service, "the CLI's what-if, then the service's");
    // The answer is the one the OpenAPI document describes, and that description is typed.
    let schema = conforms(&c, &s, "post", "/api/v1/plants/{plant}/what-if", &service).await;
    let mut bad = service.clone();
    bad["points"][0]["status"] = "melted".into();
    assert!(
        !schema.is_valid(&bad),
        "a point's status is one of its words"
    );
    bad["points"][0] = serde_json::json!({"settings": {}});
    assert!(
        !schema.is_valid(&bad),
        "a point has its figures and streams"
    );

    // A range of periods as the base case, combined: the same on both.
    let service = json_ok(
        what_if(serde_json::json!({
            "period": "2026-06-01T00:00:00Z", "period_to": "2026-06-01T03:00:00Z",
            "set": {"split:purge": 0.08},
        }))
        .await
        .unwrap(),
    )
    .await;
    let cli = cli_json(
        dir.path(),
        "what-if",
        &model,
        &csv,
        &[
            "--period-from",
            "2026-06-01T00:00:00Z",
            "--period-to",
            "2026-06-01T03:00:00Z",
            "--set",
            "split:purge=0.08",
        ],
    );
    assert_eq!(service["base"]["periods"], 3, "{service}");
    assert_eq!(cli, service, "the CLI's range what-if, then the service's");

    // Bad input is named and refused; a period without readings is not found.
    for (body, status, names) in [
        (
            serde_json::json!({"period": "2026-06-01T01:00:00Z", "set": {"split:nowhere": 0.1}}),
            400,
            "nowhere",
        ),
        (
            serde_json::json!({"period": "2026-06-01T01:00:00Z", "set": {"split:purge": 1.5}}),
            400,
            "split:purge",
        ),
        (
            serde_json::json!({"period": "2026-06-01T01:00:00Z",
                               "sweep": {"name": "split:purge", "from": 0.1, "to": 0.2, "points": 100000}}),
            400,
            "points",
        ),
        (serde_json::json!({"period": "yesterday"}), 400, "period"),
        (
            serde_json::json!({"period": "2026-06-01T01:00:00Z", "hold": "pressure"}),
            400,
            "pressure",
        ),
        (
            serde_json::json!({"period": "2026-06-01T01:00:00Z", "colour": "red"}),
            400,
            "colour",
        ),
        (
            serde_json::json!({"period": "2026-07-01T01:00:00Z"}),
            404,
            "no readings",
        ),
    ] {
        let r = what_if(body.clone()).await.unwrap();
        assert_eq!(r.status().as_u16(), status, "{body}");
        let problem: Value = r.json().await.expect("a problem");
        assert!(
            problem["detail"].as_str().unwrap().contains(names),
            "{body}: {problem}"
        );
    }
}

#[tokio::test]
async fn the_cli_and_the_service_give_equal_meter_values_on_the_same_readings() {
    let dir = tempfile::tempdir().expect("temp dir");
    let (model, csv, s, c, read) = purge_design_served(dir.path()).await;
    let value = |query: &str| {
        c.get(s.url(&format!("/api/v1/plants/{PLANT}/meter-value?{query}")))
            .bearer_auth(&read)
            .send()
    };

    // One period, two weighted figures, the best two additions.
    let service = json_ok(
        value(
            "period=2026-06-01T01:00:00Z&figure=purge_fraction:purge,molar_flow:recycle=0.5\
             &add_best=2&analyser_sigma=0.1",
        )
        .await
        .unwrap(),
    )
    .await;
    let cli = cli_json(
        dir.path(),
        "meter-value",
        &model,
        &csv,
        &[
            "--period",
            "2026-06-01T01:00:00Z",
            "--figure",
            "purge_fraction:purge",
            "--figure",
            "molar_flow:recycle=0.5",
            "--add-best",
            "2",
            "--analyser-sigma",
            "0.1",
        ],
    );
    // Not vacuous: meters and candidates valued, the best two named.
    assert_eq!(service["period"], "2026-06-01T01:00:00Z");
    assert!(
        service["figure"]["sigma"].as_f64().unwrap() > 0.0,
        "{service}"
    );
    assert!(service["meters"].as_array().unwrap().len() >= 8);
    assert!(!service["candidates"].as_array().unwrap().is_empty());
    assert_eq!(service["best"]["additions"].as_array().unwrap().len(), 2);
    assert_eq!(cli, service, "the CLI's meter value, then the service's");
    let path = "/api/v1/plants/{plant}/meter-value";
    let schema = conforms(&c, &s, "get", path, &service).await;
    let mut bad = service.clone();
    bad["meters"][0]["sigma"] = "small".into();
    assert!(!schema.is_valid(&bad), "a meter's σ is a number");

    // A range: each period valued, the firsts counted.
    let range = json_ok(
        value("from=2026-06-01T00:00:00Z&to=2026-06-01T03:00:00Z&figure=purge_fraction:purge")
            .await
            .unwrap(),
    )
    .await;
    let periods = range["periods"].as_array().expect("periods");
    assert_eq!(periods.len(), 3, "{range}");
    let firsts: u64 = range["best_repair"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["periods"].as_u64().unwrap())
        .sum();
    assert_eq!(firsts, 3);
    conforms(&c, &s, "get", path, &range).await;
    let one = json_ok(
        value("period=2026-06-01T01:00:00Z&figure=purge_fraction:purge")
            .await
            .unwrap(),
    )
    .await;
    assert_eq!(
        periods[1], one,
        "a range's period is that period's own answer"
    );

    // Bad input is named and refused; a period without readings is not found.
    for (query, status, names) in [
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fractoin:purge",
            400,
            "purge_fractoin",
        ),
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fraction:nowhere",
            400,
            "nowhere",
        ),
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fraction",
            400,
            "NAME:SUBJECT",
        ),
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fraction:purge&flow_sigma_pct=0",
            400,
            "flow meter accuracy",
        ),
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fraction:purge&flow_sigma_pct=x",
            400,
            "flow_sigma_pct",
        ),
        (
            "period=2026-06-01T01:00:00Z&figure=purge_fraction:purge&add_best=9999",
            422,
            "9999",
        ),
        (
            "period=yesterday&figure=purge_fraction:purge",
            400,
            "period",
        ),
        ("figure=purge_fraction:purge", 400, "period"),
        ("period=2026-06-01T01:00:00Z", 400, "figure"),
        (
            "period=2026-07-01T01:00:00Z&figure=purge_fraction:purge",
            404,
            "no readings",
        ),
    ] {
        let r = value(query).await.unwrap();
        assert_eq!(r.status().as_u16(), status, "{query}");
        let problem: Value = r.json().await.expect("a problem");
        assert!(
            problem["detail"].as_str().unwrap().contains(names),
            "{query}: {problem}"
        );
    }
}
