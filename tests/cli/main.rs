//! End-to-end tests of the `loopbal` binary's file commands (docs/cli.md):
//! the real executable on files in a temporary folder, checked by exit status, stdout and stderr.
//! This file holds the fixtures and helpers; the tests are by command and input: `check_model`,
//! `good_input`, `bad_input`, `faults`, `meter_value`, `what_if`, and `serve` (its options
//! refused before it starts).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use serde_json::Value;

/// The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.
mod support {
    testkit::e2e_support!();
}

mod bad_input;
mod check_model;
mod faults;
mod good_input;
mod meter_value;
mod serve;
mod what_if;

use testkit::plants::OMBRASK_PATH as OMBRASK;

/// A small linear plant (two feeds, a mixer, a splitter): no reaction, so the estimate is a
/// linear least-squares problem the engine must solve in a few iterations.
const WREN: &str = r#"
name = "wren-split"
period = "1h"

[[component]]
id = "A"
molar_mass = 28.0
[[component]]
id = "B"
molar_mass = 2.0

[[unit]]
id = "join"
kind = "mixer"
[[unit]]
id = "tee"
kind = "splitter"

[[stream]]
id = "feed-1"
from = "outside"
to = "join"
[[stream]]
id = "feed-2"
from = "outside"
to = "join"
[[stream]]
id = "header"
from = "join"
to = "tee"
[[stream]]
id = "east"
from = "tee"
to = "outside"
[[stream]]
id = "west"
from = "tee"
to = "outside"

[[meter]]
tag = "WR-F1"
stream = "feed-1"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "WR-F2"
stream = "feed-2"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "WR-F3"
stream = "header"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 3.0
[[meter]]
tag = "WR-F4"
stream = "east"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "WR-F5"
stream = "west"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 2.0
[[meter]]
tag = "WR-A1"
stream = "feed-1"
quantity = "mole_fraction"
component = "A"
uom = "%"
sigma = 0.5
[[meter]]
tag = "WR-A2"
stream = "feed-2"
quantity = "mole_fraction"
component = "A"
uom = "%"
sigma = 0.5
"#;

const WREN_READINGS: &str = "tag,time,value
WR-F1,2026-03-02T05:10:00Z,100.5
WR-F2,2026-03-02T05:10:00Z,49
WR-F3,2026-03-02T05:10:00Z,152
WR-F4,2026-03-02T05:10:00Z,90.3
WR-F5,2026-03-02T05:10:00Z,59.1
WR-A1,2026-03-02T05:10:00Z,25
WR-A2,2026-03-02T05:10:00Z,60
";

/// Ombrask meters with a plausible steady state: 1000 kmol/h of makeup (22 413.97 Nm3/h),
/// about 234 kmol/h of synthesis extent, 60 kmol/h of purge, 4000 kmol/h of recycle.
const OMBRASK_STATE: [(&str, f64); 11] = [
    ("OB2-FI-101", 22413.97),
    ("OB2-AI-102", 0.30),
    ("OB2-AI-103", 74.0),
    ("OB2-AI-104", 1.0),
    ("OB2-FI-201", 5000.0),
    ("OB2-AI-202", 4.06),
    ("OB2-FI-301", 8.03),
    ("OB2-FI-401", 60.0),
    ("OB2-AI-402", 5.0),
    ("OB2-AI-403", 8.0),
    ("OB2-FI-501", 4000.0),
];

fn loopbal(args: &[&str]) -> Output {
    Command::new(support::BIN)
        .args(args)
        .output()
        .expect("the loopbal binary runs")
}

fn write(dir: &Path, name: &str, content: impl AsRef<[u8]>) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, content).expect("write test file");
    path
}

fn s(path: &Path) -> &str {
    path.to_str().expect("utf-8 temp path")
}

fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

fn reconcile(model: &Path, readings: &Path) -> Output {
    loopbal(&["reconcile", "--model", s(model), "--readings", s(readings)])
}

