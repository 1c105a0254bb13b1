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
        /// Write the engine's wall time of each period (the whole analysis, reading the file
        /// and printing excluded) to standard error, one line `timing: PERIOD SECONDS s` each.
        #[arg(long)]
        timing: bool,
    },
    /// The loop's new steady state after a change (a purge split, a feed, a conversion, a
    /// target inlet fraction), from the reconciled base case of one period, every value with
    /// σ carried from the base case; JSON on stdout (docs/what-if.md).
    WhatIf {
        /// The model file (TOML or JSON).
        #[arg(long, value_name = "M")]
        model: PathBuf,
        /// The readings file (CSV or JSON, as for `reconcile`).
        #[arg(long, value_name = "R")]
        readings: PathBuf,
        /// The base case: the period containing this RFC 3339 time (default: the last period
        /// in R).
        #[arg(long, value_name = "T", value_parser = parse_time)]
        period: Option<DateTime<Utc>>,
        /// A range as the base case instead: the periods starting at or after this time, their
        /// calibrated values combined by their covariance.
        #[arg(long, value_name = "TIME", value_parser = parse_time, conflicts_with = "period")]
        period_from: Option<DateTime<Utc>>,
        /// A range as the base case: the periods starting before this time.
        #[arg(long, value_name = "TIME", value_parser = parse_time, conflicts_with = "period")]
        period_to: Option<DateTime<Utc>>,
        /// A setting, repeatable: split:STREAM=FRACTION, feed:STREAM=KMOL_PER_H,
        /// conversion:REACTION=FRACTION, inlet_fraction:UNIT:COMPONENT=FRACTION (a target
        /// reached by moving the purge split).
        #[arg(long = "set", value_name = "NAME=VALUE")]
        set: Vec<String>,
        /// A sweep of one setting: NAME=FROM..TO:N (N points, ends included, at most 1000).
        #[arg(long, value_name = "NAME=FROM..TO:N")]
        sweep: Option<String>,
        /// The splitter outlet that moves to reach a target or the optimum, split:STREAM
        /// (default: the one splitter outlet that leaves the plant).
        #[arg(long, value_name = "split:STREAM")]
        free: Option<String>,
        /// What each reaction is held at: its single-pass conversion of the key reactant, or
        /// its extent.
        #[arg(long, value_enum, default_value = "conversion")]
        hold_reactions: crate::what_if::HoldArg,
        /// Output: json (default), csv (one line per point and figure or stream) or text.
        #[arg(long, value_enum, default_value = "json")]
        format: crate::what_if::Format,
        /// For the optimum: price per kmol of a product component made, COMPONENT=VALUE
        /// (repeatable).
        #[arg(long = "price", value_name = "COMPONENT=VALUE")]
        price: Vec<String>,
        /// For the optimum: value per kmol of a reactant lost in the purge, COMPONENT=VALUE
        /// (repeatable).
        #[arg(long = "loss-value", value_name = "COMPONENT=VALUE")]
        loss_value: Vec<String>,
        /// For the optimum: cost per kmol of recycle (a compression proxy).
        #[arg(long, value_name = "VALUE")]
        recycle_cost: Option<f64>,
        /// For the optimum: an upper limit on a mole fraction at a reactor inlet,
        /// UNIT:COMPONENT=MAX.
        #[arg(long, value_name = "UNIT:COMPONENT=MAX")]
        max_inlet_fraction: Option<String>,
        /// For the optimum: the purge split range searched, LO..HI.
        #[arg(long, value_name = "LO..HI", default_value = "0.001..0.5")]
        purge_range: String,
    },
    /// What each meter is worth to a figure (its σ with the meter's σ halved, and without
    /// it) and which new meter would help it most, for one period; JSON on stdout
    /// (docs/meter-value.md).
    MeterValue {
        /// The model file (TOML or JSON).
        #[arg(long, value_name = "M")]
        model: PathBuf,
        /// The readings file (CSV or JSON, as for `reconcile`).
        #[arg(long, value_name = "R")]
        readings: PathBuf,
        /// The period containing this RFC 3339 time (default: the last period in R).
        #[arg(long, value_name = "T", value_parser = parse_time)]
        period: Option<DateTime<Utc>>,
        /// The figure, NAME:SUBJECT: a loop figure as a report names it, or molar_flow:STREAM,
        /// component_flow:STREAM:COMPONENT, split_fraction:STREAM. Repeatable, with an
        /// optional =WEIGHT, for the set the best additions are chosen for; the meters and
        /// candidates are valued for the first.
        #[arg(long = "figure", value_name = "NAME:SUBJECT", required = true)]
        figure: Vec<String>,
        /// Choose the best K new meters together (every subset when few enough, else greedy).
        #[arg(long, value_name = "K")]
        add_best: Option<usize>,
        /// A candidate flow meter's σ, percent of reading (default 1).
        #[arg(long, value_name = "PCT")]
        flow_sigma_pct: Option<f64>,
        /// A candidate flow meter's σ in kmol/h, instead of the percentage.
        #[arg(long, value_name = "KMOL_PER_H")]
        flow_sigma: Option<f64>,
        /// A candidate analyser's σ, mol % (default 0.2).
        #[arg(long, value_name = "MOL_PCT")]
        analyser_sigma: Option<f64>,
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
        /// Seconds a client has to send a request's line and headers, from the moment the
        /// connection is ready for a request (so also how long a kept-alive connection may sit
        /// idle); a client that has not is disconnected.
        #[arg(long, value_name = "SECONDS", default_value_t = 10, env = "LOOPBAL_HEADER_TIMEOUT",
              value_parser = clap::value_parser!(u64).range(1..=3600))]
        header_timeout: u64,
        /// Seconds a request body may go without a byte before the request is abandoned with
        /// 408.
        #[arg(long, value_name = "SECONDS", default_value_t = 10, env = "LOOPBAL_BODY_IDLE_TIMEOUT",
              value_parser = clap::value_parser!(u64).range(1..=3600))]
        body_idle_timeout: u64,
        /// Least average rate of a request body, in bytes a second, once --body-rate-grace has
        /// passed; a slower body is abandoned with 408. 0 turns this rule off.
        #[arg(
            long,
            value_name = "BYTES",
            default_value_t = 1024,
            env = "LOOPBAL_MIN_BODY_RATE"
        )]
        min_body_rate: u64,
        /// Seconds a request body may take before its average rate is held to
        /// --min-body-rate.
        #[arg(long, value_name = "SECONDS", default_value_t = 5, env = "LOOPBAL_BODY_RATE_GRACE",
              value_parser = clap::value_parser!(u64).range(0..=3600))]
        body_rate_grace: u64,
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
        /// Seconds a period run may take before it is abandoned (1 to 86400): its claim is
        /// given up, the period is listed as failed with the reason and retried after a
        /// backoff (a minute, doubling to an hour), and the other periods go on. Default: by
        /// the model, 3 s per 100 states and at least 5 s.
        #[arg(long, value_name = "SECONDS", env = "LOOPBAL_RUN_TIMEOUT",
              value_parser = clap::value_parser!(u64).range(1..=86400))]
        run_timeout: Option<u64>,
        /// Seconds a claim on a period lasts unless renewed. Instances sharing one database
        /// claim each period before running it and renew the claim while the run goes on; the
        /// periods of an instance that died are taken by another once its claims lapse.
        #[arg(long, value_name = "SECONDS", default_value_t = 60, env = "LOOPBAL_RUN_LEASE",
              value_parser = clap::value_parser!(u64).range(2..=86400))]
        run_lease: u64,
        /// Days of history meter health looks back from the plant's latest period (1 to
        /// 36500): the CUSUM, the pooled bias and the counts cover the periods since the
        /// meter's last recalibration or replacement, or this many days, whichever is shorter.
        #[arg(long, value_name = "DAYS", default_value_t = 90, env = "LOOPBAL_HEALTH_WINDOW",
              value_parser = clap::value_parser!(u32).range(1..=36500))]
        health_window: u32,
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
    crate::readings::instant(text)
}
