//! `loopbal reconcile`: the engine on files, no server. Reads the model and the readings,
//! reconciles every period found, and prints the reports as one JSON array.

use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use anyhow::Context;
use chrono::{DateTime, Utc};
use reconcile::{Report, ReportStatus};

use crate::readings::{self, ReadingsError};
use crate::BadInput;

/// Longest listing of bad readings; a file that is wrong throughout says so in a few lines.
const MAX_LISTED: usize = 50;

pub struct Options<'a> {
    pub model: &'a Path,
    pub readings: &'a Path,
    pub from: Option<DateTime<Utc>>,
    pub to: Option<DateTime<Utc>>,
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

    let periods = reconcile::group_readings(&plant, &parsed.readings)
        .into_iter()
        .filter(|p| opts.from.is_none_or(|from| p.start >= from))
        .filter(|p| opts.to.is_none_or(|to| p.start < to));
    let mut reports: Vec<Report> = Vec::new();
    let mut crashed = Vec::new();
    for period in periods {
        // The engine promises not to panic; should it break that promise on some input, the
        // other periods are still reported and the run fails (exit 1) instead of aborting.
        match std::panic::catch_unwind(|| reconcile::reconcile_period(&plant, &period)) {
            Ok(report) => reports.push(report),
            Err(_) => crashed.push(period.start),
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
            r.period_start,
            serde_json::to_value(r.status)
                .ok()
                .and_then(|v| v.as_str().map(str::to_string))
                .unwrap_or_default()
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

fn describe(file: &dyn std::fmt::Display, error: ReadingsError) -> BadInput {
    match error {
        ReadingsError::File(message) => BadInput::new(format!("{file}: {message}")),
        ReadingsError::Bad(bad) => {
            let mut lines: Vec<String> = bad
                .iter()
                .take(MAX_LISTED)
                .map(|b| format!("{file}: {b}"))
                .collect();
            if bad.len() > MAX_LISTED {
                lines.push(format!(
                    "{file}: {} more bad reading(s) not listed",
                    bad.len() - MAX_LISTED
                ));
            }
            lines.push(format!(
                "{file}: {} bad reading(s); nothing was reconciled",
                bad.len()
            ));
            BadInput::lines(lines)
        }
    }
}
