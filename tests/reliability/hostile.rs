//! Hostile input: whatever reaches the service's front door — mutated model files, broken CSV
//! and JSON readings, deep nesting, invalid UTF-8, wrong and missing content types, bodies past
//! `--max-body-bytes` with and without Content-Length, odd HTTP framing, hostile paths and query
//! strings — is answered without a 5xx, without a panic, without a hang, and without changing
//! stored data. `loopbal check-model` gets mutated files too.
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

/// The plant whose data must not change.
const PLANT: &str = "ombrask-ob2";
/// The plant that takes requests a valid case may rightly store.
const SCRATCH: &str = "ombrask-ob3";
const MAX_BODY: usize = 256 * 1024;
const REQUEST_TIMEOUT_S: u64 = 8;
/// Hostile model revisions take effect here: after everything the snapshot reads.
const FUTURE: &str = "2999-01-01T00:00:00Z";
const ALL_FROM: &str = "0000-01-01T00:00:00Z";
const ALL_TO: &str = "9999-12-31T23:59:59Z";
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

// ---------------------------------------------------------------------------------------------
// Drawing cases

fn seed() -> u64 {
    match std::env::var(SEED_VAR) {
        Ok(s) => s
            .trim()
            .parse()
            .unwrap_or_else(|_| panic!("{SEED_VAR}={s:?} is not an unsigned integer")),
        Err(_) => DEFAULT_SEED,
    }
}

/// `count` values of `strategy`, drawn deterministically from the seed and the family's name.
fn generate<S: Strategy>(family: &str, count: usize, strategy: S) -> Vec<S::Value> {
    let seed = seed();
    let mut key = [0u8; 32];
    key[..8].copy_from_slice(&seed.to_le_bytes());
    for (i, b) in family.bytes().enumerate() {
        key[8 + i % 24] ^= b;
    }
    let rng = TestRng::from_seed(RngAlgorithm::ChaCha, &key);
    let mut runner = TestRunner::new_with_rng(Config::default(), rng);
    eprintln!("hostile {family}: {count} cases from seed {seed} ({SEED_VAR} draws others)");
    (0..count)
        .map(|_| {
            strategy
                .new_tree(&mut runner)
                .expect("draw a case")
                .current()
        })
        .collect()
}

/// A family's count of cases against its time budget.
struct Budget {
    family: &'static str,
    start: Instant,
    planned: usize,
    ran: usize,
    tally: BTreeMap<u16, usize>,
}

impl Budget {
    fn new(family: &'static str, planned: usize) -> Budget {
        Budget {
            family,
            start: Instant::now(),
            planned,
            ran: 0,
            tally: BTreeMap::new(),
        }
    }

    fn spent(&self) -> bool {
        self.start.elapsed() > FAMILY_BUDGET
    }

    fn count(&mut self, status: u16) {
        self.ran += 1;
        *self.tally.entry(status).or_default() += 1;
    }

    fn done(self) {
        let stopped = if self.ran < self.planned {
            " (stopped at the time budget)"
        } else {
            ""
        };
        eprintln!(
            "hostile {}: {} of {} cases in {:.1} s{stopped}; answers {:?}",
            self.family,
            self.ran,
            self.planned,
            self.start.elapsed().as_secs_f64(),
            self.tally
        );
        assert!(
            self.ran >= self.planned.min(MIN_CASES),
            "{}: only {} cases within {FAMILY_BUDGET:?}",
            self.family,
            self.ran
        );
    }
}

/// What a failure message says about a case: enough to find it again.
fn describe(family: &str, i: usize, case: &dyn std::fmt::Debug, body: &[u8]) -> String {
    let mut drawn = format!("{case:?}");
    if drawn.len() > 1500 {
        let cut = (0..=1500)
            .rev()
            .find(|&n| drawn.is_char_boundary(n))
            .unwrap_or(0);
        drawn.truncate(cut);
        drawn.push_str("...");
    }
    format!(
        "{family} case {i} (seed {}): {drawn}; body {}",
        seed(),
        preview(body)
    )
}

fn preview(bytes: &[u8]) -> String {
    let shown: String = bytes
        .iter()
        .take(300)
        .flat_map(|b| std::ascii::escape_default(*b))
        .map(char::from)
        .collect();
    let more = if bytes.len() > 300 { "..." } else { "" };
    format!("of {} bytes b\"{shown}\"{more}", bytes.len())
}

// ---------------------------------------------------------------------------------------------
// Mutations of a body

const HOSTILE_NUMBERS: &[&str] = &[
    "1e400",
    "-1e400",
    "1e-400",
    "nan",
    "+nan",
    "-nan",
    "NaN",
    "inf",
    "+inf",
    "-inf",
    "Infinity",
    "-Infinity",
    "-0",
    "-0.0",
    "+0.0",
    "0",
    "-1",
    "99999999999999999999",
    "-99999999999999999999",
    "18446744073709551616",
    "-9223372036854775809",
    "9223372036854775807",
    "1.7976931348623157e308",
    "1.8e308",
    "4.9e-324",
    "2.2250738585072014e-308",
    "0x10",
    "0o7",
    "0b1",
    "1_000",
    "1__0",
    "1.",
    ".5",
    "-.5",
    "1e",
    "1e+",
    "--1",
    "1,5",
    "\"1\"",
    "true",
    "[]",
    "{}",
    "\"\"",
    "",
    "123456789012345678901234567890123456789012345678901234567890",
    "0.000000000000000000000000000000000000000000000000000000000001",
];

const INVALID_UTF8: &[&[u8]] = &[
    b"\xff",
    b"\xc3",
    b"\xed\xa0\x80",
    b"\xc0\x80",
    b"\xe2\x82",
    b"\x80\x80",
    b"\xf4\x90\x80\x80",
    b"\xf8\x88\x80\x80\x80",
];

/// Text put in place of a string's content. Escapes are written as the formats spell them.
const HOSTILE_TEXTS: &[&str] = &[
    "",
    " ",
    "\\u0000",
    "OB2\\u0000FI",
    "\\n",
    "\\t\\r",
    "\\u202e",
    "\\ud800",
    "\\q",
    "\\",
    "\u{202e}",
    "Ω",
    "😀",
    "\u{7f}",
    "%00",
    "../../etc/passwd",
    "'; DROP TABLE plants; --",
    "ombrask-ob2",
    "OB2-FI-101",
    "mix",
    "outside",
    "N2",
    "1h",
    "0s",
    "15m",
    "-1h",
    "99999999999999999999h",
    "kmol/h",
    "%",
    "molar_flow",
    "reactor",
    "sigma",
];

#[derive(Debug, Clone, Copy)]
enum Nest {
    Array,
    TomlTable,
    JsonObject,
}

impl Nest {
    fn render(self, depth: usize) -> String {
        let (open, close) = match self {
            Nest::Array => ("[", "]"),
            Nest::TomlTable => ("{a=", "}"),
            Nest::JsonObject => ("{\"a\":", "}"),
        };
        format!("{}1{}", open.repeat(depth), close.repeat(depth))
    }
}

#[derive(Debug, Clone)]
enum Text {
    Word(&'static str),
    Repeat(char, usize),
}

impl Text {
    fn render(&self) -> String {
        match self {
            Text::Word(w) => w.to_string(),
            Text::Repeat(c, n) => c.to_string().repeat(*n),
        }
    }
}

/// One edit of a body's bytes. Positions are drawn as `Index`es, resolved against the body as
/// it is when the edit is applied.
#[derive(Debug, Clone)]
enum Edit {
    Truncate(Index),
    FlipBit(Index, u8),
    Insert(Index, Vec<u8>),
    Delete(Index, usize),
    InvalidUtf8(Index, &'static [u8]),
    /// Replace the n-th number by a hostile one.
    Number(Index, &'static str),
    /// Replace the content of the n-th quoted string.
    Text(Index, Text),
    /// Replace the n-th number by a nest of this depth.
    Nest(Index, usize, Nest),
    DuplicateLine(Index),
    Bom,
    Crlf,
}

fn edit() -> impl Strategy<Value = Edit> {
    let text = prop_oneof![
        6 => prop::sample::select(HOSTILE_TEXTS).prop_map(Text::Word),
        1 => (
            prop::sample::select(vec!['x', 'é', '😀']),
            prop::sample::select(vec![64usize, 1_000, 70_000, 100_000]),
        )
            .prop_map(|(c, n)| Text::Repeat(c, n)),
    ];
    prop_oneof![
        2 => any::<Index>().prop_map(Edit::Truncate),
        2 => (any::<Index>(), 0u8..8).prop_map(|(i, b)| Edit::FlipBit(i, b)),
        1 => (any::<Index>(), prop::collection::vec(any::<u8>(), 1..16))
            .prop_map(|(i, b)| Edit::Insert(i, b)),
        1 => (any::<Index>(), 1usize..64).prop_map(|(i, n)| Edit::Delete(i, n)),
        2 => (any::<Index>(), prop::sample::select(INVALID_UTF8))
            .prop_map(|(i, b)| Edit::InvalidUtf8(i, b)),
        4 => (any::<Index>(), prop::sample::select(HOSTILE_NUMBERS))
            .prop_map(|(i, n)| Edit::Number(i, n)),
        4 => (any::<Index>(), text).prop_map(|(i, t)| Edit::Text(i, t)),
        2 => (
            any::<Index>(),
            prop::sample::select(vec![2usize, 32, 127, 128, 129, 1_000, 30_000, 100_000]),
            prop::sample::select(vec![Nest::Array, Nest::TomlTable, Nest::JsonObject]),
        )
            .prop_map(|(i, d, k)| Edit::Nest(i, d, k)),
        1 => any::<Index>().prop_map(Edit::DuplicateLine),
        1 => Just(Edit::Bom),
        1 => Just(Edit::Crlf),
    ]
}

impl Edit {
    fn apply(&self, body: &mut Vec<u8>) {
        let at = |i: &Index, len: usize| if len == 0 { 0 } else { i.index(len) };
        match self {
            Edit::Truncate(i) => body.truncate(at(i, body.len())),
            Edit::FlipBit(i, bit) => {
                if !body.is_empty() {
                    let k = at(i, body.len());
                    body[k] ^= 1 << bit;
                }
            }
            Edit::Insert(i, bytes) => {
                let k = at(i, body.len() + 1);
                body.splice(k..k, bytes.iter().copied());
            }
            Edit::Delete(i, n) => {
                let k = at(i, body.len());
                let end = (k + n).min(body.len());
                body.drain(k..end);
            }
            Edit::InvalidUtf8(i, bytes) => {
                let k = at(i, body.len() + 1);
                body.splice(k..k, bytes.iter().copied());
            }
            Edit::Number(i, with) => replace_nth(body, &number_spans(body), i, with.as_bytes()),
            Edit::Text(i, text) => {
                replace_nth(body, &string_spans(body), i, text.render().as_bytes())
            }
            Edit::Nest(i, depth, kind) => {
                replace_nth(body, &number_spans(body), i, kind.render(*depth).as_bytes())
            }
            Edit::DuplicateLine(i) => {
                let lines = line_spans(body);
                if !lines.is_empty() {
                    let (a, b) = lines[i.index(lines.len())];
                    let line = body[a..b].to_vec();
                    body.splice(b..b, line);
                }
            }
            Edit::Bom => {
                body.splice(0..0, *b"\xEF\xBB\xBF");
            }
            Edit::Crlf => {
                let mut out = Vec::with_capacity(body.len() + body.len() / 16);
                for &b in body.iter() {
                    if b == b'\n' {
                        out.push(b'\r');
                    }
                    out.push(b);
                }
                *body = out;
            }
        }
    }
}

fn replace_nth(body: &mut Vec<u8>, spans: &[(usize, usize)], i: &Index, with: &[u8]) {
    if !spans.is_empty() {
        let (a, b) = spans[i.index(spans.len())];
        body.splice(a..b, with.iter().copied());
    }
}

/// Numbers as values: a run of digits, signs, points and exponents after `=`, `[`, `,`, `:` or
/// a space, holding a digit.
fn number_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let part = |b: u8| b.is_ascii_digit() || matches!(b, b'.' | b'e' | b'E' | b'+' | b'-' | b'_');
    let mut spans = Vec::new();
    let mut k = 0;
    while k < body.len() {
        let starts = (body[k].is_ascii_digit() || body[k] == b'-')
            && (k == 0 || matches!(body[k - 1], b' ' | b'=' | b'[' | b',' | b':'));
        if starts {
            let end = (k..body.len())
                .find(|&j| !part(body[j]))
                .unwrap_or(body.len());
            if body[k..end].iter().any(u8::is_ascii_digit) {
                spans.push((k, end));
            }
            k = end.max(k + 1);
        } else {
            k += 1;
        }
    }
    spans
}

/// The contents of `"..."` strings (the base texts have no escaped quotes).
fn string_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let quotes: Vec<usize> = (0..body.len()).filter(|&k| body[k] == b'"').collect();
    quotes.chunks_exact(2).map(|q| (q[0] + 1, q[1])).collect()
}

/// Each line with its newline.
fn line_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let mut spans = Vec::new();
    let mut start = 0;
    for (k, &b) in body.iter().enumerate() {
        if b == b'\n' {
            spans.push((start, k + 1));
            start = k + 1;
        }
    }
    if start < body.len() {
        spans.push((start, body.len()));
    }
    spans
}

