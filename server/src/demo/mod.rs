//! `loopbal demo`: the whole job on an invented plant, in one command. A fresh embedded
//! database, the service on it, the simulator posting some days of hourly readings through the
//! real HTTP API as a historian would (noise, one biased meter, one drifting meter, a gap, a
//! late correction), the service reconciling every hour, and a short summary of what it found.

mod historian;
pub mod scenario;

use std::fmt::Write as _;
use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::{Duration, Instant};

use anyhow::{bail, Context};
use chrono::{DateTime, SecondsFormat, Utc};
use serde::Serialize;
use serde_json::Value;
use tokio::net::TcpListener;

use crate::api::{self, AppState, Limits};
use crate::schedule::{self, Schedule};
use crate::store::{Role, Store};
use crate::BadInput;
use historian::Historian;

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
    /// The first period of the last day, the base case of the purge trade-off.
    pub purge_day_from: String,
    /// The what-if of the purge over the last day (a sweep and the optimum), or why not.
    pub purge: Option<Value>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub purge_problem: Option<String>,
    /// What each meter is worth to the last hour's purge fraction, or why not.
    pub meter_value: Option<Value>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub meter_value_problem: Option<String>,
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
        let limits = Limits::default();
        crate::serve::serve_http(listener, router, &limits, async move {
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
    server.await.context("the HTTP server")?;
    worker.await.context("the scheduler")?;
    store.close().await;
    Ok(())
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

/// A figure of a what-if point as `value ± σ`, by name and subject (the first subject of the
/// name when none is given).
fn point_figure(point: &Value, name: &str, subject: Option<&str>) -> String {
    let found = point["figures"].as_array().and_then(|fs| {
        fs.iter()
            .find(|f| f["name"] == name && subject.is_none_or(|s| f["subject"] == s))
    });
    match found {
        Some(f) if f["value"].is_number() => format!("{} ± {}", num(&f["value"]), num(&f["sigma"])),
        _ => "—".into(),
    }
}

/// The purge trade-off of the last day: one line per purge split swept, then the optimum.
fn purge_table(t: &mut String, s: &Summary) {
    let _ = writeln!(
        t,
        "The purge trade-off, from the last day reconciled (from {}; σ carried from it):",
        s.purge_day_from
    );
    let Some(w) = &s.purge else {
        let _ = writeln!(
            t,
            "  not available: {}",
            s.purge_problem.as_deref().unwrap_or("no answer")
        );
        return;
    };
    let _ = writeln!(
        t,
        "  {:>11}  {:>20}  {:>20}  {:>20}  {:>16}",
        "purge split", "methanol, kmol/h", "H2 lost, kmol/h", "CH4 at inlet", "recycle ratio"
    );
    for p in w["points"].as_array().into_iter().flatten() {
        let split = p["settings"]
            .as_object()
            .and_then(|m| m.values().next())
            .map(num)
            .unwrap_or_default();
        if p["status"] != "solved" {
            let _ = writeln!(
                t,
                "  {split:>11}  no steady state: {}",
                p["reason"].as_str().unwrap_or("")
            );
            continue;
        }
        let _ = writeln!(
            t,
            "  {split:>11}  {:>20}  {:>20}  {:>20}  {:>16}",
            point_figure(p, "product_made", Some("CH3OH")),
            point_figure(p, "reactant_lost_in_purge", Some("purge:H2")),
            point_figure(p, "inert_fraction_reactor_inlet", Some("converter:CH4")),
            point_figure(p, "recycle_ratio", None),
        );
    }
    let o = &w["optimum"];
    if o.is_object() {
        let prices = scenario::purge_prices(1.0);
        let list = |key: &str| {
            prices[key]
                .as_object()
                .map(|m| {
                    m.iter()
                        .map(|(c, v)| format!("{c} {v}"))
                        .collect::<Vec<_>>()
                        .join(", ")
                })
                .unwrap_or_default()
        };
        let _ = writeln!(
            t,
            "  At invented prices per kmol ({} made; {} lost in the purge; recycle {}), the \
             margin is highest at a purge split of {}: {} ± {} per hour{}.",
            list("product_price"),
            list("loss_value"),
            prices["recycle_cost"],
            num(&o["value"]),
            num(&o["margin"]),
            num(&o["margin_sigma"]),
            o["bound"]
                .as_str()
                .map(|b| format!(" (on a limit: {b})"))
                .unwrap_or_default()
        );
    }
}

/// The best repair and the best new analyser and flow meter for the purge fraction.
fn meter_value_lines(t: &mut String, s: &Summary) {
    let _ = writeln!(
        t,
        "Which meter for the purge fraction ({}), σ as reconciled and after one change:",
        s.last_period
    );
    let Some(v) = &s.meter_value else {
        let _ = writeln!(
            t,
            "  not available: {}",
            s.meter_value_problem.as_deref().unwrap_or("no answer")
        );
        return;
    };
    let _ = writeln!(t, "  now:                 σ {}", num(&v["figure"]["sigma"]));
    if let Some(m) = v["meters"].as_array().and_then(|m| m.first()) {
        let _ = writeln!(
            t,
            "  best repair:         σ {} with {} recalibrated to half its σ (σ {} if it failed)",
            num(&m["sigma_if_halved"]),
            m["tag"].as_str().unwrap_or(""),
            num(&m["sigma_if_lost"])
        );
    }
    let candidates = v["candidates"].as_array().cloned().unwrap_or_default();
    for (quantity, what) in [("mole_fraction", "analyser"), ("molar_flow", "flow meter")] {
        if let Some(c) = candidates.iter().find(|c| c["quantity"] == quantity) {
            let on = match c["component"].as_str() {
                Some(component) => format!("{component} on {}", c["stream"].as_str().unwrap_or("")),
                None => c["stream"].as_str().unwrap_or("").to_string(),
            };
            let _ = writeln!(
                t,
                "  best new {what:<11} σ {} with {on} (σ {} {} assumed)",
                num(&c["sigma_if_added"]),
                num(&c["sigma"]),
                c["uom"].as_str().unwrap_or("")
            );
        }
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
    purge_table(&mut t, s);
    let _ = writeln!(t);
    meter_value_lines(&mut t, s);
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
    let _ = writeln!(
        t,
        "  curl -H 'Authorization: Bearer {read}' '{plant}/meter-value?period={}&figure=purge_fraction:{}&add_best=2'",
        s.last_period,
        scenario::PURGE
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
