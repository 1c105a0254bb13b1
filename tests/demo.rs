//! End-to-end: `loopbal demo --no-serve` on a temporary database, as a new user runs it, and
//! the facts of its summary checked against what the simulator did.

use std::process::Command;

use loopbal_server::demo::scenario;
use reconcile::PeriodInput;
use serde_json::Value;

const BIN: &str = env!("CARGO_BIN_EXE_loopbal");

fn demo(extra: &[&str]) -> std::process::Output {
    let dir = tempfile::tempdir().unwrap();
    demo_on(&dir.path().join("demo.sqlite"), extra)
}

/// `loopbal demo --no-serve` on the database file `db`.
fn demo_on(db: &std::path::Path, extra: &[&str]) -> std::process::Output {
    Command::new(BIN)
        .args([
            "demo",
            "--no-serve",
            "--listen",
            "127.0.0.1:0",
            "--database",
        ])
        .arg(db)
        .args(extra)
        .output()
        .expect("run loopbal demo")
}

/// The loop figures of the true steady state: the engine on the simulator's exact meter
/// values (no noise, no faults).
fn true_figures() -> Vec<Value> {
    let plant = scenario::plant();
    let z = scenario::true_state(&plant).unwrap();
    let exact = reconcile::simulate::exact_values(&plant, &z);
    let start = scenario::start();
    let input = PeriodInput {
        start,
        end: start + chrono::TimeDelta::hours(1),
        values: testkit::one_reading_each(exact),
        left_out: Vec::new(),
    };
    let report = reconcile::reconcile_period(&plant, &input);
    serde_json::to_value(&report.figures)
        .unwrap()
        .as_array()
        .unwrap()
        .clone()
}

