//! End-to-end tests of the `loopbal` binary's file commands (docs/cli.md):
//! the real executable on files in a temporary folder, checked by exit status, stdout and stderr.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use serde_json::Value;

/// The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.
mod support {
    testkit::e2e_support!();
}

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

// ---------------------------------------------------------------------------------------------
// check-model

#[test]
fn check_model_summarises_the_fixture() {
    let out = loopbal(&["check-model", OMBRASK]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).expect("utf-8");
    for expected in [
        "ombrask-ob2",
        "period 1h",
        "alpha 0.05",
        "5 components: N2, H2, NH3, Ar, CH4",
        "inerts: Ar, CH4",
        "4 units",
        "purge-split (splitter)",
        "1 reaction",
        "synthesis in conv: N2 + 3 H2 -> 2 NH3 (key N2)",
        "7 streams",
        "11 meters",
        "molar_flow: 3",
        "mass_flow: 1",
        "std_volume_flow: 1",
        "mole_fraction: 6",
    ] {
        assert!(
            text.contains(expected),
            "summary lacks {expected:?}:\n{text}"
        );
    }
}

#[test]
fn check_model_reads_json_by_extension() {
    let dir = tempfile::tempdir().expect("tempdir");
    let spec = serde_json::json!({
        "name": "wren-json",
        "component": [{"id": "A", "molar_mass": 28.0}],
        "unit": [{"id": "tee", "kind": "splitter"}],
        "stream": [
            {"id": "in", "from": "outside", "to": "tee"},
            {"id": "a", "from": "tee", "to": "outside"},
            {"id": "b", "from": "tee", "to": "outside"}
        ],
        "meter": [{"tag": "F1", "stream": "in", "quantity": "molar_flow", "uom": "kmol/h", "sigma": 1.0}]
    });
    // Pretty-printed with leading whitespace, so only the extension says JSON.
    let model = write(dir.path(), "wren.json", format!("\n  {spec:#}"));
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains("wren-json") && text.contains("3 streams") && text.contains("1 meter"),
        "{text}"
    );
}

#[test]
fn check_model_lists_every_problem_with_its_item() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(
        dir.path(),
        "heron.toml",
        r#"
name = "heron-loop"
period = "7m"
[[component]]
id = "A"
molar_mass = 28.0
[[unit]]
id = "join"
kind = "mixer"
[[stream]]
id = "feed"
from = "outside"
to = "join"
[[stream]]
id = "out"
from = "join"
to = "nowhere"
[[meter]]
tag = "HR-F1"
stream = "feed"
quantity = "molar_flow"
uom = "Nm3/h"
sigma = 1.0
[[meter]]
tag = "HR-F2"
stream = "ghost"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
"#,
    );
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty());
    let err = stderr(&out);
    for item in [
        "model",
        "stream \"out\"",
        "meter \"HR-F1\"",
        "meter \"HR-F2\"",
    ] {
        let line = format!("{}: {item}: ", model.display());
        assert!(err.contains(&line), "stderr lacks {line:?}:\n{err}");
    }
    assert!(
        err.contains("\"7m\"") && err.contains("nowhere") && err.contains("ghost"),
        "{err}"
    );
    // One line per problem, plus the count.
    assert!(err.contains("the model has 4 problem(s)"), "{err}");
}

#[test]
fn check_model_syntax_error_names_the_file_and_position() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(
        dir.path(),
        "broken.toml",
        "name = \"x\"\n[[component]\nid = \"A\"\n",
    );
    let out = loopbal(&["check-model", s(&model)]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(
        err.starts_with(&format!("{}: not valid TOML", model.display())),
        "{err}"
    );
    assert!(err.contains("line 2"), "{err}");

    let json = write(dir.path(), "broken.json", "{\"name\": \"x\",}");
    let out = loopbal(&["check-model", s(&json)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).starts_with(&format!("{}: not valid JSON", json.display())),
        "{}",
        stderr(&out)
    );
}

