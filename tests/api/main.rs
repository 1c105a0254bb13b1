//! End-to-end tests of the HTTP service (docs/api.md): the real `loopbal serve` on
//! a free loopback port with a temporary SQLite file, driven over HTTP as the historian, the
//! engineer and the administrator would.

/// The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.
mod support {
    testkit::e2e_support!();
}

use std::collections::BTreeSet;
use std::time::Duration;

use reqwest::{Client, StatusCode};
use serde_json::{json, Value};
use support::{
    client, json_ok, metrics, ombrask_model, post_readings, problem, purge_design_csv, put_model,
    token, wait_for_periods, Server, OMBRASK_TAGS,
};

const PLANT: &str = "ombrask-ob2";

struct Tokens {
    admin: String,
    ingest: String,
    read: String,
    maintain: String,
}

/// A fresh service on a temporary database, with one token of each role.
fn fresh(extra: &[&str]) -> (tempfile::TempDir, Server, Tokens) {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = dir.path().join("loopbal.sqlite");
    let tokens = Tokens {
        admin: token(&db, "admin", None),
        ingest: token(&db, "ingest", None),
        read: token(&db, "read", None),
        maintain: token(&db, "maintain", None),
    };
    let server = support::LOOPBAL.serve(&db, extra);
    (dir, server, tokens)
}

/// The Ombrask model PUT as `PLANT` with `tok`: created (asserted); the answer.
async fn create_ombrask(c: &Client, s: &Server, tok: &str) -> Value {
    let r = put_model(c, s, tok, PLANT, &ombrask_model(), "application/toml").await;
    assert_eq!(r.status(), StatusCode::CREATED);
    r.json().await.expect("JSON")
}

/// Hourly readings of every ombrask tag for one UTC day, the value scaled by `scale`.
fn day_rows(day: &str, scale: f64) -> Vec<(String, String, f64)> {
    let mut rows = Vec::new();
    for hour in 0..24 {
        for (tag, value) in OMBRASK_TAGS {
            rows.push((
                tag.to_string(),
                format!("{day}T{hour:02}:00:00Z"),
                value * scale * (1.0 + 0.001 * hour as f64),
            ));
        }
    }
    rows
}

fn csv(rows: &[(String, String, f64)]) -> String {
    let mut text = String::from("tag,time,value,quality\n");
    for (tag, time, value) in rows {
        text.push_str(&format!("{tag},{time},{value},good\n"));
    }
    text
}

fn json_batch(rows: &[(String, String, f64)]) -> String {
    let readings: Vec<Value> = rows
        .iter()
        .map(|(tag, time, value)| json!({"tag": tag, "time": time, "value": value, "quality": "good"}))
        .collect();
    json!({ "readings": readings }).to_string()
}

async fn readings(c: &Client, s: &Server, tok: &str, from: &str, to: &str) -> Vec<Value> {
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .query(&[("from", from), ("to", to)])
        .bearer_auth(tok)
        .send()
        .await
        .expect("GET readings");
    json_ok(r).await["readings"]
        .as_array()
        .expect("readings array")
        .clone()
}

fn counts(answer: &Value) -> [u64; 4] {
    ["accepted", "replaced", "unchanged", "rejected"].map(|k| answer[k].as_u64().expect(k))
}

