//! The JSON form of readings: `{"readings": [...]}`, each reading an object with `tag`,
//! `time`, `value` (a number) and `quality`, placed by its index in the array.

use crate::readings::{Place, Problem, RawFields, RawReading, RawValue, ReadingsError};

/// `{"readings": [{"tag", "time", "value", "quality"}]}`; other keys of a reading are ignored.
pub fn raw_readings(body: &[u8]) -> Result<Vec<RawReading>, ReadingsError> {
    use serde_json::Value;
    let doc: Value = serde_json::from_slice(body)
        .map_err(|e| ReadingsError::File(format!("not valid JSON: {e}")))?;
    let Some(list) = doc.get("readings").and_then(Value::as_array) else {
        return Err(ReadingsError::File(
            "expected a JSON object {\"readings\": [...]}".into(),
        ));
    };
    let text = |r: &Value, field: &'static str, problems: &mut Vec<Problem>| -> Option<String> {
        match r.get(field) {
            None | Some(Value::Null) => Some(String::new()),
            Some(Value::String(s)) => Some(s.clone()),
            Some(_) => {
                problems.push(Problem::WrongType {
                    field,
                    expected: "a string",
                });
                None
            }
        }
    };
    let raw = list
        .iter()
        .enumerate()
        .map(|(i, r)| {
            if !r.is_object() {
                return (Place::Index(i), Err(vec![Problem::NotAnObject]));
            }
            let mut problems = Vec::new();
            let tag = text(r, "tag", &mut problems);
            let time = text(r, "time", &mut problems);
            let quality = text(r, "quality", &mut problems);
            let value = match r.get("value") {
                None | Some(Value::Null) => Some(RawValue::Missing),
                // Without arbitrary precision serde_json holds every number as an f64 (a number
                // too large for one fails the parse above), so NaN here is unreachable.
                Some(Value::Number(n)) => Some(RawValue::Number(n.as_f64().unwrap_or(f64::NAN))),
                Some(_) => {
                    problems.push(Problem::WrongType {
                        field: "value",
                        expected: "a number",
                    });
                    None
                }
            };
            let fields = match (tag, time, value, quality) {
                (Some(tag), Some(time), Some(value), Some(quality)) if problems.is_empty() => {
                    Ok(RawFields {
                        tag,
                        time,
                        value,
                        quality: Some(quality),
                    })
                }
                _ => Err(problems),
            };
            (Place::Index(i), fields)
        })
        .collect();
    Ok(raw)
}
