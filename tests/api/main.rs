//! End-to-end tests of the HTTP service (docs/api.md): the real `loopbal serve` on
//! a free loopback port with a temporary SQLite file, driven over HTTP as the historian, the
//! engineer and the administrator would. This file holds the service and the helpers every
//! module uses; the tests are by concern: `readings`, `models`, `access`, `lifecycle`,
//! `limits`, `problems`, `periods`, `notes`, `bounds`, `openapi`.

/// The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.
mod support {
    testkit::e2e_support!();
}

mod access;
mod bounds;
mod lifecycle;
mod limits;
mod models;
mod notes;
mod openapi;
mod periods;
mod problems;
mod readings;
mod workspace;

use std::collections::BTreeSet;
use std::time::Duration;

use reqwest::{Client, StatusCode};
use serde_json::{json, Value};
use support::{
    client, conforms, content_type, json_ok, metrics, ombrask_model, post_readings, problem,
    purge_design_csv, put_model, token, wait_for_periods, Server, OMBRASK_TAGS,
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

/// A batch POSTed to `PLANT` by `tok`: the answer of a 200 (asserted).
async fn post_ok(c: &Client, s: &Server, tok: &str, body: &str, ctype: &str) -> Value {
    json_ok(post_readings(c, s, tok, PLANT, body, ctype).await).await
}

/// `GET /api/v1/plants/{PLANT}{path}` by `tok`: the answer of a 200 (asserted).
async fn get_ok(c: &Client, s: &Server, tok: &str, path: &str) -> Value {
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}{path}")))
        .bearer_auth(tok)
        .send()
        .await
        .unwrap();
    json_ok(r).await
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
