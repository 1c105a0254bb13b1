//! The JSON form of readings: `{"readings": [...]}`, each reading an object with `tag`,
//! `time`, `value` (a number) and `quality`, placed by its index in the array.
//!
//! The array is read one reading at a time and each is handed on at once, so a body of a
//! million bad readings never exists as a million parsed values.

use std::fmt;

use serde::de::{self, DeserializeSeed, IgnoredAny, MapAccess, SeqAccess, Visitor};
use serde_json::Value;

use crate::readings::{Place, Problem, RawFields, RawValue, ReadingsError, Sink};

const SHAPE: &str = "expected a JSON object {\"readings\": [...]}";

/// `{"readings": [{"tag", "time", "value", "quality"}]}`; other keys of the body and of a
/// reading are ignored. The body must be valid JSON to its end.
pub fn raw_readings(body: &[u8], sink: &mut Sink) -> Result<(), ReadingsError> {
    let mut de = serde_json::Deserializer::from_slice(body);
    let read = Body { sink }.deserialize(&mut de).and_then(|()| de.end());
    read.map_err(|e| {
        // The parser's message may quote the body (a key, a string): cut.
        let message = reconcile::text::clip(&e.to_string(), 300);
        match e.classify() {
            serde_json::error::Category::Data => {
                ReadingsError::File(format!("{SHAPE} ({message})"))
            }
            _ => ReadingsError::File(format!("not valid JSON: {message}")),
        }
    })
}

/// The body: an object whose `readings` key holds the list.
struct Body<'s, 'a> {
    sink: &'s mut Sink<'a>,
}

impl<'de> DeserializeSeed<'de> for Body<'_, '_> {
    type Value = ();

    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> Visitor<'de> for Body<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an object with the key \"readings\"")
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        let mut found = false;
        while let Some(key) = map.next_key::<Key>()? {
            match key {
                Key::Readings if found => {
                    return Err(de::Error::custom("the key \"readings\" appears twice"))
                }
                Key::Readings => {
                    map.next_value_seed(List {
                        sink: &mut *self.sink,
                    })?;
                    found = true;
                }
                Key::Other => {
                    map.next_value::<IgnoredAny>()?;
                }
            }
        }
        if found {
            Ok(())
        } else {
            Err(de::Error::custom("the key \"readings\" is missing"))
        }
    }
}

/// A key of the body, told apart without keeping it (a key may be megabytes long).
enum Key {
    Readings,
    Other,
}

impl<'de> de::Deserialize<'de> for Key {
    fn deserialize<D: de::Deserializer<'de>>(d: D) -> Result<Key, D::Error> {
        struct KeyVisitor;
        impl Visitor<'_> for KeyVisitor {
            type Value = Key;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("a key")
            }
            fn visit_str<E: de::Error>(self, key: &str) -> Result<Key, E> {
                Ok(if key == "readings" {
                    Key::Readings
                } else {
                    Key::Other
                })
            }
        }
        d.deserialize_str(KeyVisitor)
    }
}

/// The `readings` array, each reading handed to the sink as it is read.
struct List<'s, 'a> {
    sink: &'s mut Sink<'a>,
}

impl<'de> DeserializeSeed<'de> for List<'_, '_> {
    type Value = ();

    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de> Visitor<'de> for List<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an array of readings")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        let mut i = 0;
        while let Some(r) = seq.next_element::<Value>()? {
            (self.sink)(Place::Index(i), fields(&r));
            i += 1;
        }
        Ok(())
    }
}

/// The fields of one reading, or what makes them unreadable.
fn fields(r: &Value) -> Result<RawFields, Vec<Problem>> {
    if !r.is_object() {
        return Err(vec![Problem::NotAnObject]);
    }
    let text = |field: &'static str, problems: &mut Vec<Problem>| -> Option<String> {
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
    let mut problems = Vec::new();
    let tag = text("tag", &mut problems);
    let time = text("time", &mut problems);
    let quality = text("quality", &mut problems);
    let value = match r.get("value") {
        None | Some(Value::Null) => Some(RawValue::Missing),
        // Without arbitrary precision serde_json holds every number as an f64 (a number too
        // large for one fails the parse), so NaN here is unreachable.
        Some(Value::Number(n)) => Some(RawValue::Number(n.as_f64().unwrap_or(f64::NAN))),
        Some(_) => {
            problems.push(Problem::WrongType {
                field: "value",
                expected: "a number",
            });
            None
        }
    };
    match (tag, time, value, quality) {
        (Some(tag), Some(time), Some(value), Some(quality)) if problems.is_empty() => {
            Ok(RawFields {
                tag,
                time,
                value,
                quality: Some(quality),
            })
        }
        _ => Err(problems),
    }
}