#[test]
fn check_model_missing_or_binary_file_exits_2_naming_it() {
    let dir = tempfile::tempdir().expect("tempdir");
    let missing = dir.path().join("absent.toml");
    let out = loopbal(&["check-model", s(&missing)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains(&format!("{}: cannot read", missing.display())));

    let binary = write(dir.path(), "binary.toml", b"name = \"x\"\n\xff\xfe\n");
    let out = loopbal(&["check-model", s(&binary)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains(&format!("{}: line 2: not UTF-8", binary.display())),
        "{}",
        stderr(&out)
    );
}

// ---------------------------------------------------------------------------------------------
// reconcile: good input

#[test]
fn reconcile_ombrask_three_hours_gives_three_full_reports() {
    let dir = tempfile::tempdir().expect("tempdir");
    let readings = write(dir.path(), "ombrask.csv", ombrask_csv());
    let out = reconcile(Path::new(OMBRASK), &readings);
    let reports = reports(&out);
    assert_eq!(reports.len(), 3, "{}", stderr(&out));
    assert_exit_matches_statuses(&out, &reports);

    for (i, r) in reports.iter().enumerate() {
        let h = 2 + i;
        assert_eq!(r["period_start"], format!("2026-03-02T{h:02}:00:00Z"));
        assert_eq!(r["period_end"], format!("2026-03-02T{:02}:00:00Z", h + 1));
        has_keys(
            r,
            &[
                "period_start",
                "period_end",
                "status",
                "iterations",
                "objective",
                "redundancy",
                "global_test",
                "meters",
                "streams",
                "extents",
                "split_fractions",
                "faults",
                "figures",
            ],
            "report",
        );
        let status = r["status"].as_str().expect("status is a string");
        assert!(
            ["solved", "not_converged", "unobservable", "infeasible"].contains(&status),
            "every meter reported, so not no_data: {status}"
        );
        has_keys(
            &r["global_test"],
            &["statistic", "critical", "alpha", "passed"],
            "global_test",
        );
        assert_eq!(r["global_test"]["alpha"], 0.05);

        let meters = r["meters"].as_array().expect("meters");
        assert_eq!(meters.len(), 11);
        for m in meters {
            has_keys(
                m,
                &[
                    "tag",
                    "measured",
                    "reconciled",
                    "sigma",
                    "reconciled_sigma",
                    "adjustment",
                    "normalized_adjustment",
                    "redundant",
                    "suspect",
                ],
                "meter",
            );
        }
        // The measured value is the mean of the good and uncertain readings; the bad 99999 is
        // not used, and the uncertain ones are marked.
        let scale = [1.0, 1.01, 0.99][i];
        for (tag, v) in OMBRASK_STATE {
            let expected = if tag.contains("-FI-") { v * scale } else { v };
            let m = meters
                .iter()
                .find(|m| m["tag"] == tag)
                .expect("meter reported");
            let measured = m["measured"].as_f64().expect("measured");
            assert!(
                (measured - expected).abs() <= 1e-9 * expected.abs(),
                "{tag}: {measured} vs {expected}"
            );
            assert_eq!(m["readings"], 2, "{tag}");
            assert_eq!(m["used_uncertain"], true, "{tag}");
        }

        let streams = r["streams"].as_array().expect("streams");
        assert_eq!(streams.len(), 7);
        for st in streams {
            has_keys(
                st,
                &[
                    "id",
                    "molar_flow",
                    "molar_flow_sigma",
                    "composition",
                    "observable",
                ],
                "stream",
            );
        }
        let extents = r["extents"].as_array().expect("extents");
        assert_eq!(extents.len(), 1);
        has_keys(
            &extents[0],
            &["reaction", "value", "sigma", "observable"],
            "extent",
        );
        let splits = r["split_fractions"].as_array().expect("split_fractions");
        assert_eq!(splits.len(), 2, "purge and recycle leave the splitter");
        for sp in splits {
            has_keys(sp, &["stream", "value", "sigma"], "split fraction");
        }
        for f in r["faults"].as_array().expect("faults") {
            has_keys(
                f,
                &[
                    "kind",
                    "candidates",
                    "magnitude",
                    "magnitude_sigma",
                    "statistic",
                ],
                "fault",
            );
        }
        for f in r["figures"].as_array().expect("figures") {
            has_keys(f, &["name", "subject", "value", "sigma"], "figure");
        }
    }
}

#[test]
fn json_readings_give_the_same_reports_as_csv() {
    let dir = tempfile::tempdir().expect("tempdir");
    let csv = write(dir.path(), "ombrask.csv", ombrask_csv());
    let json = write(dir.path(), "ombrask.json", ombrask_json());
    // No extension: recognised by content.
    let json_bare = write(dir.path(), "ombrask-readings", ombrask_json());
    let from_csv = reconcile(Path::new(OMBRASK), &csv);
    let from_json = reconcile(Path::new(OMBRASK), &json);
    let from_bare = reconcile(Path::new(OMBRASK), &json_bare);
    assert_eq!(reports(&from_csv).len(), 3);
    // Byte for byte: the same numbers give the same reports (the engine is deterministic).
    assert!(
        from_csv.stdout == from_json.stdout,
        "CSV and JSON readings give different reports"
    );
    assert!(
        from_csv.stdout == from_bare.stdout,
        "JSON recognised by content differs"
    );
    assert_eq!(from_csv.status.code(), from_json.status.code());
}

#[test]
fn a_solvable_plant_reconciles_with_exit_0() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(dir.path(), "wren.csv", WREN_READINGS);
    let out = reconcile(&model, &readings);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let reports = reports(&out);
    assert_eq!(reports.len(), 1);
    let r = &reports[0];
    assert_eq!(r["status"], "solved");
    assert_eq!(r["period_start"], "2026-03-02T05:00:00Z");
    assert_eq!(r["redundancy"], 2);
    assert_eq!(r["global_test"]["passed"], true);
    // The reconciled flows close both balances, which the raw readings do not.
    let flow = |tag: &str| {
        let m = r["meters"]
            .as_array()
            .expect("meters")
            .iter()
            .find(|m| m["tag"] == tag)
            .cloned();
        m.expect("meter")["reconciled"]
            .as_f64()
            .expect("reconciled")
    };
    let (f1, f2, f3, f4, f5) = (
        flow("WR-F1"),
        flow("WR-F2"),
        flow("WR-F3"),
        flow("WR-F4"),
        flow("WR-F5"),
    );
    assert!((f1 + f2 - f3).abs() < 1e-6, "mixer: {f1} + {f2} vs {f3}");
    assert!((f3 - f4 - f5).abs() < 1e-6, "splitter: {f3} vs {f4} + {f5}");
    assert!((f3 - 152.0).abs() > 1.0, "the header flow was adjusted");
}

#[test]
fn csv_columns_may_come_in_any_order_and_duplicates_replace() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let standard = write(dir.path(), "a.csv", WREN_READINGS);
    // Columns reordered, quality present; WR-F3 first written wrong at the same instant
    // (spelled in another offset), then corrected: the later line counts.
    let mut reordered = String::from("Value,quality,time,TAG\n");
    reordered.push_str("7.0,good,2026-03-02T06:10:00+01:00,WR-F3\n");
    for line in WREN_READINGS.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        reordered.push_str(&format!("{},,{},{}\n", f[2], f[1], f[0]));
    }
    let reordered = write(dir.path(), "b.csv", reordered);
    let a = reconcile(&model, &standard);
    let b = reconcile(&model, &reordered);
    assert_eq!(b.status.code(), Some(0), "{}", stderr(&b));
    assert!(
        a.stdout == b.stdout,
        "reordered columns give different reports"
    );
    let err = stderr(&b);
    assert!(
        err.contains("note:") && err.contains("line 5 replaces line 2"),
        "{err}"
    );
}

