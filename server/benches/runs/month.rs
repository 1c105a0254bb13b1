//! The month's cases: one instance with 1, 2 and 4 workers, two instances, and one and two
//! real `loopbal serve` processes, each on a fresh database of each backend; the engine alone on
//! the same month; the backends side by side.

use std::time::{Duration, Instant};

use chrono::{DateTime, Utc};
use reconcile::solve::Measured;
use reconcile::{Plant, Reading};
use testkit::bench::{load_average as load, refuse_unless, Db};

use crate::passes::{check_runs, run_passes, tally, Pass};
use crate::processes::run_processes;
use crate::service::Service;
use crate::MONTH_HOURS;

/// A month's case: how many instances share the database, and each one's workers.
#[derive(Clone, Copy)]
pub struct Case {
    pub instances: usize,
    pub workers: usize,
    /// Real `loopbal serve` processes, not `AppState`s in this process.
    pub processes: bool,
}

impl Case {
    pub fn label(self) -> String {
        let s = |n: usize| if n == 1 { "" } else { "s" };
        if self.processes {
            format!(
                "{} × loopbal serve, {} workers",
                self.instances, self.workers
            )
        } else if self.instances == 1 {
            format!("1 instance, {} worker{}", self.workers, s(self.workers))
        } else {
            format!(
                "{} instances, {} worker{} each",
                self.instances,
                self.workers,
                s(self.workers)
            )
        }
    }
}

/// One instance with 2 workers and with 1, two instances with 2 each and 1 each, and one
/// instance with 4.
const CASES: [Case; 5] = [
    Case {
        instances: 1,
        workers: 2,
        processes: false,
    },
    Case {
        instances: 1,
        workers: 1,
        processes: false,
    },
    Case {
        instances: 2,
        workers: 2,
        processes: false,
    },
    Case {
        instances: 2,
        workers: 1,
        processes: false,
    },
    // As many runs in flight as two instances with 2 workers each, in one instance.
    Case {
        instances: 1,
        workers: 4,
        processes: false,
    },
];

pub struct MonthFigure {
    pub case: Case,
    pub posted: Duration,
    pub pass: Pass,
    pub load: String,
}

/// Every case of the month on a fresh database of `db`: the readings POSTed, then the timed
/// passes, then the counts checked.
pub async fn month_cases(
    db: Db<'_>,
    model_text: &str,
    plant_name: &str,
    start: DateTime<Utc>,
    month: &[Reading],
) -> Vec<MonthFigure> {
    println!();
    println!("   {}", db.label());
    println!(
        "   {:<28} {:>7} {:>8} {:>10} {:>10} {:>10} {:>10}  reports",
        "case", "POST s", "run s", "periods/s", "ms/period", "CPU cores", "PG cores"
    );
    let postgres = matches!(db, Db::Postgres(_));
    let mut figures = Vec::new();
    for case in CASES {
        let url = db
            .fresh(&format!("month_{}x{}", case.instances, case.workers))
            .await;
        let svc = Service::start(url, model_text, plant_name, start).await;
        let posted = svc.post(month).await;
        let dirty = svc
            .state()
            .store
            .dirty_periods(&svc.row)
            .await
            .expect("dirty")
            .len();
        refuse_unless(
            dirty == MONTH_HOURS,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("{dirty} of {MONTH_HOURS} periods marked by the POST"),
        );
        let mut states = vec![svc.state().clone()];
        for i in 1..case.instances {
            let label = format!("bench-{}", char::from(b'a' + i as u8));
            states.push(svc.other_instance(&label).await);
        }
        let load_before = load();
        let pass = run_passes(&states, &svc.row, case.workers, postgres).await;
        let load_after = load();
        refuse_unless(
            pass.ran == MONTH_HOURS,
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("the instances ran {} of {MONTH_HOURS} periods", pass.ran),
        );
        let (statuses, failed) = check_runs(&svc, start, MONTH_HOURS).await;
        let split = if case.instances > 1 {
            format!(
                "; periods per instance {} in {} round(s)",
                pass.each
                    .iter()
                    .map(usize::to_string)
                    .collect::<Vec<_>>()
                    .join(" + "),
                pass.rounds
            )
        } else {
            String::new()
        };
        for other in &states[1..] {
            other.store.close().await;
        }
        svc.stop().await;
        let figure = MonthFigure {
            case,
            posted,
            pass,
            load: load_before,
        };
        print_row(&figure, &statuses, failed, &split, &load_after);
        figures.push(figure);
    }
    for instances in [1, 2] {
        let case = Case {
            instances,
            workers: 2,
            processes: true,
        };
        let url = db.fresh(&format!("procs_{instances}x2")).await;
        let svc = Service::start(url, model_text, plant_name, start).await;
        let posted = svc.post(month).await;
        let load_before = load();
        let (pass, logs) = run_processes(&svc, case, postgres).await;
        let load_after = load();
        let (statuses, failed) = check_runs(&svc, start, MONTH_HOURS).await;
        svc.stop().await;
        let figure = MonthFigure {
            case,
            posted,
            pass,
            load: load_before,
        };
        let detail = format!("; runs logged per process {logs}");
        print_row(&figure, &statuses, failed, &detail, &load_after);
        figures.push(figure);
    }
    figures
}

