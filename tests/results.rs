//! End-to-end tests of the results of a range (docs/api.md): loop figures as time
//! series (JSON and CSV) and reconciled balances summed over the range, from the real
//! `loopbal serve` running the simulated purge-design loop hour by hour.

mod support;

use std::collections::BTreeMap;

use reqwest::{Client, StatusCode};
use serde_json::Value;
use support::{
    client, json_ok, post_readings, problem, put_model, token, wait_for_periods, Server,
};

const PLANT: &str = "purge-design";
/// Four simulated hours, 00:00 to 04:00; the range around them has an unrun hour at each end.
const HOURS: usize = 4;
const START: &str = "2026-06-01T00:00:00Z";
const END: &str = "2026-06-01T04:00:00Z";
const BEFORE: &str = "2026-05-31T23:00:00Z";
const AFTER: &str = "2026-06-01T05:00:00Z";

/// The purge-design loop: its model text, the simulator's readings of `HOURS` hours from
/// START (noise at each meter's σ, fixed seed; none of a tag in an hour where `skip` says so)
/// as CSV, and the figures of the noise-free steady state (noise-free data reconciles to
/// itself, so these are the true values).
fn purge_design(skip: &dyn Fn(&str, usize) -> bool) -> (String, String, Vec<Value>) {
    use reconcile::simulate::{exact_values, steady_state, ReadingPlan};
    let model = testkit::plants::PURGE_DESIGN.to_string();
    let plant = reconcile::parse_plant(&model).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let start = chrono::DateTime::parse_from_rfc3339(START)
        .unwrap()
        .with_timezone(&chrono::Utc);
    let plan = ReadingPlan {
        start,
        hours: HOURS,
        per_hour: 3,
        seed: 7,
        faults: vec![],
    };
    let csv = testkit::readings_csv(&plant, &z, &plan, skip);

    let exact: Vec<reconcile::Reading> = plant
        .meters
        .iter()
        .zip(exact_values(&plant, &z))
        .map(|(m, value)| reconcile::Reading {
            tag: m.tag.clone(),
            time: start,
            value,
            quality: reconcile::Quality::Good,
        })
        .collect();
    let input = reconcile::group_readings(&plant, &exact).remove(0);
    let truth = reconcile::reconcile_period(&plant, &input);
    assert_eq!(truth.status, reconcile::ReportStatus::Solved);
    let figures = serde_json::to_value(&truth.figures).unwrap();
    (model, csv, figures.as_array().unwrap().clone())
}

struct Setup {
    _dir: tempfile::TempDir,
    s: Server,
    c: Client,
    read: String,
    truth: Vec<Value>,
}

/// A fresh service that runs closed periods at once, with the purge-design model and its
/// simulated hours posted (but the readings `skip` leaves out) and every one of them run.
async fn run_hours(skip: &dyn Fn(&str, usize) -> bool) -> Setup {
    run_hours_of(skip, None).await
}