#[test]
fn a_period_with_only_bad_readings_has_no_data() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(
        dir.path(),
        "bad-quality.csv",
        "tag,time,value,quality\nWR-F1,2026-03-02T07:00:00Z,100,bad\nWR-F2,2026-03-02T07:59:59Z,50,BAD\n",
    );
    let out = reconcile(&model, &readings);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let reports = reports(&out);
    assert_eq!(reports.len(), 1);
    assert_eq!(reports[0]["status"], "no_data");
    assert_eq!(reports[0]["period_start"], "2026-03-02T07:00:00Z");
    assert!(reports[0]["meters"]
        .as_array()
        .expect("meters")
        .iter()
        .all(|m| m["measured"].is_null()));
}

#[test]
fn period_filters_keep_the_periods_asked_for() {
    let dir = tempfile::tempdir().expect("tempdir");
    let readings = write(dir.path(), "ombrask.csv", ombrask_csv());
    let out = loopbal(&[
        "reconcile",
        "--model",
        OMBRASK,
        "--readings",
        s(&readings),
        "--period-from",
        "2026-03-02T03:00:00Z",
        "--period-to",
        "2026-03-02T04:00:00Z",
    ]);
    let reports = reports(&out);
    assert_eq!(reports.len(), 1);
    assert_eq!(reports[0]["period_start"], "2026-03-02T03:00:00Z");
    assert_exit_matches_statuses(&out, &reports);
}

