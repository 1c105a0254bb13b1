//! The CSV form of readings: a header naming the columns (any order; `quality` optional), then
//! one reading per line. Lines are numbered as an editor shows them, the header being line 1.

use ::csv::{ByteRecord, ReaderBuilder, Trim};

use crate::readings::{Place, Problem, RawFields, RawReading, RawValue, ReadingsError};

/// Column positions found in the header.
struct Columns {
    tag: usize,
    time: usize,
    value: usize,
    quality: Option<usize>,
    width: usize,
}

const NAMES: [&str; 4] = ["tag", "time", "value", "quality"];

pub fn raw_readings(body: &[u8]) -> Result<Vec<RawReading>, ReadingsError> {
    // Byte records, not string records: a line that is not UTF-8 becomes a reported bad line
    // instead of stopping the reader. `flexible` for the same reason with a wrong field count.
    let mut reader = ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .trim(Trim::All)
        .from_reader(body);
    let mut records = reader.byte_records();
    let header = match records.next() {
        None => {
            return Err(ReadingsError::File(
                "line 1: missing header: the file is empty (expected tag,time,value,quality)"
                    .into(),
            ))
        }
        Some(Err(e)) => return Err(ReadingsError::File(format!("not valid CSV: {e}"))),
        Some(Ok(h)) => h,
    };
    let mut lines = LineCounter::new(body);
    let columns = columns(&header, lines.place(&header))?;
    let mut raw = Vec::new();
    for record in records {
        match record {
            Ok(r) => raw.push((lines.place(&r), fields(&r, &columns))),
            Err(e) => {
                // Reading from memory the csv reader fails only on malformed input; its own
                // message carries the position. Nothing after it can be trusted to line up.
                return Err(ReadingsError::File(format!("not valid CSV: {e}")));
            }
        }
    }
    Ok(raw)
}

/// Physical line numbers of records. The csv reader's own line count starts a record where
/// its parse began, i.e. before any blank lines it skipped, so the number is worked out from
/// the record's byte offset instead. Records come in order, so counting is incremental.
struct LineCounter<'a> {
    body: &'a [u8],
    offset: usize,
    line: u64,
}

impl<'a> LineCounter<'a> {
    fn new(body: &'a [u8]) -> Self {
        LineCounter {
            body,
            offset: 0,
            line: 1,
        }
    }

    fn place(&mut self, record: &ByteRecord) -> Place {
        let mut start = record
            .position()
            .map_or(self.offset, |p| {
                usize::try_from(p.byte()).unwrap_or(usize::MAX)
            })
            .clamp(self.offset, self.body.len());
        // Step over the blank lines the reader skipped to reach the record.
        while start < self.body.len() && matches!(self.body[start], b'\n' | b'\r') {
            start += 1;
        }
        let newlines = self.body[self.offset..start]
            .iter()
            .filter(|&&b| b == b'\n')
            .count();
        self.line += newlines as u64;
        self.offset = start;
        Place::Line(self.line)
    }
}

fn columns(header: &ByteRecord, at: Place) -> Result<Columns, ReadingsError> {
    let original: Vec<String> = header
        .iter()
        .map(|f| String::from_utf8_lossy(f).into_owned())
        .collect();
    let names: Vec<String> = original.iter().map(|n| n.to_ascii_lowercase()).collect();
    let known = |n: &str| NAMES.contains(&n);
    // A first line with no known column name is data, not a header.
    if !names.iter().any(|n| known(n)) {
        return Err(ReadingsError::File(format!(
            "{at}: missing header: expected a first line naming the columns tag, time, value \
             and optionally quality; found \"{}\"",
            original.join(",")
        )));
    }
    let mut problems = Vec::new();
    for (i, n) in names.iter().enumerate() {
        if !known(n) {
            problems.push(format!(
                "unknown column \"{n}\" (expected tag, time, value, quality)"
            ));
        } else if names[..i].contains(n) {
            problems.push(format!("column \"{n}\" appears twice"));
        }
    }
    let find = |name: &str| names.iter().position(|n| n == name);
    for required in &NAMES[..3] {
        if find(required).is_none() {
            problems.push(format!("the header has no column \"{required}\""));
        }
    }
    match (find("tag"), find("time"), find("value")) {
        (Some(tag), Some(time), Some(value)) if problems.is_empty() => Ok(Columns {
            tag,
            time,
            value,
            quality: find("quality"),
            width: names.len(),
        }),
        _ => Err(ReadingsError::File(format!(
            "{at}: bad header: {}",
            problems.join("; ")
        ))),
    }
}

fn fields(record: &ByteRecord, columns: &Columns) -> Result<RawFields, Vec<Problem>> {
    // Every field must line up with the header: a short line is usually a truncated file.
    if record.len() != columns.width {
        return Err(vec![Problem::FieldCount {
            found: record.len(),
            expected: columns.width,
        }]);
    }
    let text = |i: usize| -> Result<String, Vec<Problem>> {
        let bytes = record.get(i).unwrap_or_default();
        std::str::from_utf8(bytes)
            .map(str::to_string)
            .map_err(|_| vec![Problem::NotUtf8])
    };
    Ok(RawFields {
        tag: text(columns.tag)?,
        time: text(columns.time)?,
        value: RawValue::Text(text(columns.value)?),
        quality: columns.quality.map(text).transpose()?,
    })
}
