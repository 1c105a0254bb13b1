//! Readings as a historian sends them: CSV and JSON batches, resends and corrections, bad lines
//! named, ranges and qualities flagged, the counters.

use super::*;

#[tokio::test]
async fn a_historians_life() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let created = create_ombrask(&c, &s, &t.admin).await;
    assert_eq!(created["revision"], 1);
    assert_eq!(created["meters"], 11);

    // A day as CSV, the next as JSON: every reading new.
    let day1 = day_rows("2026-03-02", 1.0);
    let answer = post_ok(&c, &s, &t.ingest, &csv(&day1), "text/csv").await;
    assert_eq!(counts(&answer), [264, 0, 0, 0], "{answer}");
    let day2 = day_rows("2026-03-03", 1.01);
    let answer = post_ok(&c, &s, &t.ingest, &json_batch(&day2), "application/json").await;
    assert_eq!(counts(&answer), [264, 0, 0, 0], "{answer}");

    // The same batch again changes nothing.
    let answer = post_ok(&c, &s, &t.ingest, &csv(&day1), "text/csv; charset=utf-8").await;
    assert_eq!(counts(&answer), [0, 0, 264, 0], "{answer}");

    // A correction replaces one value; the rest of the day is untouched.
    let correction = "tag,time,value\nOB2-FI-101,2026-03-02T05:00:00+00:00,20999.5\n";
    let answer = post_ok(&c, &s, &t.ingest, correction, "text/csv").await;
    assert_eq!(counts(&answer), [0, 1, 0, 0], "{answer}");
    let stored = readings(
        &c,
        &s,
        &t.read,
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
    )
    .await;
    assert_eq!(stored.len(), 264);
    let corrected: Vec<&Value> = stored
        .iter()
        .filter(|r| r["tag"] == "OB2-FI-101" && r["time"] == "2026-03-02T05:00:00Z")
        .collect();
    assert_eq!(corrected.len(), 1);
    assert_eq!(corrected[0]["value"], 20999.5);

    // A batch with bad lines mixed in: the good ones are stored, each bad one is named.
    let mixed = "\
tag,time,value,quality
OB2-FI-101,2026-03-04T00:00:00Z,20400,good
OB2-XX-999,2026-03-04T00:00:00Z,1.0,good
OB2-FI-201,2026-03-04 noon,5400,good
OB2-FI-201,2026-03-04T01:00:00Z,NaN,good
OB2-FI-301,2026-03-04T00:00:00Z,,good
OB2-AI-102,2026-03-04T00:00:00Z,0.3,excellent
OB2-FI-101,2026-03-04T00:00:00Z,20400,good
OB2-FI-201,2026-03-04T00:00:00Z,5400,good
OB2-FI-401,2026-03-04T00:00:00Z,500,good
OB2-FI-501,2026-03-04T00:00:00Z,4300,bad
";
    let answer = post_ok(&c, &s, &t.ingest, mixed, "text/csv").await;
    assert_eq!(counts(&answer), [4, 0, 0, 6], "{answer}");
    assert_eq!(
        answer["out_of_range"], 1,
        "OB2-FI-401 has range 0-200 kmol/h"
    );
    assert_eq!(answer["bad_quality"], 1);
    let expected = [
        (3, "unknown tag \"OB2-XX-999\""),
        (4, "time \"2026-03-04 noon\" is not RFC 3339"),
        (5, "not a finite number"),
        (6, "value is empty"),
        (
            7,
            "quality \"excellent\" is not one of good, uncertain, bad",
        ),
        (8, "repeats the tag and time of line 2"),
    ];
    let rejections = answer["rejections"].as_array().expect("rejections");
    assert_eq!(rejections.len(), expected.len(), "{answer}");
    for ((line, reason), r) in expected.iter().zip(rejections) {
        assert_eq!(r["line"], *line, "{r}");
        let reasons: Vec<&str> = r["reasons"]
            .as_array()
            .expect("reasons")
            .iter()
            .map(|x| x.as_str().expect("text"))
            .collect();
        let reasons = reasons.join("; ");
        assert!(
            reasons.contains(reason),
            "line {line}: {reasons} lacks {reason}"
        );
    }
    let day3 = readings(
        &c,
        &s,
        &t.read,
        "2026-03-04T00:00:00Z",
        "2026-03-05T00:00:00Z",
    )
    .await;
    let tags: BTreeSet<&str> = day3.iter().map(|r| r["tag"].as_str().unwrap()).collect();
    assert_eq!(
        tags,
        BTreeSet::from(["OB2-FI-101", "OB2-FI-201", "OB2-FI-401", "OB2-FI-501"])
    );
    for r in &day3 {
        let flagged = r["tag"] == "OB2-FI-401";
        assert_eq!(r["out_of_range"], flagged, "{r}");
        let bad = r["tag"] == "OB2-FI-501";
        assert_eq!(r["quality"], if bad { "bad" } else { "good" }, "{r}");
    }

    // JSON bad items are named by their index.
    let body = json!({"readings": [
        {"tag": "OB2-FI-101", "time": "2026-03-05T00:00:00Z", "value": 20400.0},
        {"tag": "OB2-FI-101", "time": "2026-03-05T01:00:00Z", "value": "lots"},
        {"tag": "OB2-FI-101", "time": "2026-03-05T02:00:00Z"},
        "not an object",
    ]})
    .to_string();
    let answer = post_ok(&c, &s, &t.ingest, &body, "application/json").await;
    assert_eq!(counts(&answer), [1, 0, 0, 3], "{answer}");
    let indices: Vec<u64> = answer["rejections"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["index"].as_u64().expect("index"))
        .collect();
    assert_eq!(indices, [1, 2, 3]);

    // The counters follow: 264 + 264 + 4 + 1 new, 1 replaced, 264 unchanged, 9 rejected.
    let metrics = metrics(&c, &s).await;
    for line in [
        "loopbal_readings_accepted_total 533",
        "loopbal_readings_replaced_total 1",
        "loopbal_readings_unchanged_total 264",
        "loopbal_readings_rejected_total 9",
    ] {
        assert!(
            metrics.lines().any(|l| l == line),
            "missing {line} in\n{metrics}"
        );
    }
}
