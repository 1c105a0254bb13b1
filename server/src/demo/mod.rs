//! `loopbal demo`: the whole job on an invented plant, in one command. A fresh embedded
//! database, the service on it, the simulator posting some days of hourly readings through the
//! real HTTP API as a historian would (noise, one biased meter, one drifting meter, a gap, a
//! late correction), the service reconciling every hour, and a short summary of what it found.

pub mod scenario;

use std::fmt::Write as _;
use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::{Duration, Instant};

use anyhow::{bail, Context};
use chrono::{DateTime, SecondsFormat, TimeDelta, Utc};
use serde::Serialize;
use serde_json::Value;
use tokio::net::TcpListener;

use crate::api::{self, AppState, Limits};
use crate::schedule::{self, Schedule};
use crate::store::{Role, Store};
use crate::BadInput;

pub struct Options {
    pub listen: SocketAddr,
    /// Where to create the database; a temporary folder when absent.
    pub database: Option<PathBuf>,
    pub days: usize,
    pub seed: u64,
    /// Keep serving after the summary until interrupted.
    pub serve: bool,
    /// Print the summary as JSON instead of text.
    pub json: bool,
}

/// What the demo found, as printed.
#[derive(Debug, Serialize)]
pub struct Summary {
    pub plant: String,
    pub first_period: String,
    pub days: usize,
    pub readings_posted: usize,
    pub batches: usize,
    pub periods: usize,
    pub periods_reconciled: usize,
    pub statuses: std::collections::BTreeMap<String, usize>,
    pub global_test_passed: usize,
    pub global_test_tested: usize,
    pub alpha: f64,
    /// Meters not `ok`, worst first, as the service ranks them.
    pub meters: Vec<Value>,
    /// The loop figures of the last period.
    pub last_period: String,
    pub figures: Vec<Value>,
    pub seconds: f64,
    pub base_url: String,
    pub tokens: std::collections::BTreeMap<String, String>,
    pub scenario: ScenarioFacts,
}

/// What the simulator did, so a reader can compare.
#[derive(Debug, Serialize)]
pub struct ScenarioFacts {
    pub biased: String,
    pub bias: f64,
    pub drifting: String,
    pub drift_per_hour: f64,
    pub gap: String,
    pub corrected: String,
}

fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Secs, true)
}

pub async fn run(opts: Options) -> anyhow::Result<()> {
    let began = Instant::now();
    if opts.days == 0 || opts.days > 60 {
        bail!(BadInput::new(format!(
            "--days {}: the demo runs 1 to 60 days",
            opts.days
        )));
    }
    let (_dir, database) = match &opts.database {
        Some(path) => {
            if path.exists() {
                bail!(BadInput::new(format!(
                    "{}: exists; the demo creates a fresh database: remove it or name another",
                    path.display()
                )));
            }
            (None, path.clone())
        }
        None => {
            let dir = tempfile::tempdir().context("creating a temporary folder")?;
            let path = dir.path().join("loopbal-demo.sqlite");
            (Some(dir), path)
        }
    };
    let database_url = database.display().to_string();
    let store = Store::open(&database_url)
        .await
        .with_context(|| format!("creating the database {database_url}"))?;
    let mut tokens = std::collections::BTreeMap::new();
    for role in [Role::Admin, Role::Ingest, Role::Read, Role::Maintain] {
        let made = store.create_token(role, None).await?;
        tokens.insert(role.as_str().to_string(), made.token);
    }

    // The service, in this process, on the real HTTP stack.
    let state = AppState::new(store.clone(), Limits::default());
    let (stop_tx, stop_rx) = tokio::sync::watch::channel(false);
    let worker = tokio::spawn(schedule::worker(
        state.service().clone(),
        Schedule {
            grace: Duration::ZERO,
            tick: Duration::from_secs(1),
            workers: schedule::default_workers(),
        },
        stop_rx.clone(),
    ));
    let (router, _) = api::router(state);
    let listener = TcpListener::bind(opts.listen)
        .await
        .with_context(|| format!("listening on {}", opts.listen))?;
    let addr = listener.local_addr()?;
    let base = format!("http://{addr}");
    let mut http_stop = stop_rx.clone();
    let server = tokio::spawn(async move {
        axum::serve(listener, router)
            .with_graceful_shutdown(async move {
                let _ = http_stop.wait_for(|stop| *stop).await;
            })
            .await
    });

    let historian = Historian::new(&base, &tokens)?;
    let outcome = historian.day_by_day(opts.days, opts.seed).await;
    let summary = match outcome {
        Ok((readings, batches)) => {
            historian.wait_for_runs(opts.days).await?;
            historian
                .summary(&opts, readings, batches, began, &base, &tokens)
                .await?
        }
        Err(e) => {
            let _ = stop_tx.send(true);
            return Err(e);
        }
    };
    let mut out = std::io::stdout().lock();
    if opts.json {
        serde_json::to_writer_pretty(&mut out, &summary)?;
        use std::io::Write;
        writeln!(out)?;
    } else {
        use std::io::Write;
        write!(out, "{}", text(&summary, opts.serve))?;
    }
    drop(out);
    if opts.serve {
        tokio::signal::ctrl_c().await.ok();
        eprintln!("stopping");
    }
    let _ = stop_tx.send(true);
    server.await.context("the HTTP server")??;
    worker.await.context("the scheduler")?;
    store.close().await;
    Ok(())
}

