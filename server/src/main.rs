//! The `loopbal` binary. This is the edge: commands return `anyhow` errors, and this file turns
//! them into the exit status of FORMATS.md (0 success, 1 failed run, 2 bad input) with the
//! message on stderr.

use std::fmt;
use std::io::Write;
use std::process::ExitCode;

use clap::Parser;

mod cli;
mod model_file;
mod readings;
mod readings_csv;
mod run;
// The service's storage; the HTTP handlers that call it come in the next step of issue 4,
// until then only its tests do.
#[allow(dead_code)]
mod store;
mod summary;

use cli::{Cli, Command};

/// The user's input is at fault (exit status 2). Each line names the file and the line or
/// item; anything else that stops a command is a failed run (exit status 1).
#[derive(Debug)]
pub struct BadInput(Vec<String>);

impl BadInput {
    pub fn new(line: String) -> BadInput {
        BadInput(vec![line])
    }

    pub fn lines(lines: Vec<String>) -> BadInput {
        BadInput(lines)
    }
}

impl fmt::Display for BadInput {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0.join("\n"))
    }
}

impl std::error::Error for BadInput {}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match &cli.command {
        Command::CheckModel { model } => check_model(model),
        Command::Reconcile {
            model,
            readings,
            period_from,
            period_to,
        } => run::reconcile(&run::Options {
            model,
            readings,
            from: *period_from,
            to: *period_to,
        }),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            let mut stderr = std::io::stderr().lock();
            if let Some(bad) = e.downcast_ref::<BadInput>() {
                let _ = writeln!(stderr, "{bad}");
                ExitCode::from(2)
            } else {
                let _ = writeln!(stderr, "error: {e:#}");
                ExitCode::from(1)
            }
        }
    }
}

fn check_model(path: &std::path::Path) -> anyhow::Result<ExitCode> {
    let plant = model_file::load(path)?;
    let mut stdout = std::io::stdout().lock();
    write!(stdout, "{}: {}", path.display(), summary::summary(&plant))?;
    stdout.flush()?;
    Ok(ExitCode::SUCCESS)
}
