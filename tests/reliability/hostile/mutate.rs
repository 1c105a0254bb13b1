//! Mutations of a body: hostile numbers, texts, invalid UTF-8, nesting and edits at drawn positions.

use super::*;

pub(crate) const HOSTILE_NUMBERS: &[&str] = &[
    "1e400",
    "-1e400",
    "1e-400",
    "nan",
    "+nan",
    "-nan",
    "NaN",
    "inf",
    "+inf",
    "-inf",
    "Infinity",
    "-Infinity",
    "-0",
    "-0.0",
    "+0.0",
    "0",
    "-1",
    "99999999999999999999",
    "-99999999999999999999",
    "18446744073709551616",
    "-9223372036854775809",
    "9223372036854775807",
    "1.7976931348623157e308",
    "1.8e308",
    "4.9e-324",
    "2.2250738585072014e-308",
    "0x10",
    "0o7",
    "0b1",
    "1_000",
    "1__0",
    "1.",
    ".5",
    "-.5",
    "1e",
    "1e+",
    "--1",
    "1,5",
    "\"1\"",
    "true",
    "[]",
    "{}",
    "\"\"",
    "",
    "123456789012345678901234567890123456789012345678901234567890",
    "0.000000000000000000000000000000000000000000000000000000000001",
];

pub(crate) const INVALID_UTF8: &[&[u8]] = &[
    b"\xff",
    b"\xc3",
    b"\xed\xa0\x80",
    b"\xc0\x80",
    b"\xe2\x82",
    b"\x80\x80",
    b"\xf4\x90\x80\x80",
    b"\xf8\x88\x80\x80\x80",
];

/// Text put in place of a string's content. Escapes are written as the formats spell them.
pub(crate) const HOSTILE_TEXTS: &[&str] = &[
    "",
    " ",
    "\\u0000",
    "OB2\\u0000FI",
    "\\n",
    "\\t\\r",
    "\\u202e",
    "\\ud800",
    "\\q",
    "\\",
    "\u{202e}",
    "Ω",
    "😀",
    "\u{7f}",
    "%00",
    "../../etc/passwd",
    "'; DROP TABLE plants; --",
    "ombrask-ob2",
    "OB2-FI-101",
    "mix",
    "outside",
    "N2",
    "1h",
    "0s",
    "15m",
    "-1h",
    "99999999999999999999h",
    "kmol/h",
    "%",
    "molar_flow",
    "reactor",
    "sigma",
];

#[derive(Debug, Clone, Copy)]
pub(crate) enum Nest {
    Array,
    TomlTable,
    JsonObject,
}

impl Nest {
    pub(crate) fn render(self, depth: usize) -> String {
        let (open, close) = match self {
            Nest::Array => ("[", "]"),
            Nest::TomlTable => ("{a=", "}"),
            Nest::JsonObject => ("{\"a\":", "}"),
        };
        format!("{}1{}", open.repeat(depth), close.repeat(depth))
    }
}