#[tokio::test]
async fn a_historians_life() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let created = create_ombrask(&c, &s, &t.admin).await;
    assert_eq!(created["revision"], 1);
    assert_eq!(created["meters"], 11);

    // A day as CSV, the next as JSON: every reading new.
    let day1 = day_rows("2026-03-02", 1.0);
    let answer =
        json_ok(post_readings(&c, &s, &t.ingest, PLANT, &csv(&day1), "text/csv").await).await;
    assert_eq!(counts(&answer), [264, 0, 0, 0], "{answer}");
    let day2 = day_rows("2026-03-03", 1.01);
    let answer = json_ok(
        post_readings(
            &c,
            &s,
            &t.ingest,
            PLANT,
            &json_batch(&day2),
            "application/json",
        )
        .await,
    )
    .await;
    assert_eq!(counts(&answer), [264, 0, 0, 0], "{answer}");

    // The same batch again changes nothing.
    let answer = json_ok(
        post_readings(
            &c,
            &s,
            &t.ingest,
            PLANT,
            &csv(&day1),
            "text/csv; charset=utf-8",
        )
        .await,
    )
    .await;
    assert_eq!(counts(&answer), [0, 0, 264, 0], "{answer}");

    // A correction replaces one value; the rest of the day is untouched.
    let correction = "tag,time,value\nOB2-FI-101,2026-03-02T05:00:00+00:00,20999.5\n";
    let answer =
        json_ok(post_readings(&c, &s, &t.ingest, PLANT, correction, "text/csv").await).await;
    assert_eq!(counts(&answer), [0, 1, 0, 0], "{answer}");
    let stored = readings(
        &c,
        &s,
        &t.read,
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
    )
    .await;
    assert_eq!(stored.len(), 264);
    let corrected: Vec<&Value> = stored
        .iter()
        .filter(|r| r["tag"] == "OB2-FI-101" && r["time"] == "2026-03-02T05:00:00Z")
        .collect();
    assert_eq!(corrected.len(), 1);
    assert_eq!(corrected[0]["value"], 20999.5);

    // A batch with bad lines mixed in: the good ones are stored, each bad one is named.
    let mixed = "\
tag,time,value,quality
OB2-FI-101,2026-03-04T00:00:00Z,20400,good
OB2-XX-999,2026-03-04T00:00:00Z,1.0,good
OB2-FI-201,2026-03-04 noon,5400,good
OB2-FI-201,2026-03-04T01:00:00Z,NaN,good
OB2-FI-301,2026-03-04T00:00:00Z,,good
OB2-AI-102,2026-03-04T00:00:00Z,0.3,excellent
OB2-FI-101,2026-03-04T00:00:00Z,20400,good
OB2-FI-201,2026-03-04T00:00:00Z,5400,good
OB2-FI-401,2026-03-04T00:00:00Z,500,good
OB2-FI-501,2026-03-04T00:00:00Z,4300,bad
";
    let answer = json_ok(post_readings(&c, &s, &t.ingest, PLANT, mixed, "text/csv").await).await;
    assert_eq!(counts(&answer), [4, 0, 0, 6], "{answer}");
    assert_eq!(
        answer["out_of_range"], 1,
        "OB2-FI-401 has range 0-200 kmol/h"
    );
    assert_eq!(answer["bad_quality"], 1);
    let expected = [
        (3, "unknown tag \"OB2-XX-999\""),
        (4, "time \"2026-03-04 noon\" is not RFC 3339"),
        (5, "not a finite number"),
        (6, "value is empty"),
        (
            7,
            "quality \"excellent\" is not one of good, uncertain, bad",
        ),
        (8, "repeats the tag and time of line 2"),
    ];
    let rejections = answer["rejections"].as_array().expect("rejections");
    assert_eq!(rejections.len(), expected.len(), "{answer}");
    for ((line, reason), r) in expected.iter().zip(rejections) {
        assert_eq!(r["line"], *line, "{r}");
        let reasons: Vec<&str> = r["reasons"]
            .as_array()
            .expect("reasons")
            .iter()
            .map(|x| x.as_str().expect("text"))
            .collect();
        let reasons = reasons.join("; ");
        assert!(
            reasons.contains(reason),
            "line {line}: {reasons} lacks {reason}"
        );
    }
    let day3 = readings(
        &c,
        &s,
        &t.read,
        "2026-03-04T00:00:00Z",
        "2026-03-05T00:00:00Z",
    )
    .await;
    let tags: BTreeSet<&str> = day3.iter().map(|r| r["tag"].as_str().unwrap()).collect();
    assert_eq!(
        tags,
        BTreeSet::from(["OB2-FI-101", "OB2-FI-201", "OB2-FI-401", "OB2-FI-501"])
    );
    for r in &day3 {
        let flagged = r["tag"] == "OB2-FI-401";
        assert_eq!(r["out_of_range"], flagged, "{r}");
        let bad = r["tag"] == "OB2-FI-501";
        assert_eq!(r["quality"], if bad { "bad" } else { "good" }, "{r}");
    }

    // JSON bad items are named by their index.
    let body = json!({"readings": [
        {"tag": "OB2-FI-101", "time": "2026-03-05T00:00:00Z", "value": 20400.0},
        {"tag": "OB2-FI-101", "time": "2026-03-05T01:00:00Z", "value": "lots"},
        {"tag": "OB2-FI-101", "time": "2026-03-05T02:00:00Z"},
        "not an object",
    ]})
    .to_string();
    let answer =
        json_ok(post_readings(&c, &s, &t.ingest, PLANT, &body, "application/json").await).await;
    assert_eq!(counts(&answer), [1, 0, 0, 3], "{answer}");
    let indices: Vec<u64> = answer["rejections"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["index"].as_u64().expect("index"))
        .collect();
    assert_eq!(indices, [1, 2, 3]);

    // The counters follow: 264 + 264 + 4 + 1 new, 1 replaced, 264 unchanged, 9 rejected.
    let metrics = metrics(&c, &s).await;
    for line in [
        "loopbal_readings_accepted_total 533",
        "loopbal_readings_replaced_total 1",
        "loopbal_readings_unchanged_total 264",
        "loopbal_readings_rejected_total 9",
    ] {
        assert!(
            metrics.lines().any(|l| l == line),
            "missing {line} in\n{metrics}"
        );
    }
}

