//! Readings files (docs/readings.md): CSV with a header, or JSON. Every reading is checked
//! at this boundary (known tag, RFC 3339 time, finite value, known quality) and every bad one is
//! reported with its place, so a user fixes a file in one pass instead of one error per run.

use std::collections::HashMap;
use std::fmt;
use std::path::Path;

use chrono::{DateTime, Datelike, TimeZone, Utc};
use reconcile::text::Quoted;
use reconcile::{Plant, Quality, Reading};

mod csv;
mod json;

/// The instants the service takes and writes: the years 0000 to 9998 in UTC and the instant
/// that ends them (9999-01-01T00:00:00Z, an exclusive end), so that every instant it writes, a
/// period's end included, has the four-digit year RFC 3339 requires.
pub const SUPPORTED_YEARS: std::ops::RangeInclusive<i32> = 0..=9998;

/// Is `t` among the supported instants?
pub fn supported(t: DateTime<Utc>) -> bool {
    let end = Utc.with_ymd_and_hms(SUPPORTED_YEARS.end() + 1, 1, 1, 0, 0, 0);
    SUPPORTED_YEARS.contains(&t.year()) || end.single() == Some(t)
}

/// An RFC 3339 time among the supported instants, or why not.
pub fn instant(text: &str) -> Result<DateTime<Utc>, String> {
    let t = DateTime::parse_from_rfc3339(text.trim())
        .map(|t| t.with_timezone(&Utc))
        .map_err(|e| format!("not an RFC 3339 time such as 2026-03-02T05:00:00Z ({e})"))?;
    if !supported(t) {
        return Err(format!(
            "outside the supported instants, the years {:04} to {:04} in UTC (to \
             {:04}-01-01T00:00:00Z as an end)",
            SUPPORTED_YEARS.start(),
            SUPPORTED_YEARS.end(),
            SUPPORTED_YEARS.end() + 1
        ));
    }
    Ok(t)
}

/// Where a reading sits in its file: the physical CSV line (the header is line 1), or the
/// index in the JSON `readings` array.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Place {
    Line(u64),
    Index(usize),
}

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Place::Line(n) => write!(f, "line {n}"),
            Place::Index(i) => write!(f, "readings[{i}]"),
        }
    }
}

/// What is wrong with one reading. The text of a field is held [`Quoted`]: escaped and cut to
/// a few hundred characters, so a bad line costs little memory and its message is short,
/// whatever the line's length.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Problem {
    #[error("tag is empty")]
    EmptyTag,
    /// No meter has the tag, or it is not a safe name (reconcile::names), which no meter
    /// admitted now can have.
    #[error("unknown tag {0} (no meter of the model has it)")]
    UnknownTag(Quoted),
    #[error("time is empty")]
    EmptyTime,
    #[error("time {text} is not RFC 3339 ({reason})")]
    BadTime { text: Quoted, reason: String },
    #[error("value is empty")]
    EmptyValue,
    #[error("value {0} is not a number")]
    NotANumber(Quoted),
    #[error("value {0} is not a finite number")]
    NotFinite(Quoted),
    #[error("quality {0} is not one of good, uncertain, bad")]
    BadQuality(Quoted),
    #[error("has {found} field(s) but the header names {expected}")]
    FieldCount { found: usize, expected: usize },
    #[error("is not UTF-8 text")]
    NotUtf8,
    #[error("repeats the tag and time of {earlier}, which is kept")]
    Repeated { earlier: Place },
    #[error("is not an object with tag, time, value and quality")]
    NotAnObject,
    #[error("{field} must be {expected}")]
    WrongType {
        field: &'static str,
        expected: &'static str,
    },
}

#[derive(Debug, Clone, PartialEq)]
pub struct BadReading {
    pub place: Place,
    pub problems: Vec<Problem>,
}

impl fmt::Display for BadReading {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let problems: Vec<String> = self.problems.iter().map(|p| p.to_string()).collect();
        write!(f, "{}: {}", self.place, problems.join("; "))
    }
}

/// The bad readings of a body: the first ones (by place) with their problems, and how many
/// there are in all. Those past the first are counted, not kept: a body bad throughout
/// costs the memory of its listing, not of its lines.
#[derive(Debug, Clone, PartialEq)]
pub struct BadList {
    pub listed: Vec<BadReading>,
    pub total: usize,
    limit: usize,
}

impl BadList {
    /// An empty list that keeps the first `limit` bad readings.
    pub fn new(limit: usize) -> BadList {
        BadList {
            listed: Vec::new(),
            total: 0,
            limit,
        }
    }

