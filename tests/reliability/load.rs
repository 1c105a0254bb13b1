//! Sustained load: several historians posting and several engineers reading at once, for 60 s
//! (`LOOPBAL_LOAD_SECONDS` to change it), with the scheduler running periods all the while.
//!
//! One `loopbal serve` (`--run-grace 0 --run-tick 1`, so every posted hour is due at once and
//! period runs go on beside the requests) with three plants of the ombrask model under invented
//! names. Time is compressed: a historian posts the next hour of its plant every
//! [`HISTORIAN_PAUSE`] (one batch: every tag of the plant at :00, :15, :30 and :45, CSV or JSON),
//! and now and then replaces an hour it posted earlier (a late correction) or resends the hour
//! it just posted (a retry). Two historians share one plant, taking alternate hours. Engineers
//! read what engineers read: the period list, a period's report, figures, balances, meter
//! health, one meter's history, stored readings.
//!
//! Asserted: every answer is the expected 2xx with the expected counts (a transport error or
//! any other status stops the load and fails the test with the body), the server logs no
//! error and no panic and exits 0 on SIGTERM, every reading posted is stored with its last
//! value and quality, some periods were run during the load and every posted period has a
//! current run afterwards. Speed is printed (p50, p99 and max per kind of request; `--nocapture`
//! shows it), never asserted: docs/performance.md has the figures.
//!
//!     LOOPBAL_LOAD_SECONDS=10 cargo test -p loopbal-server --test reliability -- --nocapture load

use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::sync::atomic::{AtomicBool, AtomicI64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use chrono::{DateTime, TimeDelta, TimeZone, Utc};
use rand::{Rng, SeedableRng};
use reqwest::{Client, StatusCode};
use serde_json::{json, Value};

use crate::support::{client, ombrask_model, token_on, Backend, Server, OMBRASK_TAGS};

/// The environment variable giving the load's length in seconds.
const SECONDS_VAR: &str = "LOOPBAL_LOAD_SECONDS";
const DEFAULT_SECONDS: u64 = 60;
const PLANTS: [&str; 3] = ["pellworm-a1", "hallig-b4", "sandvig-u2"];
const HISTORIANS: usize = 4;
const ENGINEERS: usize = 4;
/// A historian's pause between batches; an engineer's between reads.
const HISTORIAN_PAUSE: Duration = Duration::from_millis(50);
const ENGINEER_PAUSE: Duration = Duration::from_millis(50);
/// Readings of one tag in one hour (every 15 minutes).
const SAMPLES_PER_HOUR: usize = 4;
/// After the load, how long the scheduler gets to run every posted period.
const SETTLE_LIMIT: Duration = Duration::from_secs(180);

/// The two tests of the pair take turns, so each has the machine (and its latencies) to itself
/// within this suite.
static ONE_AT_A_TIME: tokio::sync::Mutex<()> = tokio::sync::Mutex::const_new(());

fn load_seconds() -> u64 {
    match std::env::var(SECONDS_VAR) {
        Ok(s) => s
            .trim()
            .parse::<u64>()
            .ok()
            .filter(|&n| n > 0)
            .unwrap_or_else(|| panic!("{SECONDS_VAR}={s:?}: expected a whole number of seconds")),
        Err(_) => DEFAULT_SECONDS,
    }
}

/// Hour 0 of every plant: the load posts hours from here on.
fn base() -> DateTime<Utc> {
    Utc.with_ymd_and_hms(2025, 3, 1, 0, 0, 0).unwrap()
}

fn hour_start(hour: i64) -> DateTime<Utc> {
    base() + TimeDelta::hours(hour)
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.format("%Y-%m-%dT%H:%M:%SZ").to_string()
}

/// What the load does, by kind of request.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Kind {
    PostCsv,
    PostJson,
    PostReplacement,
    PostResend,
    Periods,
    Report,
    Figures,
    Balances,
    Meters,
    Meter,
    Readings,
}

