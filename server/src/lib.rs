//! loopbal's shell: the command line, the HTTP service, storage and scheduling around the
//! `reconcile` engine. The binary (`main.rs`) is a thin edge over this library, so benchmarks
//! and tests can start the service in-process.

use std::fmt;

// Layers, each using only those below it: `serve` and `demo` start `api` and `schedule`, both
// of which stand on `service` (state, ingestion) and the pure `period_run` and `run_limit`;
// `revisions`, `ingest` and `store` are below those. Nothing below `api` names it.
pub mod api;
pub mod claimant;
pub mod cli;
pub mod csv_out;
pub mod demo;
pub mod flowsheet;
pub mod health;
pub mod ingest;
pub mod meter_value;
pub mod metrics;
pub mod model_file;
pub mod out_of_service;
pub mod period_run;
pub mod readings;
pub mod results;
pub mod revisions;
pub mod run;
pub mod run_limit;
pub mod schedule;
pub mod serve;
pub mod service;
pub mod store;
pub mod summary;
#[cfg(test)]
mod test_plants;
pub mod what_if;

/// The user's input is at fault (exit status 2). Each line names the file and the line or
/// item; anything else that stops a command is a failed run (exit status 1).
#[derive(Debug)]
pub struct BadInput(Vec<String>);

/// Longest line of a [`BadInput`] message, in characters.
const MAX_LINE_CHARS: usize = 1_000;
/// Most lines of a [`BadInput`] message.
const MAX_LINES: usize = 120;

impl BadInput {
    pub fn new(line: String) -> BadInput {
        BadInput::lines(vec![line])
    }

    /// The last guard on what reaches a terminal: each line escaped and cut as
    /// reconcile::text::clip does, and a message of many lines cut to its first ones and its
    /// last (the count), so no input makes the message long.
    pub fn lines(lines: Vec<String>) -> BadInput {
        let clip = |l: &String| reconcile::text::clip(l, MAX_LINE_CHARS);
        if lines.len() <= MAX_LINES {
            return BadInput(lines.iter().map(clip).collect());
        }
        let mut kept: Vec<String> = lines[..MAX_LINES - 2].iter().map(clip).collect();
        kept.push(format!(
            "… and {} more line(s)",
            lines.len() - MAX_LINES + 1
        ));
        kept.extend(lines.last().map(clip));
        BadInput(kept)
    }
}

impl fmt::Display for BadInput {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0.join("\n"))
    }
}

impl std::error::Error for BadInput {}