/// As `run_hours`; with `stored`, that model (of the purge-design tags) is put in the store
/// directly as the plant's first revision, as a revision admitted under earlier rules would
/// be, instead of the purge-design model PUT through the API.
async fn run_hours_of(skip: &dyn Fn(&str, usize) -> bool, stored: Option<&str>) -> Setup {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = dir.path().join("loopbal.sqlite");
    let admin = token(&db, "admin", None);
    let ingest = token(&db, "ingest", None);
    let read = token(&db, "read", None);
    if let Some(text) = stored {
        let store = loopbal_server::store::Store::open(&support::database_arg(&db))
            .await
            .expect("the test database");
        let row = store.create_plant(PLANT).await.expect("the plant");
        let spec = reconcile::ModelSpec::from_toml(text).expect("the model parses");
        let from = chrono::DateTime::parse_from_rfc3339("2026-01-01T00:00:00Z")
            .unwrap()
            .with_timezone(&chrono::Utc);
        store
            .put_model_revision(&row, &spec, text, from)
            .await
            .expect("the revision stored");
        store.close().await;
    }
    let s = support::LOOPBAL.serve(&db, &["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let (model, csv, truth) = purge_design(skip);
    if stored.is_none() {
        let r = put_model(&c, &s, &admin, PLANT, &model, "application/toml").await;
        assert_eq!(r.status(), StatusCode::CREATED);
    }
    let r = post_readings(&c, &s, &ingest, PLANT, &csv, "text/csv").await;
    let answer = json_ok(r).await;
    assert_eq!(answer["rejected"], 0, "{answer}");

    wait_for_periods(&c, &s, &read, PLANT, START, END, |periods| {
        periods.len() == HOURS
            && periods
                .iter()
                .all(|p| p["runs"] == 1 && p["rerun_due"] == false)
    })
    .await;
    Setup {
        _dir: dir,
        s,
        c,
        read,
        truth,
    }
}

/// As `run_hours` with every reading: every hour is solved.
async fn solved_hours() -> Setup {
    let t = run_hours(&|_, _| false).await;
    for p in t.json("periods", &[("from", START), ("to", END)]).await["periods"]
        .as_array()
        .unwrap()
    {
        assert_eq!(p["status"], "solved", "{p}");
    }
    t
}

impl Setup {
    fn get(&self, path: &str, query: &[(&str, &str)]) -> reqwest::RequestBuilder {
        self.c
            .get(self.s.url(&format!("/api/v1/plants/{PLANT}/{path}")))
            .query(query)
            .bearer_auth(&self.read)
    }

    /// The JSON answer of `GET …/{path}` with `query` (200 asserted).
    async fn json(&self, path: &str, query: &[(&str, &str)]) -> Value {
        json_ok(self.get(path, query).send().await.unwrap()).await
    }

    async fn report(&self, start: &str) -> Value {
        self.json(&format!("periods/{start}"), &[]).await["report"].clone()
    }
}

fn hour(k: usize) -> String {
    format!("2026-06-01T{k:02}:00:00Z")
}

fn number(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("{v} is not a number"))
}

#[tokio::test]
async fn figures_are_a_time_series_with_sigma_as_json_and_as_csv() {
    let t = solved_hours().await;

    // Every figure of the solved hours: one point per period, each with a value and a σ.
    let all = t.json("figures", &[("from", START), ("to", END)]).await;
    assert_eq!(all["plant"], PLANT);
    assert_eq!(all["periods"], HOURS);
    let names: Vec<&str> = all["names"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| n.as_str().unwrap())
        .collect();
    for name in [
        "purge_fraction",
        "inert_fraction_reactor_inlet",
        "single_pass_conversion",
    ] {
        assert!(names.contains(&name), "{names:?}");
    }
    let series = all["series"].as_array().unwrap();
    assert!(series.len() >= 5, "{series:?}");
    let report0 = t.report(START).await;
    for s in series {
        let points = s["points"].as_array().unwrap();
        assert_eq!(points.len(), HOURS, "{s}");
        for (k, p) in points.iter().enumerate() {
            assert_eq!(p["period_start"], hour(k));
            assert_eq!(p["status"], "solved");
        }
        // The first point is the first report's figure.
        let f = report0["figures"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["name"] == s["name"] && f["subject"] == s["subject"])
            .expect("the series is a figure of the report");
        assert_eq!(points[0]["value"], f["value"], "{s}");
        assert_eq!(points[0]["sigma"], f["sigma"], "{s}");
        assert_eq!(s["uom"], f["uom"]);
    }

    // Figures the simulator's steady state fixes lie within 4 σ of their true value each
    // hour (the chance that one of these 8 points misses by chance is below 10⁻³).
    for (name, subject) in [
        ("purge_fraction", "purge"),
        ("inert_fraction_reactor_inlet", "conv:Ar"),
    ] {
        let answer = t
            .json(
                "figures",
                &[
                    ("from", START),
                    ("to", END),
                    ("name", name),
                    ("subject", subject),
                ],
            )
            .await;
        let series = answer["series"].as_array().unwrap();
        assert_eq!(series.len(), 1, "{answer}");
        let truth = t
            .truth
            .iter()
            .find(|f| f["name"] == name && f["subject"] == subject)
            .expect("true figure");
        let truth = number(&truth["value"]);
        for p in series[0]["points"].as_array().unwrap() {
            let (value, sigma) = (number(&p["value"]), number(&p["sigma"]));
            assert!(sigma > 0.0, "{p}");
            assert!(
                (value - truth).abs() <= 4.0 * sigma,
                "{name} {p}: true value {truth}"
            );
        }
    }

    // The range around the simulated hours: its first and last periods were never run, and
    // their points are there with null, as gaps.
    let wide = t.json("figures", &[("from", BEFORE), ("to", AFTER)]).await;
    for s in wide["series"].as_array().unwrap() {
        let points = s["points"].as_array().unwrap();
        assert_eq!(points.len(), HOURS + 2);
        for p in [&points[0], &points[HOURS + 1]] {
            assert_eq!(p["status"], "no_run", "{p}");
            assert!(p["value"].is_null() && p["sigma"].is_null(), "{p}");
        }
    }

    // The same range as CSV: a header and one row per point, agreeing with the JSON number
    // for number (empty cells where JSON has null).
    let r = t
        .get("figures", &[("from", BEFORE), ("to", AFTER)])
        .header("accept", "text/csv")
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::OK);
    let ctype = r.headers()["content-type"].to_str().unwrap().to_string();
    assert!(ctype.starts_with("text/csv"), "{ctype}");
    let text = r.text().await.unwrap();
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    assert_eq!(
        reader.headers().unwrap(),
        vec!["period_start", "name", "subject", "uom", "value", "sigma"]
    );
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("a CSV row")).collect();
    let mut json_rows = Vec::new();
    for s in wide["series"].as_array().unwrap() {
        for p in s["points"].as_array().unwrap() {
            json_rows.push((s, p));
        }
    }
    assert_eq!(rows.len(), json_rows.len());
    let cell = |text: &str| -> Option<f64> {
        (!text.is_empty()).then(|| text.parse::<f64>().expect("a number"))
    };
    for (row, (s, p)) in rows.iter().zip(&json_rows) {
        assert_eq!(&row[0], p["period_start"].as_str().unwrap());
        assert_eq!(&row[1], s["name"].as_str().unwrap());
        assert_eq!(&row[2], s["subject"].as_str().unwrap());
        assert_eq!(&row[3], s["uom"].as_str().unwrap());
        assert_eq!(cell(&row[4]), p["value"].as_f64(), "{row:?} {p}");
        assert_eq!(cell(&row[5]), p["sigma"].as_f64(), "{row:?} {p}");
    }
    // format=csv does the same for tools that cannot set headers.
    let r = t
        .get(
            "figures",
            &[("from", BEFORE), ("to", AFTER), ("format", "csv")],
        )
        .send()
        .await
        .unwrap();
    assert_eq!(r.text().await.unwrap(), text);

    // A name not in the range: 404 naming the figures there are.
    let r = t
        .get(
            "figures",
            &[("from", START), ("to", END), ("name", "purge_fractoin")],
        )
        .send()
        .await
        .unwrap();
    let body = problem(r, StatusCode::NOT_FOUND).await;
    assert!(
        body["detail"].as_str().unwrap().contains("purge_fraction"),
        "{body}"
    );
    let r = t
        .get(
            "figures",
            &[
                ("from", START),
                ("to", END),
                ("name", "purge_fraction"),
                ("subject", "gas"),
            ],
        )
        .send()
        .await
        .unwrap();
    let body = problem(r, StatusCode::NOT_FOUND).await;
    assert!(body["detail"].as_str().unwrap().contains("purge"), "{body}");

    // Bad ranges.
    let r = t
        .get("figures", &[("from", END), ("to", START)])
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = t
        .get("figures", &[("from", "yesterday"), ("to", START)])
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = t
        .get("figures", &[("from", "2020-01-01T00:00:00Z"), ("to", END)])
        .send()
        .await
        .unwrap();
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert!(body["detail"].as_str().unwrap().contains("10000"), "{body}");
    let r = t.get("figures", &[("from", START)]).send().await.unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
}