impl Kind {
    fn label(self) -> &'static str {
        match self {
            Kind::PostCsv => "POST readings, CSV hour",
            Kind::PostJson => "POST readings, JSON hour",
            Kind::PostReplacement => "POST readings, late replacement",
            Kind::PostResend => "POST readings, identical resend",
            Kind::Periods => "GET periods (24 h)",
            Kind::Report => "GET periods/{start} (report)",
            Kind::Figures => "GET figures (24 h)",
            Kind::Balances => "GET balances (24 h)",
            Kind::Meters => "GET meters",
            Kind::Meter => "GET meters/{tag}",
            Kind::Readings => "GET readings (3 h)",
        }
    }
}

/// What every task shares: the server, the clock, the latencies and the first errors.
struct Shared {
    base: String,
    http: Client,
    ingest: String,
    read: String,
    stop: AtomicBool,
    end: Instant,
    /// Per plant, the latest hour any historian has posted (-1: none yet).
    latest: Vec<AtomicI64>,
    latencies: Mutex<BTreeMap<Kind, Vec<Duration>>>,
    /// (plant, period start) of every period an engineer's listing showed as run during the
    /// load.
    seen_run: Mutex<BTreeSet<(usize, String)>>,
    errors: Mutex<Vec<String>>,
}

impl Shared {
    fn running(&self) -> bool {
        !self.stop.load(Ordering::Relaxed) && Instant::now() < self.end
    }

    /// Note an error and stop the load: the first errors are the informative ones.
    fn fail(&self, what: String) {
        self.stop.store(true, Ordering::Relaxed);
        let mut errors = self.errors.lock().unwrap();
        if errors.len() < 20 {
            errors.push(what);
        }
    }

    /// Send `req`, time it, and return the body of a 200 answer; anything else is an error.
    async fn send(&self, kind: Kind, what: &str, req: reqwest::RequestBuilder) -> Option<String> {
        let t = Instant::now();
        let res = match req.send().await {
            Ok(r) => r,
            Err(e) => {
                self.fail(format!("{what}: transport error: {e}"));
                return None;
            }
        };
        let status = res.status();
        let body = match res.text().await {
            Ok(b) => b,
            Err(e) => {
                self.fail(format!("{what}: answer {status}, body unreadable: {e}"));
                return None;
            }
        };
        let dt = t.elapsed();
        if status != StatusCode::OK {
            self.fail(format!("{what}: answered {status}: {body}"));
            return None;
        }
        self.latencies
            .lock()
            .unwrap()
            .entry(kind)
            .or_default()
            .push(dt);
        Some(body)
    }

    fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }
}

