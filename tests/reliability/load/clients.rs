//! The load's clients: historians posting hours of readings (with late corrections and
//! retries) and engineers reading what engineers read, sharing one tally of answers.

use super::*;

/// What the load does, by kind of request.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub(crate) enum Kind {
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
    pub(crate) fn label(self) -> &'static str {
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
pub(crate) struct Shared {
    pub(crate) base: String,
    pub(crate) http: Client,
    pub(crate) ingest: String,
    pub(crate) read: String,
    pub(crate) stop: AtomicBool,
    pub(crate) end: Instant,
    /// Per plant, the latest hour any historian has posted (-1: none yet).
    pub(crate) latest: Vec<AtomicI64>,
    pub(crate) latencies: Mutex<BTreeMap<Kind, Vec<Duration>>>,
    /// (plant, period start) of every period an engineer's listing showed as run during the
    /// load.
    pub(crate) seen_run: Mutex<BTreeSet<(usize, String)>>,
    pub(crate) errors: Mutex<Vec<String>>,
}

impl Shared {
    pub(crate) fn running(&self) -> bool {
        !self.stop.load(Ordering::Relaxed) && Instant::now() < self.end
    }

    /// Note an error and stop the load: the first errors are the informative ones.
    pub(crate) fn fail(&self, what: String) {
        self.stop.store(true, Ordering::Relaxed);
        let mut errors = self.errors.lock().unwrap();
        if errors.len() < 20 {
            errors.push(what);
        }
    }

    /// Send `req`, time it, and return the body of a 200 answer; anything else is an error.
    pub(crate) async fn send(
        &self,
        kind: Kind,
        what: &str,
        req: reqwest::RequestBuilder,
    ) -> Option<String> {
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

    pub(crate) fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }
}

/// One reading as posted: its value and quality.
pub(crate) type Posted = BTreeMap<(String, DateTime<Utc>), (f64, &'static str)>;

pub(crate) fn csv_body(rows: &[(String, DateTime<Utc>, f64, &'static str)]) -> String {
    let mut text = String::from("tag,time,value,quality\n");
    for (tag, time, value, quality) in rows {
        let _ = writeln!(text, "{tag},{},{value},{quality}", rfc3339(*time));
    }
    text
}

pub(crate) fn json_body(rows: &[(String, DateTime<Utc>, f64, &'static str)]) -> String {
    let readings: Vec<Value> = rows
        .iter()
        .map(|(tag, time, value, quality)| {
            json!({"tag": tag, "time": rfc3339(*time), "value": value, "quality": quality})
        })
        .collect();
    json!({ "readings": readings }).to_string()
}

/// The four counts of an ingest answer.
pub(crate) fn counts(body: &str) -> Option<[u64; 4]> {
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
pub(crate) async fn historian(
    shared: Arc<Shared>,
    id: usize,
    plant: usize,
    lane: i64,
    lanes: i64,
) -> Posted {
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
pub(crate) async fn engineer(shared: Arc<Shared>, id: usize) {
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