/// The ombrask readings of 02:00–05:00 UTC, one (tag, time, value, quality) per reading.
/// Each hour has two good readings per meter whose mean is the steady state scaled by a
/// small per-hour factor; FI-101 also gets a wild bad reading that must not count, and hour
/// 03:00 is written in a +02:00 offset to check that periods are aligned to UTC.
fn ombrask_readings() -> Vec<(String, String, String, &'static str)> {
    let mut rows = Vec::new();
    for (h, scale) in [(2, 1.0), (3, 1.01), (4, 0.99)] {
        for (tag, v) in OMBRASK_STATE {
            let v = if tag.contains("-FI-") { v * scale } else { v };
            let (t1, t2) = if h == 3 {
                (
                    "2026-03-02T05:05:00+02:00".to_string(),
                    "2026-03-02T05:50:00+02:00".to_string(),
                )
            } else {
                (
                    format!("2026-03-02T{h:02}:05:00Z"),
                    format!("2026-03-02T{h:02}:50:00Z"),
                )
            };
            // ±0.5 % around the mean: the mean is exactly v.
            rows.push((tag.to_string(), t1, format!("{}", v * 1.005), "good"));
            rows.push((tag.to_string(), t2, format!("{}", v * 0.995), "uncertain"));
        }
        rows.push((
            "OB2-FI-101".to_string(),
            format!("2026-03-02T{h:02}:30:00Z"),
            "99999".to_string(),
            "bad",
        ));
    }
    rows
}

fn ombrask_csv() -> String {
    let mut csv = String::from("tag,time,value,quality\n");
    for (tag, time, value, quality) in ombrask_readings() {
        csv.push_str(&format!("{tag},{time},{value},{quality}\n"));
    }
    csv
}

fn ombrask_json() -> String {
    let readings: Vec<Value> = ombrask_readings()
        .into_iter()
        .map(|(tag, time, value, quality)| {
            serde_json::json!({"tag": tag, "time": time,
                "value": value.parse::<f64>().expect("number"), "quality": quality})
        })
        .collect();
    serde_json::json!({ "readings": readings }).to_string()
}

fn reports(out: &Output) -> Vec<Value> {
    let v: Value = serde_json::from_slice(&out.stdout).expect("stdout is JSON");
    v.as_array().expect("a JSON array").clone()
}

fn has_keys(v: &Value, keys: &[&str], what: &str) {
    let obj = v
        .as_object()
        .unwrap_or_else(|| panic!("{what} is an object: {v}"));
    for k in keys {
        assert!(obj.contains_key(*k), "{what} lacks \"{k}\": {v}");
    }
}

/// Exit status 1 exactly when some period failed to reconcile (docs/cli.md).
fn assert_exit_matches_statuses(out: &Output, reports: &[Value]) {
    let failed = reports
        .iter()
        .any(|r| matches!(r["status"].as_str(), Some("not_converged" | "infeasible")));
    assert_eq!(
        out.status.code(),
        Some(if failed { 1 } else { 0 }),
        "{}",
        stderr(out)
    );
    // Every failed period is named on stderr, and no other.
    for r in reports {
        let named = stderr(out).contains(&format!(
            "period {} was not reconciled",
            r["period_start"].as_str().unwrap_or("?")
        ));
        let failed = matches!(r["status"].as_str(), Some("not_converged" | "infeasible"));
        assert_eq!(named, failed, "{}", stderr(out));
    }
}

/// Two hours of the purge-design loop's simulated readings (design case) as files.
pub fn purge_design_files(dir: &Path) -> (PathBuf, PathBuf) {
    use reconcile::simulate::{steady_state, ReadingPlan};
    let plant = reconcile::parse_plant(testkit::plants::PURGE_DESIGN).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    let plan = ReadingPlan {
        start: chrono::DateTime::parse_from_rfc3339("2026-06-01T00:00:00Z")
            .unwrap()
            .with_timezone(&chrono::Utc),
        hours: 2,
        per_hour: 4,
        seed: 5,
        faults: Vec::new(),
    };
    let csv = testkit::readings_csv(&plant, &z, &plan, &|_, _| false);
    (
        write(dir, "purge-design.toml", testkit::plants::PURGE_DESIGN),
        write(dir, "readings.csv", csv),
    )
}
