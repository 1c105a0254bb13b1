//! The names a model gives (its own name, and the ids of its components, units, reactions,
//! streams and meters' tags). They travel far: into reports, CSV downloads that spreadsheets
//! open, logs and terminals. So a name is plain text anyone can read and no tool will run:
//! letters of any script, digits, and the separators `-` `_` `.` `:` `/` and the space, 1 to
//! [`MAX_NAME_CHARS`] characters; not beginning with `=`, `+`, `-` or `@` (a spreadsheet takes
//! such a cell for a formula) nor with or ending in a space; never a control, format
//! (bidirectional, zero-width) or other invisible character.

use crate::text::{is_invisible, needs_escape};

/// The longest name, in characters.
pub const MAX_NAME_CHARS: usize = 64;

/// The separators a name may hold besides letters and digits.
pub const SEPARATORS: [char; 6] = ['-', '_', '.', ':', '/', ' '];

/// The characters a spreadsheet reads as the start of a formula.
const FORMULA_STARTS: [char; 4] = ['=', '+', '-', '@'];

fn allowed(c: char) -> bool {
    ((c.is_alphabetic() || c.is_numeric()) && !is_invisible(c)) || SEPARATORS.contains(&c)
}

/// Why `name` is not a safe name, as the end of a sentence naming it ("… begins with '='"), or
/// `None` when it is one.
pub fn fault(name: &str) -> Option<String> {
    let Some(first) = name.chars().next() else {
        return Some("is empty".into());
    };
    let length = name.chars().count();
    if length > MAX_NAME_CHARS {
        return Some(format!(
            "is {length} characters long; a name has at most {MAX_NAME_CHARS}"
        ));
    }
    if FORMULA_STARTS.contains(&first) {
        return Some(format!(
            "begins with '{first}', which a spreadsheet takes for the start of a formula"
        ));
    }
    if name.starts_with(' ') || name.ends_with(' ') {
        return Some("begins or ends with a space".into());
    }
    let bad = name.chars().find(|&c| !allowed(c))?;
    let shown = if needs_escape(bad) {
        format!("U+{:04X}", u32::from(bad))
    } else {
        format!("'{bad}' (U+{:04X})", u32::from(bad))
    };
    Some(format!(
        "holds {shown}; a name holds only letters, digits, spaces inside and - _ . : /"
    ))
}

/// Whether `name` is a safe name (see the module).
pub fn is_safe(name: &str) -> bool {
    fault(name).is_none()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_names_in_use_are_safe() {
        for name in [
            "TH2-FI-601",
            "co-to-methanol",
            "OB2-AI-402",
            "purge-split",
            "N2",
            "H2O",
            "CH3OH",
            "tarn-hollow-mx2",
            "reactor:N2",
            "area 3/loop.b_2",
            "Ω",
            "méthanol",
            "合成塔",
            "_x",
            "1",
            &"A".repeat(MAX_NAME_CHARS),
        ] {
            assert_eq!(fault(name), None, "{name}");
        }
    }

    #[test]
    fn hostile_names_are_refused_with_the_reason() {
        let cases: [(&str, &str); 14] = [
            ("F-1\u{202e}", "holds U+202E"),
            ("F\u{200b}1", "holds U+200B"),
            ("F-1\nF-2", "holds U+000A"),
            ("F\t1", "holds U+0009"),
            ("=1+2", "begins with '='"),
            ("@SUM(A1)", "begins with '@'"),
            ("+x", "begins with '+'"),
            ("-x", "begins with '-'"),
            ("", "is empty"),
            (" x", "begins or ends with a space"),
            ("x ", "begins or ends with a space"),
            ("a,b", "holds ',' (U+002C)"),
            ("x\u{feff}", "holds U+FEFF"),
            ("\u{3164}", "holds U+3164"),
        ];
        for (name, why) in cases {
            let fault = fault(name).unwrap_or_else(|| panic!("{name:?} passed"));
            assert!(fault.starts_with(why), "{name:?}: {fault}");
        }
        let long = "A".repeat(MAX_NAME_CHARS + 1);
        assert_eq!(
            fault(&long).as_deref(),
            Some("is 65 characters long; a name has at most 64")
        );
        assert!(!is_safe("x\u{0}"));
        assert!(!is_safe("a\"b"));
    }
}
