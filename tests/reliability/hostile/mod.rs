//! Hostile input: whatever reaches the service's front door — mutated model files, broken CSV
//! and JSON readings, deep nesting, invalid UTF-8, wrong and missing content types, bodies past
//! `--max-body-bytes` with and without Content-Length, odd HTTP framing, hostile paths and query
//! strings — is answered without a 5xx, without a panic, without a hang, and without changing
//! stored data. `loopbal check-model` gets mutated files too.
//!
//! One module per family: `models` (model files), `batches` (readings), `media` (media types,
//! nesting and oversize through the client), `framing` (oversize and malformed HTTP on a bare
//! connection), `paths` (paths and query strings), `notes` (technicians' notes); `draw` draws
//! the cases and keeps each family's budget, `mutate` edits bodies, `fixture` holds the service,
//! its plants, the snapshot and the checks every answer must pass.
//!
//! Cases are drawn with proptest from a fixed seed (printed; `LOOPBAL_HOSTILE_SEED=<u64>` draws
//! another set), a fixed number per family, and sent over HTTP to a real `loopbal serve` started
//! with `--max-body-bytes 262144` (oversize is cheap, yet JSON nested 100,000 deep still fits
//! and reaches the parser) and `--request-timeout 8`. A family stops early at its time budget
//! and says so; it must still have sent a minimum number of cases. A failure names the family,
//! the case number, the seed, the case as drawn and the start of the body, so it reproduces.
//!
//! Every answer, in every family:
//! - is not 5xx, comes within the client's timeout, and a 4xx from the service is
//!   `application/problem+json` with its own status, a detail and a `urn:` type (the empty 4xx
//!   that hyper gives to malformed HTTP, before any request exists, are checked for their
//!   status only);
//! - is the status docs/api.md and the OpenAPI document promise where they are specific: 413
//!   over the size limit (Content-Length or chunked), 415 for a media type that is neither of
//!   the endpoint's, 400 for a body without readable structure, 404 for an unknown plant, 408
//!   for a body that stalls, 422 for an invalid model.
//!
//! After every test `/healthz` answers, the server's log has no `panicked` and no ERROR line,
//! and the snapshot of the plant ombrask-ob2 is what it was.
//!
//! What may change data, and where it goes:
//! - ombrask-ob2 holds a model, three hours of readings, their period runs and a technician's
//!   note. Before the hostile cases everything readable about it is snapshotted (revisions,
//!   the current model, readings over the years 0000 to 9999, the period listing of 2026 and
//!   every report, the meter list and each meter's detail, figures, balances). Only requests
//!   that must be refused as a whole go to it (wrong content types, oversize, broken framing,
//!   deep nesting, hostile GETs), and model files:
//! - Mutated model files are PUT to ombrask-ob2 with `effective_from` in 2999, and the answer
//!   must be exactly what the engine's own parser and validator, run here on the same bytes,
//!   say: 201 if and only if the mutation is still a valid model of that name, else 422 (400
//!   not UTF-8, 413 over the limit, 415 a media type that is neither TOML nor JSON). A model
//!   holding U+0000 in any text counts as invalid: no store keeps it (PostgreSQL text cannot
//!   hold one). Accepted revisions are counted; afterwards the revision list must be the old
//!   one plus exactly that many, each effective in 2999, and nothing else may differ (a 2999
//!   revision is in effect for nothing the snapshot reads).
//! - Readings mutations may rightly store their good lines, so they go to a second plant,
//!   ombrask-ob3 (the same model renamed), read back after every case: a 400 or 413 changed
//!   nothing; a 200 added exactly `accepted` readings, changed exactly `replaced`, left every
//!   other stored reading as it was, and everything stored is a reading a valid batch could
//!   hold (a known tag, a finite number, a quality word, a time in the years 0000 to 9998). The
//!   scheduler then runs ombrask-ob3's periods, which must settle without an error.
//! - Technicians' notes, hostile `effective_from` on model PUTs and period re-runs also go to
//!   ombrask-ob3; a refused note leaves the meter's notes as they were, an accepted one adds
//!   exactly one.

use std::collections::BTreeMap;
use std::time::{Duration, Instant};

use proptest::prelude::*;
use proptest::sample::Index;
use proptest::strategy::ValueTree;
use proptest::test_runner::{Config, RngAlgorithm, TestRng, TestRunner};
use reconcile::{ModelSpec, Plant};
use reqwest::{Client, Method, RequestBuilder};
use serde_json::{json, Value};

use crate::support::{self, Backend, Server, OMBRASK_TAGS};

// One module per family of cases, and the machinery they share (draw, mutate, fixture).
mod batches;
mod draw;
mod fixture;
mod framing;
mod media;
mod models;
mod mutate;
mod notes;
mod paths;

use batches::*;
use draw::*;
use fixture::*;
use framing::*;
use media::*;
use models::*;
use mutate::*;
use notes::*;
use paths::*;