    /// Count a bad reading; keep it when it is among the first. Readings come in place order.
    pub fn push(&mut self, bad: BadReading) {
        self.total += 1;
        if self.listed.len() < self.limit {
            self.listed.push(bad);
        }
    }

    pub fn is_empty(&self) -> bool {
        self.total == 0
    }

    /// Both lists as one: the first of the two together by place (the first `limit` of the
    /// union are among the first `limit` of each), every one counted.
    pub fn merge(self, other: BadList) -> BadList {
        let limit = self.limit.min(other.limit);
        let mut listed: Vec<BadReading> = self.listed.into_iter().chain(other.listed).collect();
        listed.sort_by_key(|b| b.place.order());
        listed.truncate(limit);
        BadList {
            listed,
            total: self.total + other.total,
            limit,
        }
    }
}

impl Place {
    /// Position in the body, for ordering.
    fn order(&self) -> u64 {
        match *self {
            Place::Line(n) => n,
            Place::Index(i) => i as u64,
        }
    }
}

/// Most bad readings a file's error lists one by one; the count covers them all.
pub const MAX_LISTED_BAD: usize = 50;

/// Why a readings file cannot be used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ReadingsError {
    /// The file as a whole is unusable (no header, not JSON, wrong shape).
    #[error("{0}")]
    File(String),
    /// Some readings are bad: the first [`MAX_LISTED_BAD`] listed, all counted.
    #[error("{} bad reading(s)", .0.total)]
    Bad(BadList),
}

/// A later reading of the same (tag, time) that replaced an earlier one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Replacement {
    pub later: Place,
    pub earlier: Place,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Readings {
    pub readings: Vec<Reading>,
    pub replaced: Vec<Replacement>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    Csv,
    Json,
}

const BOM: &[u8] = b"\xEF\xBB\xBF";

/// `.json` and `.csv` decide; any other name is JSON when the content starts with `{`.
pub fn detect(path: &Path, bytes: &[u8]) -> Format {
    match crate::model_file::extension(path).as_deref() {
        Some("json") => Format::Json,
        Some("csv") => Format::Csv,
        _ => {
            let body = bytes.strip_prefix(BOM).unwrap_or(bytes);
            match body.iter().find(|b| !b.is_ascii_whitespace()) {
                Some(b'{') => Format::Json,
                _ => Format::Csv,
            }
        }
    }
}

pub fn parse(bytes: &[u8], format: Format, plant: &Plant) -> Result<Readings, ReadingsError> {
    let tags: std::collections::HashSet<&str> =
        plant.meters.iter().map(|m| m.tag.as_str()).collect();
    let sorted = sort(bytes, format, &|tag| tags.contains(tag), MAX_LISTED_BAD)?;
    if !sorted.bad.is_empty() {
        return Err(ReadingsError::Bad(sorted.bad));
    }
    let mut readings: Vec<Reading> = Vec::new();
    let mut places: Vec<Place> = Vec::new();
    let mut replaced = Vec::new();
    // (tag, instant) → index in `readings`: two spellings of one instant are one reading, and
    // in a file the later line wins (a file is edited by hand; its last word counts).
    let mut seen: HashMap<(String, DateTime<Utc>), usize> = HashMap::new();
    for (place, reading) in sorted.good {
        let key = (reading.tag.clone(), reading.time);
        if let Some(&i) = seen.get(&key) {
            replaced.push(Replacement {
                later: place,
                earlier: places[i],
            });
            readings[i] = reading;
            places[i] = place;
        } else {
            seen.insert(key, readings.len());
            readings.push(reading);
            places.push(place);
        }
    }
    Ok(Readings { readings, replaced })
}

/// A batch split into the readings that passed every check, in the order given, and the bad
/// ones (the first `listed` with all their problems, every one counted). Repeats of one (tag,
/// instant) are left to the caller.
#[derive(Debug, Clone, PartialEq)]
pub struct Sorted {
    pub good: Vec<(Place, Reading)>,
    pub bad: BadList,
}