/// A model with three independent problems: a meter on a stream that does not exist, a
/// negative sigma, and a splitter with a single outlet.
const BROKEN_MODEL: &str = r#"
name = "ombrask-ob2"
[[component]]
id = "N2"
molar_mass = 28.0134
[[unit]]
id = "tee"
kind = "splitter"
[[stream]]
id = "in"
from = "outside"
to = "tee"
[[stream]]
id = "out"
from = "tee"
to = "outside"
[[meter]]
tag = "T-1"
stream = "nowhere"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "T-2"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = -2.0
"#;

#[tokio::test]
async fn an_invalid_model_is_refused_with_every_problem_and_nothing_is_stored() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let r = put_model(&c, &s, &t.admin, PLANT, BROKEN_MODEL, "application/toml").await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    let errors = body["errors"].as_array().expect("errors listed");
    let items: Vec<String> = errors
        .iter()
        .map(|e| {
            format!(
                "{}: {}",
                e["item"].as_str().unwrap(),
                e["message"].as_str().unwrap()
            )
        })
        .collect();
    for needle in ["nowhere", "T-2", "tee"] {
        assert!(
            items.iter().any(|i| i.contains(needle)),
            "no problem names {needle}: {items:?}"
        );
    }
    assert!(errors.len() >= 3, "{items:?}");

    // Not TOML at all: the syntax error is reported with its position.
    let r = put_model(
        &c,
        &s,
        &t.admin,
        PLANT,
        "name = \n[[unit",
        "application/toml",
    )
    .await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert!(body["detail"].as_str().unwrap().contains("TOML"), "{body}");

    // The same model as JSON is read as JSON.
    let r = put_model(&c, &s, &t.admin, PLANT, "{\"name\": 3}", "application/json").await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert!(body["detail"].as_str().unwrap().contains("JSON"), "{body}");

    // Neither TOML nor JSON by its media type.
    let r = put_model(&c, &s, &t.admin, PLANT, &ombrask_model(), "text/html").await;
    problem(r, StatusCode::UNSUPPORTED_MEDIA_TYPE).await;

    // A model sent to a plant of another name.
    let r = put_model(
        &c,
        &s,
        &t.admin,
        "ombrask-ob3",
        &ombrask_model(),
        "application/toml",
    )
    .await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert_eq!(body["errors"][0]["item"], "name");

    // None of it created the plant or a revision.
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/model/revisions")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
}