/// The plant whose data must not change.
const PLANT: &str = "ombrask-ob2";
/// The plant that takes requests a valid case may rightly store.
const SCRATCH: &str = "ombrask-ob3";
const MAX_BODY: usize = 256 * 1024;
const REQUEST_TIMEOUT_S: u64 = 8;
/// Hostile model revisions take effect here: after everything the snapshot reads.
const FUTURE: &str = "2999-01-01T00:00:00Z";
const ALL_FROM: &str = "0000-01-01T00:00:00Z";
/// The end of the supported instants (docs/api.md, "Errors").
const ALL_TO: &str = "9999-01-01T00:00:00Z";
const SEED_VAR: &str = "LOOPBAL_HOSTILE_SEED";
const DEFAULT_SEED: u64 = 20_260_302;
/// Wall time one family may take before it stops drawing cases.
const FAMILY_BUDGET: Duration = Duration::from_secs(25);
/// A family that stops at its budget must still have sent this many cases.
const MIN_CASES: usize = 40;

// ---------------------------------------------------------------------------------------------
// The tests

testkit::both_backends! {
    /// Mutated model files (TOML and JSON), media types, nesting and oversize on the model PUT.
    async fn hostile_model_files(backend: Backend) {
        let mut fx = Fixture::start(backend, "models").await;
        model_files(&mut fx, 200).await;
        model_media_types(&mut fx).await;
        model_nesting(&mut fx).await;
        fx.finish().await;
    }
}

testkit::both_backends! {
    /// Mutated CSV and JSON readings, media types, nesting, oversize and odd HTTP framing.
    async fn hostile_readings_bodies(backend: Backend) {
        let mut fx = Fixture::start(backend, "readings").await;
        readings_batches(&mut fx, 150, false).await;
        readings_batches(&mut fx, 150, true).await;
        readings_media_types(&mut fx).await;
        readings_nesting(&mut fx).await;
        oversize_and_framing(&mut fx).await;
        fx.settle(SCRATCH, "2026-05-04T00:00:00Z", "2026-05-07T00:00:00Z")
            .await;
        fx.finish().await;
    }
}

testkit::both_backends! {
    /// Hostile paths and query strings on every endpoint, and hostile technicians' notes.
    async fn hostile_queries_and_notes(backend: Backend) {
        let mut fx = Fixture::start(backend, "queries").await;
        queries(&mut fx, 250).await;
        notes(&mut fx, 100).await;
        fx.finish().await;
    }
}

/// `loopbal check-model` on mutated files: exit 0 exactly when the engine accepts the file,
/// else 2 with a message naming the file; never a panic, never a hang.
#[test]
fn check_model_on_mutated_files() {
    let cases = generate("check-model", 60, model_case());
    let dir = tempfile::tempdir().expect("temp dir");
    let bases = [model_base(false), model_base(true)];
    let mut tally: BTreeMap<u16, usize> = BTreeMap::new();
    for (i, case) in cases.iter().enumerate() {
        let body = case.body(&bases);
        let path = dir.path().join(if case.json {
            "model.json"
        } else {
            "model.toml"
        });
        std::fs::write(&path, &body).expect("write the model file");
        let what = describe("check-model", i, case, &body);
        let valid = std::str::from_utf8(&body)
            .ok()
            .and_then(|text| parse_model(text, case.json).ok())
            .and_then(|spec| Plant::new(spec).ok())
            .is_some();
        // Output to files: a message quoting a long line would fill a pipe nobody reads yet.
        let err_path = dir.path().join("stderr");
        let file = |p: &std::path::Path| std::fs::File::create(p).expect("an output file");
        let mut child = std::process::Command::new(support::BIN)
            .arg("check-model")
            .arg(&path)
            .stdout(file(&dir.path().join("stdout")))
            .stderr(file(&err_path))
            .spawn()
            .expect("run loopbal check-model");
        let deadline = Instant::now() + Duration::from_secs(30);
        let status = loop {
            if let Some(status) = child.try_wait().expect("wait") {
                break status;
            }
            if Instant::now() > deadline {
                let _ = child.kill();
                let _ = child.wait();
                panic!("{what}: check-model did not finish in 30 s");
            }
            std::thread::sleep(Duration::from_millis(5));
        };
        let stderr: String = std::fs::read_to_string(&err_path)
            .unwrap_or_default()
            .chars()
            .take(2_000)
            .collect();
        assert!(!stderr.contains("panicked"), "{what}: {stderr}");
        let code = status.code().unwrap_or(-1);
        *tally.entry(code as u16).or_default() += 1;
        if valid {
            assert_eq!(code, 0, "{what}: a valid model refused: {stderr}");
        } else {
            assert_eq!(code, 2, "{what}: exit {code}, stderr {stderr}");
            assert!(
                stderr.contains(&path.display().to_string()),
                "{what}: the message does not name the file: {stderr}"
            );
        }
    }
    eprintln!(
        "hostile check-model: {} files; exit codes {tally:?}",
        cases.len()
    );
}