/// One reading as posted: its value and quality.
type Posted = BTreeMap<(String, DateTime<Utc>), (f64, &'static str)>;

fn csv_body(rows: &[(String, DateTime<Utc>, f64, &'static str)]) -> String {
    let mut text = String::from("tag,time,value,quality\n");
    for (tag, time, value, quality) in rows {
        let _ = writeln!(text, "{tag},{},{value},{quality}", rfc3339(*time));
    }
    text
}

fn json_body(rows: &[(String, DateTime<Utc>, f64, &'static str)]) -> String {
    let readings: Vec<Value> = rows
        .iter()
        .map(|(tag, time, value, quality)| {
            json!({"tag": tag, "time": rfc3339(*time), "value": value, "quality": quality})
        })
        .collect();
    json!({ "readings": readings }).to_string()
}

/// The four counts of an ingest answer.
fn counts(body: &str) -> Option<[u64; 4]> {
    let v: Value = serde_json::from_str(body).ok()?;
    let mut out = [0; 4];
    for (i, k) in ["accepted", "replaced", "unchanged", "rejected"]
        .iter()
        .enumerate()
    {
        out[i] = v[k].as_u64()?;
    }
    Some(out)
}

/// A historian: hours `lane`, `lane + lanes`, `lane + 2 lanes` … of plant `plant`, each a
/// batch of every tag, until the load ends. Returns what it stored, reading by reading.
async fn historian(shared: Arc<Shared>, id: usize, plant: usize, lane: i64, lanes: i64) -> Posted {
    let name = PLANTS[plant];
    let url = shared.url(&format!("/api/v1/plants/{name}/readings"));
    let mut rng = rand::rngs::StdRng::seed_from_u64(0x10ad + id as u64);
    let mut posted = Posted::new();
    let mut hours: Vec<i64> = Vec::new();
    let per_batch = (OMBRASK_TAGS.len() * SAMPLES_PER_HOUR) as u64;
    let mut k: usize = 0;
    while shared.running() {
        let hour = lane + k as i64 * lanes;
        // A new hour: every tag, a little noise about its plausible value; now and then one
        // reading is of uncertain quality.
        let mut rows = Vec::with_capacity(per_batch as usize);
        for (t, (tag, value)) in OMBRASK_TAGS.iter().enumerate() {
            for s in 0..SAMPLES_PER_HOUR {
                let time = hour_start(hour) + TimeDelta::minutes(15 * s as i64);
                let v = value * (1.0 + 0.001 * rng.gen_range(-1.0..1.0));
                let v = (v * 1e4).round() / 1e4;
                let quality = if k % 7 == 3 && t == 0 && s == 0 {
                    "uncertain"
                } else {
                    "good"
                };
                rows.push((tag.to_string(), time, v, quality));
            }
        }
        let (kind, body, ctype) = if (k + id).is_multiple_of(3) {
            (Kind::PostJson, json_body(&rows), "application/json")
        } else {
            (Kind::PostCsv, csv_body(&rows), "text/csv")
        };
        let what = format!("historian {id}: POST hour {hour} of {name}");
        let req = shared
            .http
            .post(&url)
            .bearer_auth(&shared.ingest)
            .header("content-type", ctype)
            .body(body.clone());
        let Some(answer) = shared.send(kind, &what, req).await else {
            break;
        };
        if counts(&answer) != Some([per_batch, 0, 0, 0]) {
            shared.fail(format!("{what}: expected {per_batch} accepted: {answer}"));
            break;
        }
        for (tag, time, v, q) in rows {
            posted.insert((tag, time), (v, q));
        }
        hours.push(hour);
        shared.latest[plant].fetch_max(hour, Ordering::Relaxed);

        // A retry of the same batch, as a historian that missed the answer would send it.
        if k % 13 == 12 {
            let what = format!("historian {id}: resend hour {hour} of {name}");
            let req = shared
                .http
                .post(&url)
                .bearer_auth(&shared.ingest)
                .header("content-type", ctype)
                .body(body);
            let Some(answer) = shared.send(Kind::PostResend, &what, req).await else {
                break;
            };
            if counts(&answer) != Some([0, 0, per_batch, 0]) {
                shared.fail(format!("{what}: expected {per_batch} unchanged: {answer}"));
                break;
            }
        }

        // A late correction: an hour posted a few batches ago, every value changed.
        if k % 10 == 9 {
            let old = hours[hours.len() - 4];
            let from = hour_start(old);
            let to = hour_start(old + 1);
            let mut rows = Vec::with_capacity(per_batch as usize);
            for (tag, _) in OMBRASK_TAGS {
                for ((tag, time), (v, q)) in
                    posted.range((tag.to_string(), from)..(tag.to_string(), to))
                {
                    rows.push((tag.clone(), *time, ((v * 1.002) * 1e4).round() / 1e4, *q));
                }
            }
            let what = format!("historian {id}: replace hour {old} of {name}");
            let req = shared
                .http
                .post(&url)
                .bearer_auth(&shared.ingest)
                .header("content-type", "text/csv")
                .body(csv_body(&rows));
            let Some(answer) = shared.send(Kind::PostReplacement, &what, req).await else {
                break;
            };
            if counts(&answer) != Some([0, per_batch, 0, 0]) {
                shared.fail(format!("{what}: expected {per_batch} replaced: {answer}"));
                break;
            }
            for (tag, time, v, q) in rows {
                posted.insert((tag, time), (v, q));
            }
        }
        k += 1;
        tokio::time::sleep(HISTORIAN_PAUSE).await;
    }
    posted
}

/// An engineer: one read after another, round the plants and the kinds of read.
async fn engineer(shared: Arc<Shared>, id: usize) {
    let kinds = [
        Kind::Periods,
        Kind::Report,
        Kind::Figures,
        Kind::Balances,
        Kind::Meters,
        Kind::Meter,
        Kind::Readings,
    ];
    // Per plant, the starts of periods a listing showed as run: their reports exist for good.
    let mut run: Vec<BTreeSet<String>> = vec![BTreeSet::new(); PLANTS.len()];
    let mut n = id;
    while shared.running() {
        let plant = n % PLANTS.len();
        let kind = kinds[(n / PLANTS.len()) % kinds.len()];
        n += 1;
        let name = PLANTS[plant];
        let latest = shared.latest[plant].load(Ordering::Relaxed);
        if latest < 0 {
            tokio::time::sleep(ENGINEER_PAUSE).await;
            continue;
        }
        let day = (
            rfc3339(hour_start((latest - 23).max(0))),
            rfc3339(hour_start(latest + 1)),
        );
        let plant_url = |rest: &str| shared.url(&format!("/api/v1/plants/{name}{rest}"));
        let range = |url: String, from: &str, to: &str| {
            shared
                .http
                .get(url)
                .query(&[("from", from), ("to", to)])
                .bearer_auth(&shared.read)
        };
        let what = format!("engineer {id}: {} of {name}", kind.label());
        match kind {
            Kind::Periods => {
                let req = range(plant_url("/periods"), &day.0, &day.1);
                let Some(body) = shared.send(kind, &what, req).await else {
                    break;
                };
                let Ok(list) = serde_json::from_str::<Value>(&body) else {
                    shared.fail(format!("{what}: not JSON: {body}"));
                    break;
                };
                let Some(periods) = list["periods"].as_array() else {
                    shared.fail(format!("{what}: no periods array: {body}"));
                    break;
                };
                let listed: Vec<String> = periods
                    .iter()
                    .filter(|p| p["run_id"].is_i64())
                    .filter_map(|p| p["start"].as_str().map(str::to_string))
                    .collect();
                let mut seen = shared.seen_run.lock().unwrap();
                seen.extend(listed.iter().map(|s| (plant, s.clone())));
                run[plant].extend(listed);
            }
            Kind::Report => {
                let Some(start) = run[plant].iter().nth(n % run[plant].len().max(1)).cloned()
                else {
                    continue;
                };
                let req = shared
                    .http
                    .get(plant_url(&format!("/periods/{start}")))
                    .bearer_auth(&shared.read);
                let Some(body) = shared.send(kind, &what, req).await else {
                    break;
                };
                let report: Value = serde_json::from_str(&body).unwrap_or_default();
                let at = |v: &Value| {
                    v.as_str()
                        .and_then(|t| DateTime::parse_from_rfc3339(t).ok())
                        .map(|t| t.with_timezone(&Utc))
                };
                if at(&report["report"]["period_start"]).is_none()
                    || at(&report["report"]["period_start"]) != at(&Value::from(start.as_str()))
                {
                    shared.fail(format!("{what}: the report of {start} is not: {body}"));
                    break;
                }
            }
            Kind::Figures | Kind::Balances => {
                let path = if kind == Kind::Figures {
                    "/figures"
                } else {
                    "/balances"
                };
                let req = range(plant_url(path), &day.0, &day.1);
                if shared.send(kind, &what, req).await.is_none() {
                    break;
                }
            }
            Kind::Meters => {
                let req = shared
                    .http
                    .get(plant_url("/meters"))
                    .bearer_auth(&shared.read);
                if shared.send(kind, &what, req).await.is_none() {
                    break;
                }
            }
            Kind::Meter => {
                let tag = OMBRASK_TAGS[n % OMBRASK_TAGS.len()].0;
                let req = shared
                    .http
                    .get(plant_url(&format!("/meters/{tag}")))
                    .bearer_auth(&shared.read);
                if shared.send(kind, &what, req).await.is_none() {
                    break;
                }
            }
            Kind::Readings => {
                let from = rfc3339(hour_start((latest - 2).max(0)));
                let req = range(plant_url("/readings"), &from, &day.1);
                if shared.send(kind, &what, req).await.is_none() {
                    break;
                }
            }
            _ => unreachable!("engineers only read"),
        }
        tokio::time::sleep(ENGINEER_PAUSE).await;
    }
}

/// Every stored reading of `plant` over hours `0..=last`, keyed as the historians keep them.
async fn stored(http: &Client, s: &Server, read: &str, plant: &str, last: i64) -> Posted {
    let mut out = Posted::new();
    let mut from = 0;
    while from <= last {
        let to = (from + 1000).min(last + 1);
        let r = http
            .get(s.url(&format!("/api/v1/plants/{plant}/readings")))
            .query(&[
                ("from", rfc3339(hour_start(from))),
                ("to", rfc3339(hour_start(to))),
            ])
            .bearer_auth(read)
            .send()
            .await
            .expect("GET readings after the load");
        let list = crate::support::json_ok(r).await;
        for r in list["readings"].as_array().expect("readings") {
            let time = DateTime::parse_from_rfc3339(r["time"].as_str().expect("time"))
                .expect("RFC 3339")
                .with_timezone(&Utc);
            let quality = match r["quality"].as_str() {
                Some("good") => "good",
                Some("uncertain") => "uncertain",
                other => panic!("unexpected quality {other:?} in {r}"),
            };
            let value = r["value"].as_f64().expect("value");
            let tag = r["tag"].as_str().expect("tag").to_string();
            assert!(
                out.insert((tag, time), (value, quality)).is_none(),
                "a reading listed twice: {r}"
            );
        }
        from = to;
    }
    out
}

/// The period listing of `plant` over hours `0..=last`, in ranges the listing accepts.
async fn periods(http: &Client, s: &Server, read: &str, plant: &str, last: i64) -> Vec<Value> {
    let mut out = Vec::new();
    let mut from = 0;
    while from <= last {
        let to = (from + 5000).min(last + 1);
        let r = http
            .get(s.url(&format!("/api/v1/plants/{plant}/periods")))
            .query(&[
                ("from", rfc3339(hour_start(from))),
                ("to", rfc3339(hour_start(to))),
            ])
            .bearer_auth(read)
            .send()
            .await
            .expect("GET periods after the load");
        let list = crate::support::json_ok(r).await;
        out.extend(list["periods"].as_array().expect("periods").iter().cloned());
        from = to;
    }
    out
}

/// Nearest-rank percentile of sorted durations, in ms.
fn percentile(sorted: &[Duration], p: f64) -> f64 {
    let rank = ((p / 100.0) * sorted.len() as f64).ceil() as usize;
    sorted[rank.clamp(1, sorted.len()) - 1].as_secs_f64() * 1e3
}

fn loadavg() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

testkit::both_backends! {
    /// Historians and engineers at once for 60 s: no error, nothing lost, periods run.
    async fn sustained_load(backend: Backend) {
        let _turn = ONE_AT_A_TIME.lock().await;
        let seconds = load_seconds();
        // Everything, the settling included, ends within this time or the test fails.
        let deadline = Duration::from_secs(seconds) + SETTLE_LIMIT + Duration::from_secs(120);
        tokio::time::timeout(deadline, load(backend, seconds))
            .await
            .unwrap_or_else(|_| panic!("the load test did not finish within {deadline:?}"));
    }
}

async fn load(backend: Backend, seconds: u64) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let (log_at, url) = backend.fresh(dir.path(), "load");
    let admin = token_on(&url, "admin", None);
    let ingest = token_on(&url, "ingest", None);
    let read = token_on(&url, "read", None);
    let s = crate::support::LOOPBAL.serve_on(
        &log_at,
        &url,
        &["--run-grace", "0", "--run-tick", "1"],
        "warn",
    );
    let http = client();
    for plant in PLANTS {
        let model =
            ombrask_model().replacen("name = \"ombrask-ob2\"", &format!("name = \"{plant}\""), 1);
        let r = http
            .put(s.url(&format!("/api/v1/plants/{plant}/model")))
            .bearer_auth(&admin)
            .header("content-type", "application/toml")
            .body(model)
            .send()
            .await
            .expect("PUT model");
        let status = r.status();
        assert_eq!(status, StatusCode::CREATED, "{}", r.text().await.unwrap());
    }

    let load_before = loadavg();
    let shared = Arc::new(Shared {
        base: s.base.clone(),
        http: http.clone(),
        ingest,
        read: read.clone(),
        stop: AtomicBool::new(false),
        end: Instant::now() + Duration::from_secs(seconds),
        latest: PLANTS.iter().map(|_| AtomicI64::new(-1)).collect(),
        latencies: Mutex::new(BTreeMap::new()),
        seen_run: Mutex::new(BTreeSet::new()),
        errors: Mutex::new(Vec::new()),
    });
    let began = Instant::now();
    let mut historians = Vec::new();
    for id in 0..HISTORIANS {
        let plant = id % PLANTS.len();
        // The historians of one plant take alternate hours.
        let lanes = (0..HISTORIANS)
            .filter(|h| h % PLANTS.len() == plant)
            .count() as i64;
        let lane = (id / PLANTS.len()) as i64;
        historians.push(tokio::spawn(historian(
            shared.clone(),
            id,
            plant,
            lane,
            lanes,
        )));
    }
    let engineers: Vec<_> = (0..ENGINEERS)
        .map(|id| tokio::spawn(engineer(shared.clone(), id)))
        .collect();
    let mut expected: Vec<Posted> = vec![Posted::new(); PLANTS.len()];
    for (id, h) in historians.into_iter().enumerate() {
        expected[id % PLANTS.len()].extend(h.await.expect("historian task"));
    }
    for e in engineers {
        e.await.expect("engineer task");
    }
    let elapsed = began.elapsed();
    let errors = shared.errors.lock().unwrap().clone();
    assert!(
        errors.is_empty(),
        "{} error(s) under load on {backend:?}, first:\n{}\nserver log:\n{}",
        errors.len(),
        errors.join("\n"),
        s.log()
    );

    // Periods were run while the load went on: the engineers' listings showed runs.
    let run_during = shared.seen_run.lock().unwrap().len();
    assert!(
        run_during > 0,
        "no listing showed a period run during the load"
    );
    let mut last_hour = Vec::new();
    for (p, plant) in PLANTS.iter().enumerate() {
        let last = shared.latest[p].load(Ordering::Relaxed);
        assert!(last >= 0, "no hour of {plant} was posted");
        last_hour.push(last);
    }

    // Nothing lost: every reading posted is stored, with its last value and quality.
    let mut readings = 0;
    for (p, plant) in PLANTS.iter().enumerate() {
        let got = stored(&http, &s, &read, plant, last_hour[p]).await;
        assert_eq!(
            got.len(),
            expected[p].len(),
            "{plant}: {} readings stored, {} posted",
            got.len(),
            expected[p].len()
        );
        for (key, want) in &expected[p] {
            assert_eq!(got.get(key), Some(want), "{plant}: reading {key:?}");
        }
        readings += got.len();
    }

    // Every posted hour gets its current run, and no run stays due (bounded wait).
    let settle = Instant::now();
    let mut hours_posted = 0;
    let mut runs = 0;
    for (p, plant) in PLANTS.iter().enumerate() {
        let posted_hours: BTreeSet<String> = expected[p]
            .keys()
            .map(|(_, t)| rfc3339(hour_start((*t - base()).num_hours())))
            .collect();
        hours_posted += posted_hours.len();
        loop {
            let list = periods(&http, &s, &read, plant, last_hour[p]).await;
            let waiting: Vec<&Value> = list
                .iter()
                .filter(|x| {
                    let start = x["start"].as_str().unwrap_or_default();
                    posted_hours.contains(start)
                        && (!x["run_id"].is_i64() || x["rerun_due"] != false)
                })
                .collect();
            if waiting.is_empty() {
                runs += list
                    .iter()
                    .map(|x| x["runs"].as_i64().unwrap_or(0))
                    .sum::<i64>();
                let never = list
                    .iter()
                    .filter(|x| x["run_id"].is_i64())
                    .filter(|x| !posted_hours.contains(x["start"].as_str().unwrap_or_default()))
                    .count();
                assert_eq!(never, 0, "{plant}: a period without readings was run");
                break;
            }
            assert!(
                settle.elapsed() < SETTLE_LIMIT,
                "{plant}: {} posted period(s) still without a current run {SETTLE_LIMIT:?} \
                 after the load, e.g. {}",
                waiting.len(),
                waiting[0]
            );
            tokio::time::sleep(Duration::from_millis(500)).await;
        }
    }
    let settled_in = settle.elapsed();

    let load_after = loadavg();
    let log_path = log_at.with_extension("log");
    let exited_cleanly = s.stop();
    let log = std::fs::read_to_string(&log_path).unwrap_or_default();
    let bad: Vec<&str> = log
        .lines()
        .filter(|l| l.contains("ERROR") || l.contains("panicked"))
        .collect();
    assert!(
        bad.is_empty(),
        "the server logged errors:\n{}",
        bad.join("\n")
    );
    assert!(
        exited_cleanly,
        "the server did not exit 0 on SIGTERM:\n{log}"
    );
    let warnings: Vec<&str> = log.lines().filter(|l| l.contains("WARN")).collect();

    let mut table = String::new();
    let _ = writeln!(
        table,
        "\nsustained load on {backend:?}: {:.1} s, {} plants, {HISTORIANS} historians, \
         {ENGINEERS} engineers; server: the `loopbal` binary `cargo test` built; load average \
         {load_before} before, {load_after} after",
        elapsed.as_secs_f64(),
        PLANTS.len()
    );
    let _ = writeln!(
        table,
        "{readings} readings stored and checked, {hours_posted} hours posted, {run_during} \
         periods seen run during the load, {runs} runs in all once settled (in {:.1} s); \
         {} warning line(s) in the log",
        settled_in.as_secs_f64(),
        warnings.len()
    );
    for w in warnings.iter().take(5) {
        let _ = writeln!(table, "  {w}");
    }
    let _ = writeln!(
        table,
        "{:<34} {:>7} {:>9} {:>9} {:>9}",
        "kind", "count", "p50 ms", "p99 ms", "max ms"
    );
    let latencies = shared.latencies.lock().unwrap();
    for (kind, times) in latencies.iter() {
        let mut sorted = times.clone();
        sorted.sort();
        let _ = writeln!(
            table,
            "{:<34} {:>7} {:>9.1} {:>9.1} {:>9.1}",
            kind.label(),
            sorted.len(),
            percentile(&sorted, 50.0),
            percentile(&sorted, 99.0),
            percentile(&sorted, 100.0)
        );
    }
    println!("{table}");
    for kind in [Kind::PostCsv, Kind::PostJson, Kind::Periods, Kind::Report] {
        assert!(
            latencies.get(&kind).is_some_and(|t| !t.is_empty()),
            "no {} request was made: the load did not do what it should",
            kind.label()
        );
    }
}