/// The simulated historian: posts readings through the HTTP API.
struct Historian {
    client: reqwest::Client,
    base: String,
    admin: String,
    ingest: String,
    read: String,
}

impl Historian {
    fn new(
        base: &str,
        tokens: &std::collections::BTreeMap<String, String>,
    ) -> anyhow::Result<Historian> {
        Ok(Historian {
            client: reqwest::Client::builder()
                .timeout(Duration::from_secs(120))
                .build()?,
            base: base.to_string(),
            admin: tokens["admin"].clone(),
            ingest: tokens["ingest"].clone(),
            read: tokens["read"].clone(),
        })
    }

    fn url(&self, path: &str) -> String {
        format!("{}/api/v1/plants/{}{path}", self.base, scenario::PLANT_NAME)
    }

    async fn get(&self, path: &str) -> anyhow::Result<Value> {
        let r = self
            .client
            .get(self.url(path))
            .bearer_auth(&self.read)
            .send()
            .await?;
        let status = r.status();
        let body: Value = r.json().await?;
        if !status.is_success() {
            bail!("GET {path}: {status}: {body}");
        }
        Ok(body)
    }

    async fn post_csv(&self, csv: String) -> anyhow::Result<Value> {
        let r = self
            .client
            .post(self.url("/readings"))
            .bearer_auth(&self.ingest)
            .header("content-type", "text/csv")
            .body(csv)
            .send()
            .await?;
        let status = r.status();
        let body: Value = r.json().await?;
        if !status.is_success() || body["rejected"] != 0 {
            bail!("posting readings: {status}: {body}");
        }
        Ok(body)
    }

    /// Store the model, then post a day of readings at a time; the crude flow of one hour is
    /// first sent ten times too high and corrected after the last day. Returns (readings
    /// posted, batches).
    async fn day_by_day(&self, days: usize, seed: u64) -> anyhow::Result<(usize, usize)> {
        let r = self
            .client
            .put(self.url("/model"))
            .query(&[("effective_from", rfc3339(scenario::start()))])
            .bearer_auth(&self.admin)
            .header("content-type", "application/toml")
            .body(scenario::PLANT)
            .send()
            .await?;
        if !r.status().is_success() {
            bail!(
                "storing the demo model: {}: {}",
                r.status(),
                r.text().await?
            );
        }
        let plant = scenario::plant();
        let z = scenario::true_state(&plant).context("the demo loop's steady state")?;
        let all = reconcile::simulate::readings(&plant, &z, &scenario::plan(days, seed));
        let typo_time = scenario::start() + TimeDelta::hours(scenario::CORRECTED_HOUR as i64);
        let mut correction = None;
        let (mut posted, mut batches) = (0, 0);
        for day in 0..days {
            let from = scenario::start() + TimeDelta::days(day as i64);
            let to = from + TimeDelta::days(1);
            let mut csv = String::from("tag,time,value,quality\n");
            for r in all.iter().filter(|r| r.time >= from && r.time < to) {
                let mut value = r.value;
                if r.tag == scenario::CORRECTED_TAG && correction.is_none() && r.time >= typo_time {
                    correction = Some(format!(
                        "tag,time,value,quality\n{},{},{},good\n",
                        r.tag,
                        rfc3339(r.time),
                        r.value
                    ));
                    value *= 10.0;
                }
                let _ = writeln!(
                    csv,
                    "{},{},{},{}",
                    r.tag,
                    rfc3339(r.time),
                    value,
                    quality(r)
                );
                posted += 1;
            }
            self.post_csv(csv).await?;
            batches += 1;
        }
        if let Some(fix) = correction {
            let answer = self.post_csv(fix).await?;
            if answer["replaced"] != 1 {
                bail!("the late correction replaced nothing: {answer}");
            }
            batches += 1;
        }
        Ok((posted, batches))
    }