// ---------------------------------------------------------------------------------------------
// reconcile: bad input

/// Run a CSV of readings for the wren model and expect exit 2 with stderr naming the file and
/// the given line and reason, and nothing on stdout.
fn expect_bad(name: &str, content: impl AsRef<[u8]>, expected: &[&str]) {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(dir.path(), name, content);
    let out = reconcile(&model, &readings);
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{name}: {err}");
    assert!(
        out.stdout.is_empty(),
        "{name}: nothing reconciled on bad input"
    );
    for e in expected {
        let want = format!("{}: {e}", readings.display());
        assert!(err.contains(&want), "{name}: stderr lacks {want:?}:\n{err}");
    }
}

const HEAD: &str = "tag,time,value,quality\nWR-F1,2026-03-02T05:10:00Z,100,good\n";

#[test]
fn bad_readings_exit_2_naming_the_line() {
    expect_bad(
        "tag.csv",
        format!("{HEAD}WR-X9,2026-03-02T05:10:00Z,1,good\n"),
        &["line 3: unknown tag \"WR-X9\""],
    );
    expect_bad(
        "time.csv",
        format!("{HEAD}WR-F2,2026-03-02 05:10,1,good\n"),
        &["line 3: time \"2026-03-02 05:10\" is not RFC 3339"],
    );
    expect_bad(
        "nan.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:10:00Z,NaN,good\n"),
        &["line 3: value \"NaN\" is not a finite number"],
    );
    expect_bad(
        "inf.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:10:00Z,-inf,good\n"),
        &["line 3: value \"-inf\" is not a finite number"],
    );
    expect_bad(
        "empty.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:10:00Z,,good\n"),
        &["line 3: value is empty"],
    );
    expect_bad(
        "word.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:10:00Z,1,fine\n"),
        &["line 3: quality \"fine\" is not one of"],
    );
    expect_bad(
        "text.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:10:00Z,12,5,good\n"),
        &["line 3: has 5 field(s)"],
    );
    expect_bad(
        "truncated.csv",
        format!("{HEAD}WR-F2,2026-03-02T05:1"),
        &["line 3: has 2 field(s) but the header names 4"],
    );
    expect_bad(
        "binary.csv",
        [
            HEAD.as_bytes(),
            b"WR-\xff\xfe,2026-03-02T05:10:00Z,1,good\n",
        ]
        .concat(),
        &["line 3: is not UTF-8 text"],
    );
    expect_bad(
        "year.csv",
        format!("{HEAD}WR-F2,9999-12-31T23:00:00-05:00,1,good\n"),
        &["line 3: time \"9999-12-31T23:00:00-05:00\" is not RFC 3339 (outside the years"],
    );
    expect_bad(
        "no-header.csv",
        "WR-F1,2026-03-02T05:10:00Z,100,good\n",
        &["line 1: missing header"],
    );
    expect_bad("empty-file.csv", "", &["line 1: missing header"]);
    expect_bad(
        "bad-header.csv",
        "tag,time,valeu\n",
        &["line 1: bad header: unknown column \"valeu\""],
    );
}

