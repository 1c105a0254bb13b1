//! A year of periods run by the scheduler a month at a time, within a time budget, and the
//! report reads timed with that year stored (SQLite only).

use std::time::{Duration, Instant};

use chrono::{DateTime, TimeDelta, Utc};
use loopbal_server::store::NewRun;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use reconcile::Plant;
use testkit::bench::{load_average as load, refuse_unless, rfc3339};

use crate::passes::{check_runs, run_passes, tally};
use crate::service::{readings, Service};
use crate::{MONTH_HOURS, READ_LIMIT, WARM_UP};

/// What the year is made of: the plant, its true state, the first hour, how many hours and
/// readings per meter per hour, and the engine's time budget.
pub struct Year<'a> {
    pub plant: &'a Plant,
    pub z: &'a [f64],
    pub start: DateTime<Utc>,
    pub hours: usize,
    pub per_hour: usize,
    pub budget: Duration,
}

/// The year's readings POSTed and run a month at a time by `run_due` with 2 workers, on the
/// service `svc`; after the budget, the periods left get copies of stored runs.
pub async fn run_year(svc: &Service, year: &Year<'_>) {
    let Year {
        plant,
        z,
        start,
        hours: year_hours,
        per_hour,
        budget: year_budget,
    } = *year;
    let year_began = Instant::now();
    let mut engine_hours = 0;
    let mut run_time = Duration::ZERO;
    let mut post_time = Duration::ZERO;
    let mut rates = Vec::new();
    while engine_hours < year_hours && year_began.elapsed() < year_budget {
        let hours = MONTH_HOURS.min(year_hours - engine_hours);
        let from = start + TimeDelta::hours(engine_hours as i64);
        let chunk = readings(plant, z, from, hours, per_hour, 100 + engine_hours as u64);
        post_time += svc.post(&chunk).await;
        let pass = run_passes(std::slice::from_ref(svc.state()), &svc.row, 2, false).await;
        refuse_unless(
            pass.ran == hours,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("run_due ran {} of the month's {hours} periods", pass.ran),
        );
        run_time += pass.wall;
        rates.push(pass.rate());
        engine_hours += hours;
    }
    let (statuses, failed) = check_runs(svc, start, engine_hours).await;
    println!(
        "   engine runs: {engine_hours} periods in {:.1} s of run_due ({:.0} periods/s; per month {}), POST {:.1} s",
        run_time.as_secs_f64(),
        engine_hours as f64 / run_time.as_secs_f64(),
        rates.iter().map(|r| format!("{r:.0}")).collect::<Vec<_>>().join(" "),
        post_time.as_secs_f64()
    );
    println!(
        "   reports: {} (global test failed in {failed})",
        tally(&statuses)
    );
    if engine_hours < year_hours {
        // Over budget: the remaining periods get copies of the stored runs (report and inputs
        // of period h mod engine_hours, with their own start and end), through the store's
        // own record_run. Their reports are as large as real ones; they have no readings and
        // no meter records.
        let t = Instant::now();
        let store = &svc.state().store;
        for h in engine_hours..year_hours {
            let src = start + TimeDelta::hours((h % engine_hours) as i64);
            let dst = start + TimeDelta::hours(h as i64);
            let history = store.run_history(&svc.row, src).await.expect("run history");
            let row = history
                .iter()
                .rev()
                .find(|r| r.current)
                .expect("a current run");
            let mut report = row.run.report.clone();
            report["period_start"] = rfc3339(dst).into();
            report["period_end"] = rfc3339(dst + TimeDelta::hours(1)).into();
            let run = NewRun {
                period_start: dst,
                report,
                meters: Vec::new(),
                ..row.run.clone()
            };
            store.record_run(&svc.row, &run).await.expect("record run");
        }
        println!(
            "   NOTE: the engine budget ({} s) ran out; periods {engine_hours}..{year_hours} got copies of stored runs by Store::record_run ({:.1} s)",
            year_budget.as_secs(),
            t.elapsed().as_secs_f64()
        );
    }
    let runs = svc
        .state()
        .store
        .current_runs(&svc.row, start, start + TimeDelta::hours(year_hours as i64))
        .await
        .expect("current runs");
    refuse_unless(
        runs.len() == year_hours,
        "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
        || {
            format!(
                "{} of the year's {year_hours} periods have a current run",
                runs.len()
            )
        },
    );
    println!(
        "   database: {:.1} MB (file, WAL and shared memory)",
        svc.db_bytes() as f64 / 1e6
    );
}