// ---------------------------------------------------------------------------------------------
// Answers

#[derive(Debug)]
struct Answer {
    status: u16,
    ctype: String,
    body: Vec<u8>,
}

impl Answer {
    fn json(&self) -> Value {
        serde_json::from_slice(&self.body).unwrap_or(Value::Null)
    }

    fn text(&self) -> String {
        let text = String::from_utf8_lossy(&self.body);
        text.chars().take(600).collect()
    }
}

async fn send(req: RequestBuilder, what: &str) -> Answer {
    // A transport error (no HTTP answer at all) is sent once more on a new connection, and
    // said on stderr: it was seen, rarely, on a loaded machine and could not be reproduced (an
    // open question in the issue notes). A server that is down or that never answers fails
    // the second time too.
    let again = req.try_clone();
    let r = match req.send().await {
        Ok(r) => r,
        Err(first) => {
            let Some(again) = again else {
                panic!("{what}: no answer ({first:?})")
            };
            eprintln!("{what}: transport error, sending once more: {first:?}");
            tokio::time::sleep(Duration::from_millis(100)).await;
            again
                .send()
                .await
                .unwrap_or_else(|e| panic!("{what}: no answer ({first:?}; then {e:?})"))
        }
    };
    let status = r.status().as_u16();
    let ctype = r
        .headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string();
    let body = r
        .bytes()
        .await
        .unwrap_or_else(|e| panic!("{what}: the answer was cut off ({e})"))
        .to_vec();
    Answer {
        status,
        ctype,
        body,
    }
}

/// What every answer of the service keeps: no 5xx, and a 4xx is problem details.
fn check(a: &Answer, what: &str) {
    assert!(
        a.status < 500,
        "{what}: answered {}: {}",
        a.status,
        a.text()
    );
    if (400..500).contains(&a.status) {
        assert_eq!(
            a.ctype,
            "application/problem+json",
            "{what}: a {} that is not problem details: {}",
            a.status,
            a.text()
        );
        let p: Value = serde_json::from_slice(&a.body)
            .unwrap_or_else(|e| panic!("{what}: the problem is not JSON ({e}): {}", a.text()));
        assert_eq!(p["status"], a.status, "{what}: {p}");
        assert!(
            p["detail"].as_str().is_some_and(|d| !d.is_empty()),
            "{what}: {p}"
        );
        assert!(
            p["type"].as_str().is_some_and(|t| t.starts_with("urn:")),
            "{what}: {p}"
        );
    }
}

fn expect(a: &Answer, want: &[u16], what: &str) {
    check(a, what);
    assert!(
        want.contains(&a.status),
        "{what}: answered {}, expected one of {want:?}: {}",
        a.status,
        a.text()
    );
}

// ---------------------------------------------------------------------------------------------
// The service, its two plants and the snapshot

struct Fixture {
    _dir: tempfile::TempDir,
    s: Server,
    c: Client,
    admin: String,
    ingest: String,
    read: String,
    maintain: String,
    before: BTreeMap<String, Value>,
    /// Hostile model files the service took as valid revisions of ombrask-ob2 (in 2999).
    accepted_models: usize,
}

fn scratch_model() -> String {
    let model = support::ombrask_model();
    let renamed = model.replace(
        &format!("name = \"{PLANT}\""),
        &format!("name = \"{SCRATCH}\""),
    );
    assert_ne!(renamed, model);
    renamed
}

fn known_tags() -> Vec<&'static str> {
    OMBRASK_TAGS.iter().map(|(t, _)| *t).collect()
}

impl Fixture {
    async fn start(backend: Backend, name: &str) -> Fixture {
        let dir = tempfile::tempdir().expect("temp dir");
        let (log_at, url) = backend.fresh(dir.path(), name);
        let token = |role| support::token_on(&url, role, None);
        let (admin, ingest, read, maintain) = (
            token("admin"),
            token("ingest"),
            token("read"),
            token("maintain"),
        );
        let max = MAX_BODY.to_string();
        let timeout = REQUEST_TIMEOUT_S.to_string();
        let s = support::LOOPBAL.serve_on(
            &log_at,
            &url,
            &[
                "--max-body-bytes",
                &max,
                "--request-timeout",
                &timeout,
                "--run-grace",
                "0",
                "--run-tick",
                "1",
            ],
            "warn",
        );
        // A fresh connection per request: the server may close a connection after refusing a
        // body it did not read, and a pooled connection reused in that instant fails on the
        // client's side without the server being at fault. A dead server still fails every
        // request (connection refused), and `/healthz` is checked at the end.
        let c = Client::builder()
            .timeout(Duration::from_secs(30))
            .pool_max_idle_per_host(0)
            .build()
            .expect("http client");
        let mut fx = Fixture {
            _dir: dir,
            s,
            c,
            admin,
            ingest,
            read,
            maintain,
            before: BTreeMap::new(),
            accepted_models: 0,
        };

        // ombrask-ob2: its model from March 2026, three hours of readings, their runs, a note.
        let a = fx
            .put_model(
                PLANT,
                Some("application/toml"),
                Some("2026-03-01T00:00:00Z"),
                support::ombrask_model().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());
        let mut csv = String::from("tag,time,value,quality\n");
        for hour in 0..3 {
            for (i, (tag, value)) in OMBRASK_TAGS.iter().enumerate() {
                let quality = if hour == 1 && i == 3 {
                    "uncertain"
                } else {
                    "good"
                };
                let value = value * (1.0 + 0.002 * hour as f64);
                csv += &format!(
                    "{tag},2026-03-02T{hour:02}:{:02}:00Z,{value},{quality}\n",
                    10 + i
                );
            }
        }
        let a = fx
            .post_readings(PLANT, Some("text/csv"), csv.into_bytes(), "set-up")
            .await;
        assert_eq!(a.status, 200, "{}", a.text());
        assert_eq!(a.json()["accepted"], 33, "{}", a.text());
        let periods = fx
            .settle(PLANT, "2026-03-02T00:00:00Z", "2026-03-02T03:00:00Z")
            .await;
        assert!(
            periods.iter().all(|p| p["run_id"].is_i64()),
            "every hour of ombrask-ob2 has a run: {periods:?}"
        );
        let note = json!({"kind": "checked", "text": "zero checked on site", "effective_at": "2026-03-02T02:30:00Z"});
        let a = fx
            .post_note(
                PLANT,
                "OB2-FI-201",
                Some("application/json"),
                note.to_string().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());

        // ombrask-ob3: the same model, no readings yet.
        let a = fx
            .put_model(
                SCRATCH,
                Some("application/toml"),
                Some("2026-03-01T00:00:00Z"),
                scratch_model().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());

        fx.before = fx.snapshot().await;
        fx
    }

