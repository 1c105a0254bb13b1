//! The CSV form of readings: a header naming the columns (any order; `quality` optional), then
//! one reading per line. Lines are numbered as an editor shows them, the header being line 1.

use std::collections::HashSet;

use ::csv::{ByteRecord, ReaderBuilder, Trim};
use reconcile::text::Quoted;

use crate::readings::{Place, Problem, RawFields, RawValue, ReadingsError, Sink};

/// Column positions found in the header.
struct Columns {
    tag: usize,
    time: usize,
    value: usize,
    quality: Option<usize>,
    width: usize,
}

const NAMES: [&str; 4] = ["tag", "time", "value", "quality"];

/// Most unknown columns a bad header's message names; the count covers them all.
const MAX_NAMED_COLUMNS: usize = 5;

/// Every reading of the body, each handed to `sink` as soon as it is read.
pub fn raw_readings(body: &[u8], sink: &mut Sink) -> Result<(), ReadingsError> {
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
    let at = lines.place(&header);
    let columns = columns(&header, at, body)?;
    // The header's fields can be megabytes: let them go before the readings are read.
    drop(header);
    for record in records {
        match record {
            Ok(r) => sink(lines.place(&r), fields(&r, &columns)),
            Err(e) => {
                // Reading from memory the csv reader fails only on malformed input; its own
                // message carries the position. Nothing after it can be trusted to line up.
                return Err(ReadingsError::File(format!("not valid CSV: {e}")));
            }
        }
    }
    Ok(())
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

/// The known column a header field names (any case), if any.
fn known(field: &[u8]) -> Option<&'static str> {
    NAMES
        .iter()
        .find(|n| field.eq_ignore_ascii_case(n.as_bytes()))
        .copied()
}

/// The columns of the header. A bad header is described in a message of bounded size: the
/// first few unknown columns named (quoted, cut), the rest counted. The header's fields are
/// looked at in place, never copied one by one.
fn columns(header: &ByteRecord, at: Place, body: &[u8]) -> Result<Columns, ReadingsError> {
    // A first line with no known column name is data, not a header.
    if !header.iter().any(|f| known(f).is_some()) {
        let first = body.split(|&b| b == b'\n').next().unwrap_or_default();
        let first = first.strip_suffix(b"\r").unwrap_or(first);
        return Err(ReadingsError::File(format!(
            "{at}: missing header: expected a first line naming the columns tag, time, value \
             and optionally quality; found {}",
            Quoted::new(&String::from_utf8_lossy(first))
        )));
    }
    let mut problems = Vec::new();
    let mut unknown = 0;
    let mut seen: HashSet<&'static str> = HashSet::new();
    let mut repeated: HashSet<&'static str> = HashSet::new();
    let mut place: [Option<usize>; 4] = [None; 4];
    for (i, field) in header.iter().enumerate() {
        match known(field) {
            None => {
                unknown += 1;
                if unknown <= MAX_NAMED_COLUMNS {
                    problems.push(format!(
                        "unknown column {} (expected tag, time, value, quality)",
                        Quoted::new(&String::from_utf8_lossy(field))
                    ));
                }
            }
            Some(name) if !seen.insert(name) => {
                // Said once per name, however often it repeats.
                if repeated.insert(name) {
                    problems.push(format!("column \"{name}\" appears twice"));
                }
            }
            Some(name) => {
                let k = NAMES.iter().position(|n| *n == name).unwrap_or(0);
                place[k] = Some(i);
            }
        }
    }
    if unknown > MAX_NAMED_COLUMNS {
        problems.push(format!(
            "and {} more unknown column(s)",
            unknown - MAX_NAMED_COLUMNS
        ));
    }
    for (required, found) in NAMES[..3].iter().zip(place) {
        if found.is_none() {
            problems.push(format!("the header has no column \"{required}\""));
        }
    }
    match place {
        [Some(tag), Some(time), Some(value), quality] if problems.is_empty() => Ok(Columns {
            tag,
            time,
            value,
            quality,
            width: header.len(),
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