/// Σ value·Δt and sqrt(Σ (σ·Δt)²) of one quantity over the periods (hours of 1 h).
fn expected_total(values: &[(f64, f64)]) -> (f64, f64) {
    let amount = values.iter().map(|(v, _)| v * 1.0).sum();
    let sigma = values
        .iter()
        .map(|(_, s)| (s * 1.0).powi(2))
        .sum::<f64>()
        .sqrt();
    (amount, sigma)
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1.0)
}

#[tokio::test]
async fn balances_are_the_reports_flows_summed_over_the_range_with_sigma() {
    let t = solved_hours().await;
    let answer = t.json("balances", &[("from", START), ("to", END)]).await;
    assert_eq!(answer["plant"], PLANT);
    assert_eq!(answer["period_seconds"], 3600);
    let coverage = &answer["coverage"];
    assert_eq!(coverage["periods"], HOURS);
    assert_eq!(coverage["covered"], HOURS);
    assert_eq!(number(&coverage["hours"]), HOURS as f64);
    assert_eq!(coverage["missing"], serde_json::json!([]));
    assert_eq!(coverage["not_usable"], serde_json::json!([]));
    assert_eq!(coverage["unobservable"], serde_json::json!([]));

    // Each period's flows are its report's.
    let periods = answer["periods"].as_array().unwrap();
    assert_eq!(periods.len(), HOURS);
    // (stream, quantity) → (value, σ) of each hour
    let mut per_hour: BTreeMap<(String, String), Vec<(f64, f64)>> = BTreeMap::new();
    for (k, p) in periods.iter().enumerate() {
        assert_eq!(p["start"], hour(k));
        assert_eq!(p["end"], hour(k + 1));
        assert_eq!(p["status"], "solved");
        assert_eq!(number(&p["hours"]), 1.0);
        let report = t.report(&hour(k)).await;
        let streams = p["streams"].as_array().unwrap();
        assert_eq!(streams.len(), report["streams"].as_array().unwrap().len());
        for (ours, theirs) in streams.iter().zip(report["streams"].as_array().unwrap()) {
            for field in [
                "id",
                "molar_flow",
                "molar_flow_sigma",
                "mass_flow",
                "mass_flow_sigma",
                "component_flows",
                "component_flows_sigma",
                "observable",
            ] {
                assert_eq!(ours[field], theirs[field], "{field} of {}", ours["id"]);
            }
            let id = ours["id"].as_str().unwrap().to_string();
            for (q, v, s) in [
                ("kmol", "molar_flow", "molar_flow_sigma"),
                ("kg", "mass_flow", "mass_flow_sigma"),
            ] {
                per_hour
                    .entry((id.clone(), q.into()))
                    .or_default()
                    .push((number(&ours[v]), number(&ours[s])));
            }
            for (c, v) in ours["component_flows"].as_object().unwrap() {
                let s = &ours["component_flows_sigma"][c];
                per_hour
                    .entry((id.clone(), c.clone()))
                    .or_default()
                    .push((number(v), number(s)));
            }
        }
    }

    // The totals: Σ flow × 1 h, and σ = sqrt(Σ (σ·1 h)²).
    let totals = answer["totals"]["streams"].as_array().unwrap();
    assert_eq!(number(&answer["totals"]["hours"]), HOURS as f64);
    assert_eq!(
        totals.len(),
        periods[0]["streams"].as_array().unwrap().len()
    );
    let mut checked = 0;
    for total in totals {
        let id = total["id"].as_str().unwrap().to_string();
        assert_eq!(total["periods_without_value"], 0);
        let mut pairs = vec![
            (
                "kmol".to_string(),
                &total["amount_kmol"],
                &total["amount_kmol_sigma"],
            ),
            (
                "kg".to_string(),
                &total["amount_kg"],
                &total["amount_kg_sigma"],
            ),
        ];
        for (c, v) in total["component_amounts_kmol"].as_object().unwrap() {
            pairs.push((c.clone(), v, &total["component_amounts_kmol_sigma"][c]));
        }
        for (q, amount, sigma) in pairs {
            let hours = &per_hour[&(id.clone(), q.clone())];
            assert_eq!(hours.len(), HOURS);
            let (want, want_sigma) = expected_total(hours);
            assert!(
                close(number(amount), want),
                "{id} {q}: {amount} against {want}"
            );
            assert!(
                close(number(sigma), want_sigma),
                "{id} {q}: σ {sigma} against {want_sigma}"
            );
            checked += 1;
        }
    }
    assert_eq!(checked, per_hour.len());

    // A range with unrun periods at both ends reports them, and sums no fewer hours than it
    // has: every total is null.
    let wide = t.json("balances", &[("from", BEFORE), ("to", AFTER)]).await;
    let coverage = &wide["coverage"];
    assert_eq!(coverage["periods"], HOURS + 2);
    assert_eq!(coverage["covered"], HOURS);
    assert_eq!(number(&coverage["covered_hours"]), HOURS as f64);
    assert_eq!(coverage["missing"], serde_json::json!([BEFORE, END]));
    let periods = wide["periods"].as_array().unwrap();
    assert_eq!(periods.len(), HOURS + 2);
    assert_eq!(periods[0]["status"], "no_run");
    assert_eq!(periods[0]["streams"], serde_json::json!([]));
    for total in wide["totals"]["streams"].as_array().unwrap() {
        assert_eq!(total["periods_without_value"], 2, "{total}");
        assert!(
            total["amount_kmol"].is_null() && total["amount_kmol_sigma"].is_null(),
            "{total}"
        );
        assert!(total["amount_kg"].is_null(), "{total}");
        for v in total["component_amounts_kmol"]
            .as_object()
            .unwrap()
            .values()
        {
            assert!(v.is_null(), "{total}");
        }
    }

    let r = t
        .get("balances", &[("from", END), ("to", START)])
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = t
        .get("balances", &[("from", "2020-01-01T00:00:00Z"), ("to", END)])
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
}