#[test]
fn the_demo_finds_the_biased_meter_watches_the_drifting_one_and_blames_no_other() {
    let out = demo(&["--json"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let s: Value = serde_json::from_slice(&out.stdout).expect("JSON summary");
    assert_eq!(s["plant"], scenario::PLANT_NAME);
    assert_eq!(s["periods"], 96);
    assert_eq!(s["periods_reconciled"], 96);
    assert_eq!(s["batches"], 5, "four days and the late correction");
    assert!(s["global_test_tested"].as_u64().unwrap() >= 90);

    let meters = s["meters"].as_array().unwrap();
    let status = |tag: &str| {
        meters
            .iter()
            .find(|m| m["tag"] == tag)
            .map(|m| m["status"].as_str().unwrap().to_string())
            .unwrap_or_else(|| "ok".into())
    };
    assert_eq!(status(scenario::BIASED), "suspect", "{meters:#?}");
    let biased = meters
        .iter()
        .find(|m| m["tag"] == scenario::BIASED)
        .unwrap();
    let (b, sb) = (
        biased["bias"].as_f64().unwrap(),
        biased["bias_sigma"].as_f64().unwrap(),
    );
    assert!(
        (b - scenario::BIAS).abs() <= 3.0 * sb,
        "bias {b} ± {sb}, true {}",
        scenario::BIAS
    );
    let drifting = status(scenario::DRIFTING);
    assert!(drifting == "watch" || drifting == "suspect", "{drifting}");
    for m in meters {
        let tag = m["tag"].as_str().unwrap();
        if tag != scenario::BIASED && tag != scenario::DRIFTING {
            assert_ne!(m["status"], "suspect", "an unbiased meter is blamed: {m}");
        }
    }

    // The loop figures of the last hour against the true steady state, ± 3σ.
    let truth = true_figures();
    let figures = s["figures"].as_array().unwrap();
    assert!(figures.len() >= 10, "{figures:?}");
    for f in figures {
        let Some(value) = f["value"].as_f64() else {
            continue;
        };
        let sigma = f["sigma"].as_f64().unwrap();
        let t = truth
            .iter()
            .find(|t| t["name"] == f["name"] && t["subject"] == f["subject"])
            .unwrap_or_else(|| panic!("no true value of {f}"));
        let tv = t["value"].as_f64().unwrap();
        assert!(
            (value - tv).abs() <= 3.0 * sigma,
            "{} {}: {value} ± {sigma}, true {tv}",
            f["name"],
            f["subject"]
        );
    }

    // The purge trade-off of the last day: five solved points of a purge sweep, in which a
    // larger purge takes out more inert (less methane at the converter inlet), circulates
    // less (a smaller recycle ratio) and makes less methanol, as a loop's mass balance has it;
    // and an optimum inside the range searched.
    let purge = &s["purge"];
    let points = purge["points"].as_array().expect("the purge sweep");
    assert_eq!(points.len(), 5, "{purge}");
    let figure = |p: &Value, name: &str, subject: &str| -> f64 {
        p["figures"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["name"] == name && f["subject"] == subject)
            .and_then(|f| f["value"].as_f64())
            .unwrap_or_else(|| panic!("{name} {subject} in {p}"))
    };
    let split = |p: &Value| p["settings"]["split:purge"].as_f64().unwrap();
    for pair in points.windows(2) {
        let (a, b) = (&pair[0], &pair[1]);
        assert_eq!(a["status"], "solved", "{a}");
        assert!(split(a) < split(b));
        assert!(figure(a, "product_made", "CH3OH") > figure(b, "product_made", "CH3OH"));
        assert!(
            figure(a, "recycle_ratio", "purge-split") > figure(b, "recycle_ratio", "purge-split")
        );
        assert!(
            figure(a, "inert_fraction_reactor_inlet", "converter:CH4")
                > figure(b, "inert_fraction_reactor_inlet", "converter:CH4")
        );
    }
    let optimum = purge["optimum"]["value"].as_f64().expect("an optimum");
    let base = figures
        .iter()
        .find(|f| f["name"] == "purge_fraction")
        .and_then(|f| f["value"].as_f64())
        .unwrap();
    assert!(
        optimum > base * 0.25 && optimum < base * 4.0,
        "{optimum} within the range searched around {base}"
    );
    assert!(purge["optimum"]["margin_sigma"].as_f64().unwrap() > 0.0);

    // Which meter for the purge fraction: the best repair narrows it, losing that meter widens
    // it, the best new meter narrows it, and the purge flow meter is among the meters valued.
    let value = &s["meter_value"];
    assert_eq!(value["figure"]["name"], "purge_fraction", "{value}");
    let sigma = value["figure"]["sigma"].as_f64().unwrap();
    let repair = &value["meters"][0];
    assert!(
        repair["sigma_if_halved"].as_f64().unwrap() < sigma,
        "{repair}"
    );
    assert!(
        repair["sigma_if_lost"].as_f64().is_none_or(|s| s > sigma),
        "{repair}"
    );
    let added = value["candidates"][0]["sigma_if_added"].as_f64().unwrap();
    assert!(added < sigma, "{}", value["candidates"][0]);
    let purge_meter = value["meters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["tag"] == "TH2-FI-501")
        .expect("the purge flow meter valued");
    assert!(purge_meter["sigma_if_halved"].as_f64().unwrap() < sigma);
}

#[test]
fn the_text_summary_reads_as_a_report_and_refuses_an_existing_database() {
    let out = demo(&["--days", "2"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8(out.stdout).unwrap();
    for needle in [
        "Meters to look at",
        "Loop figures of the last hour",
        "The purge trade-off",
        "the margin is highest at a purge split of",
        "Which meter for the purge fraction",
        "best repair:",
        "best new analyser",
        "48 of 48 periods reconciled",
        scenario::BIASED,
        "Tokens of this demo database",
        "licensed engineering practice",
    ] {
        assert!(text.contains(needle), "missing {needle:?} in\n{text}");
    }
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("taken.sqlite");
    std::fs::write(&db, b"not a demo").unwrap();
    let out = demo_on(&db, &[]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("taken.sqlite"));
    assert_eq!(
        std::fs::read(&db).unwrap(),
        b"not a demo",
        "the file is left alone"
    );
}