#[tokio::test]
async fn a_new_revision_leaves_stored_readings_alone() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let put_from = |body: String, from: &'static str| {
        c.put(s.url(&format!("/api/v1/plants/{PLANT}/model")))
            .query(&[("effective_from", from)])
            .bearer_auth(&t.admin)
            .header("content-type", "application/toml")
            .body(body)
            .send()
    };
    let r = put_from(ombrask_model(), "2026-03-01T00:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let day = day_rows("2026-03-02", 1.0);
    json_ok(post_readings(&c, &s, &t.ingest, PLANT, &csv(&day), "text/csv").await).await;
    let (from, to) = ("2026-03-02T00:00:00Z", "2026-03-03T00:00:00Z");
    let before = readings(&c, &s, &t.read, from, to).await;

    // Revision 2 narrows the purge meter's range below every stored value and changes a sigma.
    let revised = ombrask_model()
        .replace("range = [0.0, 200.0]", "range = [0.0, 10.0]")
        .replace("sigma = 40.0", "sigma = 35.0");
    assert_ne!(revised, ombrask_model());
    let r = put_from(revised.clone(), "2026-03-02T12:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let after = readings(&c, &s, &t.read, from, to).await;
    assert_eq!(
        before, after,
        "stored readings are not re-judged by a new revision"
    );

    // Revision 3 takes effect in the future: revision 2 stays the one in effect.
    let r = put_from(ombrask_model(), "2099-01-01T00:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let current = json_ok(
        c.get(s.url(&format!("/api/v1/plants/{PLANT}/model")))
            .bearer_auth(&t.read)
            .send()
            .await
            .unwrap(),
    )
    .await;
    assert_eq!(current["revision"], 2);
    assert_eq!(current["source"], revised.as_str());
    assert_eq!(current["model"]["name"], PLANT);
    let list = json_ok(
        c.get(s.url(&format!("/api/v1/plants/{PLANT}/model/revisions")))
            .bearer_auth(&t.read)
            .send()
            .await
            .unwrap(),
    )
    .await;
    let numbers: Vec<i64> = list
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["revision"].as_i64().unwrap())
        .collect();
    assert_eq!(numbers, [1, 2, 3]);
    assert_eq!(list[2]["effective_from"], "2099-01-01T00:00:00Z");

    // A new reading is judged by the range of the revision in effect at its time: revision 2
    // from noon of the 2nd, revision 1 before it.
    let late =
        "tag,time,value\nOB2-FI-401,2026-03-03T00:00:00Z,48\nOB2-FI-401,2026-03-01T00:00:00Z,48\n";
    let answer = json_ok(post_readings(&c, &s, &t.ingest, PLANT, late, "text/csv").await).await;
    assert_eq!(answer["out_of_range"], 1, "{answer}");
    let flags: Vec<(String, bool)> = readings(
        &c,
        &s,
        &t.read,
        "2026-03-01T00:00:00Z",
        "2026-03-04T00:00:00Z",
    )
    .await
    .iter()
    .filter(|r| r["tag"] == "OB2-FI-401" && !r["time"].as_str().unwrap().starts_with("2026-03-02"))
    .map(|r| {
        (
            r["time"].as_str().unwrap().to_string(),
            r["out_of_range"].as_bool().unwrap(),
        )
    })
    .collect();
    assert_eq!(
        flags,
        [
            ("2026-03-01T00:00:00Z".to_string(), false),
            ("2026-03-03T00:00:00Z".to_string(), true)
        ]
    );
}

/// Every secured operation of the API with the role docs/api.md gives it.
const SECURED: [(&str, &str, &str); 13] = [
    ("put", "/api/v1/plants/{plant}/model", "admin"),
    ("get", "/api/v1/plants/{plant}/model", "read"),
    ("get", "/api/v1/plants/{plant}/model/revisions", "read"),
    ("post", "/api/v1/plants/{plant}/readings", "ingest"),
    ("get", "/api/v1/plants/{plant}/readings", "read"),
    ("get", "/api/v1/plants/{plant}/periods", "read"),
    ("get", "/api/v1/plants/{plant}/periods/{start}", "read"),
    (
        "post",
        "/api/v1/plants/{plant}/periods/{start}/reconcile",
        "admin",
    ),
    ("get", "/api/v1/plants/{plant}/figures", "read"),
    ("get", "/api/v1/plants/{plant}/balances", "read"),
    ("get", "/api/v1/plants/{plant}/meters", "read"),
    ("get", "/api/v1/plants/{plant}/meters/{tag}", "read"),
    (
        "post",
        "/api/v1/plants/{plant}/meters/{tag}/notes",
        "maintain",
    ),
];
const OPEN: [(&str, &str); 3] = [
    ("get", "/healthz"),
    ("get", "/metrics"),
    ("get", "/api/v1/openapi.json"),
];

fn request(
    c: &Client,
    s: &Server,
    method: &str,
    path: &str,
    plant: &str,
) -> reqwest::RequestBuilder {
    let url = s.url(
        &path
            .replace("{plant}", plant)
            .replace("{start}", "2026-03-02T05:00:00Z")
            .replace("{tag}", "OB2-FI-101"),
    );
    match method {
        "get" => c.get(url),
        "put" => c.put(url),
        "post" => c.post(url),
        other => panic!("method {other}"),
    }
}