/// `reads` timed `GET …/periods/{start}` of random periods of the year (after [`WARM_UP`]
/// untimed ones), each answer the whole report of that period with its `meters`; answers the
/// median in milliseconds.
pub async fn report_reads(svc: &Service, year: &Year<'_>, reads: usize, meters: usize) -> f64 {
    let (start, year_hours) = (year.start, year.hours);
    // Report reads: one keep-alive client, one request at a time, random periods of the year.
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let client = reqwest::Client::builder()
        .pool_max_idle_per_host(1)
        .build()
        .expect("client");
    let mut times = Vec::with_capacity(reads);
    let mut bytes = Vec::with_capacity(reads);
    let load_before = load();
    let reads_began = Instant::now();
    for i in 0..WARM_UP + reads {
        if reads_began.elapsed() > READ_LIMIT {
            break;
        }
        let h = rng.gen_range(0..year_hours);
        let period = rfc3339(start + TimeDelta::hours(h as i64));
        let url = format!("{}/periods/{period}", svc.served.base);
        let t = Instant::now();
        let res = client
            .get(&url)
            .bearer_auth(&svc.served.token)
            .send()
            .await
            .expect("GET period");
        let status = res.status();
        let body = res.bytes().await.expect("body");
        let dt = t.elapsed();
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        refuse_unless(
            status.is_success()
                && v["start"].as_str() == Some(period.as_str())
                && v["report"]["meters"]
                    .as_array()
                    .is_some_and(|m| m.len() == meters),
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("GET {url} answered {status} without the whole report of that period"),
        );
        if i >= WARM_UP {
            times.push(dt.as_secs_f64() * 1e3);
            bytes.push(body.len());
        }
    }
    let load_after = load();
    refuse_unless(
        !times.is_empty(),
        "nothing: the reads' own time bound",
        || format!("no timed reads within {READ_LIMIT:?}"),
    );
    let mean = times.iter().sum::<f64>() / times.len() as f64;
    times.sort_by(f64::total_cmp);
    bytes.sort_unstable();
    let median = percentile(&times, 50.0);
    println!(
        "   GET /periods/{{start}}: {} timed reads (after {WARM_UP} warm-up), median {:.2} ms, p90 {:.2} ms, p99 {:.2} ms, max {:.2} ms, mean {:.2} ms; body {} bytes (median); load {load_before} -> {load_after}",
        times.len(),
        median,
        percentile(&times, 90.0),
        percentile(&times, 99.0),
        times[times.len() - 1],
        mean,
        bytes[bytes.len() / 2],
    );
    median
}

pub fn percentile(sorted: &[f64], p: f64) -> f64 {
    // Nearest rank.
    let rank = ((p / 100.0) * sorted.len() as f64).ceil().max(1.0) as usize;
    sorted[rank.min(sorted.len()) - 1]
}

