//! The command line (FORMATS.md, "The binary"). Only the file commands exist so far; `serve`,
//! `demo` and `token` arrive with the HTTP service.

use std::path::PathBuf;

use chrono::{DateTime, Utc};
use clap::{Parser, Subcommand};

#[derive(Debug, Parser)]
#[command(
    name = "loopbal",
    version,
    about = "Data reconciliation of plant recycle loops",
    long_about = None
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Validate a model file (TOML, or JSON) and print what is wrong, or a summary of it.
    CheckModel {
        /// The model file; `.json` or text starting with `{` is read as JSON, else TOML.
        model: PathBuf,
    },
    /// Reconcile every period found in a readings file and print the reports as a JSON array.
    Reconcile {
        /// The model file (TOML or JSON).
        #[arg(long, value_name = "M")]
        model: PathBuf,
        /// The readings: CSV with a header `tag,time,value[,quality]`, or JSON
        /// `{"readings": [...]}` (chosen by the `.json` extension or the content).
        #[arg(long, value_name = "R")]
        readings: PathBuf,
        /// Only periods starting at or after this RFC 3339 time.
        #[arg(long, value_name = "TIME", value_parser = parse_time)]
        period_from: Option<DateTime<Utc>>,
        /// Only periods starting before this RFC 3339 time.
        #[arg(long, value_name = "TIME", value_parser = parse_time)]
        period_to: Option<DateTime<Utc>>,
    },
}

fn parse_time(text: &str) -> Result<DateTime<Utc>, String> {
    DateTime::parse_from_rfc3339(text)
        .map(|t| t.with_timezone(&Utc))
        .map_err(|e| format!("not an RFC 3339 time such as 2026-03-02T05:00:00Z ({e})"))
}