#[derive(Debug, Clone)]
pub(crate) enum Text {
    Word(&'static str),
    Repeat(char, usize),
}

impl Text {
    pub(crate) fn render(&self) -> String {
        match self {
            Text::Word(w) => w.to_string(),
            Text::Repeat(c, n) => c.to_string().repeat(*n),
        }
    }
}

/// One edit of a body's bytes. Positions are drawn as `Index`es, resolved against the body as
/// it is when the edit is applied.
#[derive(Debug, Clone)]
pub(crate) enum Edit {
    Truncate(Index),
    FlipBit(Index, u8),
    Insert(Index, Vec<u8>),
    Delete(Index, usize),
    InvalidUtf8(Index, &'static [u8]),
    /// Replace the n-th number by a hostile one.
    Number(Index, &'static str),
    /// Replace the content of the n-th quoted string.
    Text(Index, Text),
    /// Replace the n-th number by a nest of this depth.
    Nest(Index, usize, Nest),
    DuplicateLine(Index),
    Bom,
    Crlf,
}

pub(crate) fn edit() -> impl Strategy<Value = Edit> {
    let text = prop_oneof![
        6 => prop::sample::select(HOSTILE_TEXTS).prop_map(Text::Word),
        1 => (
            prop::sample::select(vec!['x', 'é', '😀']),
            prop::sample::select(vec![64usize, 1_000, 70_000, 100_000]),
        )
            .prop_map(|(c, n)| Text::Repeat(c, n)),
    ];
    prop_oneof![
        2 => any::<Index>().prop_map(Edit::Truncate),
        2 => (any::<Index>(), 0u8..8).prop_map(|(i, b)| Edit::FlipBit(i, b)),
        1 => (any::<Index>(), prop::collection::vec(any::<u8>(), 1..16))
            .prop_map(|(i, b)| Edit::Insert(i, b)),
        1 => (any::<Index>(), 1usize..64).prop_map(|(i, n)| Edit::Delete(i, n)),
        2 => (any::<Index>(), prop::sample::select(INVALID_UTF8))
            .prop_map(|(i, b)| Edit::InvalidUtf8(i, b)),
        4 => (any::<Index>(), prop::sample::select(HOSTILE_NUMBERS))
            .prop_map(|(i, n)| Edit::Number(i, n)),
        4 => (any::<Index>(), text).prop_map(|(i, t)| Edit::Text(i, t)),
        2 => (
            any::<Index>(),
            prop::sample::select(vec![2usize, 32, 127, 128, 129, 1_000, 30_000, 100_000]),
            prop::sample::select(vec![Nest::Array, Nest::TomlTable, Nest::JsonObject]),
        )
            .prop_map(|(i, d, k)| Edit::Nest(i, d, k)),
        1 => any::<Index>().prop_map(Edit::DuplicateLine),
        1 => Just(Edit::Bom),
        1 => Just(Edit::Crlf),
    ]
}

impl Edit {
    pub(crate) fn apply(&self, body: &mut Vec<u8>) {
        let at = |i: &Index, len: usize| if len == 0 { 0 } else { i.index(len) };
        match self {
            Edit::Truncate(i) => body.truncate(at(i, body.len())),
            Edit::FlipBit(i, bit) => {
                if !body.is_empty() {
                    let k = at(i, body.len());
                    body[k] ^= 1 << bit;
                }
            }
            Edit::Insert(i, bytes) => {
                let k = at(i, body.len() + 1);
                body.splice(k..k, bytes.iter().copied());
            }
            Edit::Delete(i, n) => {
                let k = at(i, body.len());
                let end = (k + n).min(body.len());
                body.drain(k..end);
            }
            Edit::InvalidUtf8(i, bytes) => {
                let k = at(i, body.len() + 1);
                body.splice(k..k, bytes.iter().copied());
            }
            Edit::Number(i, with) => replace_nth(body, &number_spans(body), i, with.as_bytes()),
            Edit::Text(i, text) => {
                replace_nth(body, &string_spans(body), i, text.render().as_bytes())
            }
            Edit::Nest(i, depth, kind) => {
                replace_nth(body, &number_spans(body), i, kind.render(*depth).as_bytes())
            }
            Edit::DuplicateLine(i) => {
                let lines = line_spans(body);
                if !lines.is_empty() {
                    let (a, b) = lines[i.index(lines.len())];
                    let line = body[a..b].to_vec();
                    body.splice(b..b, line);
                }
            }
            Edit::Bom => {
                body.splice(0..0, *b"\xEF\xBB\xBF");
            }
            Edit::Crlf => {
                let mut out = Vec::with_capacity(body.len() + body.len() / 16);
                for &b in body.iter() {
                    if b == b'\n' {
                        out.push(b'\r');
                    }
                    out.push(b);
                }
                *body = out;
            }
        }
    }
}

pub(crate) fn replace_nth(body: &mut Vec<u8>, spans: &[(usize, usize)], i: &Index, with: &[u8]) {
    if !spans.is_empty() {
        let (a, b) = spans[i.index(spans.len())];
        body.splice(a..b, with.iter().copied());
    }
}

/// Numbers as values: a run of digits, signs, points and exponents after `=`, `[`, `,`, `:` or
/// a space, holding a digit.
pub(crate) fn number_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let part = |b: u8| b.is_ascii_digit() || matches!(b, b'.' | b'e' | b'E' | b'+' | b'-' | b'_');
    let mut spans = Vec::new();
    let mut k = 0;
    while k < body.len() {
        let starts = (body[k].is_ascii_digit() || body[k] == b'-')
            && (k == 0 || matches!(body[k - 1], b' ' | b'=' | b'[' | b',' | b':'));
        if starts {
            let end = (k..body.len())
                .find(|&j| !part(body[j]))
                .unwrap_or(body.len());
            if body[k..end].iter().any(u8::is_ascii_digit) {
                spans.push((k, end));
            }
            k = end.max(k + 1);
        } else {
            k += 1;
        }
    }
    spans
}

/// The contents of `"..."` strings (the base texts have no escaped quotes).
pub(crate) fn string_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let quotes: Vec<usize> = (0..body.len()).filter(|&k| body[k] == b'"').collect();
    quotes.chunks_exact(2).map(|q| (q[0] + 1, q[1])).collect()
}

/// Each line with its newline.
pub(crate) fn line_spans(body: &[u8]) -> Vec<(usize, usize)> {
    let mut spans = Vec::new();
    let mut start = 0;
    for (k, &b) in body.iter().enumerate() {
        if b == b'\n' {
            spans.push((start, k + 1));
            start = k + 1;
        }
    }
    if start < body.len() {
        spans.push((start, body.len()));
    }
    spans
}
