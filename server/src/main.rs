//! The `loopbal` binary. This is the edge: commands return `anyhow` errors, and this file turns
//! them into the exit status of docs/cli.md (0 success, 1 failed run, 2 bad input) with the
//! message on stderr.

use std::io::Write;
use std::process::ExitCode;

use clap::Parser;

use loopbal_server::cli::{Cli, Command, RoleArg, TokenCommand};
use loopbal_server::{api, model_file, run, serve, store, summary, BadInput};

fn main() -> ExitCode {
    let cli = Cli::parse();
    let result = match &cli.command {
        Command::CheckModel { model } => check_model(model),
        Command::Reconcile {
            model,
            readings,
            period_from,
            period_to,
            timing,
        } => run::reconcile(&run::Options {
            model,
            readings,
            from: *period_from,
            to: *period_to,
            timing: *timing,
        }),
        Command::WhatIf {
            model,
            readings,
            period,
            period_from,
            period_to,
            set,
            sweep,
            free,
            hold_reactions,
            format,
            price,
            loss_value,
            recycle_cost,
            max_inlet_fraction,
            purge_range,
        } => loopbal_server::what_if::what_if(&loopbal_server::what_if::Options {
            model,
            readings,
            period: *period,
            range: (period_from.is_some() || period_to.is_some())
                .then_some((*period_from, *period_to)),
            set,
            sweep: sweep.as_deref(),
            free: free.as_deref(),
            hold: *hold_reactions,
            format: *format,
            price,
            loss_value,
            recycle_cost: *recycle_cost,
            max_inlet_fraction: max_inlet_fraction.as_deref(),
            purge_range,
        }),
        Command::MeterValue {
            model,
            readings,
            period,
            figure,
            add_best,
            flow_sigma_pct,
            flow_sigma,
            analyser_sigma,
        } => loopbal_server::meter_value::meter_value(&loopbal_server::meter_value::Options {
            model,
            readings,
            period: *period,
            figures: figure,
            add_best: *add_best,
            flow_sigma_pct: *flow_sigma_pct,
            flow_sigma: *flow_sigma,
            analyser_sigma: *analyser_sigma,
        }),
        Command::Serve {
            listen,
            database,
            max_body_bytes,
            request_timeout,
            header_timeout,
            body_idle_timeout,
            min_body_rate,
            body_rate_grace,
            run_grace,
            run_tick,
            run_workers,
            run_timeout,
            run_lease,
            health_window,
            instance_name,
        } => {
            serve::init_tracing();
            runtime()
                .and_then(|rt| {
                    rt.block_on(serve::serve(serve::Options {
                        listen: *listen,
                        database: database.database.clone(),
                        limits: api::Limits {
                            max_body_bytes: *max_body_bytes,
                            request_timeout: std::time::Duration::from_secs(*request_timeout),
                            header_timeout: std::time::Duration::from_secs(*header_timeout),
                            body_idle_timeout: std::time::Duration::from_secs(*body_idle_timeout),
                            min_body_rate: *min_body_rate,
                            body_rate_grace: std::time::Duration::from_secs(*body_rate_grace),
                        },
                        schedule: loopbal_server::schedule::Schedule {
                            grace: std::time::Duration::from_secs(*run_grace),
                            tick: std::time::Duration::from_secs(*run_tick),
                            workers: run_workers
                                .map_or_else(loopbal_server::schedule::default_workers, |n| {
                                    n as usize
                                }),
                        },
                        run_limit: run_timeout.map_or(
                            loopbal_server::run_limit::RunLimit::PerModel,
                            |seconds| {
                                loopbal_server::run_limit::RunLimit::Fixed(
                                    std::time::Duration::from_secs(seconds),
                                )
                            },
                        ),
                        claimant: loopbal_server::schedule::Claimant {
                            instance: loopbal_server::schedule::instance_name(
                                instance_name.as_deref(),
                            ),
                            lease: std::time::Duration::from_secs(*run_lease),
                        },
                        health_window: chrono::TimeDelta::days((*health_window).into()),
                    }))
                })
                .map(|()| ExitCode::SUCCESS)
        }
        Command::Demo {
            listen,
            database,
            days,
            seed,
            no_serve,
            json,
        } => {
            // Quiet unless asked: the summary is the output.
            if std::env::var_os("RUST_LOG").is_none() {
                std::env::set_var("RUST_LOG", "warn");
            }
            serve::init_tracing();
            runtime()
                .and_then(|rt| {
                    rt.block_on(loopbal_server::demo::run(loopbal_server::demo::Options {
                        listen: *listen,
                        database: database.clone(),
                        days: *days,
                        seed: *seed,
                        serve: !*no_serve,
                        json: *json,
                    }))
                })
                .map(|()| ExitCode::SUCCESS)
        }
        Command::Token {
            command:
                TokenCommand::Create {
                    role,
                    plant,
                    database,
                },
        } => token_create(*role, plant.as_deref(), &database.database),
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

fn runtime() -> anyhow::Result<tokio::runtime::Runtime> {
    Ok(tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()?)
}

fn token_create(role: RoleArg, plant: Option<&str>, database: &str) -> anyhow::Result<ExitCode> {
    use store::Role;
    let role = match role {
        RoleArg::Ingest => Role::Ingest,
        RoleArg::Read => Role::Read,
        RoleArg::Maintain => Role::Maintain,
        RoleArg::Admin => Role::Admin,
    };
    if let Some(p) = plant {
        api::check_plant_name(p).map_err(|e| BadInput::new(format!("--plant: {}", e.detail)))?;
    }
    let made = runtime()?.block_on(async {
        let store = store::Store::open(database).await?;
        let made = store.create_token(role, plant).await;
        store.close().await;
        made
    })?;
    // The token on stdout alone, so `TOKEN=$(loopbal token create ...)` works; the rest on
    // stderr.
    println!("{}", made.token);
    let scope = plant.map_or("every plant".to_string(), |p| format!("plant {p}"));
    eprintln!(
        "token {} with role {} for {scope} stored (hashed) in {}; this is the only time it is shown",
        made.id, made.role, store::redacted(database)
    );
    Ok(ExitCode::SUCCESS)
}