    /// Wait (at most two minutes) until every period has a current run and none is due.
    async fn wait_for_runs(&self, days: usize) -> anyhow::Result<()> {
        let (from, to) = range(days);
        let deadline = Instant::now() + Duration::from_secs(120);
        loop {
            let list = self.get(&format!("/periods?from={from}&to={to}")).await?;
            let periods = list["periods"].as_array().cloned().unwrap_or_default();
            let done = periods
                .iter()
                .all(|p| p["runs"].as_i64().unwrap_or(0) >= 1 && p["rerun_due"] == false);
            if done {
                return Ok(());
            }
            if Instant::now() > deadline {
                bail!("the service did not reconcile every period within two minutes");
            }
            tokio::time::sleep(Duration::from_millis(200)).await;
        }
    }

    async fn summary(
        &self,
        opts: &Options,
        readings_posted: usize,
        batches: usize,
        began: Instant,
        base: &str,
        tokens: &std::collections::BTreeMap<String, String>,
    ) -> anyhow::Result<Summary> {
        let (from, to) = range(opts.days);
        let list = self.get(&format!("/periods?from={from}&to={to}")).await?;
        let periods = list["periods"].as_array().cloned().unwrap_or_default();
        let mut statuses = std::collections::BTreeMap::new();
        let (mut passed, mut tested) = (0, 0);
        let mut alpha = 0.05;
        for p in &periods {
            *statuses
                .entry(p["status"].as_str().unwrap_or("?").to_string())
                .or_insert(0) += 1;
            let start = p["start"].as_str().unwrap_or_default();
            let run = self.get(&format!("/periods/{start}")).await?;
            let test = &run["report"]["global_test"];
            if let Some(ok) = test["passed"].as_bool() {
                tested += 1;
                passed += usize::from(ok);
                alpha = test["alpha"].as_f64().unwrap_or(alpha);
            }
        }
        let meters = self.get("/meters").await?;
        let flagged: Vec<Value> = meters["meters"]
            .as_array()
            .cloned()
            .unwrap_or_default()
            .into_iter()
            .filter(|m| m["status"] != "ok")
            .collect();
        let last = periods
            .last()
            .and_then(|p| p["start"].as_str())
            .unwrap_or_default()
            .to_string();
        let last_run = self.get(&format!("/periods/{last}")).await?;
        let figures = last_run["report"]["figures"]
            .as_array()
            .cloned()
            .unwrap_or_default();
        let reconciled = periods
            .iter()
            .filter(|p| p["runs"].as_i64().unwrap_or(0) >= 1)
            .count();
        Ok(Summary {
            plant: scenario::PLANT_NAME.to_string(),
            first_period: from,
            days: opts.days,
            readings_posted,
            batches,
            periods: periods.len(),
            periods_reconciled: reconciled,
            statuses,
            global_test_passed: passed,
            global_test_tested: tested,
            alpha,
            meters: flagged,
            last_period: last,
            figures,
            seconds: began.elapsed().as_secs_f64(),
            base_url: base.to_string(),
            tokens: tokens.clone(),
            scenario: ScenarioFacts {
                biased: scenario::BIASED.to_string(),
                bias: scenario::BIAS,
                drifting: scenario::DRIFTING.to_string(),
                drift_per_hour: scenario::DRIFT_PER_HOUR,
                gap: format!(
                    "{} sends nothing in hours {} to {}",
                    scenario::GAP_TAG,
                    scenario::GAP_HOURS.0,
                    scenario::GAP_HOURS.1
                ),
                corrected: format!(
                    "{} at hour {} sent ten times too high, corrected after the last day",
                    scenario::CORRECTED_TAG,
                    scenario::CORRECTED_HOUR
                ),
            },
        })
    }
}

fn quality(r: &reconcile::Reading) -> &'static str {
    match r.quality {
        reconcile::Quality::Good => "good",
        reconcile::Quality::Uncertain => "uncertain",
        reconcile::Quality::Bad => "bad",
    }
}

/// The demo's periods as an RFC 3339 range.
fn range(days: usize) -> (String, String) {
    let from = scenario::start();
    (rfc3339(from), rfc3339(from + TimeDelta::days(days as i64)))
}

fn num(v: &Value) -> String {
    match v.as_f64() {
        Some(x) if x.abs() < 5e-5 => "0".into(),
        Some(x) if x.abs() >= 1000.0 => format!("{x:.0}"),
        Some(x) if x.abs() >= 10.0 => format!("{x:.1}"),
        Some(x) if x.abs() >= 0.1 => format!("{x:.3}"),
        Some(x) => format!("{x:.4}"),
        None => "—".into(),
    }
}

