//! Readings: mutated CSV and JSON batches posted to ombrask-ob3, each checked against what the
//! store holds before and after.

use super::*;

pub(crate) const ODD_TAGS: &[&str] = &[
    "OB2-FI-999",
    "",
    " ",
    " OB2-FI-101 ",
    "ob2-fi-101",
    "OB2-FI-101\0",
    "\0",
    "OB2-FI-101\u{202e}",
    "OB2-FI-101\"",
    "OB2-FI-101,OB2-FI-201",
    "../OB2-FI-101",
    "Ω",
    "\u{feff}OB2-FI-101",
    "OB2-FI-101\r",
    "'; DELETE FROM readings; --",
];

pub(crate) const ODD_TIMES: &[&str] = &[
    "0000-01-01T00:00:00Z",
    "0000-01-01T00:00:00+23:59",
    "0001-01-01T00:00:00Z",
    "1970-01-01T00:00:00Z",
    "1969-12-31T23:59:59.999999999Z",
    "9998-12-31T23:00:00Z",
    "9999-12-31T23:59:59Z",
    "9999-12-31T23:59:59-23:59",
    "2026-02-30T00:00:00Z",
    "2026-06-30T23:59:60Z",
    "2026-05-04T05:00:00",
    "2026-05-04 05:00:00Z",
    "2026-05-04T05:00:00.0000000000001Z",
    "2026-05-04T25:00:00Z",
    "2026-05-04T05:00:00+24:00",
    "+275760-09-13T00:00:00Z",
    "-0001-01-01T00:00:00Z",
    "1777870800",
    "2026-05-04T05:00:00Z\0",
    "now",
    "",
    "2026-W19-1",
];

pub(crate) const ODD_QUALITIES: &[&str] = &[
    "",
    "GOOD",
    "Bad",
    " uncertain ",
    "meh",
    "good\0",
    "ok",
    "0",
    "null",
];