/// What the workspace's loop page asks the service for, with the year stored: the plant list,
/// the drawing, the model, the latest 48 periods, the last period's run and the meters; then a
/// year of one figure thinned to 800 points, as the figures page asks for it. Medians of
/// `rounds` rounds, one request at a time on one keep-alive client.
pub async fn workspace_reads(svc: &Service, year: &Year<'_>, rounds: usize) {
    let base = &svc.served.base;
    let root = base.split("/api/v1/").next().expect("a base URL");
    let end = year.start + TimeDelta::hours(year.hours as i64);
    let last = rfc3339(end - TimeDelta::hours(1));
    let recent = rfc3339(end - TimeDelta::hours(48));
    let (from, to) = (rfc3339(year.start), rfc3339(end));
    let loop_page = [
        format!("{root}/api/v1/plants"),
        format!("{base}/flowsheet"),
        format!("{base}/model"),
        format!("{base}/periods?from={recent}&to={}", rfc3339(end)),
        format!("{base}/periods/{last}"),
        format!("{base}/meters"),
    ];
    let figures = format!("{base}/figures?from={from}&to={to}&name=purge_fraction&points=800");
    // Every figure of the range at once, thinned, as an API client may ask for it (the
    // figures page asks for one figure at a time).
    let all_figures = format!("{base}/figures?from={from}&to={to}&points=800");
    let client = bench_client();
    let get = |url: String| timed_get(&client, svc, url, "tests/api/workspace.rs");
    let mut pages = Vec::with_capacity(rounds);
    let mut each = vec![Vec::with_capacity(rounds); loop_page.len()];
    let mut series = Vec::with_capacity(rounds);
    let mut every = Vec::with_capacity(rounds);
    let mut first = (0.0, 0.0);
    let began = Instant::now();
    for round in 0..rounds + 1 {
        if began.elapsed() > READ_LIMIT {
            break;
        }
        let mut page = 0.0;
        for (i, url) in loop_page.iter().enumerate() {
            let (ms, _) = get(url.clone()).await;
            page += ms;
            if round > 0 {
                each[i].push(ms);
            }
        }
        let (ms, body) = get(figures.clone()).await;
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        let points = v["series"][0]["points"].as_array().map_or(0, Vec::len);
        refuse_unless(
            points > 0 && points <= 801,
            "results::figures::tests::thinning_keeps_every_excursion_gap_and_failed_test_in_time_order",
            || format!("a year thinned to 800 points gave {points}"),
        );
        let (all_ms, body) = get(all_figures.clone()).await;
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        let count = v["series"].as_array().map_or(0, Vec::len);
        refuse_unless(count > 1, "tests/api/workspace.rs", || {
            format!("every figure of a year gave {count} series")
        });
        // The first round warms the caches (the meter health memo among them): it is shown
        // on its own.
        if round > 0 {
            pages.push(page);
            series.push(ms);
            every.push((all_ms, count));
        } else {
            first = (page, ms);
        }
    }
    refuse_unless(
        !pages.is_empty(),
        "nothing: the reads' own time bound",
        || "no timed workspace reads".into(),
    );
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        percentile(v, 50.0)
    };
    let names = [
        "plants",
        "flowsheet",
        "model",
        "periods (48 h)",
        "period",
        "meters",
    ];
    let parts: Vec<String> = names
        .iter()
        .zip(each.iter_mut())
        .map(|(name, times)| format!("{name} {:.1}", median(times)))
        .collect();
    println!(
        "   the workspace's loop page, {} rounds: its six requests {:.1} ms in all (median; {} ms each)",
        pages.len(),
        median(&mut pages),
        parts.join(", ")
    );
    println!(
        "   a year of purge_fraction thinned to 800 points: median {:.1} ms",
        median(&mut series)
    );
    let count = every.first().map_or(0, |e| e.1);
    let mut all_ms: Vec<f64> = every.iter().map(|e| e.0).collect();
    println!(
        "   a year of every figure ({count} series) thinned to 800 points each: median {:.1} ms",
        median(&mut all_ms)
    );
    println!(
        "   the first round, before any memo: the loop page's requests {:.1} ms, the thinned year {:.1} ms",
        first.0, first.1
    );
}