/// A case's row of the month's table: its times, rates and CPU, the reports' statuses, and
/// `detail` (how the periods were shared out) before the load average.
fn print_row(
    f: &MonthFigure,
    statuses: &[(String, usize)],
    failed: usize,
    detail: &str,
    load_after: &str,
) {
    let pass = &f.pass;
    println!(
        "   {:<28} {:>7.2} {:>8.2} {:>10.0} {:>10.2} {:>10} {:>10}  {} (global test failed in {failed}){detail}; load {} -> {load_after}",
        f.case.label(),
        f.posted.as_secs_f64(),
        pass.wall.as_secs_f64(),
        pass.rate(),
        1e3 * pass.wall.as_secs_f64() / pass.ran as f64,
        pass.cores(),
        pass.server_cores(),
        tally(statuses),
        f.load,
    );
}

/// The engine's share of a run, without the service: for each period, the report
/// (`reconcile_period`) and the second estimate whose adjustment covariance gives the meter
/// health correlations, as `schedule::run_period` does, one period after another on this
/// thread. Returns the wall time.
fn engine_only(plant: &Plant, readings: &[Reading]) -> (usize, Duration) {
    let inputs = reconcile::group_readings(plant, readings);
    let t = Instant::now();
    for input in &inputs {
        let report = reconcile::reconcile_period(plant, input);
        std::hint::black_box(&report);
        let measured: Vec<Measured> = input
            .values
            .iter()
            .filter(|v| v.value.is_finite())
            .filter_map(|v| {
                let sigma = plant.meters[v.meter].sigma_for(v.value)?;
                Some(Measured {
                    meter: v.meter,
                    value: v.value,
                    sigma,
                })
            })
            .collect();
        let estimate = reconcile::estimate(plant, measured);
        std::hint::black_box(estimate.classification.scaled_adjustment_covariance());
    }
    (inputs.len(), t.elapsed())
}

/// The month's cases of every backend measured, side by side.
pub fn print_side_by_side(months: &[(&str, Vec<MonthFigure>)]) {
    println!();
    println!("month side by side: run_due wall time (periods/s; process CPU cores + PostgreSQL server cores)");
    print!("   {:<28}", "case");
    for (label, _) in months {
        print!(" {label:>36}");
    }
    println!();
    for (i, case) in months[0].1.iter().map(|f| f.case).enumerate() {
        print!("   {:<28}", case.label());
        for (_, figures) in months {
            let f = &figures[i];
            let cell = format!(
                "{:.2} s ({:.0}/s; {} + {})",
                f.pass.wall.as_secs_f64(),
                f.pass.rate(),
                f.pass.cores(),
                f.pass.server_cores()
            );
            print!(" {cell:>36}");
        }
        println!();
    }
    for (label, figures) in months {
        let one = figures[0].pass.wall.as_secs_f64();
        let two = figures[2].pass.wall.as_secs_f64();
        println!(
            "   {label}: two instances × 2 workers take {:.2}× the time of one instance × 2 workers (POST {:.2} s; load at the cases' starts {})",
            two / one,
            figures[0].posted.as_secs_f64(),
            figures.iter().map(|f| f.load.as_str()).collect::<Vec<_>>().join(" | ")
        );
        if let (Some(one), Some(two)) = (figures.get(5), figures.get(6)) {
            println!(
                "   {label}: two loopbal serve processes take {:.2}× the time of one",
                two.pass.wall.as_secs_f64() / one.pass.wall.as_secs_f64()
            );
        }
    }
}

/// The engine alone on the month's readings ([`engine_only`]), timed and printed.
pub fn engine_alone(plant: &Plant, month: &[Reading]) {
    let load_before = load();
    let (periods, engine) = engine_only(plant, month);
    refuse_unless(
        periods == MONTH_HOURS,
        "reconcile/tests/simulator.rs hourly_readings_group_into_one_period_an_hour",
        || format!("{periods} period inputs for {MONTH_HOURS} hours"),
    );
    println!(
        "engine only (no service, no store, one thread): {:.2} s, {:.2} ms/period; load {load_before} -> {}",
        engine.as_secs_f64(),
        1e3 * engine.as_secs_f64() / periods as f64,
        load()
    );
}
