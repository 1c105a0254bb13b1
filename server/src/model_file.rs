//! Reading a model file from disk. The engine parses and validates; this module only decides
//! the format from the file name and turns every problem into a line that names the file.

use std::path::Path;

use reconcile::model::MAX_LISTED_PROBLEMS;
use reconcile::{ModelError, ModelSpec, Plant};

use crate::BadInput;

/// Read, parse and validate a model file; on failure the error lists every problem found.
pub fn load(path: &Path) -> Result<Plant, BadInput> {
    let text = read_text(path)?;
    parse(path, &text).map_err(|e| describe(path, &e))
}

/// Read a whole file as UTF-8 text, naming the file (and the line) when that fails.
pub fn read_text(path: &Path) -> Result<String, BadInput> {
    let bytes = std::fs::read(path)
        .map_err(|e| BadInput::new(format!("{}: cannot read: {e}", path.display())))?;
    String::from_utf8(bytes).map_err(|e| {
        let at = e.utf8_error().valid_up_to();
        let line = e.as_bytes()[..at].iter().filter(|&&b| b == b'\n').count() + 1;
        BadInput::new(format!(
            "{}: line {line}: not UTF-8 text (invalid byte at offset {at})",
            path.display()
        ))
    })
}

/// The extension wins when it says JSON or TOML; otherwise the engine looks at the content.
fn parse(path: &Path, text: &str) -> Result<Plant, ModelError> {
    match extension(path).as_deref() {
        Some("json") => Plant::new(ModelSpec::from_json(text)?),
        Some("toml") => Plant::new(ModelSpec::from_toml(text)?),
        _ => reconcile::parse_plant(text),
    }
}

pub fn extension(path: &Path) -> Option<String> {
    path.extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
}

/// One line per problem, each naming the file and the item, so that a user (or a script
/// grepping stderr) can fix the file in one pass.
fn describe(path: &Path, error: &ModelError) -> BadInput {
    let file = path.display();
    let lines = match error {
        ModelError::Syntax { format, message } => {
            // toml and serde_json messages start with the position ("at line 3, column 5");
            // a toml message goes on with a source excerpt, kept indented below the line.
            let mut parts = message.trim_end().lines();
            let first = parts.next().unwrap_or("").trim();
            let mut lines = vec![format!("{file}: not valid {format}: {first}")];
            lines.extend(parts.map(|l| format!("    {l}")));
            lines
        }
        ModelError::Invalid(problems) => {
            // A model wrong throughout says so in a few lines: the first problems, the count.
            let mut lines: Vec<String> = problems
                .iter()
                .take(MAX_LISTED_PROBLEMS)
                .map(|p| format!("{file}: {}: {}", p.item, p.message))
                .collect();
            if problems.len() > MAX_LISTED_PROBLEMS {
                lines.push(format!(
                    "{file}: {} more problem(s) not listed",
                    problems.len() - MAX_LISTED_PROBLEMS
                ));
            }
            lines.push(format!(
                "{file}: the model has {} problem(s)",
                problems.len()
            ));
            lines
        }
    };
    BadInput::lines(lines)
}