#[tokio::test]
async fn every_endpoint_needs_a_suitable_token_and_the_openapi_document_lists_every_route() {
    let (dir, s, t) = fresh(&[]);
    let c = client();
    let db = dir.path().join("loopbal.sqlite");
    let other_plant_admin = token(&db, "admin", Some("another-plant"));

    // The document parses as OpenAPI 3 and lists exactly the routes served.
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    assert!(
        doc["openapi"].as_str().unwrap().starts_with("3."),
        "{}",
        doc["openapi"]
    );
    let mut documented = BTreeSet::new();
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for method in ["get", "put", "post", "delete", "patch"] {
            if let Some(op) = item.get(method) {
                let secured = op.get("security").is_some();
                documented.insert((method.to_string(), path.clone(), secured));
            }
        }
    }
    let expected: BTreeSet<(String, String, bool)> = SECURED
        .iter()
        .map(|(m, p, _)| (m.to_string(), p.to_string(), true))
        .chain(
            OPEN.iter()
                .map(|(m, p)| (m.to_string(), p.to_string(), false)),
        )
        .collect();
    assert_eq!(documented, expected);

    for (method, path) in OPEN {
        let r = request(&c, &s, method, path, PLANT).send().await.unwrap();
        assert_eq!(
            r.status(),
            StatusCode::OK,
            "{method} {path} without a token"
        );
    }
    let roles = [
        ("admin", &t.admin),
        ("ingest", &t.ingest),
        ("read", &t.read),
        ("maintain", &t.maintain),
    ];
    for (method, path, role) in SECURED {
        // No token, a malformed header and an unknown token: 401 with a challenge. A route the
        // router did not serve would answer the fallback's 404 instead.
        for auth in [None, Some("Basic dXNlcjpwYXNz"), Some("Bearer lb_0000")] {
            let mut req = request(&c, &s, method, path, PLANT);
            if let Some(a) = auth {
                req = req.header("authorization", a);
            }
            let r = req.send().await.unwrap();
            assert!(
                r.headers().contains_key("www-authenticate"),
                "{method} {path}"
            );
            problem(r, StatusCode::UNAUTHORIZED).await;
        }
        // Every role but the one needed (and admin): 403.
        for (name, tok) in roles {
            if name == role || name == "admin" {
                continue;
            }
            let r = request(&c, &s, method, path, PLANT)
                .bearer_auth(tok)
                .send()
                .await
                .unwrap();
            let body = problem(r, StatusCode::FORBIDDEN).await;
            assert!(body["detail"].as_str().unwrap().contains(role), "{body}");
        }
        // An admin token of another plant: 403 as well.
        let r = request(&c, &s, method, path, PLANT)
            .bearer_auth(&other_plant_admin)
            .send()
            .await
            .unwrap();
        problem(r, StatusCode::FORBIDDEN).await;
    }
}

#[tokio::test]
async fn acknowledged_data_survives_a_restart_and_shutdown_finishes_requests_in_flight() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    json_ok(
        post_readings(
            &c,
            &s,
            &t.ingest,
            PLANT,
            &csv(&day_rows("2026-03-02", 1.0)),
            "text/csv",
        )
        .await,
    )
    .await;
    let (from, to) = ("2026-03-01T00:00:00Z", "2026-04-01T00:00:00Z");
    let before = readings(&c, &s, &t.read, from, to).await;
    assert_eq!(before.len(), 264);

    let s = s.restart();
    assert_eq!(readings(&c, &s, &t.read, from, to).await, before);
    let model = json_ok(
        c.get(s.url(&format!("/api/v1/plants/{PLANT}/model")))
            .bearer_auth(&t.read)
            .send()
            .await
            .unwrap(),
    )
    .await;
    assert_eq!(model["revision"], 1);

    // A batch of 20 days is in flight when SIGTERM arrives: the server finishes it, answers,
    // and only then exits; after a restart the whole batch is there.
    let mut rows = Vec::new();
    for d in 3..23 {
        rows.extend(day_rows(&format!("2026-03-{d:02}"), 1.0));
    }
    let big = csv(&rows);
    let url = s.url(&format!("/api/v1/plants/{PLANT}/readings"));
    let ingest = t.ingest.clone();
    let c2 = c.clone();
    let in_flight = tokio::spawn(async move {
        c2.post(url)
            .bearer_auth(ingest)
            .header("content-type", "text/csv")
            .body(big)
            .send()
            .await
    });
    tokio::time::sleep(Duration::from_millis(30)).await;
    let database = s.database.clone();
    let stopped = tokio::task::spawn_blocking(move || s.stop()).await.unwrap();
    assert!(stopped, "exit status 0 after SIGTERM");
    let answer = json_ok(in_flight.await.unwrap().expect("the batch is answered")).await;
    assert_eq!(answer["accepted"], rows.len(), "{answer}");
    let s = support::LOOPBAL.serve(&database, &[]);
    assert_eq!(
        readings(&c, &s, &t.read, from, to).await.len(),
        264 + rows.len()
    );
}

