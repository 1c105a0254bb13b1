//! User text inside messages. Whatever a file or a request holds, a message quotes it escaped
//! (a newline, a bidirectional override or a zero-width space cannot rearrange a terminal, a
//! log line or a reader's screen) and cut to a few hundred characters (an error about a
//! megabyte field is not itself a megabyte), with the original length said. The engine's
//! model problems, the readings checks, the CLI and the service all quote through here.

use std::fmt;

/// Most characters of one quoted piece of user text a message shows.
pub const QUOTE_CHARS: usize = 200;

/// Characters no screen shows as themselves: format characters (Unicode Cf, among them the
/// bidirectional controls and the zero-width ones), the other default-ignorable code points
/// (variation selectors, Hangul fillers, tags), line and paragraph separators, and private
/// use (what it looks like depends on a font). Ranges, inclusive.
const INVISIBLE: &[(u32, u32)] = &[
    (0x00AD, 0x00AD),
    (0x034F, 0x034F),
    (0x0600, 0x0605),
    (0x061C, 0x061C),
    (0x06DD, 0x06DD),
    (0x070F, 0x070F),
    (0x0890, 0x0891),
    (0x08E2, 0x08E2),
    (0x115F, 0x1160),
    (0x17B4, 0x17B5),
    (0x180B, 0x180F),
    (0x200B, 0x200F),
    (0x2028, 0x202E),
    (0x2060, 0x206F),
    (0x3164, 0x3164),
    (0xE000, 0xF8FF),
    (0xFE00, 0xFE0F),
    (0xFEFF, 0xFEFF),
    (0xFFA0, 0xFFA0),
    (0xFFF0, 0xFFFB),
    (0x110BD, 0x110BD),
    (0x110CD, 0x110CD),
    (0x13430, 0x1343F),
    (0x1BCA0, 0x1BCA3),
    (0x1D173, 0x1D17A),
    (0xE0000, 0xE0FFF),
    (0xF0000, 0x10FFFF),
];

/// A character that shows as nothing, or as something else: see [`INVISIBLE`].
pub fn is_invisible(c: char) -> bool {
    let c = u32::from(c);
    INVISIBLE.iter().any(|&(lo, hi)| (lo..=hi).contains(&c))
}

/// A character a message shows escaped: controls, whitespace other than the plain space, and
/// the invisible ones.
pub fn needs_escape(c: char) -> bool {
    if c.is_ascii() {
        return c.is_ascii_control();
    }
    c.is_control() || c.is_whitespace() || is_invisible(c)
}

/// Append `c` as a message shows it to `out`, unless that would take `out` past `max`
/// characters (`width` counts them); false then. `quotes`: escape `"` and `\` too.
fn push_shown(out: &mut String, width: &mut usize, max: usize, c: char, quotes: bool) -> bool {
    use std::fmt::Write;
    let start = out.len();
    match c {
        '"' if quotes => out.push_str("\\\""),
        '\\' if quotes => out.push_str("\\\\"),
        '\n' => out.push_str("\\n"),
        '\r' => out.push_str("\\r"),
        '\t' => out.push_str("\\t"),
        c if needs_escape(c) => {
            let _ = write!(out, "\\u{{{:x}}}", u32::from(c));
        }
        c => out.push(c),
    }
    // Escapes are ASCII, so a piece's width is its length unless it is the character itself.
    let w = if out.len() - start == c.len_utf8() && !c.is_ascii() {
        1
    } else {
        out.len() - start
    };
    if *width + w > max {
        out.truncate(start);
        return false;
    }
    *width += w;
    true
}

/// Text as a message shows it: in double quotes, `"` and `\` and every character of
/// [`needs_escape`] escaped, cut after [`QUOTE_CHARS`] characters of the escaped form with an
/// ellipsis and the original length: `"KKKK…" (3000000 characters)`. Holds at most that much,
/// whatever the size of the text it was made from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Quoted {
    shown: String,
    /// The original length in characters when the text was cut.
    cut: Option<usize>,
}

impl Quoted {
    pub fn new(text: &str) -> Quoted {
        let mut shown = String::new();
        let mut width = 0;
        for c in text.chars() {
            if !push_shown(&mut shown, &mut width, QUOTE_CHARS, c, true) {
                return Quoted {
                    shown,
                    cut: Some(text.chars().count()),
                };
            }
        }
        Quoted { shown, cut: None }
    }

