//! `loopbal reconcile` on good input: full reports, CSV and JSON alike, exit statuses, column
//! order and repeats, periods with only bad readings, period filters.

use super::*;

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

#[test]
fn timing_writes_each_periods_engine_seconds_to_stderr_and_leaves_stdout_alone() {
    let dir = tempfile::tempdir().expect("tempdir");
    let readings = write(dir.path(), "ombrask.csv", ombrask_csv());
    let plain = reconcile(Path::new(OMBRASK), &readings);
    let timed = loopbal(&[
        "reconcile",
        "--model",
        OMBRASK,
        "--readings",
        s(&readings),
        "--timing",
    ]);
    assert_eq!(timed.status.code(), plain.status.code());
    // The same reports (a timing line on stdout would break the JSON).
    assert_eq!(reports(&timed), reports(&plain));
    let lines: Vec<String> = stderr(&timed)
        .lines()
        .filter(|l| l.starts_with("timing: "))
        .map(str::to_owned)
        .collect();
    assert_eq!(lines.len(), 3, "{}", stderr(&timed));
    for (line, h) in lines.iter().zip(2..) {
        let fields: Vec<&str> = line.split(' ').collect();
        assert_eq!(fields.len(), 4, "{line}");
        assert_eq!(fields[1], format!("2026-03-02T{h:02}:00:00Z"), "{line}");
        let seconds: f64 = fields[2].parse().expect("seconds are a number");
        assert!(seconds > 0.0 && seconds < 10.0, "{line}");
        assert_eq!(fields[3], "s", "{line}");
    }
    assert!(!stderr(&plain).contains("timing: "));
}
