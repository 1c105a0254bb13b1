//! The demo's historian: posts the simulated readings through the service's HTTP API day by
//! day as a plant historian would (with the scenario's late correction), waits for the service
//! to reconcile every hour, and reads back what the summary reports.

use std::fmt::Write as _;
use std::time::{Duration, Instant};

use anyhow::{bail, Context};
use chrono::TimeDelta;
use serde_json::Value;

use super::{rfc3339, scenario, Options, ScenarioFacts, Summary};

/// The simulated historian: posts readings through the HTTP API.
pub(super) struct Historian {
    client: reqwest::Client,
    base: String,
    admin: String,
    ingest: String,
    read: String,
}

impl Historian {
    pub(super) fn new(
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
        let r = self.client.get(self.url(path)).bearer_auth(&self.read);
        answer(r, &format!("GET {path}")).await
    }

    /// The purge trade-off of the last day: a sweep of the purge split around its reconciled
    /// value, and the optimum at the demo's invented prices (`scenario::PURGE_PRICES`), from
    /// the day's periods combined as the base case.
    pub(super) async fn purge_trade_off(
        &self,
        from: &str,
        to: &str,
        base_split: f64,
    ) -> anyhow::Result<Value> {
        let body = serde_json::json!({
            "period": from,
            "period_to": to,
            "sweep": {"name": format!("split:{}", scenario::PURGE),
                      "from": base_split * 0.5, "to": base_split * 2.0, "points": 5},
            "economics": scenario::purge_prices(base_split),
        });
        let r = self
            .client
            .post(self.url("/what-if"))
            .bearer_auth(&self.read)
            .json(&body);
        answer(r, "POST /what-if").await
    }

    /// What each meter is worth to the purge fraction of `period`, and which new meter would
    /// narrow it most.
    pub(super) async fn purge_meter_value(&self, period: &str) -> anyhow::Result<Value> {
        let figure = format!("purge_fraction:{}", scenario::PURGE);
        self.get(&format!("/meter-value?period={period}&figure={figure}"))
            .await
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
    pub(super) async fn day_by_day(
        &self,
        days: usize,
        seed: u64,
    ) -> anyhow::Result<(usize, usize)> {
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
    pub(super) async fn wait_for_runs(&self, days: usize) -> anyhow::Result<()> {
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

    pub(super) async fn summary(
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
        // The last day (at most 24 periods) as the base case of the purge trade-off.
        let day_from = periods[periods.len().saturating_sub(24)..]
            .first()
            .and_then(|p| p["start"].as_str())
            .unwrap_or_default()
            .to_string();
        let base_split = figures
            .iter()
            .find(|f| f["name"] == "purge_fraction" && f["subject"] == scenario::PURGE)
            .and_then(|f| f["value"].as_f64());
        let purge = match base_split {
            Some(split) => self
                .purge_trade_off(&day_from, &to, split)
                .await
                .map_err(|e| e.to_string()),
            None => Err("the last hour has no reconciled purge split".to_string()),
        };
        let meter_value = self
            .purge_meter_value(&last)
            .await
            .map_err(|e| e.to_string());
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
            purge_day_from: day_from,
            purge: purge.as_ref().ok().cloned(),
            purge_problem: purge.err(),
            meter_value: meter_value.as_ref().ok().cloned(),
            meter_value_problem: meter_value.err(),
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

/// The JSON answer of a request, or a failure naming it with the status and body.
async fn answer(request: reqwest::RequestBuilder, what: &str) -> anyhow::Result<Value> {
    let r = request.send().await?;
    let status = r.status();
    let body: Value = r.json().await?;
    if !status.is_success() {
        bail!("{what}: {status}: {body}");
    }
    Ok(body)
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