    /// Whether the text was cut.
    pub fn is_cut(&self) -> bool {
        self.cut.is_some()
    }
}

impl fmt::Display for Quoted {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.cut {
            None => write!(f, "\"{}\"", self.shown),
            Some(n) => write!(f, "\"{}…\" ({n} characters)", self.shown),
        }
    }
}

impl From<&str> for Quoted {
    fn from(text: &str) -> Quoted {
        Quoted::new(text)
    }
}

/// `text` quoted as [`Quoted`] shows it.
pub fn quote(text: &str) -> String {
    Quoted::new(text).to_string()
}

/// A message that may carry user text without quotes (a parser's, a whole line): escaped as
/// [`Quoted`] escapes (quotes and backslashes left as they are) and cut after `max` characters
/// with an ellipsis and the original length.
pub fn clip(text: &str, max: usize) -> String {
    let mut out = String::new();
    let mut width = 0;
    for c in text.chars() {
        if !push_shown(&mut out, &mut width, max, c, false) {
            out.push_str(&format!("… ({} characters)", text.chars().count()));
            return out;
        }
    }
    out
}

/// A message of several lines (a TOML error with its source excerpt): each line clipped as
/// [`clip`] does to `max_chars`, at most `max_lines` lines, then how many more there were.
pub fn clip_lines(text: &str, max_chars: usize, max_lines: usize) -> String {
    let mut lines: Vec<String> = Vec::new();
    let mut more = 0;
    for line in text.split('\n') {
        if lines.len() < max_lines {
            lines.push(clip(line.strip_suffix('\r').unwrap_or(line), max_chars));
        } else {
            more += 1;
        }
    }
    if more > 0 {
        lines.push(format!("… and {more} more line(s)"));
    }
    lines.join("\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plain_text_is_quoted_as_it_is() {
        assert_eq!(quote("TH2-FI-601"), "\"TH2-FI-601\"");
        assert_eq!(quote("Ω méthanol"), "\"Ω méthanol\"");
        assert_eq!(quote(""), "\"\"");
    }

    #[test]
    fn what_would_disturb_a_screen_is_escaped() {
        assert_eq!(quote("a\nb\tc\rd"), "\"a\\nb\\tc\\rd\"");
        assert_eq!(quote("F-1\u{202e}"), "\"F-1\\u{202e}\"");
        assert_eq!(quote("\u{200b}x"), "\"\\u{200b}x\"");
        assert_eq!(quote("\u{feff}\u{0}"), "\"\\u{feff}\\u{0}\"");
        assert_eq!(quote("say \"hi\" \\"), "\"say \\\"hi\\\" \\\\\"");
        assert_eq!(quote("a\u{a0}b"), "\"a\\u{a0}b\"");
    }

    #[test]
    fn long_text_is_cut_with_its_length() {
        let long = "K".repeat(3_000_000);
        let q = Quoted::new(&long);
        assert!(q.is_cut());
        let shown = q.to_string();
        assert_eq!(
            shown,
            format!("\"{}…\" (3000000 characters)", "K".repeat(QUOTE_CHARS))
        );
        // Exactly the limit is not cut.
        let edge = "é".repeat(QUOTE_CHARS);
        assert_eq!(quote(&edge), format!("\"{edge}\""));
        // Escapes count as what they show: a line of newlines is cut at 100 of them.
        let newlines = "\n".repeat(1_000);
        assert_eq!(
            quote(&newlines),
            format!("\"{}…\" (1000 characters)", "\\n".repeat(QUOTE_CHARS / 2))
        );
    }

    #[test]
    fn clip_escapes_and_cuts_and_keeps_quotes() {
        assert_eq!(clip("expected `\"`", 50), "expected `\"`");
        assert_eq!(clip("a\u{202e}b", 50), "a\\u{202e}b");
        assert_eq!(clip("abcdef", 3), "abc… (6 characters)");
        let text = format!("head\n{}\n^\nx\ny", "z".repeat(1000));
        assert_eq!(
            clip_lines(&text, 10, 3),
            "head\nzzzzzzzzzz… (1000 characters)\n^\n… and 2 more line(s)"
        );
    }
}