#[test]
fn every_bad_line_is_listed_with_its_own_reason() {
    let content = format!(
        "{HEAD}WR-X9,2026-03-02T05:10:00Z,1,good\nWR-F2,yesterday,1,good\nWR-F3,2026-03-02T05:10:00Z,nan,good\n\n\
         WR-F4,2026-03-02T05:10:00Z,one,good\nWR-F5,2026-03-02T05:10:00Z,1\n"
    );
    expect_bad(
        "several.csv",
        content,
        &[
            "line 3: unknown tag",
            "line 4: time \"yesterday\"",
            "line 5: value \"nan\"",
            // Line 6 is blank; numbering follows the file, not the records.
            "line 7: value \"one\" is not a number",
            "line 8: has 3 field(s)",
            "5 bad reading(s)",
        ],
    );
}

#[test]
fn a_long_listing_is_capped() {
    let mut content = String::from("tag,time,value\n");
    for i in 0..60 {
        content.push_str(&format!("NOPE-{i},2026-03-02T05:10:00Z,1\n"));
    }
    expect_bad(
        "many.csv",
        &content,
        &[
            "line 51: unknown tag \"NOPE-49\"",
            "10 more bad reading(s) not listed",
            "60 bad reading(s)",
        ],
    );
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(dir.path(), "many.csv", &content);
    let err = stderr(&reconcile(&model, &readings));
    assert!(
        !err.contains("NOPE-50"),
        "the 51st bad line is not listed:\n{err}"
    );
}

#[test]
fn bad_json_readings_exit_2_naming_the_index() {
    let json = serde_json::json!({"readings": [
        {"tag": "WR-F1", "time": "2026-03-02T05:10:00Z", "value": 1.0},
        {"tag": "WR-F1", "time": "2026-03-02T05:10:00Z", "value": null},
        {"tag": "WR-F1", "time": "2026-03-02T05:10:00Z", "value": "12"},
        {"tag": "WR-F9", "time": "2026-03-02T05:10:00Z", "value": 1.0, "quality": "bad"},
        {"tag": "WR-F1", "time": "2026-03-02T05:10:00Z", "value": 1.0, "quality": "so-so"},
        7
    ]});
    expect_bad(
        "bad.json",
        json.to_string(),
        &[
            "readings[1]: value is empty",
            "readings[2]: value must be a number",
            "readings[3]: unknown tag \"WR-F9\"",
            "readings[4]: quality \"so-so\"",
            "readings[5]: is not an object",
        ],
    );
    expect_bad("syntax.json", "{\"readings\": [", &["not valid JSON"]);
    expect_bad("huge.json", "{\"readings\": [{\"tag\": \"WR-F1\", \"time\": \"2026-03-02T05:10:00Z\", \"value\": 1e999}]}", &["not valid JSON: number out of range"]);
    expect_bad("shape.json", "[]", &["expected a JSON object"]);
    expect_bad(
        "binary.json",
        b"{\"readings\": [{\"tag\": \"WR-\xff\"}]}",
        &["not valid JSON"],
    );
}

#[test]
fn missing_files_exit_2_naming_them() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let absent = dir.path().join("absent.csv");
    let out = reconcile(&model, &absent);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains(&format!("{}: cannot read", absent.display())),
        "{}",
        stderr(&out)
    );

    let readings = write(dir.path(), "r.csv", WREN_READINGS);
    let absent_model = dir.path().join("absent.toml");
    let out = reconcile(&absent_model, &readings);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains(&format!("{}: cannot read", absent_model.display())),
        "{}",
        stderr(&out)
    );
}

