//! `loopbal reconcile` on bad input: exit status 2 naming the line, the index or the file, every
//! bad line with its own reason, a capped listing, an invalid model, usage errors.

use super::*;

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
        &["line 3: time \"9999-12-31T23:00:00-05:00\" is not RFC 3339 (outside the supported instants, the years"],
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

/// A message on standard error that stays short whatever the input: at most this many bytes.
const SHORT: usize = 16 * 1024;

#[test]
fn a_header_of_megabytes_is_refused_in_a_few_lines() {
    let mut header = String::from("tag,time,value");
    let mut k = 0;
    while header.len() < 8 * 1024 * 1024 {
        header += &format!(",col-{k}");
        k += 1;
    }
    let content = format!("{header}\nWR-F1,2026-03-02T05:10:00Z,1\n");
    expect_bad(
        "wide.csv",
        &content,
        &[
            "line 1: bad header: unknown column \"col-0\" (expected tag, time, value, quality); \
             unknown column \"col-1\"",
        ],
    );
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(dir.path(), "wide.csv", &content);
    let err = stderr(&reconcile(&model, &readings));
    assert!(err.len() < SHORT, "{} bytes", err.len());
    assert!(
        err.contains(&format!("and {} more unknown column(s)", k - 5)),
        "{err}"
    );
}

#[test]
fn a_file_bad_throughout_with_long_fields_is_refused_in_a_few_lines() {
    let long = format!("{}\u{202e}", "x".repeat(2_000));
    let mut content = String::from("tag,time,value,quality\n");
    for k in 0..200_000 {
        if k < 100 {
            content += &format!("WR-{long},{long},{long},{long}\n");
        } else {
            content += &format!("WR-{k},noon,one,meh\n");
        }
    }
    expect_bad(
        "throughout.csv",
        &content,
        &[
            "line 2: unknown tag \"WR-xxx",
            "199950 more bad reading(s) not listed",
            "200000 bad reading(s); nothing was reconciled",
        ],
    );
    let dir = tempfile::tempdir().expect("tempdir");
    let model = write(dir.path(), "wren.toml", WREN);
    let readings = write(dir.path(), "throughout.csv", &content);
    let err = stderr(&reconcile(&model, &readings));
    assert!(err.len() < 64 * 1024, "{} bytes", err.len());
    assert!(err.contains("…\" (2004 characters)"), "{err}");
    assert!(
        !err.contains('\u{202e}'),
        "the override reaches the terminal escaped"
    );
    assert_eq!(err.lines().count(), 52, "{err}");
}
