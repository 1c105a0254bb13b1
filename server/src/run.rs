//! `loopbal reconcile`: the engine on files, no server. Reads the model and the readings,
//! runs every period found as the service does (`period_run`), and prints the reports as one
//! JSON array.

use std::collections::BTreeMap;
use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context;
use chrono::{DateTime, Utc};
use reconcile::{Report, ReportStatus};

use crate::period_run::{self, PeriodReading};
use crate::readings::{self, ReadingsError};
use crate::BadInput;

/// A model file stands alone: its runs are of revision 1, as the service numbers a plant's
/// first model.
const FILE_REVISION: i64 = 1;

/// Longest listing of replaced readings; a file that repeats itself says so in a few lines.
const MAX_LISTED: usize = 50;

pub struct Options<'a> {
    pub model: &'a Path,
    pub readings: &'a Path,
    pub from: Option<DateTime<Utc>>,
    pub to: Option<DateTime<Utc>>,
    /// Write each period's engine wall time to standard error (`--timing`).
    pub timing: bool,
}

/// The readings of a file grouped by the periods of `plant`.
pub fn file_periods(
    plant: &reconcile::Plant,
    path: &Path,
) -> anyhow::Result<BTreeMap<DateTime<Utc>, Vec<PeriodReading>>> {
    let file = path.display();
    let bytes =
        std::fs::read(path).map_err(|e| BadInput::new(format!("{file}: cannot read: {e}")))?;
    let format = readings::detect(path, &bytes);
    let parsed = readings::parse(&bytes, format, plant).map_err(|e| describe(&file, e))?;
    Ok(period_run::by_period(plant, parsed.readings))
}

/// One period of a file's: the one containing `at`, else the last. `purpose` says what it is
/// for in the refusal (`the base case`).
pub fn one_period(
    plant: &reconcile::Plant,
    path: &Path,
    at: Option<DateTime<Utc>>,
    purpose: &str,
) -> anyhow::Result<(DateTime<Utc>, Vec<PeriodReading>)> {
    let file = path.display();
    let mut periods = file_periods(plant, path)?;
    let picked = match at {
        Some(t) => {
            let start = reconcile::period::period_start(t, plant.period_seconds);
            periods.remove(&start).map(|r| (start, r)).ok_or_else(|| {
                BadInput::new(format!(
                    "--period: {file} has no readings in the period starting {}",
                    start.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
                ))
            })?
        }
        None => periods
            .pop_last()
            .ok_or_else(|| BadInput::new(format!("{file}: no readings, so no {purpose}")))?,
    };
    Ok(picked)
}

pub fn reconcile(opts: &Options) -> anyhow::Result<ExitCode> {
    let plant = crate::model_file::load(opts.model)?;
    let file = opts.readings.display();
    let bytes = std::fs::read(opts.readings)
        .map_err(|e| BadInput::new(format!("{file}: cannot read: {e}")))?;
    let format = readings::detect(opts.readings, &bytes);
    let parsed = readings::parse(&bytes, format, &plant).map_err(|e| describe(&file, e))?;

    let mut stderr = std::io::stderr().lock();
    for (n, r) in parsed.replaced.iter().enumerate() {
        if n == MAX_LISTED {
            let _ = writeln!(
                stderr,
                "note: {file}: {} more replaced reading(s)",
                parsed.replaced.len() - MAX_LISTED
            );
            break;
        }
        let _ = writeln!(
            stderr,
            "note: {file}: {} replaces {} (same tag and time; the later one counts)",
            r.later, r.earlier
        );
    }
    if parsed.readings.is_empty() {
        let _ = writeln!(stderr, "note: {file}: no readings, so no periods");
    }

    // The service's run of a period, on the periods of the file: the same screens and
    // warnings as the scheduler's, so the same readings give the same report.
    let periods = period_run::by_period(&plant, parsed.readings)
        .into_iter()
        .filter(|(start, _)| opts.from.is_none_or(|from| *start >= from))
        .filter(|(start, _)| opts.to.is_none_or(|to| *start < to));
    let mut reports: Vec<Report> = Vec::new();
    let mut crashed = Vec::new();
    let mut timings = Vec::new();
    let mut prepared = reconcile::Prepared::new(&plant);
    for (start, readings) in periods {
        // The engine promises not to panic; should it break that promise on some input, the
        // other periods are still reported and the run fails (exit 1) instead of aborting.
        // Files carry no technicians' notes, so no meter is left out; a command on files has
        // no time limit, so a run always finishes.
        // The file is one revision: its periods share one `Prepared`.
        let never = reconcile::Cancel::never();
        let run = std::panic::AssertUnwindSafe(|| {
            period_run::run_period_prepared(
                &plant,
                &mut prepared,
                FILE_REVISION,
                start,
                readings,
                Vec::new(),
                &never,
            )
        });
        let began = std::time::Instant::now();
        let outcome = std::panic::catch_unwind(run);
        timings.push((start, began.elapsed()));
        match outcome {
            Ok(Ok(run)) => reports.push(run.report),
            Ok(Err(reconcile::Cancelled)) => crashed.push(start),
            Err(_) => {
                // A panic may have left it half-updated: the next period prepares afresh.
                prepared = reconcile::Prepared::new(&plant);
                crashed.push(start);
            }
        }
    }
    // Written after the runs, so that writing them is not timed (bench/peer/ reads them).
    if opts.timing {
        for (start, elapsed) in &timings {
            let _ = writeln!(
                stderr,
                "timing: {} {:.9} s",
                start.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
                elapsed.as_secs_f64()
            );
        }
    }

    let mut stdout = std::io::stdout().lock();
    serde_json::to_writer_pretty(&mut stdout, &reports)
        .map_err(anyhow::Error::from)
        .and_then(|()| writeln!(stdout).map_err(anyhow::Error::from))
        .and_then(|()| stdout.flush().map_err(anyhow::Error::from))
        .context("cannot write the reports to standard output")?;

    // A period the engine could not reconcile is a failed run, not bad input: the reports
    // are all printed so the user sees which periods and why.
    let failed: Vec<&Report> = reports
        .iter()
        .filter(|r| {
            matches!(
                r.status,
                ReportStatus::NotConverged | ReportStatus::Infeasible
            )
        })
        .collect();
    for r in &failed {
        let _ = writeln!(
            stderr,
            "{file}: period {} was not reconciled: status {} (see its warnings)",
            r.period_start, r.status
        );
    }
    for start in &crashed {
        let _ = writeln!(
            stderr,
            "{file}: period {}: the engine failed (a bug); no report",
            start.to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
        );
    }
    Ok(if failed.is_empty() && crashed.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

pub(crate) fn describe(file: &dyn std::fmt::Display, error: ReadingsError) -> BadInput {
    match error {
        ReadingsError::File(message) => BadInput::new(format!("{file}: {message}")),
        // A file wrong throughout says so in a few lines: the first bad readings (the list
        // holds at most readings::MAX_LISTED_BAD), then the count.
        ReadingsError::Bad(bad) => {
            let mut lines: Vec<String> =
                bad.listed.iter().map(|b| format!("{file}: {b}")).collect();
            if bad.total > bad.listed.len() {
                lines.push(format!(
                    "{file}: {} more bad reading(s) not listed",
                    bad.total - bad.listed.len()
                ));
            }
            lines.push(format!(
                "{file}: {} bad reading(s); nothing was reconciled",
                bad.total
            ));
            BadInput::lines(lines)
        }
    }
}
