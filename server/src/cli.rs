//! The command line (docs/cli.md).

use std::net::SocketAddr;
use std::path::PathBuf;

use chrono::{DateTime, Utc};
use clap::{Args, Parser, Subcommand, ValueEnum};

/// The database when none is given: a SQLite file in the working directory.
pub const DEFAULT_DATABASE: &str = "loopbal.sqlite";

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
    /// Run the HTTP service.
    Serve {
        /// Address and port to listen on.
        #[arg(
            long,
            value_name = "ADDR",
            default_value = "127.0.0.1:8080",
            env = "LOOPBAL_LISTEN"
        )]
        listen: SocketAddr,
        #[command(flatten)]
        database: DatabaseArg,
        /// Largest request body accepted, in bytes (a readings batch, a model).
        #[arg(long, value_name = "BYTES", default_value_t = 64 * 1024 * 1024, env = "LOOPBAL_MAX_BODY_BYTES")]
        max_body_bytes: usize,
        /// Seconds before an unanswered request is abandoned with 408.
        #[arg(long, value_name = "SECONDS", default_value_t = 60, env = "LOOPBAL_REQUEST_TIMEOUT",
              value_parser = clap::value_parser!(u64).range(1..=3600))]
        request_timeout: u64,
        /// Seconds after a period's end before it is reconciled (late readings of the hour
        /// arrive in this time); a period whose readings change later is run again.
        #[arg(
            long,
            value_name = "SECONDS",
            default_value_t = 300,
            env = "LOOPBAL_RUN_GRACE"
        )]
        run_grace: u64,
        /// Seconds between the scheduler's looks for due periods (it also wakes on every batch
        /// that changes stored readings).
        #[arg(long, value_name = "SECONDS", default_value_t = 30, env = "LOOPBAL_RUN_TICK",
              value_parser = clap::value_parser!(u64).range(1..=86400))]
        run_tick: u64,
        /// Periods reconciled at once (default: one per core).
        #[arg(long, value_name = "N", env = "LOOPBAL_RUN_WORKERS",
              value_parser = clap::value_parser!(u64).range(1..=256))]
        run_workers: Option<u64>,
        /// Seconds a claim on a period lasts unless renewed. Instances sharing one database
        /// claim each period before running it and renew the claim while the run goes on; the
        /// periods of an instance that died are taken by another once its claims lapse.
        #[arg(long, value_name = "SECONDS", default_value_t = 60, env = "LOOPBAL_RUN_LEASE",
              value_parser = clap::value_parser!(u64).range(2..=86400))]
        run_lease: u64,
        /// This instance's name in its claims and log (the host's name by default); the
        /// process id and a random suffix are added, so names never collide.
        #[arg(long, value_name = "NAME", env = "LOOPBAL_INSTANCE_NAME")]
        instance_name: Option<String>,
    },
    /// The whole job on an invented methanol loop: a fresh database, the service, some days of
    /// simulated hourly readings posted over HTTP, a summary, then serve until Ctrl-C.
    Demo {
        /// Address and port of the demo's service (port 0: any free port).
        #[arg(long, value_name = "ADDR", default_value = "127.0.0.1:8080")]
        listen: SocketAddr,
        /// Create the demo database here (must not exist); a temporary folder by default.
        #[arg(long, value_name = "PATH")]
        database: Option<PathBuf>,
        /// Days of hourly readings to simulate.
        #[arg(long, default_value_t = 4)]
        days: usize,
        /// Seed of the simulated noise.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Stop after the summary instead of serving.
        #[arg(long)]
        no_serve: bool,
        /// Print the summary as JSON.
        #[arg(long)]
        json: bool,
    },
    /// API tokens.
    Token {
        #[command(subcommand)]
        command: TokenCommand,
    },
}

#[derive(Debug, Args)]
pub struct DatabaseArg {
    /// The database: a SQLite file path or `sqlite:` URL, created with its schema if absent;
    /// or a `postgres://` URL of an existing PostgreSQL database (its schema is created).
    #[arg(long, value_name = "URL", default_value = DEFAULT_DATABASE, env = "LOOPBAL_DATABASE_URL")]
    pub database: String,
}

#[derive(Debug, Subcommand)]
pub enum TokenCommand {
    /// Make a new token and print it once: only its hash is stored.
    Create {
        /// What the token may do: ingest (post readings), read (models, reports, figures,
        /// meters), maintain (technicians' notes), admin (everything).
        #[arg(long, value_enum)]
        role: RoleArg,
        /// Limit the token to one plant (every plant when absent).
        #[arg(long, value_name = "PLANT")]
        plant: Option<String>,
        #[command(flatten)]
        database: DatabaseArg,
    },
}

#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum RoleArg {
    Ingest,
    Read,
    Maintain,
    Admin,
}

fn parse_time(text: &str) -> Result<DateTime<Utc>, String> {
    DateTime::parse_from_rfc3339(text)
        .map(|t| t.with_timezone(&Utc))
        .map_err(|e| format!("not an RFC 3339 time such as 2026-03-02T05:00:00Z ({e})"))
}