    async fn put_model(
        &self,
        plant: &str,
        media: Option<&str>,
        effective_from: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .put(self.s.url(&format!("/api/v1/plants/{plant}/model")))
            .bearer_auth(&self.admin)
            .body(body);
        if let Some(t) = effective_from {
            req = req.query(&[("effective_from", t)]);
        }
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    async fn post_readings(
        &self,
        plant: &str,
        media: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .post(self.s.url(&format!("/api/v1/plants/{plant}/readings")))
            .bearer_auth(&self.ingest)
            .body(body);
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    async fn post_note(
        &self,
        plant: &str,
        tag: &str,
        media: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .post(
                self.s
                    .url(&format!("/api/v1/plants/{plant}/meters/{tag}/notes")),
            )
            .bearer_auth(&self.maintain)
            .body(body);
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    /// A read that must answer 200 with JSON.
    async fn get(&self, path: &str, query: &[(&str, &str)]) -> Value {
        let what = format!("GET {path} {query:?}");
        let a = send(
            self.c
                .get(self.s.url(path))
                .query(query)
                .bearer_auth(&self.read),
            &what,
        )
        .await;
        assert_eq!(a.status, 200, "{what}: {}", a.text());
        serde_json::from_slice(&a.body).unwrap_or_else(|e| panic!("{what}: not JSON ({e})"))
    }

    /// Every stored reading of a plant, by (tag, time).
    async fn readings(&self, plant: &str) -> BTreeMap<(String, String), Value> {
        let list = self
            .get(
                &format!("/api/v1/plants/{plant}/readings"),
                &[("from", ALL_FROM), ("to", ALL_TO)],
            )
            .await;
        list["readings"]
            .as_array()
            .expect("readings")
            .iter()
            .map(|r| {
                let key = (
                    r["tag"].as_str().unwrap_or_default().to_string(),
                    r["time"].as_str().unwrap_or_default().to_string(),
                );
                (key, r.clone())
            })
            .collect()
    }

    /// Wait (at most 60 s) until no period of the range is pending or due for a new run.
    async fn settle(&self, plant: &str, from: &str, to: &str) -> Vec<Value> {
        let deadline = Instant::now() + Duration::from_secs(60);
        loop {
            let list = self
                .get(
                    &format!("/api/v1/plants/{plant}/periods"),
                    &[("from", from), ("to", to)],
                )
                .await;
            let periods = list["periods"].as_array().expect("periods").clone();
            if periods
                .iter()
                .all(|p| p["status"] != "pending" && p["rerun_due"] == false)
            {
                return periods;
            }
            if Instant::now() > deadline {
                let log = self.s.log();
                let tail: Vec<&str> = log.lines().rev().take(40).collect();
                panic!(
                    "the periods of {plant} never settled: {periods:?}\nlog, last lines first:\n{}",
                    tail.join("\n")
                );
            }
            tokio::time::sleep(Duration::from_millis(200)).await;
        }
    }

    /// Everything readable about ombrask-ob2.
    async fn snapshot(&self) -> BTreeMap<String, Value> {
        let base = format!("/api/v1/plants/{PLANT}");
        let window = [
            ("from", "2026-03-02T00:00:00Z"),
            ("to", "2026-03-02T03:00:00Z"),
        ];
        let mut m = BTreeMap::new();
        m.insert(
            "revisions".into(),
            self.get(&format!("{base}/model/revisions"), &[]).await,
        );
        m.insert(
            "model".into(),
            self.get(&format!("{base}/model"), &[]).await,
        );
        m.insert(
            "readings".into(),
            self.get(
                &format!("{base}/readings"),
                &[("from", ALL_FROM), ("to", ALL_TO)],
            )
            .await,
        );
        let periods = self
            .get(
                &format!("{base}/periods"),
                &[
                    ("from", "2026-01-01T00:00:00Z"),
                    ("to", "2027-01-01T00:00:00Z"),
                ],
            )
            .await;
        for p in periods["periods"].as_array().expect("periods") {
            if p["run_id"].is_i64() {
                let start = p["start"].as_str().expect("start");
                m.insert(
                    format!("period {start}"),
                    self.get(&format!("{base}/periods/{start}"), &[]).await,
                );
            }
        }
        m.insert("periods".into(), periods);
        m.insert(
            "meters".into(),
            self.get(&format!("{base}/meters"), &[]).await,
        );
        for tag in known_tags() {
            m.insert(
                format!("meter {tag}"),
                self.get(&format!("{base}/meters/{tag}"), &[]).await,
            );
        }
        m.insert(
            "figures".into(),
            self.get(&format!("{base}/figures"), &window).await,
        );
        m.insert(
            "balances".into(),
            self.get(&format!("{base}/balances"), &window).await,
        );
        m
    }

    /// The service is alive, its log is clean and ombrask-ob2 is as it was.
    async fn finish(self) {
        let a = send(self.c.get(self.s.url("/healthz")), "healthz").await;
        assert_eq!(a.status, 200, "the service is not healthy: {}", a.text());
        let after = self.snapshot().await;
        let old = self.before["revisions"].as_array().expect("revisions");
        let new = after["revisions"].as_array().expect("revisions");
        assert_eq!(
            new.len(),
            old.len() + self.accepted_models,
            "ombrask-ob2 has revisions other than the accepted valid ones: {new:?}"
        );
        assert_eq!(&new[..old.len()], &old[..], "a stored revision changed");
        for r in &new[old.len()..] {
            assert_eq!(r["effective_from"], FUTURE, "{r}");
        }
        assert_eq!(
            after.keys().collect::<Vec<_>>(),
            self.before.keys().collect::<Vec<_>>(),
            "periods were run or lost"
        );
        for (key, was) in &self.before {
            if key != "revisions" {
                assert_eq!(&after[key], was, "ombrask-ob2's {key} changed");
            }
        }
        let log = self.s.log();
        assert!(!log.contains("panicked"), "the server panicked:\n{log}");
        let errors: Vec<&str> = log
            .lines()
            .filter(|l| l.split_whitespace().nth(1) == Some("ERROR"))
            .collect();
        assert!(
            errors.is_empty(),
            "the server logged errors:\n{}",
            errors.join("\n")
        );
        eprintln!(
            "hostile: ombrask-ob2 unchanged ({} parts compared, {} valid hostile revisions in 2999)",
            self.before.len(),
            self.accepted_models
        );
    }
}

// ---------------------------------------------------------------------------------------------
// Model files

fn model_base(json: bool) -> Vec<u8> {
    let toml = support::ombrask_model();
    if json {
        let spec = ModelSpec::from_toml(&toml).expect("the ombrask model parses");
        serde_json::to_string_pretty(&spec)
            .expect("a model serialises")
            .into_bytes()
    } else {
        toml.into_bytes()
    }
}

fn parse_model(text: &str, json: bool) -> Result<ModelSpec, reconcile::ModelError> {
    if json {
        ModelSpec::from_json(text)
    } else {
        ModelSpec::from_toml(text)
    }
}

#[derive(Debug, Clone)]
struct ModelCase {
    json: bool,
    edits: Vec<Edit>,
    /// The Content-Type sent when not the body's own (`Some(None)`: none at all).
    media: Option<Option<&'static str>>,
}

impl ModelCase {
    fn body(&self, bases: &[Vec<u8>; 2]) -> Vec<u8> {
        let mut body = bases[usize::from(self.json)].clone();
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    fn media(&self) -> Option<&'static str> {
        self.media.unwrap_or(Some(if self.json {
            "application/json"
        } else {
            "application/toml"
        }))
    }
}

const MODEL_MEDIA: &[Option<&str>] = &[
    None,
    Some(""),
    Some("application/json"),
    Some("application/toml"),
    Some("text/toml"),
    Some("text/x-toml"),
    Some("APPLICATION/JSON"),
    Some("application/toml; charset=utf-8"),
    Some("application/vnd.ombrask+json"),
    Some("text/plain"),
    Some("text/csv"),
    Some("application/octet-stream"),
    Some("multipart/form-data; boundary=ombrask"),
    Some("application/x-www-form-urlencoded"),
    Some(";"),
];

fn model_case() -> impl Strategy<Value = ModelCase> {
    (
        any::<bool>(),
        prop::collection::vec(edit(), 1..=3),
        prop_oneof![
            9 => Just(None),
            1 => prop::sample::select(MODEL_MEDIA).prop_map(Some),
        ],
    )
        .prop_map(|(json, edits, media)| ModelCase { json, edits, media })
}

/// What the service must answer to a model PUT to `plant`: decided by the engine's own parser
/// and validator on the same bytes, and the order of the checks in docs/api.md (size,
/// UTF-8, media type, content).
fn model_verdict(body: &[u8], media: Option<&str>, plant: &str) -> (u16, String) {
    if body.len() > MAX_BODY {
        return (413, "the body is over the limit".into());
    }
    let Ok(text) = std::str::from_utf8(body) else {
        return (400, "the body is not UTF-8".into());
    };
    let m = media
        .and_then(|m| m.split(';').next())
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    let json = if m == "application/json" || m.ends_with("+json") {
        true
    } else if matches!(m.as_str(), "application/toml" | "text/toml" | "text/x-toml") {
        false
    } else {
        return (415, format!("{media:?} is neither TOML nor JSON"));
    };
    let spec = match parse_model(text, json) {
        Ok(spec) => spec,
        Err(e) => return (422, format!("the engine cannot parse it: {e}")),
    };
    if spec.name != plant {
        return (422, format!("it is named {:?}", spec.name));
    }
    let with_nul = serde_json::to_string(&spec)
        .expect("a model serialises")
        .contains("\\u0000");
    if let Err(e) = Plant::new(spec) {
        return (422, format!("the engine's validator refuses it: {e}"));
    }
    if with_nul {
        return (422, "a text of the model holds U+0000".into());
    }
    (201, "it is a valid model of the plant".into())
}

async fn model_files(fx: &mut Fixture, count: usize) {
    let cases = generate("model files", count, model_case());
    let bases = [model_base(false), model_base(true)];
    let mut budget = Budget::new("model files", cases.len());
    for (i, case) in cases.iter().enumerate() {
        if budget.spent() {
            break;
        }
        let body = case.body(&bases);
        let media = case.media();
        let (want, why) = model_verdict(&body, media, PLANT);
        let what = describe("model files", i, case, &body);
        let a = fx.put_model(PLANT, media, Some(FUTURE), body, &what).await;
        check_model_answer(fx, &a, want, &why, &what);
        budget.count(a.status);
    }
    budget.done();
}

fn check_model_answer(fx: &mut Fixture, a: &Answer, want: u16, why: &str, what: &str) {
    check(a, what);
    assert_eq!(
        a.status,
        want,
        "{what}: expected {want} because {why}; got {}",
        a.text()
    );
    match a.status {
        201 => {
            fx.accepted_models += 1;
            let body = a.json();
            assert_eq!(
                body["revision"],
                1 + fx.accepted_models as i64,
                "{what}: {body}"
            );
            assert_eq!(body["effective_from"], FUTURE, "{what}: {body}");
        }
        422 => {
            let errors = a.json()["errors"].as_array().map_or(0, Vec::len);
            assert!(errors > 0, "{what}: a 422 lists no problem: {}", a.text());
        }
        _ => {}
    }
}

/// Models sent with every kind of Content-Type, each expected as the contract says.
async fn model_media_types(fx: &mut Fixture) {
    let toml = model_base(false);
    let json = model_base(true);
    let multipart = [
        &b"--ombrask\r\nContent-Disposition: form-data; name=\"model\"; filename=\"ombrask.toml\"\r\nContent-Type: application/toml\r\n\r\n"[..],
        &toml,
        b"\r\n--ombrask--\r\n",
    ]
    .concat();
    let cases: Vec<(&str, Vec<u8>, Option<&str>, u16)> = vec![
        ("no Content-Type", toml.clone(), None, 415),
        ("an empty Content-Type", toml.clone(), Some(""), 415),
        ("text/plain", toml.clone(), Some("text/plain"), 415),
        (
            "text/plain with a charset",
            toml.clone(),
            Some("text/plain; charset=utf-8"),
            415,
        ),
        (
            "multipart",
            multipart,
            Some("multipart/form-data; boundary=ombrask"),
            415,
        ),
        (
            "a form",
            toml.clone(),
            Some("application/x-www-form-urlencoded"),
            415,
        ),
        (
            "octet-stream",
            toml.clone(),
            Some("application/octet-stream"),
            415,
        ),
        ("xml", toml.clone(), Some("application/xml"), 415),
        (
            "a +toml suffix",
            toml.clone(),
            Some("application/vnd.ombrask+toml"),
            415,
        ),
        (
            "only parameters",
            toml.clone(),
            Some("; charset=utf-8"),
            415,
        ),
        (
            "TOML sent as JSON",
            toml.clone(),
            Some("application/json"),
            422,
        ),
        (
            "JSON sent as TOML",
            json.clone(),
            Some("application/toml"),
            422,
        ),
        (
            "JSON sent as text/toml",
            json.clone(),
            Some("text/toml"),
            422,
        ),
        (
            "TOML sent as a +json type",
            toml.clone(),
            Some("application/vnd.ombrask+json"),
            422,
        ),
        // The contract's types with parameters and in capitals are the same types: accepted,
        // as revisions in 2999.
        (
            "TOML with a charset",
            toml.clone(),
            Some("application/toml; charset=utf-8"),
            201,
        ),
        (
            "JSON in capitals",
            json.clone(),
            Some("APPLICATION/JSON"),
            201,
        ),
        (
            "JSON as a +json type",
            json.clone(),
            Some("application/vnd.ombrask+json"),
            201,
        ),
    ];
    let mut budget = Budget::new("model media types", cases.len());
    for (name, body, media, want) in cases {
        let what = format!("model media types: {name} ({media:?})");
        let (verdict, why) = model_verdict(&body, media, PLANT);
        assert_eq!(
            verdict, want,
            "{what}: the case is not what it claims ({why})"
        );
        let a = fx.put_model(PLANT, media, Some(FUTURE), body, &what).await;
        check_model_answer(fx, &a, want, &why, &what);
        budget.count(a.status);
    }
    budget.done();
}

/// Models nested past any parser's recursion limit, and models over the size limit.
async fn model_nesting(fx: &mut Fixture) {
    let deep = 100_000;
    let cases: Vec<(&str, String, &str, u16)> = vec![
        (
            "JSON components nested 100,000 deep",
            format!(
                "{{\"name\": \"{PLANT}\", \"component\": {}}}",
                Nest::Array.render(deep)
            ),
            "application/json",
            422,
        ),
        (
            "JSON objects nested 40,000 deep",
            format!(
                "{{\"name\": \"{PLANT}\", \"unit\": {}}}",
                Nest::JsonObject.render(40_000)
            ),
            "application/json",
            422,
        ),
        (
            "TOML array nested 100,000 deep",
            format!(
                "name = \"{PLANT}\"\ncomponent = {}\n",
                Nest::Array.render(deep)
            ),
            "application/toml",
            422,
        ),
        (
            "TOML inline tables nested 50,000 deep",
            format!(
                "name = \"{PLANT}\"\nalpha = {}\n",
                Nest::TomlTable.render(50_000)
            ),
            "application/toml",
            422,
        ),
        (
            "TOML dotted table header 60,000 keys long",
            format!("name = \"{PLANT}\"\n[{}a]\n", "a.".repeat(60_000)),
            "application/toml",
            422,
        ),
        (
            "TOML array of tables header nested",
            format!("name = \"{PLANT}\"\n[[{}a]]\n", "a.".repeat(60_000)),
            "application/toml",
            422,
        ),
        (
            "a model one byte over the limit",
            {
                let mut m = support::ombrask_model();
                while m.len() < MAX_BODY + 1 {
                    m.push_str("# padding of the ombrask model past the body limit\n");
                }
                m
            },
            "application/toml",
            413,
        ),
        (
            "a 300,000-character name",
            format!("name = \"{}\"\n", "k".repeat(300_000)),
            "application/toml",
            413,
        ),
    ];
    let mut budget = Budget::new("model nesting and size", cases.len());
    for (name, body, media, want) in cases {
        let body = body.into_bytes();
        let what = format!("model nesting and size: {name}, body {}", preview(&body));
        let (verdict, why) = model_verdict(&body, Some(media), PLANT);
        assert_eq!(
            verdict, want,
            "{what}: the case is not what it claims ({why})"
        );
        let a = fx
            .put_model(PLANT, Some(media), Some(FUTURE), body, &what)
            .await;
        check_model_answer(fx, &a, want, &why, &what);
        if want == 413 {
            assert!(
                a.text().contains(&MAX_BODY.to_string()),
                "{what}: {}",
                a.text()
            );
        }
        budget.count(a.status);
    }
    budget.done();
}

// ---------------------------------------------------------------------------------------------
// Readings

const ODD_TAGS: &[&str] = &[
    "OB2-FI-999",
    "",
    " ",
    " OB2-FI-101 ",
    "ob2-fi-101",
    "OB2-FI-101\0",
    "\0",
    "OB2-FI-101\u{202e}",
    "OB2-FI-101\"",
    "OB2-FI-101,OB2-FI-201",
    "../OB2-FI-101",
    "Ω",
    "\u{feff}OB2-FI-101",
    "OB2-FI-101\r",
    "'; DELETE FROM readings; --",
];

const ODD_TIMES: &[&str] = &[
    "0000-01-01T00:00:00Z",
    "0000-01-01T00:00:00+23:59",
    "0001-01-01T00:00:00Z",
    "1970-01-01T00:00:00Z",
    "1969-12-31T23:59:59.999999999Z",
    "9998-12-31T23:00:00Z",
    "9999-12-31T23:59:59Z",
    "9999-12-31T23:59:59-23:59",
    "2026-02-30T00:00:00Z",
    "2026-06-30T23:59:60Z",
    "2026-05-04T05:00:00",
    "2026-05-04 05:00:00Z",
    "2026-05-04T05:00:00.0000000000001Z",
    "2026-05-04T25:00:00Z",
    "2026-05-04T05:00:00+24:00",
    "+275760-09-13T00:00:00Z",
    "-0001-01-01T00:00:00Z",
    "1777870800",
    "2026-05-04T05:00:00Z\0",
    "now",
    "",
    "2026-W19-1",
];

const ODD_QUALITIES: &[&str] = &[
    "",
    "GOOD",
    "Bad",
    " uncertain ",
    "meh",
    "good\0",
    "ok",
    "0",
    "null",
];

#[derive(Debug, Clone, Copy)]
enum ValueAs {
    /// As written (in JSON: a raw token, which may not be JSON at all).
    Raw,
    /// As a JSON string.
    Quoted,
    /// In JSON, this instead of the value.
    Literal(&'static str),
}

#[derive(Debug, Clone)]
enum Shape {
    Whole,
    /// Without its value (CSV: one field short).
    NoValue,
    /// With one field more.
    Extra,
    /// Not a reading: CSV a line of this, JSON this instead of the object.
    NotAReading(&'static str),
}

#[derive(Debug, Clone)]
struct Row {
    tag: String,
    time: String,
    value: String,
    value_as: ValueAs,
    quality: Option<String>,
    shape: Shape,
    quoted: bool,
    eol: &'static str,
}

#[derive(Debug, Clone)]
struct BatchCase {
    json: bool,
    header: &'static str,
    wrapper: u8,
    /// JSON values that are not JSON numbers are sent raw (else quoted, a refused line).
    raw_hostile: bool,
    rows: Vec<Row>,
    edits: Vec<Edit>,
}

fn tag() -> impl Strategy<Value = String> {
    prop_oneof![
        10 => prop::sample::select(known_tags()).prop_map(String::from),
        2 => prop::sample::select(ODD_TAGS).prop_map(String::from),
        1 => "\\PC{0,16}",
        1 => (1usize..3_000).prop_map(|n| "K".repeat(n)),
    ]
}

fn time() -> impl Strategy<Value = String> {
    let zones = vec![
        "Z",
        "Z",
        "+00:00",
        "+02:00",
        "-05:30",
        ".5Z",
        ".123456789Z",
        "z",
    ];
    prop_oneof![
        10 => (0u32..48, 0u32..60, prop::sample::select(zones)).prop_map(|(h, m, zone)| {
            let (day, hour) = (4 + h / 24, h % 24);
            match zone.strip_prefix('.') {
                Some(frac) => format!("2026-05-{day:02}T{hour:02}:{m:02}:00.{frac}"),
                None => format!("2026-05-{day:02}T{hour:02}:{m:02}:00{zone}"),
            }
        }),
        2 => prop::sample::select(ODD_TIMES).prop_map(String::from),
        1 => "\\PC{0,32}",
    ]
}

fn value() -> impl Strategy<Value = String> {
    prop_oneof![
        10 => (0.0f64..30_000.0).prop_map(|v| format!("{v}")),
        3 => prop::sample::select(HOSTILE_NUMBERS).prop_map(String::from),
        2 => any::<f64>().prop_map(|v| format!("{v:e}")),
        1 => "[0-9]{15,30}",
        1 => "-?[0-9]{0,3}(\\.[0-9]{0,3})?([eE][-+]?[0-9]{1,4})?",
        1 => "\\PC{0,10}",
    ]
}

fn row() -> impl Strategy<Value = Row> {
    (
        tag(),
        time(),
        value(),
        prop_oneof![
            12 => Just(ValueAs::Raw),
            1 => Just(ValueAs::Quoted),
            1 => prop::sample::select(vec!["null", "true", "[]", "{}", "[1]", "\"\"", "{\"v\":1}"])
                .prop_map(ValueAs::Literal),
        ],
        prop_oneof![
            8 => prop::sample::select(vec!["good", "uncertain", "bad"])
                .prop_map(|q| Some(q.to_string())),
            1 => Just(None),
            2 => prop::sample::select(ODD_QUALITIES).prop_map(|q| Some(q.to_string())),
        ],
        prop_oneof![
            20 => Just(Shape::Whole),
            1 => Just(Shape::NoValue),
            1 => Just(Shape::Extra),
            1 => prop::sample::select(vec!["1", "null", "\"OB2-FI-101\"", "[]", "true", "#"])
                .prop_map(Shape::NotAReading),
        ],
        prop::bool::weighted(0.15),
        prop::sample::select(vec!["\n", "\n", "\n", "\r\n", "\r"]),
    )
        .prop_map(
            |(tag, time, value, value_as, quality, shape, quoted, eol)| Row {
                tag,
                time,
                value,
                value_as,
                quality,
                shape,
                quoted,
                eol,
            },
        )
}

fn batch_case(json: bool) -> impl Strategy<Value = BatchCase> {
    (
        prop_oneof![
            12 => Just("tag,time,value,quality"),
            1 => prop::sample::select(vec![
                "time,tag,value,quality",
                "TAG,Time,VALUE,Quality",
                "tag,time,value",
                "tag,time,value,quality,extra",
                "tag,tag,time,value",
                "tag;time;value;quality",
                "",
                "\"tag\",\"time\",\"value\",\"quality\"",
                "tag,time",
                "\u{feff}tag,time,value,quality",
            ]),
        ],
        prop_oneof![12 => Just(0u8), 1 => 1u8..7],
        prop::bool::weighted(0.25),
        prop::collection::vec(row(), 0..40),
        prop_oneof![
            2 => Just(Vec::new()),
            1 => prop::collection::vec(edit(), 1..=2),
        ],
    )
        .prop_map(
            move |(header, wrapper, raw_hostile, rows, edits)| BatchCase {
                json,
                header,
                wrapper,
                raw_hostile,
                rows,
                edits,
            },
        )
}

impl BatchCase {
    fn body(&self) -> Vec<u8> {
        let mut body = if self.json {
            self.json_text().into_bytes()
        } else {
            self.csv_text().into_bytes()
        };
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    fn csv_text(&self) -> String {
        let mut out = format!("{}\n", self.header);
        for r in &self.rows {
            let mut fields = vec![r.tag.clone(), r.time.clone(), r.value.clone()];
            fields.push(r.quality.clone().unwrap_or_default());
            match r.shape {
                Shape::Whole => {}
                Shape::NoValue => {
                    fields.remove(2);
                }
                Shape::Extra => fields.push("surplus".into()),
                Shape::NotAReading(t) => fields = vec![t.to_string()],
            }
            let fields: Vec<String> = fields
                .into_iter()
                .map(|f| {
                    if r.quoted {
                        format!("\"{}\"", f.replace('"', "\"\""))
                    } else {
                        f
                    }
                })
                .collect();
            out += &fields.join(",");
            out += r.eol;
        }
        out
    }

    fn json_text(&self) -> String {
        let s = |t: &str| serde_json::to_string(t).expect("a string serialises");
        let rows: Vec<String> = self
            .rows
            .iter()
            .map(|r| {
                if let Shape::NotAReading(t) = r.shape {
                    return t.to_string();
                }
                let is_number = serde_json::from_str::<serde_json::Number>(&r.value).is_ok();
                let value = match r.value_as {
                    ValueAs::Raw if is_number || self.raw_hostile => r.value.clone(),
                    ValueAs::Raw | ValueAs::Quoted => s(&r.value),
                    ValueAs::Literal(l) => l.to_string(),
                };
                let mut fields = vec![
                    format!("\"tag\": {}", s(&r.tag)),
                    format!("\"time\": {}", s(&r.time)),
                    format!("\"value\": {value}"),
                ];
                if let Some(q) = &r.quality {
                    fields.push(format!("\"quality\": {}", s(q)));
                }
                match r.shape {
                    Shape::NoValue => {
                        fields.remove(2);
                    }
                    Shape::Extra => fields.push("\"site\": \"ombrask point\"".into()),
                    _ => {}
                }
                format!("{{{}}}", fields.join(", "))
            })
            .collect();
        let list = format!("[{}]", rows.join(",\n"));
        match self.wrapper {
            0 => format!("{{\"readings\": {list}}}"),
            1 => list,
            2 => format!(
                "{{\"readings\": {{\"0\": {}}}}}",
                rows.first().map_or("{}", String::as_str)
            ),
            3 => format!("{{\"readings\": {list}, \"readings\": []}}"),
            4 => format!("{{\"READINGS\": {list}}}"),
            5 => format!("{{\"readings\": {list}}} and more"),
            _ => format!("{{\"extra\": [1, {{}}], \"readings\": {list}}}"),
        }
    }
}

/// A stored reading a valid batch could have made.
fn check_stored(r: &Value, what: &str) {
    let tags = known_tags();
    assert!(
        r["tag"].as_str().is_some_and(|t| tags.contains(&t)),
        "{what}: a reading of an unknown tag was stored: {r}"
    );
    assert!(r["value"].is_number(), "{what}: {r}");
    assert!(
        ["good", "uncertain", "bad"].contains(&r["quality"].as_str().unwrap_or("")),
        "{what}: {r}"
    );
    let time = r["time"].as_str().unwrap_or("");
    let year = chrono::DateTime::parse_from_rfc3339(time)
        .map(|t| chrono::Datelike::year(&t))
        .unwrap_or_else(|e| panic!("{what}: stored time {time:?} is not RFC 3339 ({e})"));
    assert!((0..=9998).contains(&year), "{what}: {r}");
}

/// The readings of ombrask-ob3 before and after one batch agree with its answer.
fn check_ingest(
    before: &BTreeMap<(String, String), Value>,
    after: &BTreeMap<(String, String), Value>,
    a: &Answer,
    what: &str,
) {
    if a.status != 200 {
        assert!(
            before == after,
            "{what}: a refused batch ({}) changed the stored readings",
            a.status
        );
        return;
    }
    let answer = a.json();
    let count = |k: &str| {
        answer[k]
            .as_u64()
            .unwrap_or_else(|| panic!("{what}: no {k} in {answer}")) as usize
    };
    let mut changed = 0;
    for (key, was) in before {
        let now = after
            .get(key)
            .unwrap_or_else(|| panic!("{what}: the stored reading {key:?} disappeared"));
        // Values bit for bit: -0 and 0 are different numbers to a historian's resend.
        let bits = |r: &Value| r["value"].as_f64().map(f64::to_bits);
        let same = bits(now) == bits(was) && now["quality"] == was["quality"];
        if same {
            assert_eq!(now, was, "{what}: an unchanged reading was rewritten");
        } else {
            changed += 1;
        }
    }
    let added = after.keys().filter(|k| !before.contains_key(*k)).count();
    assert_eq!(added, count("accepted"), "{what}: {answer}");
    assert_eq!(changed, count("replaced"), "{what}: {answer}");
    let listed = answer["rejections"].as_array().map_or(0, Vec::len);
    assert_eq!(listed, count("rejected").min(10_000), "{what}: {answer}");
    for r in after.values() {
        check_stored(r, what);
    }
}

async fn readings_batches(fx: &mut Fixture, count: usize, json: bool) {
    let family = if json {
        "JSON readings"
    } else {
        "CSV readings"
    };
    let cases = generate(family, count, batch_case(json));
    let media = if json { "application/json" } else { "text/csv" };
    let mut stored = fx.readings(SCRATCH).await;
    let mut budget = Budget::new(family, cases.len());
    for (i, case) in cases.iter().enumerate() {
        if budget.spent() {
            break;
        }
        let body = case.body();
        let what = describe(family, i, case, &body);
        let oversize = body.len() > MAX_BODY;
        let a = fx.post_readings(SCRATCH, Some(media), body, &what).await;
        let want: &[u16] = if oversize { &[413] } else { &[200, 400] };
        expect(&a, want, &what);
        let after = fx.readings(SCRATCH).await;
        check_ingest(&stored, &after, &a, &what);
        stored = after;
        budget.count(a.status);
    }
    budget.done();
}

/// A few readings of ombrask-ob3, as CSV and as JSON.
fn scratch_batch() -> (Vec<u8>, Vec<u8>) {
    let mut csv = String::from("tag,time,value,quality\n");
    let mut rows = Vec::new();
    for (tag, value) in OMBRASK_TAGS {
        csv += &format!("{tag},2026-05-06T10:00:07Z,{value},good\n");
        rows.push(json!({"tag": tag, "time": "2026-05-06T10:00:07Z", "value": value}));
    }
    let json = serde_json::to_string_pretty(&json!({ "readings": rows })).expect("JSON");
    (csv.into_bytes(), json.into_bytes())
}

/// Readings with every kind of Content-Type. Types the contract refuses, and bodies of the
/// other format, go to ombrask-ob2 (refused whole); the contract's types spelt with parameters
/// or capitals go to ombrask-ob3 and must be read.
async fn readings_media_types(fx: &mut Fixture) {
    let (csv, json) = scratch_batch();
    let utf16: Vec<u8> = [0xFFu8, 0xFE]
        .into_iter()
        .chain(
            String::from_utf8(csv.clone())
                .expect("UTF-8")
                .encode_utf16()
                .flat_map(u16::to_le_bytes),
        )
        .collect();
    let multipart = [
        &b"--ombrask\r\nContent-Disposition: form-data; name=\"readings\"; filename=\"r.csv\"\r\nContent-Type: text/csv\r\n\r\n"[..],
        &csv,
        b"\r\n--ombrask--\r\n",
    ]
    .concat();
    let refused: Vec<(&str, Vec<u8>, Option<&str>, u16)> = vec![
        ("no Content-Type", csv.clone(), None, 415),
        ("an empty Content-Type", csv.clone(), Some(""), 415),
        ("text/plain", csv.clone(), Some("text/plain"), 415),
        (
            "text/plain with a charset",
            csv.clone(),
            Some("text/plain; charset=utf-8"),
            415,
        ),
        (
            "multipart",
            multipart,
            Some("multipart/form-data; boundary=ombrask"),
            415,
        ),
        (
            "a form",
            csv.clone(),
            Some("application/x-www-form-urlencoded"),
            415,
        ),
        ("xml", csv.clone(), Some("application/xml"), 415),
        ("application/csv", csv.clone(), Some("application/csv"), 415),
        ("text/csvx", csv.clone(), Some("text/csvx"), 415),
        (
            "problem+json",
            json.clone(),
            Some("application/problem+json"),
            415,
        ),
        ("a wildcard", csv.clone(), Some("*/*"), 415),
        ("only parameters", csv.clone(), Some("; charset=utf-8"), 415),
        ("TOML", csv.clone(), Some("application/toml"), 415),
        (
            "CSV sent as JSON",
            csv.clone(),
            Some("application/json"),
            400,
        ),
        (
            "CSV sent as JSON with a charset",
            csv.clone(),
            Some("application/json; charset=utf-8"),
            400,
        ),
        ("JSON sent as CSV", json.clone(), Some("text/csv"), 400),
        (
            "JSON sent as CSV with a charset",
            json.clone(),
            Some("text/csv; charset=utf-8"),
            400,
        ),
        ("UTF-16 CSV", utf16, Some("text/csv; charset=utf-16"), 400),
    ];
    let mut budget = Budget::new("readings media types", refused.len() + 5);
    for (name, body, media, want) in refused {
        let what = format!("readings media types: {name} ({media:?})");
        let a = fx.post_readings(PLANT, media, body, &what).await;
        expect(&a, &[want], &what);
        budget.count(a.status);
    }
    let read: Vec<(&str, Vec<u8>, &str)> = vec![
        ("CSV with a charset", csv.clone(), "text/csv; charset=utf-8"),
        ("CSV in capitals", csv.clone(), "TEXT/CSV"),
        ("CSV with spaces", csv.clone(), "text/csv ; header=present"),
        (
            "JSON with a charset",
            json.clone(),
            "application/json; charset=utf-8",
        ),
        ("JSON in capitals", json.clone(), "Application/JSON"),
    ];
    for (name, body, media) in read {
        let what = format!("readings media types: {name} ({media:?})");
        let before = fx.readings(SCRATCH).await;
        let a = fx.post_readings(SCRATCH, Some(media), body, &what).await;
        expect(&a, &[200], &what);
        let answer = a.json();
        let n = |k: &str| answer[k].as_u64().unwrap_or(0);
        assert_eq!(
            n("accepted") + n("replaced") + n("unchanged"),
            OMBRASK_TAGS.len() as u64,
            "{what}: {answer}"
        );
        assert_eq!(n("rejected"), 0, "{what}: {answer}");
        check_ingest(&before, &fx.readings(SCRATCH).await, &a, &what);
        budget.count(a.status);
    }
    budget.done();
}

/// Readings nested far past any parser's limit: refused whole with 400, on ombrask-ob2.
async fn readings_nesting(fx: &mut Fixture) {
    let deep = 100_000;
    let one = "{\"tag\": \"OB2-FI-101\", \"time\": \"2026-03-02T00:00:00Z\", \"value\": ";
    let cases: Vec<(&str, String, &str)> = vec![
        (
            "100,000 open brackets",
            "[".repeat(deep),
            "application/json",
        ),
        (
            "100,000 closed brackets",
            Nest::Array.render(deep),
            "application/json",
        ),
        (
            "readings nested 100,000 deep",
            format!("{{\"readings\": {}}}", Nest::Array.render(deep)),
            "application/json",
        ),
        (
            "a value nested 100,000 deep",
            format!("{{\"readings\": [{one}{}}}]}}", Nest::Array.render(deep)),
            "application/json",
        ),
        (
            "objects nested 40,000 deep",
            Nest::JsonObject.render(40_000),
            "application/json",
        ),
        (
            "readings of objects nested 40,000 deep",
            format!("{{\"readings\": [{}]}}", Nest::JsonObject.render(40_000)),
            "application/json",
        ),
        ("100,000 open braces", "{".repeat(deep), "application/json"),
        ("brackets as CSV", Nest::Array.render(deep), "text/csv"),
        (
            "a CSV header of 100,000 quotes",
            "\"".repeat(deep),
            "text/csv",
        ),
    ];
    let mut budget = Budget::new("readings nesting", cases.len());
    for (name, body, media) in cases {
        let body = body.into_bytes();
        assert!(body.len() <= MAX_BODY);
        let what = format!("readings nesting: {name}, body {}", preview(&body));
        let a = fx.post_readings(PLANT, Some(media), body, &what).await;
        expect(&a, &[400], &what);
        budget.count(a.status);
    }
    budget.done();
}

// ---------------------------------------------------------------------------------------------
// Oversize bodies and HTTP framing, over a bare connection where a client library will not go

struct RawAnswer {
    status: u16,
    ctype: String,
    body: Vec<u8>,
}

/// Send `bytes` on a new connection (the writing half stays open), read until the server
/// closes or `wait` passes; the answer, if one came.
async fn raw(base: &str, bytes: Vec<u8>, wait: Duration) -> Option<RawAnswer> {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};
    let addr = base.trim_start_matches("http://");
    let stream = tokio::net::TcpStream::connect(addr)
        .await
        .expect("connect to the service");
    let (mut rd, mut wr) = stream.into_split();
    // A server that answers before reading everything stops reading: write aside.
    let writer = tokio::spawn(async move {
        let _ = wr.write_all(&bytes).await;
        wr
    });
    let mut out = Vec::new();
    let _ = tokio::time::timeout(wait, async {
        let mut buf = vec![0u8; 16 * 1024];
        loop {
            match rd.read(&mut buf).await {
                Ok(0) | Err(_) => break,
                Ok(n) => out.extend_from_slice(&buf[..n]),
            }
        }
    })
    .await;
    writer.abort();
    let end = out.windows(4).position(|w| w == b"\r\n\r\n")?;
    let head = String::from_utf8_lossy(&out[..end]).to_string();
    let status = head.split_whitespace().nth(1)?.parse().ok()?;
    let header = |name: &str| {
        head.lines()
            .filter_map(|l| l.split_once(':'))
            .find(|(k, _)| k.trim().eq_ignore_ascii_case(name))
            .map(|(_, v)| v.trim().to_string())
    };
    let mut body = out[end + 4..].to_vec();
    if let Some(n) = header("content-length").and_then(|n| n.parse::<usize>().ok()) {
        body.truncate(n);
    }
    Some(RawAnswer {
        status,
        ctype: header("content-type").unwrap_or_default(),
        body,
    })
}

fn request_head(method: &str, path: &str, token: &str, headers: &[u8]) -> Vec<u8> {
    let mut head = format!(
        "{method} {path} HTTP/1.1\r\nHost: loopbal\r\nConnection: close\r\n\
         Authorization: Bearer {token}\r\n"
    )
    .into_bytes();
    head.extend_from_slice(headers);
    head.extend_from_slice(b"\r\n");
    head
}

fn chunked(body: &[u8], piece: usize) -> Vec<u8> {
    let mut out = Vec::with_capacity(body.len() + body.len() / piece * 8 + 8);
    for c in body.chunks(piece) {
        out.extend_from_slice(format!("{:x}\r\n", c.len()).as_bytes());
        out.extend_from_slice(c);
        out.extend_from_slice(b"\r\n");
    }
    out.extend_from_slice(b"0\r\n\r\n");
    out
}

/// Valid readings of ombrask-ob2, past the body limit: stored only if the limit failed.
fn oversized_csv() -> Vec<u8> {
    let mut csv = String::from("tag,time,value,quality\n");
    let mut k = 0u64;
    while csv.len() <= MAX_BODY + 4096 {
        let (tag, value) = OMBRASK_TAGS[(k % 11) as usize];
        let (day, second) = (k / 11 / 86_400, k / 11 % 86_400);
        csv += &format!(
            "{tag},2026-04-{:02}T{:02}:{:02}:{:02}Z,{value},good\n",
            1 + day,
            second / 3600,
            second / 60 % 60,
            second % 60
        );
        k += 1;
    }
    csv.into_bytes()
}

struct RawCase {
    name: &'static str,
    bytes: Vec<u8>,
    /// The statuses the contract allows.
    want: &'static [u16],
    /// Malformed HTTP, which hyper answers before a request exists (an empty 4xx), or which
    /// it may pass on to the service.
    protocol: bool,
    /// The answer must come within this time.
    within: Duration,
}

/// Bodies past `--max-body-bytes` on every endpoint that takes one, with Content-Length and
/// chunked; Content-Length lies; bodies that stall; malformed chunks and requests. All go to
/// ombrask-ob2 and must be refused.
async fn oversize_and_framing(fx: &mut Fixture) {
    let limit = MAX_BODY.to_string();
    let big_csv = oversized_csv();
    let mut big_model = support::ombrask_model();
    while big_model.len() <= MAX_BODY {
        big_model.push_str("# padding of the ombrask model past the body limit\n");
    }
    let big_note = json!({"kind": "checked", "text": "x".repeat(MAX_BODY)}).to_string();

    let readings = format!("/api/v1/plants/{PLANT}/readings");
    let model = format!("/api/v1/plants/{PLANT}/model?effective_from={FUTURE}");
    let note = format!("/api/v1/plants/{PLANT}/meters/OB2-FI-101/notes");
    let quick = Duration::from_secs(5);
    let stall = Duration::from_secs(REQUEST_TIMEOUT_S + 10);
    let with = |method: &str, path: &str, token: &str, headers: &[u8], body: &[u8]| {
        let mut bytes = request_head(method, path, token, headers);
        bytes.extend_from_slice(body);
        bytes
    };
    let csv_chunked: &[u8] = b"Content-Type: text/csv\r\nTransfer-Encoding: chunked\r\n";
    let header = b"tag,time,value\n";
    let (ingest, admin, maintain, read) = (&fx.ingest, &fx.admin, &fx.maintain, &fx.read);
    let case = |name, bytes, want, protocol, within| RawCase {
        name,
        bytes,
        want,
        protocol,
        within,
    };
    let many_headers: String = (0..200)
        .map(|i| format!("X-Ombrask-{i}: {i}\r\n"))
        .collect();
    let cases =
        vec![
        case("chunked readings past the limit",
            with("POST", &readings, ingest, csv_chunked, &chunked(&big_csv, 8192)),
            &[413], false, quick),
        case("chunked readings past the limit in one chunk",
            with("POST", &readings, ingest, csv_chunked, &chunked(&big_csv, big_csv.len())),
            &[413], false, quick),
        case("a chunked model past the limit",
            with("PUT", &model, admin,
                b"Content-Type: application/toml\r\nTransfer-Encoding: chunked\r\n",
                &chunked(big_model.as_bytes(), 4096)),
            &[413], false, quick),
        case("a chunked note past the limit",
            with("POST", &note, maintain,
                b"Content-Type: application/json\r\nTransfer-Encoding: chunked\r\n",
                &chunked(big_note.as_bytes(), 4096)),
            &[413], false, quick),
        case("readings with a Content-Length of a terabyte",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 1000000000000\r\n", header),
            &[408, 413], false, stall),
        case("a model with a Content-Length of a terabyte",
            with("PUT", &model, admin,
                b"Content-Type: application/toml\r\nContent-Length: 1000000000000\r\n", b"name = "),
            &[408, 413], false, stall),
        case("a note with a Content-Length of a terabyte",
            with("POST", &note, maintain,
                b"Content-Type: application/json\r\nContent-Length: 1000000000000\r\n", b"{"),
            &[408, 413], false, stall),
        case("a body that stalls",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 100\r\n", header),
            &[408], false, stall),
        case("a chunked body that stalls",
            with("POST", &readings, ingest, csv_chunked, b"f\r\ntag,time,value\n\r\n"),
            &[408], false, stall),
        case("a malformed chunk size",
            with("POST", &readings, ingest, csv_chunked, b"zz\r\ntag,time,value\n\r\n0\r\n\r\n"),
            &[400], false, quick),
        case("a chunk longer than it says",
            with("POST", &readings, ingest, csv_chunked, b"2\r\ntag,time,value\n\r\n0\r\n\r\n"),
            &[400], false, quick),
        case("a Content-Type of bytes that are not text",
            with("POST", &readings, ingest,
                b"Content-Type: text/\xff\xfe\r\nContent-Length: 15\r\n", header),
            &[415], true, quick),
        case("a negative Content-Length",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: -5\r\n", header),
            &[400], true, quick),
        case("two Content-Lengths",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 10\r\nContent-Length: 15\r\n", header),
            &[400], true, quick),
        case("Content-Length beside chunked",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 3\r\nTransfer-Encoding: chunked\r\n",
                b"0\r\n\r\n"),
            &[400], true, quick),
        case("a request line of garbage",
            b"\x00\x01\x02 / HTTP/1.1\r\n\r\n".to_vec(), &[400], true, quick),
        case("HTTP/9.9",
            b"GET /healthz HTTP/9.9\r\nHost: loopbal\r\n\r\n".to_vec(), &[400], true, quick),
        case("a path of 70,000 bytes",
            request_head("GET", &format!("/api/v1/plants/{}/model", "k".repeat(70_000)), read, b""),
            &[414], true, quick),
        case("a NUL in the path",
            request_head("GET", "/api/v1/plants/ombrask\0ob2/model", read, b""),
            &[400], true, quick),
        case("200 headers",
            request_head("GET", "/healthz", read, many_headers.as_bytes()),
            &[431], true, quick),
    ];
    let mut budget = Budget::new("oversize and framing", cases.len() + 3);

    // With Content-Length, through the client library.
    for (name, path, token, media, body) in [
        (
            "readings",
            readings.clone(),
            ingest,
            "text/csv",
            big_csv.clone(),
        ),
        (
            "a model",
            model.clone(),
            admin,
            "application/toml",
            big_model.clone().into_bytes(),
        ),
        (
            "a note",
            note.clone(),
            maintain,
            "application/json",
            big_note.clone().into_bytes(),
        ),
    ] {
        let what = format!("oversize: {name} with Content-Length");
        let method = if name == "a model" {
            Method::PUT
        } else {
            Method::POST
        };
        let req =
            fx.c.request(method, fx.s.url(&path))
                .bearer_auth(token)
                .header("content-type", media)
                .body(body);
        let a = send(req, &what).await;
        expect(&a, &[413], &what);
        assert!(a.text().contains(&limit), "{what}: {}", a.text());
        budget.count(a.status);
    }

    // Over bare connections, all at once (two of them wait out the request timeout).
    let running: Vec<_> = cases
        .into_iter()
        .map(|case| {
            let base = fx.s.base.clone();
            tokio::spawn(async move {
                let started = Instant::now();
                let answer = raw(&base, case.bytes.clone(), case.within).await;
                (case, answer, started.elapsed())
            })
        })
        .collect();
    for task in running {
        let (case, answer, took) = task.await.expect("a framing case ran");
        let what = format!("framing: {}", case.name);
        let a = answer.unwrap_or_else(|| panic!("{what}: no answer within {:?}", case.within));
        let a = Answer {
            status: a.status,
            ctype: a.ctype,
            body: a.body,
        };
        if case.protocol && a.ctype.is_empty() {
            // hyper's own answer: no body to check.
            assert!(
                case.want.contains(&a.status),
                "{what}: answered {}, expected one of {:?}",
                a.status,
                case.want
            );
        } else if case.protocol {
            // Passed on to the service, which must refuse it as a client error.
            check(&a, &what);
            assert!(
                (400..500).contains(&a.status),
                "{what}: answered {}",
                a.status
            );
        } else {
            expect(&a, case.want, &what);
        }
        assert!(took <= case.within, "{what}: answered only after {took:?}");
        budget.count(a.status);
    }
    budget.done();
}

// ---------------------------------------------------------------------------------------------
// Paths and query strings

/// Plant path segments, as sent (percent-encoding included).
const PLANT_SEGMENTS: &[&str] = &[
    PLANT,
    PLANT,
    PLANT,
    PLANT,
    SCRATCH,
    "ombrask-ob9",
    "OMBRASK-OB2",
    "..",
    ".",
    "%2E%2E",
    "..%2F..%2Fetc",
    "%00",
    "ombrask-ob2%00",
    "ombrask%00ob2",
    "ombrask%2Fob2",
    "%FF",
    "%C0%AE%C0%AE",
    "%E2%80%AE",
    "%20",
    "ombrask-ob2%20",
    ".hidden",
    "-",
    "ombrask-ob2;drop",
    "%25",
    "%",
];

/// Times in a query or a path, as sent (percent-encoding included).
const TIMES: &[&str] = &[
    "2026-03-02T00:00:00Z",
    "2026-03-02T01:00:00Z",
    "2026-03-02T03:00:00Z",
    "2026-03-02T01:30:00Z",
    "0000-01-01T00:00:00Z",
    "9999-12-31T23:59:59Z",
    "9999-12-31T23:59:59-23:59",
    "0000-01-01T00:00:00%2B23:59",
    "2026-03-02T00:00:00.999999999Z",
    "2026-06-30T23:59:60Z",
    "2026-03-02T00:00:00%2B01:00",
    "2026-03-02T00:00:00+01:00",
    "yesterday",
    "",
    "%00",
    "2026-03-02T00:00:00Z%00",
    "2026-02-30T00:00:00Z",
    "-2026-03-02T00:00:00Z",
    "2026-03-02T00:00:00%2B99:00",
    "%FF%FE",
    "1772409600",
    "2026-03-02",
    "%2B275760-09-13T00:00:00Z",
];

/// The time the service reads from `raw` in a query string (where `+` is a space) or a path.
fn decoded_time(raw: &str, in_query: bool) -> Option<chrono::DateTime<chrono::FixedOffset>> {
    if in_query && raw.contains('+') {
        return None;
    }
    let text = raw.replace("%2B", "+");
    if text.contains('%') {
        return None;
    }
    chrono::DateTime::parse_from_rfc3339(text.trim()).ok()
}

/// Whether a path segment percent-decodes to UTF-8 (else the router's extractor refuses it).
fn decodes(segment: &str) -> bool {
    let b = segment.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut k = 0;
    while k < b.len() {
        let hex = b.get(k + 1..k + 3).and_then(|h| {
            std::str::from_utf8(h)
                .ok()
                .and_then(|h| u8::from_str_radix(h, 16).ok())
        });
        match (b[k], hex) {
            (b'%', Some(v)) => {
                out.push(v);
                k += 3;
            }
            (c, _) => {
                out.push(c);
                k += 1;
            }
        }
    }
    String::from_utf8(out).is_ok()
}

const QUERY_TAGS: &[&str] = &[
    "OB2-FI-101",
    "OB2-AI-402",
    "OB2-FI-999",
    "%00",
    "OB2-FI-101%00",
    "..",
    "%2F",
    "%FF",
    "ob2-fi-101",
];

const JUNK: &[&str] = &[
    "",
    "",
    "",
    "&from=2026-03-02T02:00:00Z",
    "&%00=1",
    "&tag[]=1",
    "&&&",
    "&=",
    "&name=%00",
    "&format=csv",
    "&format=%FF",
    "&x=%",
];

const ENDPOINTS: usize = 11;

#[derive(Debug, Clone)]
struct QueryCase {
    endpoint: usize,
    method: &'static str,
    plant: &'static str,
    from: Option<&'static str>,
    to: Option<&'static str>,
    start: &'static str,
    tag: &'static str,
    /// A plant name of this many letters instead.
    long: Option<usize>,
    junk: &'static str,
}

fn query_time() -> impl Strategy<Value = Option<&'static str>> {
    prop_oneof![
        6 => prop::sample::select(TIMES).prop_map(Some),
        1 => Just(None),
    ]
}

fn query_case() -> impl Strategy<Value = QueryCase> {
    (
        0..ENDPOINTS,
        prop_oneof![
            12 => Just("GET"),
            1 => prop::sample::select(vec!["DELETE", "PATCH", "OPTIONS", "TRACE"]),
        ],
        prop::sample::select(PLANT_SEGMENTS),
        query_time(),
        query_time(),
        prop::sample::select(TIMES),
        prop::sample::select(QUERY_TAGS),
        prop_oneof![
            8 => Just(None),
            1 => prop::sample::select(vec![65usize, 300, 8_000]).prop_map(Some),
        ],
        prop::sample::select(JUNK),
    )
        .prop_map(
            |(endpoint, method, plant, from, to, start, tag, long, junk)| QueryCase {
                endpoint,
                method,
                plant,
                from,
                to,
                start,
                tag,
                long,
                junk,
            },
        )
}

impl QueryCase {
    /// Endpoints 9 (re-run a period) and 10 (PUT a model with `effective_from`) may change a
    /// plant's data: they are sent to ombrask-ob3 when the case names ombrask-ob2.
    fn writes(&self) -> bool {
        self.endpoint >= 9
    }

    fn plant(&self) -> String {
        match self.long {
            Some(n) => "k".repeat(n),
            None if self.writes() && self.plant == PLANT => SCRATCH.into(),
            None => self.plant.into(),
        }
    }

    /// The method, the URL, the token and the body.
    fn request(&self, fx: &Fixture) -> (Method, String, String, Option<Vec<u8>>) {
        let (method, token) = match self.endpoint {
            9 => ("POST", &fx.admin),
            10 => ("PUT", &fx.admin),
            _ => (self.method, &fx.read),
        };
        let mut range = String::new();
        if let Some(t) = self.from {
            range += &format!("&from={t}");
        }
        if let Some(t) = self.to {
            range += &format!("&to={t}");
        }
        let base = format!("/api/v1/plants/{}", self.plant());
        let (start, tag, junk) = (self.start, self.tag, self.junk);
        let path = match self.endpoint {
            0 => format!("{base}/model?{junk}"),
            1 => format!("{base}/model/revisions?{junk}"),
            2 => format!("{base}/readings?tag={tag}{range}{junk}"),
            3 => format!("{base}/periods?{range}{junk}"),
            4 => format!("{base}/periods/{start}?{junk}"),
            5 => format!("{base}/figures?name=single_pass_conversion{range}{junk}"),
            6 => format!("{base}/balances?{range}{junk}"),
            7 => format!("{base}/meters?{junk}"),
            8 => format!("{base}/meters/{tag}?{junk}"),
            9 => format!("{base}/periods/{start}/reconcile?{junk}"),
            _ => format!("{base}/model?effective_from={start}{junk}"),
        };
        let body = (self.endpoint == 10).then(|| scratch_model().into_bytes());
        (
            Method::from_bytes(method.as_bytes()).expect("a method"),
            fx.s.url(&path),
            token.clone(),
            body,
        )
    }

    /// The statuses the contract allows where it is specific; `None` where only the general
    /// rules apply.
    fn expected(&self) -> Option<Vec<u16>> {
        // A dot segment is resolved away by the client: no route has the path left.
        if self.long.is_none() && ["..", ".", "%2E%2E"].contains(&self.plant) {
            return Some(vec![404]);
        }
        if !self.writes() && self.method != "GET" {
            return matches!(self.method, "DELETE" | "PATCH").then(|| vec![405]);
        }
        if self.long.is_some() || !self.junk.is_empty() {
            return None;
        }
        let mut segments = vec![self.plant];
        match self.endpoint {
            4 | 9 => segments.push(self.start),
            8 => segments.push(self.tag),
            _ => {}
        }
        if !segments.iter().all(|s| decodes(s)) || (self.endpoint == 8 && self.tag == "..") {
            return (self.tag != "..").then(|| vec![400]);
        }
        let ranged = matches!(self.endpoint, 2 | 3 | 5 | 6);
        let from = self.from.and_then(|t| decoded_time(t, true));
        let to = self.to.and_then(|t| decoded_time(t, true));
        let range_ok = matches!((from, to), (Some(f), Some(t)) if f < t);
        if ranged && !range_ok {
            return Some(vec![400]);
        }
        let ours = [PLANT, SCRATCH].contains(&self.plant);
        let unknown = ["ombrask-ob9", "OMBRASK-OB2"].contains(&self.plant);
        let start_ok = decoded_time(self.start, self.endpoint == 10).is_some();
        match self.endpoint {
            0 | 1 | 7 if ours => Some(vec![200]),
            8 if ours && ["OB2-FI-101", "OB2-AI-402"].contains(&self.tag) => Some(vec![200]),
            0..=9 if unknown => Some(vec![404]),
            8 if ours => Some(vec![404]),
            4 | 9 if ours && !start_ok => Some(vec![400]),
            10 if !start_ok => Some(vec![400]),
            10 if unknown => Some(vec![422]),
            10 if ours => Some(vec![201]),
            _ => None,
        }
    }
}

async fn queries(fx: &mut Fixture, count: usize) {
    let cases = generate("queries", count, query_case());
    let mut budget = Budget::new("queries", cases.len());
    for (i, case) in cases.iter().enumerate() {
        if budget.spent() {
            break;
        }
        let (method, url, token, body) = case.request(fx);
        let what = format!(
            "queries case {i} (seed {}): {case:?}: {method} {url}",
            seed()
        );
        let mut req = fx.c.request(method, &url).bearer_auth(token);
        if let Some(body) = body {
            req = req.header("content-type", "application/toml").body(body);
        }
        let a = send(req, &what).await;
        check(&a, &what);
        if let Some(want) = case.expected() {
            expect(&a, &want, &what);
        }
        if a.status == 200 {
            let ours = [PLANT, SCRATCH].contains(&case.plant) && case.long.is_none();
            assert!(
                ours,
                "{what}: a 200 for a plant that does not exist: {}",
                a.text()
            );
            if a.ctype.starts_with("application/json") {
                serde_json::from_slice::<Value>(&a.body)
                    .unwrap_or_else(|e| panic!("{what}: a 200 that is not JSON ({e})"));
            }
        }
        budget.count(a.status);
    }
    budget.done();
}

// ---------------------------------------------------------------------------------------------
// Technicians' notes

const NOTE_KINDS: &[&str] = &[
    "checked",
    "recalibrated",
    "replaced",
    "",
    "CHECKED",
    " checked ",
    "broken",
    "checked\u{0}",
];

const NOTE_TAGS: &[&str] = &[
    "OB2-FI-101",
    "OB2-FI-201",
    "OB2-AI-402",
    "OB2-FI-999",
    "%00",
    "OB2-FI-101%00",
    "..",
    "%FF",
];

#[derive(Debug, Clone)]
struct NoteCase {
    tag: &'static str,
    kind: &'static str,
    text: Text,
    effective_at: Option<&'static str>,
    extra: bool,
    edits: Vec<Edit>,
    media: Option<&'static str>,
}

fn note_case() -> impl Strategy<Value = NoteCase> {
    let text = prop_oneof![
        4 => prop::sample::select(vec!["zero checked", "", "\u{0}", "a\u{0}b", "\u{202e}", "\n\t", "Ω😀"])
            .prop_map(Text::Word),
        1 => (
            prop::sample::select(vec!['x', 'é', '😀']),
            prop::sample::select(vec![4_000usize, 4_001, 100_000]),
        )
            .prop_map(|(c, n)| Text::Repeat(c, n)),
    ];
    (
        prop_oneof![4 => prop::sample::select(&NOTE_TAGS[..3]), 1 => prop::sample::select(NOTE_TAGS)],
        prop_oneof![4 => prop::sample::select(&NOTE_KINDS[..3]), 1 => prop::sample::select(NOTE_KINDS)],
        text,
        prop_oneof![2 => Just(None), 3 => prop::sample::select(TIMES).prop_map(Some)],
        prop::bool::weighted(0.1),
        prop_oneof![4 => Just(Vec::new()), 1 => prop::collection::vec(edit(), 1..=2)],
        prop_oneof![
            12 => Just(Some("application/json")),
            1 => prop::sample::select(vec![None, Some("text/plain"), Some("application/json; charset=utf-8"), Some("text/csv")]),
        ],
    )
        .prop_map(|(tag, kind, text, effective_at, extra, edits, media)| NoteCase {
            tag,
            kind,
            text,
            effective_at,
            extra,
            edits,
            media,
        })
}

impl NoteCase {
    fn body(&self) -> Vec<u8> {
        let mut note = json!({"kind": self.kind, "text": self.text.render()});
        if let Some(t) = self.effective_at {
            // The times are written for URLs; in JSON they are plain text.
            note["effective_at"] = json!(t.replace("%2B", "+"));
        }
        if self.extra {
            note["by"] = json!("night shift");
        }
        let mut body = note.to_string().into_bytes();
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    /// The status the contract promises, when the case is clean enough to say.
    fn expected(&self) -> Option<u16> {
        // A dot segment is resolved away by the client: no route has the path left.
        if self.tag == ".." {
            return Some(404);
        }
        if !self.edits.is_empty() || self.media != Some("application/json") {
            return None;
        }
        let text = self.text.render();
        let time_ok = self
            .effective_at
            .is_none_or(|t| decoded_time(t, false).is_some());
        let refused = self.extra
            || !["checked", "recalibrated", "replaced"].contains(&self.kind.trim())
            || text.chars().count() > 4_000
            || text.contains('\0')
            || !time_ok;
        if refused {
            Some(400)
        } else if NOTE_TAGS[..3].contains(&self.tag) {
            Some(201)
        } else {
            Some(404)
        }
    }
}

async fn notes(fx: &mut Fixture, count: usize) {
    let cases = generate("notes", count, note_case());
    let mut budget = Budget::new("notes", cases.len());
    for (i, case) in cases.iter().enumerate() {
        if budget.spent() {
            break;
        }
        let body = case.body();
        let what = describe("notes", i, case, &body);
        let known = NOTE_TAGS[..3].contains(&case.tag);
        let notes_of = |detail: Value| detail["notes"].as_array().cloned().unwrap_or_default();
        let before = if known {
            notes_of(
                fx.get(
                    &format!("/api/v1/plants/{SCRATCH}/meters/{}", case.tag),
                    &[],
                )
                .await,
            )
        } else {
            Vec::new()
        };
        let oversize = body.len() > MAX_BODY;
        let a = fx
            .post_note(SCRATCH, case.tag, case.media, body, &what)
            .await;
        check(&a, &what);
        if oversize {
            expect(&a, &[413], &what);
        } else if let Some(want) = case.expected() {
            expect(&a, &[want], &what);
        }
        if known {
            let after = notes_of(
                fx.get(
                    &format!("/api/v1/plants/{SCRATCH}/meters/{}", case.tag),
                    &[],
                )
                .await,
            );
            if a.status == 201 {
                // Notes are listed by when they took effect: the new one may come anywhere.
                assert_eq!(after.len(), before.len() + 1, "{what}");
                assert!(
                    before.iter().all(|n| after.contains(n)),
                    "{what}: {after:?}"
                );
                assert!(
                    after.iter().any(|n| n["id"] == a.json()["id"]),
                    "{what}: {after:?}"
                );
            } else {
                assert_eq!(after, before, "{what}: a refused note changed the notes");
            }
        }
        budget.count(a.status);
    }
    budget.done();
}