#[tokio::test]
async fn a_stream_unobservable_in_one_hour_has_a_gap_and_no_total() {
    // Without the loop's flow meters (FI-2 into the converter, FI-5 on the recycle) the
    // circulation rate of hour 2 cannot be determined: the recycle is unobservable.
    let t = run_hours(&|tag, hour| hour == 2 && (tag == "FI-2" || tag == "FI-5")).await;
    let report = t.report(&hour(2)).await;
    assert_eq!(
        report["status"], "unobservable",
        "{}",
        report["unobservable"]
    );
    let recycle = report["streams"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id"] == "recycle")
        .unwrap();
    assert!(recycle["molar_flow"].is_null(), "{recycle}");

    let answer = t.json("balances", &[("from", START), ("to", END)]).await;
    let coverage = &answer["coverage"];
    assert_eq!(
        coverage["covered"], HOURS,
        "an unobservable hour still counts for the rest"
    );
    let unobservable = coverage["unobservable"].as_array().unwrap();
    assert_eq!(unobservable.len(), 1, "{coverage}");
    assert_eq!(unobservable[0]["start"], hour(2));
    assert!(
        unobservable[0]["streams"]
            .as_array()
            .unwrap()
            .contains(&Value::from("recycle")),
        "{coverage}"
    );
    let totals = answer["totals"]["streams"].as_array().unwrap();
    let recycle = totals.iter().find(|s| s["id"] == "recycle").unwrap();
    assert_eq!(recycle["periods_without_value"], 1);
    assert!(
        recycle["amount_kmol"].is_null() && recycle["amount_kg"].is_null(),
        "{recycle}"
    );
    // The fresh feed is measured every hour: its total stands.
    let feed = totals.iter().find(|s| s["id"] == "feed").unwrap();
    assert_eq!(feed["periods_without_value"], 0);
    assert!(number(&feed["amount_kmol"]) > 0.0, "{feed}");

    // The recycle ratio of that hour is a gap in its series, not a number.
    let figures = t
        .json(
            "figures",
            &[("from", START), ("to", END), ("name", "recycle_ratio")],
        )
        .await;
    let points = figures["series"][0]["points"].as_array().unwrap();
    assert_eq!(points.len(), HOURS);
    assert_eq!(points[2]["status"], "unobservable");
    assert!(
        points[2]["value"].is_null() && points[2]["sigma"].is_null(),
        "{}",
        points[2]
    );
    assert!(points[1]["value"].is_number(), "{}", points[1]);
}

/// A revision stored before names were held to the safe set may name a stream, a unit, a
/// reaction or a component so that a spreadsheet would run it (`=1+2`, `@conv`, `-synthesis`,
/// `+Ar`). Such a model is refused today; the stored one still runs, and the figures CSV writes
/// every such name as text, the numbers (negative ones too) as numbers.
#[tokio::test]
async fn the_figures_csv_never_hands_a_spreadsheet_a_formula() {
    let hostile = testkit::plants::PURGE_DESIGN
        .replace("\"purge\"", "\"=1+2\"")
        .replace("\"conv\"", "\"@conv\"")
        .replace("\"synthesis\"", "\"-synthesis\"")
        .replace("\"Ar\"", "\"+Ar\"");
    let spec = reconcile::ModelSpec::from_toml(&hostile).unwrap();
    assert!(
        reconcile::Plant::new(spec).is_err(),
        "refused when admitted today"
    );
    let t = run_hours_of(&|_, _| false, Some(&hostile)).await;

    let json = t.json("figures", &[("from", START), ("to", END)]).await;
    let r = t
        .get(
            "figures",
            &[("from", START), ("to", END), ("format", "csv")],
        )
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::OK);
    let text = r.text().await.unwrap();
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("a CSV row")).collect();
    let mut points = Vec::new();
    for s in json["series"].as_array().unwrap() {
        for p in s["points"].as_array().unwrap() {
            points.push((s, p));
        }
    }
    assert_eq!(rows.len(), points.len());
    let mut neutralised = std::collections::BTreeSet::new();
    for (row, (s, p)) in rows.iter().zip(&points) {
        let subject = s["subject"].as_str().unwrap();
        if subject.starts_with(['=', '+', '-', '@']) {
            assert_eq!(&row[2], format!("'{subject}"), "{row:?}");
            neutralised.insert(subject.to_string());
        } else {
            assert_eq!(&row[2], subject, "{row:?}");
        }
        // Numbers stay numbers, never prefixed.
        assert_eq!(row[4].parse::<f64>().ok(), p["value"].as_f64(), "{row:?}");
    }
    for subject in ["=1+2", "@conv:+Ar", "-synthesis"] {
        assert!(neutralised.contains(subject), "{neutralised:?}");
    }
    // No cell of the document begins like a formula.
    for row in &rows {
        for (k, cell) in row.iter().enumerate() {
            let numeric = k >= 4 && (cell.is_empty() || cell.parse::<f64>().is_ok());
            assert!(
                numeric || !cell.starts_with(['=', '+', '-', '@', '\t', '\r']),
                "{row:?}"
            );
        }
    }
}