/// Check every reading of a body; `known` says whether a tag belongs to a meter. Fails as a
/// whole only when the body has no readable structure (no header, not JSON, wrong shape).
/// Each reading is checked as it is read, so the memory used is that of the good readings
/// and of the first `listed` bad ones, not of the whole body again.
pub fn sort(
    bytes: &[u8],
    format: Format,
    known: &dyn Fn(&str) -> bool,
    listed: usize,
) -> Result<Sorted, ReadingsError> {
    let body = bytes.strip_prefix(BOM).unwrap_or(bytes);
    let mut good = Vec::new();
    let mut bad = BadList::new(listed);
    let mut take = |place: Place, fields: Result<RawFields, Vec<Problem>>| match fields
        .and_then(|f| check(&f, known))
    {
        Ok(reading) => good.push((place, reading)),
        Err(problems) => bad.push(BadReading { place, problems }),
    };
    match format {
        Format::Csv => csv::raw_readings(body, &mut take)?,
        Format::Json => json::raw_readings(body, &mut take)?,
    }
    Ok(Sorted { good, bad })
}

/// A value as found in the file, before it is checked.
#[derive(Debug, Clone, PartialEq)]
pub enum RawValue {
    Text(String),
    Number(f64),
    Missing,
}

/// The fields of one reading as found in the file.
#[derive(Debug, Clone, PartialEq)]
pub struct RawFields {
    pub tag: String,
    pub time: String,
    pub value: RawValue,
    pub quality: Option<String>,
}

/// Where each reading of a body goes as it is read: its place and either its fields or what
/// made them unreadable.
pub type Sink<'a> = dyn FnMut(Place, Result<RawFields, Vec<Problem>>) + 'a;

/// Instants are kept to the millisecond, as the service stores them (integer Unix
/// milliseconds, floored), so `loopbal reconcile` and the service see the same instants: two
/// readings of one tag within one millisecond are the same instant to both (the later line of
/// a file replaces the earlier; a batch refuses the second), never two readings to one and one
/// to the other.
fn to_millisecond(t: DateTime<Utc>) -> DateTime<Utc> {
    Utc.timestamp_millis_opt(t.timestamp_millis())
        .single()
        .unwrap_or(t)
}