/// The summary as a process engineer reads it.
pub fn text(s: &Summary, serving: bool) -> String {
    let mut t = String::new();
    let _ = writeln!(
        t,
        "loopbal demo: methanol loop MX-2 of the invented Tarn Hollow works ({})",
        s.plant
    );
    let _ = writeln!(
        t,
        "  {} days of hourly readings from {}: {} readings posted over HTTP in {} batches,",
        s.days, s.first_period, s.readings_posted, s.batches
    );
    let _ = writeln!(
        t,
        "  with a biased meter, a drifting meter, a six-hour gap and a late correction."
    );
    let _ = writeln!(
        t,
        "  {} of {} periods reconciled in {:.1} s; global test passed in {} of {} ({:.0} %) at alpha {}.",
        s.periods_reconciled,
        s.periods,
        s.seconds,
        s.global_test_passed,
        s.global_test_tested,
        100.0 * s.global_test_passed as f64 / (s.global_test_tested.max(1)) as f64,
        s.alpha
    );
    let _ = writeln!(t);
    let _ = writeln!(t, "Meters to look at (the service's ranking):");
    if s.meters.is_empty() {
        let _ = writeln!(t, "  none");
    }
    for m in &s.meters {
        let bias = match (m["bias"].as_f64(), m["bias_sigma"].as_f64()) {
            (Some(_), Some(_)) => format!(
                "bias {} ± {} {}",
                num(&m["bias"]),
                num(&m["bias_sigma"]),
                m["uom"].as_str().unwrap_or("")
            ),
            _ => String::new(),
        };
        let since = m["evidence_since"]
            .as_str()
            .map(|s| format!(" since {s}"))
            .unwrap_or_default();
        let _ = writeln!(
            t,
            "  {:<11} {:<12} {}{}  ({} {} on {})",
            m["tag"].as_str().unwrap_or(""),
            m["status"].as_str().unwrap_or(""),
            bias,
            since,
            m["quantity"].as_str().unwrap_or(""),
            m["component"].as_str().unwrap_or(""),
            m["stream"].as_str().unwrap_or("")
        );
    }
    let _ = writeln!(t);
    let _ = writeln!(t, "Loop figures of the last hour ({}):", s.last_period);
    for f in &s.figures {
        let _ = writeln!(
            t,
            "  {:<34} {:<22} {:>12} ± {:<10} {}",
            f["name"].as_str().unwrap_or(""),
            f["subject"].as_str().unwrap_or(""),
            num(&f["value"]),
            num(&f["sigma"]),
            f["uom"].as_str().unwrap_or("")
        );
    }
    let _ = writeln!(t);
    let _ = writeln!(
        t,
        "What the simulator did: {} reads high by {} from day 2; {} drifts by {} per hour from \
         day 2; {}; {}.",
        s.scenario.biased,
        s.scenario.bias,
        s.scenario.drifting,
        s.scenario.drift_per_hour,
        s.scenario.gap,
        s.scenario.corrected
    );
    let _ = writeln!(t);
    let plant = format!("{}/api/v1/plants/{}", s.base_url, s.plant);
    if serving {
        let _ = writeln!(
            t,
            "The service is running at {} until you press Ctrl-C:",
            s.base_url
        );
    } else {
        let _ = writeln!(
            t,
            "The service has stopped (--no-serve); with it running you would ask:"
        );
    }
    let read = s.tokens.get("read").map(String::as_str).unwrap_or("");
    let _ = writeln!(t, "  curl -H 'Authorization: Bearer {read}' {plant}/meters");
    let _ = writeln!(
        t,
        "  curl -H 'Authorization: Bearer {read}' {plant}/meters/{}",
        s.scenario.biased
    );
    let _ = writeln!(
        t,
        "  curl -H 'Authorization: Bearer {read}' '{plant}/periods/{}'",
        s.last_period
    );
    let _ = writeln!(
        t,
        "  curl -H 'Authorization: Bearer {read}' -H 'Accept: text/csv' '{plant}/figures?from={}&to={}'",
        s.first_period,
        s.last_period
    );
    let _ = writeln!(t, "  the API: {}/api/v1/openapi.json", s.base_url);
    let _ = writeln!(t, "Tokens of this demo database:");
    for (role, token) in &s.tokens {
        let _ = writeln!(t, "  {role:<9} {token}");
    }
    let _ = writeln!(t);
    let _ = writeln!(t, "{}", reconcile::report::CAUTION);
    t
}