#[test]
fn an_invalid_model_stops_reconcile_with_exit_2() {
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(
        dir.path(),
        "bad.toml",
        WREN.replace("uom = \"%\"", "uom = \"percent\""),
    );
    let readings = write(dir.path(), "r.csv", WREN_READINGS);
    let out = reconcile(&model, &readings);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(
        err.contains(&format!("{}: meter \"WR-A1\"", model.display())),
        "{err}"
    );
    assert!(
        err.contains(&format!("{}: meter \"WR-A2\"", model.display())),
        "{err}"
    );
}

#[test]
fn usage_errors_exit_2() {
    assert_eq!(
        loopbal(&["reconcile", "--model", OMBRASK]).status.code(),
        Some(2)
    );
    assert_eq!(loopbal(&["no-such-command"]).status.code(), Some(2));
    let out = loopbal(&[
        "reconcile",
        "--model",
        OMBRASK,
        "--readings",
        "x.csv",
        "--period-from",
        "soon",
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("RFC 3339"), "{}", stderr(&out));
}

/// The whole chain on files: the simulator's readings of the purge-design loop, with one flow
/// meter reading high from the third hour, reconciled by the binary. The biased meter is a
/// suspect with its bias in the later hours, not in the earlier ones, and every report carries
/// figures and each redundant meter's detectable bias.
#[test]
fn a_biased_meter_in_the_readings_is_named_with_its_bias() {
    use reconcile::simulate::{steady_state, MeterFault, ReadingPlan};
    let dir = tempfile::tempdir().unwrap();
    let model_text = testkit::plants::PURGE_DESIGN;
    let plant = reconcile::parse_plant(model_text).unwrap();
    let z = steady_state(&plant, &testkit::purge_design::specs()).unwrap();
    // FI-4, the purge flow meter (σ 1 mol/s), reads 8 mol/s high from hour 2 on.
    let plan = ReadingPlan {
        start: chrono::DateTime::parse_from_rfc3339("2026-06-01T00:00:00Z")
            .unwrap()
            .with_timezone(&chrono::Utc),
        hours: 4,
        per_hour: 2,
        seed: 11,
        faults: vec![MeterFault::Bias {
            tag: "FI-4".into(),
            from_hour: 2,
            value: 8.0,
        }],
    };
    let csv = testkit::readings_csv(&plant, &z, &plan, &|_, _| false);
    let model = write(dir.path(), "purge-design.toml", model_text);
    let data = write(dir.path(), "readings.csv", csv);
    let out = reconcile(&model, &data);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let reports = reports(&out);
    assert_eq!(reports.len(), 4);
    for (hour, report) in reports.iter().enumerate() {
        let fi4 = report["meters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|m| m["tag"] == "FI-4")
            .unwrap();
        assert!(fi4["detectable_bias"].as_f64().unwrap() > 0.0);
        assert!(!report["figures"].as_array().unwrap().is_empty());
        if hour < 2 {
            assert_eq!(fi4["suspect"], false, "hour {hour}");
        } else {
            assert_eq!(fi4["suspect"], true, "hour {hour}: {}", report["faults"]);
            let fault = report["faults"]
                .as_array()
                .unwrap()
                .iter()
                .find(|f| {
                    f["candidates"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .any(|c| c == "FI-4")
                })
                .unwrap();
            let member = fault["members"]
                .as_array()
                .unwrap()
                .iter()
                .find(|m| m["id"] == "FI-4")
                .unwrap();
            let (b, sb) = (
                member["magnitude"].as_f64().unwrap(),
                member["magnitude_sigma"].as_f64().unwrap(),
            );
            assert!((b - 8.0).abs() <= 3.0 * sb, "bias {b} ± {sb}");
        }
    }
}