/// Check every field, collecting all problems of the reading rather than the first.
fn check(f: &RawFields, known: &dyn Fn(&str) -> bool) -> Result<Reading, Vec<Problem>> {
    let mut problems = Vec::new();
    let tag = f.tag.trim();
    if tag.is_empty() {
        problems.push(Problem::EmptyTag);
    } else if !reconcile::names::is_safe(tag) || !known(tag) {
        // A tag outside the safe names is refused even if a model stored before that rule
        // has it: it would reach reports, downloads and logs.
        problems.push(Problem::UnknownTag(Quoted::new(tag)));
    }
    let time_text = f.time.trim();
    let time = if time_text.is_empty() {
        problems.push(Problem::EmptyTime);
        None
    } else {
        match DateTime::parse_from_rfc3339(time_text) {
            // Reports print times as RFC 3339, which has four-digit years: an offset that
            // carries a time past 9999 in UTC could not be reported.
            Ok(t) if !supported(t.with_timezone(&Utc)) => {
                problems.push(Problem::BadTime {
                    text: Quoted::new(time_text),
                    reason: "outside the supported instants, the years 0000 to 9998 in UTC".into(),
                });
                None
            }
            Ok(t) => Some(to_millisecond(t.with_timezone(&Utc))),
            Err(e) => {
                problems.push(Problem::BadTime {
                    text: Quoted::new(time_text),
                    reason: e.to_string(),
                });
                None
            }
        }
    };
    let value = match &f.value {
        RawValue::Missing => Err(Problem::EmptyValue),
        RawValue::Text(t) if t.trim().is_empty() => Err(Problem::EmptyValue),
        RawValue::Text(t) => match t.trim().parse::<f64>() {
            Ok(v) if v.is_finite() => Ok(v),
            Ok(_) => Err(Problem::NotFinite(Quoted::new(t.trim()))),
            Err(_) => Err(Problem::NotANumber(Quoted::new(t.trim()))),
        },
        RawValue::Number(v) if v.is_finite() => Ok(*v),
        RawValue::Number(v) => Err(Problem::NotFinite(Quoted::new(&v.to_string()))),
    };
    let value = value.map_err(|p| problems.push(p)).ok();
    // The words are the contract's; case is forgiven because historians disagree on it.
    let quality_text = f
        .quality
        .as_deref()
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    let quality = Quality::parse(&quality_text).or_else(|| {
        let original = f.quality.as_deref().unwrap_or("").trim();
        problems.push(Problem::BadQuality(Quoted::new(original)));
        None
    });
    match (time, value, quality) {
        (Some(time), Some(value), Some(quality)) if problems.is_empty() => Ok(Reading {
            tag: tag.to_string(),
            time,
            value,
            quality,
        }),
        _ => Err(problems),
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn the_supported_instants_end_where_rfc_3339_years_would_need_five_digits() {
        assert!(super::instant("0000-01-01T00:00:00Z").is_ok());
        assert!(super::instant("9998-12-31T23:59:59Z").is_ok());
        assert!(
            super::instant("9999-01-01T00:00:00Z").is_ok(),
            "the end of the range"
        );
        assert!(super::instant("9999-01-01T00:00:01Z").is_err());
        assert!(super::instant("9999-12-31T23:00:00Z")
            .unwrap_err()
            .contains("0000 to 9998"));
        assert!(
            super::instant("9998-12-31T23:30:00-02:00").is_err(),
            "year 9999 in UTC"
        );
        assert!(super::instant("yesterday")
            .unwrap_err()
            .contains("RFC 3339"));
    }

    use super::*;

    use crate::test_plants::{tee, FlowMeter};

    fn plant() -> Plant {
        reconcile::parse_plant(&tee(&[FlowMeter("T-1", "in", None)])).expect("valid test model")
    }

    #[test]
    fn crlf_bom_and_blank_lines_keep_physical_line_numbers() {
        let text = "\u{feff}tag,time,value\r\n\r\nT-1,2026-03-02T05:00:00Z,1\r\n\r\n\r\nT-1,2026-03-02T05:00:00Z,x\r\n";
        let err = parse(text.as_bytes(), Format::Csv, &plant()).expect_err("line 6 is bad");
        let ReadingsError::Bad(bad) = err else {
            panic!("expected bad readings, got {err:?}");
        };
        assert_eq!(bad.total, 1);
        assert_eq!(
            bad.listed,
            [BadReading {
                place: Place::Line(6),
                problems: vec![Problem::NotANumber("x".into())],
            }]
        );
    }

    #[test]
    fn one_instant_in_two_offsets_is_one_reading_and_the_later_wins() {
        let text = "tag,time,value,quality\nT-1,2026-03-02T05:00:00Z,1,\nT-1,2026-03-02T07:00:00+02:00,2,Uncertain\n";
        let parsed = parse(text.as_bytes(), Format::Csv, &plant()).expect("valid");
        assert_eq!(parsed.readings.len(), 1);
        assert_eq!(parsed.readings[0].value, 2.0);
        assert_eq!(parsed.readings[0].quality, Quality::Uncertain);
        assert_eq!(
            parsed.replaced,
            vec![Replacement {
                later: Place::Line(3),
                earlier: Place::Line(2)
            }]
        );
    }

    #[test]
    fn instants_are_kept_to_the_millisecond_so_two_within_one_are_one() {
        let text = "tag,time,value\nT-1,2026-03-02T05:00:00.1234Z,1\nT-1,2026-03-02T05:00:00.1239Z,2\nT-1,1969-12-31T23:59:59.9995Z,3\n";
        let parsed = parse(text.as_bytes(), Format::Csv, &plant()).expect("valid");
        assert_eq!(parsed.readings.len(), 2);
        assert_eq!(parsed.readings[0].value, 2.0, "the later line replaces");
        assert_eq!(
            parsed.readings[0]
                .time
                .to_rfc3339_opts(chrono::SecondsFormat::AutoSi, true),
            "2026-03-02T05:00:00.123Z"
        );
        assert_eq!(
            parsed.readings[1].time.timestamp_millis(),
            -1,
            "floored, as stored"
        );
        assert_eq!(parsed.replaced.len(), 1);
    }

    #[test]
    fn a_reading_lists_all_its_problems() {
        let text = "tag,time,value,quality\nT-9,noon,inf,meh\n";
        let Err(ReadingsError::Bad(bad)) = parse(text.as_bytes(), Format::Csv, &plant()) else {
            panic!("expected bad readings");
        };
        assert_eq!(bad.total, 1);
        assert_eq!(bad.listed[0].problems.len(), 4, "{}", bad.listed[0]);
    }

    fn file_error(text: &str, format: Format) -> String {
        match sort(text.as_bytes(), format, &|_| true, MAX_LISTED_BAD) {
            Err(ReadingsError::File(message)) => message,
            other => panic!("expected the file refused, got {other:?}"),
        }
    }

    #[test]
    fn a_header_of_many_unknown_columns_is_refused_in_a_short_message() {
        let mut header = String::from("tag,time,value");
        for k in 0..200_000 {
            header += &format!(",c{k}");
        }
        header += ",tag,tag,\u{202e}\n";
        let message = file_error(&header, Format::Csv);
        assert!(message.len() < 1_000, "{} bytes: {message}", message.len());
        assert!(
            message.starts_with(
                "line 1: bad header: unknown column \"c0\" (expected tag, time, value, quality); \
                 unknown column \"c1\""
            ),
            "{message}"
        );
        assert!(
            message.contains("and 199996 more unknown column(s)"),
            "{message}"
        );
        assert_eq!(message.matches("column \"tag\" appears twice").count(), 1);

        // A first line without any known column, a megabyte long, is quoted cut.
        let line = format!("{}\n", "z\u{200b}".repeat(500_000));
        let message = file_error(&line, Format::Csv);
        assert!(message.len() < 1_000, "{message}");
        assert!(message.contains("…\" (1000000 characters)"), "{message}");
        assert!(!message.contains('\u{200b}'), "{message}");
    }

    #[test]
    fn json_readings_are_read_one_by_one_and_the_shape_is_checked() {
        let body = r#"{"other": {"x": [1, 2]}, "readings": [
            {"tag": "T-1", "time": "2026-03-02T05:00:00Z", "value": 1},
            7,
            {"tag": "T-1", "time": "2026-03-02T06:00:00Z", "value": "1"}
        ]}"#;
        let sorted = sort(body.as_bytes(), Format::Json, &|t| t == "T-1", 1).unwrap();
        assert_eq!(sorted.good.len(), 1);
        assert_eq!(sorted.bad.total, 2);
        assert_eq!(
            sorted.bad.listed,
            [BadReading {
                place: Place::Index(1),
                problems: vec![Problem::NotAnObject]
            }]
        );
        for (body, says) in [
            ("[]", "expected a JSON object"),
            ("{\"rows\": []}", "the key \"readings\" is missing"),
            ("{\"readings\": {\"0\": {}}}", "expected a JSON object"),
            (
                "{\"readings\": [], \"readings\": []}",
                "the key \"readings\" appears twice",
            ),
            ("{\"readings\": []} and more", "not valid JSON"),
            ("{\"readings\": [", "not valid JSON"),
        ] {
            let message = file_error(body, Format::Json);
            assert!(message.contains(says), "{body}: {message}");
        }
        // A key of a megabyte is not repeated back.
        let body = format!("{{\"{}\": 1, \"readings\": [}}", "k".repeat(1_000_000));
        assert!(file_error(&body, Format::Json).len() < 1_000);
    }

    #[test]
    fn a_tag_outside_the_safe_names_is_an_unknown_tag_quoted_safely() {
        let text =
            "tag,time,value\n=1+2,2026-03-02T05:00:00Z,1\n\"T-1\u{202e}\",2026-03-02T05:00:00Z,1\n";
        // Even were a meter to have them (a model stored before the rule).
        let sorted = sort(text.as_bytes(), Format::Csv, &|_| true, 10).unwrap();
        assert!(sorted.good.is_empty());
        let reasons: Vec<String> = sorted
            .bad
            .listed
            .iter()
            .map(|b| b.problems[0].to_string())
            .collect();
        assert_eq!(
            reasons,
            [
                "unknown tag \"=1+2\" (no meter of the model has it)",
                "unknown tag \"T-1\\u{202e}\" (no meter of the model has it)"
            ]
        );
    }

    #[test]
    fn a_file_bad_throughout_keeps_only_its_first_bad_lines() {
        let mut text = String::from("tag,time,value\n");
        for _ in 0..20_000 {
            text += &format!("T-1,{},1\n", "n".repeat(300));
        }
        let Err(ReadingsError::Bad(bad)) = parse(text.as_bytes(), Format::Csv, &plant()) else {
            panic!("expected bad readings");
        };
        assert_eq!(bad.total, 20_000);
        assert_eq!(bad.listed.len(), MAX_LISTED_BAD);
        assert_eq!(bad.listed[0].place, Place::Line(2));
        assert!(bad.listed[0].to_string().len() < 500, "{}", bad.listed[0]);
    }

    #[test]
    fn format_follows_extension_then_content() {
        assert_eq!(detect(Path::new("r.json"), b"tag,time"), Format::Json);
        assert_eq!(detect(Path::new("r.csv"), b"{"), Format::Csv);
        assert_eq!(
            detect(Path::new("r.txt"), b"\xEF\xBB\xBF \n{\"readings\":[]}"),
            Format::Json
        );
        assert_eq!(detect(Path::new("r"), b"tag,time,value"), Format::Csv);
    }
}