#[derive(Debug, Clone, Copy)]
pub(crate) enum ValueAs {
    /// As written (in JSON: a raw token, which may not be JSON at all).
    Raw,
    /// As a JSON string.
    Quoted,
    /// In JSON, this instead of the value.
    Literal(&'static str),
}

#[derive(Debug, Clone)]
pub(crate) enum Shape {
    Whole,
    /// Without its value (CSV: one field short).
    NoValue,
    /// With one field more.
    Extra,
    /// Not a reading: CSV a line of this, JSON this instead of the object.
    NotAReading(&'static str),
}

#[derive(Debug, Clone)]
pub(crate) struct Row {
    pub(crate) tag: String,
    pub(crate) time: String,
    pub(crate) value: String,
    pub(crate) value_as: ValueAs,
    pub(crate) quality: Option<String>,
    pub(crate) shape: Shape,
    pub(crate) quoted: bool,
    pub(crate) eol: &'static str,
}

#[derive(Debug, Clone)]
pub(crate) struct BatchCase {
    pub(crate) json: bool,
    pub(crate) header: &'static str,
    pub(crate) wrapper: u8,
    /// JSON values that are not JSON numbers are sent raw (else quoted, a refused line).
    pub(crate) raw_hostile: bool,
    pub(crate) rows: Vec<Row>,
    pub(crate) edits: Vec<Edit>,
}

pub(crate) fn tag() -> impl Strategy<Value = String> {
    prop_oneof![
        10 => prop::sample::select(known_tags()).prop_map(String::from),
        2 => prop::sample::select(ODD_TAGS).prop_map(String::from),
        1 => "\\PC{0,16}",
        1 => (1usize..3_000).prop_map(|n| "K".repeat(n)),
    ]
}

pub(crate) fn time() -> impl Strategy<Value = String> {
    let zones = vec![
        "Z",
        "Z",
        "+00:00",
        "+02:00",
        "-05:30",
        ".5Z",
        ".123456789Z",
        "z",
    ];
    prop_oneof![
        10 => (0u32..48, 0u32..60, prop::sample::select(zones)).prop_map(|(h, m, zone)| {
            let (day, hour) = (4 + h / 24, h % 24);
            match zone.strip_prefix('.') {
                Some(frac) => format!("2026-05-{day:02}T{hour:02}:{m:02}:00.{frac}"),
                None => format!("2026-05-{day:02}T{hour:02}:{m:02}:00{zone}"),
            }
        }),
        2 => prop::sample::select(ODD_TIMES).prop_map(String::from),
        1 => "\\PC{0,32}",
    ]
}

pub(crate) fn value() -> impl Strategy<Value = String> {
    prop_oneof![
        10 => (0.0f64..30_000.0).prop_map(|v| format!("{v}")),
        3 => prop::sample::select(HOSTILE_NUMBERS).prop_map(String::from),
        2 => any::<f64>().prop_map(|v| format!("{v:e}")),
        1 => "[0-9]{15,30}",
        1 => "-?[0-9]{0,3}(\\.[0-9]{0,3})?([eE][-+]?[0-9]{1,4})?",
        1 => "\\PC{0,10}",
    ]
}

pub(crate) fn row() -> impl Strategy<Value = Row> {
    (
        tag(),
        time(),
        value(),
        prop_oneof![
            12 => Just(ValueAs::Raw),
            1 => Just(ValueAs::Quoted),
            1 => prop::sample::select(vec!["null", "true", "[]", "{}", "[1]", "\"\"", "{\"v\":1}"])
                .prop_map(ValueAs::Literal),
        ],
        prop_oneof![
            8 => prop::sample::select(vec!["good", "uncertain", "bad"])
                .prop_map(|q| Some(q.to_string())),
            1 => Just(None),
            2 => prop::sample::select(ODD_QUALITIES).prop_map(|q| Some(q.to_string())),
        ],
        prop_oneof![
            20 => Just(Shape::Whole),
            1 => Just(Shape::NoValue),
            1 => Just(Shape::Extra),
            1 => prop::sample::select(vec!["1", "null", "\"OB2-FI-101\"", "[]", "true", "#"])
                .prop_map(Shape::NotAReading),
        ],
        prop::bool::weighted(0.15),
        prop::sample::select(vec!["\n", "\n", "\n", "\r\n", "\r"]),
    )
        .prop_map(
            |(tag, time, value, value_as, quality, shape, quoted, eol)| Row {
                tag,
                time,
                value,
                value_as,
                quality,
                shape,
                quoted,
                eol,
            },
        )
}

pub(crate) fn batch_case(json: bool) -> impl Strategy<Value = BatchCase> {
    (
        prop_oneof![
            12 => Just("tag,time,value,quality"),
            1 => prop::sample::select(vec![
                "time,tag,value,quality",
                "TAG,Time,VALUE,Quality",
                "tag,time,value",
                "tag,time,value,quality,extra",
                "tag,tag,time,value",
                "tag;time;value;quality",
                "",
                "\"tag\",\"time\",\"value\",\"quality\"",
                "tag,time",
                "\u{feff}tag,time,value,quality",
            ]),
        ],
        prop_oneof![12 => Just(0u8), 1 => 1u8..7],
        prop::bool::weighted(0.25),
        prop::collection::vec(row(), 0..40),
        prop_oneof![
            2 => Just(Vec::new()),
            1 => prop::collection::vec(edit(), 1..=2),
        ],
    )
        .prop_map(
            move |(header, wrapper, raw_hostile, rows, edits)| BatchCase {
                json,
                header,
                wrapper,
                raw_hostile,
                rows,
                edits,
            },
        )
}

impl BatchCase {
    pub(crate) fn body(&self) -> Vec<u8> {
        let mut body = if self.json {
            self.json_text().into_bytes()
        } else {
            self.csv_text().into_bytes()
        };
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    pub(crate) fn csv_text(&self) -> String {
        let mut out = format!("{}\n", self.header);
        for r in &self.rows {
            let mut fields = vec![r.tag.clone(), r.time.clone(), r.value.clone()];
            fields.push(r.quality.clone().unwrap_or_default());
            match r.shape {
                Shape::Whole => {}
                Shape::NoValue => {
                    fields.remove(2);
                }
                Shape::Extra => fields.push("surplus".into()),
                Shape::NotAReading(t) => fields = vec![t.to_string()],
            }
            let fields: Vec<String> = fields
                .into_iter()
                .map(|f| {
                    if r.quoted {
                        format!("\"{}\"", f.replace('"', "\"\""))
                    } else {
                        f
                    }
                })
                .collect();
            out += &fields.join(",");
            out += r.eol;
        }
        out
    }

    pub(crate) fn json_text(&self) -> String {
        let s = |t: &str| serde_json::to_string(t).expect("a string serialises");
        let rows: Vec<String> = self
            .rows
            .iter()
            .map(|r| {
                if let Shape::NotAReading(t) = r.shape {
                    return t.to_string();
                }
                let is_number = serde_json::from_str::<serde_json::Number>(&r.value).is_ok();
                let value = match r.value_as {
                    ValueAs::Raw if is_number || self.raw_hostile => r.value.clone(),
                    ValueAs::Raw | ValueAs::Quoted => s(&r.value),
                    ValueAs::Literal(l) => l.to_string(),
                };
                let mut fields = vec![
                    format!("\"tag\": {}", s(&r.tag)),
                    format!("\"time\": {}", s(&r.time)),
                    format!("\"value\": {value}"),
                ];
                if let Some(q) = &r.quality {
                    fields.push(format!("\"quality\": {}", s(q)));
                }
                match r.shape {
                    Shape::NoValue => {
                        fields.remove(2);
                    }
                    Shape::Extra => fields.push("\"site\": \"ombrask point\"".into()),
                    _ => {}
                }
                format!("{{{}}}", fields.join(", "))
            })
            .collect();
        let list = format!("[{}]", rows.join(",\n"));
        match self.wrapper {
            0 => format!("{{\"readings\": {list}}}"),
            1 => list,
            2 => format!(
                "{{\"readings\": {{\"0\": {}}}}}",
                rows.first().map_or("{}", String::as_str)
            ),
            3 => format!("{{\"readings\": {list}, \"readings\": []}}"),
            4 => format!("{{\"READINGS\": {list}}}"),
            5 => format!("{{\"readings\": {list}}} and more"),
            _ => format!("{{\"extra\": [1, {{}}], \"readings\": {list}}}"),
        }
    }
}

/// A stored reading a valid batch could have made.
pub(crate) fn check_stored(r: &Value, what: &str) {
    let tags = known_tags();
    assert!(
        r["tag"].as_str().is_some_and(|t| tags.contains(&t)),
        "{what}: a reading of an unknown tag was stored: {r}"
    );
    assert!(r["value"].is_number(), "{what}: {r}");
    assert!(
        ["good", "uncertain", "bad"].contains(&r["quality"].as_str().unwrap_or("")),
        "{what}: {r}"
    );
    let time = r["time"].as_str().unwrap_or("");
    let year = chrono::DateTime::parse_from_rfc3339(time)
        .map(|t| chrono::Datelike::year(&t))
        .unwrap_or_else(|e| panic!("{what}: stored time {time:?} is not RFC 3339 ({e})"));
    assert!((0..=9998).contains(&year), "{what}: {r}");
}

/// The readings of ombrask-ob3 before and after one batch agree with its answer.
pub(crate) fn check_ingest(
    before: &BTreeMap<(String, String), Value>,
    after: &BTreeMap<(String, String), Value>,
    a: &Answer,
    what: &str,
) {
    if a.status != 200 {
        assert!(
            before == after,
            "{what}: a refused batch ({}) changed the stored readings",
            a.status
        );
        return;
    }
    let answer = a.json();
    let count = |k: &str| {
        answer[k]
            .as_u64()
            .unwrap_or_else(|| panic!("{what}: no {k} in {answer}")) as usize
    };
    let mut changed = 0;
    for (key, was) in before {
        let now = after
            .get(key)
            .unwrap_or_else(|| panic!("{what}: the stored reading {key:?} disappeared"));
        // Values bit for bit: -0 and 0 are different numbers to a historian's resend.
        let bits = |r: &Value| r["value"].as_f64().map(f64::to_bits);
        let same = bits(now) == bits(was) && now["quality"] == was["quality"];
        if same {
            assert_eq!(now, was, "{what}: an unchanged reading was rewritten");
        } else {
            changed += 1;
        }
    }
    let added = after.keys().filter(|k| !before.contains_key(*k)).count();
    assert_eq!(added, count("accepted"), "{what}: {answer}");
    assert_eq!(changed, count("replaced"), "{what}: {answer}");
    // The first refused lines are listed while they fit the answer's bound; all are counted.
    let listed = answer["rejections"].as_array().map_or(0, Vec::len);
    let rejected = count("rejected");
    assert!(
        (rejected.min(10)..=rejected.min(loopbal_server::ingest::MAX_LISTED_REJECTIONS))
            .contains(&listed),
        "{what}: {listed} of {rejected} listed: {answer}"
    );
    assert!(
        a.text().len() < 64 * 1024,
        "{what}: a {} byte answer",
        a.text().len()
    );
    for r in after.values() {
        check_stored(r, what);
    }
}

pub(crate) async fn readings_batches(fx: &mut Fixture, count: usize, json: bool) {
    let family = if json {
        "JSON readings"
    } else {
        "CSV readings"
    };
    let mut family = Family::draw(family, count, batch_case(json));
    let media = if json { "application/json" } else { "text/csv" };
    let mut stored = fx.readings(SCRATCH).await;
    while let Some((i, case)) = family.next() {
        let body = case.body();
        let what = family.describe(i, &case, &body);
        let oversize = body.len() > MAX_BODY;
        let a = fx.post_readings(SCRATCH, Some(media), body, &what).await;
        let want: &[u16] = if oversize { &[413] } else { &[200, 400] };
        expect(&a, want, &what);
        let after = fx.readings(SCRATCH).await;
        check_ingest(&stored, &after, &a, &what);
        stored = after;
        family.count(a.status);
    }
    family.done();
}

/// A few readings of ombrask-ob3, as CSV and as JSON.
pub(crate) fn scratch_batch() -> (Vec<u8>, Vec<u8>) {
    let mut csv = String::from("tag,time,value,quality\n");
    let mut rows = Vec::new();
    for (tag, value) in OMBRASK_TAGS {
        csv += &format!("{tag},2026-05-06T10:00:07Z,{value},good\n");
        rows.push(json!({"tag": tag, "time": "2026-05-06T10:00:07Z", "value": value}));
    }
    let json = serde_json::to_string_pretty(&json!({ "readings": rows })).expect("JSON");
    (csv.into_bytes(), json.into_bytes())
}