/// Meter health with the year stored: `GET …/meters` and `GET …/meters/{tag}` timed right
/// after a new run landed (the memo not current: the running states are read, and the new
/// period's rows have been folded into them by the run's own transaction) and again when the
/// memo is current; and `GET …/meters` right after a re-run of the period a day before the
/// last (the meters' states are taken up again from a checkpoint). `rounds` of each, medians. Each run is a copy of
/// the run and meter rows of the period before it, recorded through the store's own
/// `record_run`.
pub async fn meter_reads(svc: &Service, year: &Year<'_>, rounds: usize) {
    let base = &svc.served.base;
    let store = &svc.state().store;
    let tag = &year.plant.meters[0].tag;
    let client = bench_client();
    let get = |url: String| timed_get(&client, svc, url, "tests/health.rs");
    let mut next = year.start + TimeDelta::hours(year.hours as i64);
    // A new period one hour after the last; or, with `rerun`, the period a day before the
    // last again (its meter states must be rebuilt).
    let mut land = |rerun: bool| {
        let dst = if rerun {
            next - TimeDelta::hours(24)
        } else {
            next
        };
        if !rerun {
            next += TimeDelta::hours(1);
        }
        async move {
            let src = dst - TimeDelta::hours(1);
            let row = store
                .current_run(&svc.row, src)
                .await
                .expect("current run")
                .expect("a run of the last period");
            let meters = store
                .meter_periods(&svc.row, None, src, dst)
                .await
                .expect("meter rows")
                .into_iter()
                .map(|(tag, mut p)| {
                    p.period_start = dst;
                    (tag, p)
                })
                .collect::<Vec<_>>();
            let mut report = row.run.report.clone();
            report["period_start"] = rfc3339(dst).into();
            report["period_end"] = rfc3339(dst + TimeDelta::hours(1)).into();
            let run = NewRun {
                period_start: dst,
                report,
                meters,
                ..row.run.clone()
            };
            store.record_run(&svc.row, &run).await.expect("record run");
        }
    };
    let list = format!("{base}/meters");
    let one = format!("{base}/meters/{tag}");
    let (mut fresh, mut kept, mut fresh_one, mut kept_one) = (vec![], vec![], vec![], vec![]);
    let mut rerun = Vec::new();
    let mut history = 0;
    let mut periods = 0;
    for _ in 0..rounds {
        land(true).await;
        rerun.push(get(list.clone()).await.0);
        land(false).await;
        fresh.push(get(list.clone()).await.0);
        let (ms, body) = get(list.clone()).await;
        kept.push(ms);
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        periods = v["meters"][0]["periods"].as_u64().unwrap_or(0);
        land(false).await;
        fresh_one.push(get(one.clone()).await.0);
        let (ms, body) = get(one.clone()).await;
        kept_one.push(ms);
        let v: serde_json::Value = serde_json::from_slice(&body).unwrap_or_default();
        history = v["history"].as_array().map_or(0, Vec::len);
    }
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        percentile(v, 50.0)
    };
    let (a, b) = (median(&mut fresh), median(&mut kept));
    let (c, d) = (median(&mut fresh_one), median(&mut kept_one));
    let e = median(&mut rerun);
    println!(
        "   meter health, {rounds} rounds, medians: GET meters {a:.1} ms right after a run landed, {b:.1} ms with the memo current ({periods} periods in a record); GET meters/{tag} {c:.1} ms after a run, {d:.1} ms current ({history} history points)"
    );
    println!(
        "   GET meters right after a re-run of the period a day before the last (every meter's state taken up again from a checkpoint): {e:.1} ms median"
    );
    println!(
        "   target: GET meters < 20 ms: {}; GET meters/{{tag}} < 30 ms: {}",
        if a < 20.0 { "met" } else { "NOT met" },
        if c < 30.0 { "met" } else { "NOT met" }
    );
}

/// A client holding one connection, as a browser tab's requests reuse theirs.
fn bench_client() -> reqwest::Client {
    reqwest::Client::builder()
        .pool_max_idle_per_host(1)
        .build()
        .expect("client")
}

/// GET `url` with the service's token: its time in ms and its body; a failure stops the bench,
/// naming `test` (the test that checks the same answers).
async fn timed_get(
    client: &reqwest::Client,
    svc: &Service,
    url: String,
    test: &str,
) -> (f64, Vec<u8>) {
    let t = Instant::now();
    let res = client
        .get(url.clone())
        .bearer_auth(&svc.served.token)
        .send()
        .await
        .expect("GET");
    let ok = res.status().is_success();
    let body = res.bytes().await.expect("body");
    let ms = t.elapsed().as_secs_f64() * 1e3;
    refuse_unless(ok, test, || {
        format!("GET {url} failed: {}", String::from_utf8_lossy(&body))
    });
    (ms, body.to_vec())
}