#[tokio::test]
async fn bad_requests_get_problem_details_and_change_nothing() {
    let (_dir, s, t) = fresh(&["--max-body-bytes", "4096"]);
    let c = client();
    // Readings for a plant that does not exist yet.
    let r = post_readings(&c, &s, &t.ingest, PLANT, "tag,time,value\n", "text/csv").await;
    problem(r, StatusCode::NOT_FOUND).await;
    create_ombrask(&c, &s, &t.admin).await;

    let big = csv(&day_rows("2026-03-02", 1.0));
    assert!(big.len() > 4096);
    let r = post_readings(&c, &s, &t.ingest, PLANT, &big, "text/csv").await;
    let body = problem(r, StatusCode::PAYLOAD_TOO_LARGE).await;
    assert!(body["detail"].as_str().unwrap().contains("4096"), "{body}");

    for (body, ctype, status) in [
        (
            "tag,time,value\n",
            "application/xml",
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
        ),
        (
            "{\"readings\": [",
            "application/json",
            StatusCode::BAD_REQUEST,
        ),
        (
            "{\"rows\": []}",
            "application/json",
            StatusCode::BAD_REQUEST,
        ),
        ("", "text/csv", StatusCode::BAD_REQUEST),
    ] {
        let r = post_readings(&c, &s, &t.ingest, PLANT, body, ctype).await;
        problem(r, status).await;
    }
    let r = post_readings(
        &c,
        &s,
        &t.ingest,
        PLANT,
        "tag,time,value\n\u{0}\u{ff}",
        "text/csv",
    )
    .await;
    assert!(
        r.status().is_client_error() || r.status() == StatusCode::OK,
        "{}",
        r.status()
    );

    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .query(&[("from", "yesterday"), ("to", "2026-03-03T00:00:00Z")])
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = c.get(s.url("/api/v1/nothing")).send().await.unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
    let r = c
        .delete(s.url(&format!("/api/v1/plants/{PLANT}/model")))
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::METHOD_NOT_ALLOWED).await;
    let r = c
        .put(s.url("/api/v1/plants/..%2Fetc/model"))
        .bearer_auth(&t.admin)
        .header("content-type", "application/toml")
        .body(ombrask_model())
        .send()
        .await
        .unwrap();
    assert!(r.status().is_client_error(), "{}", r.status());

    // Nothing of the above was stored.
    let stored = readings(
        &c,
        &s,
        &t.read,
        "1970-01-01T00:00:00Z",
        "9999-01-01T00:00:00Z",
    )
    .await;
    assert!(stored.is_empty(), "{stored:?}");
    let health = c.get(s.url("/healthz")).send().await.unwrap();
    assert_eq!(health.status(), StatusCode::OK);
}

#[tokio::test]
async fn the_log_has_requests_but_no_token_and_no_reading_value() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("loopbal.sqlite");
    let admin = token(&db, "admin", None);
    // Debug is what an operator turns on to look closer; even then nothing secret shows.
    let s = support::LOOPBAL.serve_logging(&db, &[], "debug");
    let c = client();
    create_ombrask(&c, &s, &admin).await;
    let batch = "tag,time,value\nOB2-FI-101,2026-03-02T05:00:00Z,20417.123456\n";
    json_ok(post_readings(&c, &s, &admin, PLANT, batch, "text/csv").await).await;
    let r = post_readings(&c, &s, "lb_not_a_real_token_4242", PLANT, batch, "text/csv").await;
    assert_eq!(r.status(), StatusCode::UNAUTHORIZED);
    let s_log = s.stop_and_log();
    assert!(s_log.contains("/api/v1/plants/{plant}/readings"), "{s_log}");
    assert!(
        s_log.contains("ombrask-ob2"),
        "the plant is in the request span"
    );
    assert!(!s_log.contains(&admin[3..]), "a token is in the log");
    assert!(!s_log.contains("4242"), "a presented token is in the log");
    assert!(!s_log.contains("20417.12"), "a reading value is in the log");
}

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
