//! The month run by real `loopbal serve` processes of this build on the in-process service's
//! database.

use std::time::{Duration, Instant};

use testkit::bench::{cpu_seconds_of, refuse_unless};

use crate::month::Case;
use crate::passes::{postgres_cpu_seconds, Pass};
use crate::service::Service;
use crate::{MONTH_HOURS, RUN_DUE_LIMIT};

/// A `loopbal serve` child, killed if still running when dropped (a failed bench leaves none).
struct Child {
    child: std::process::Child,
    log: std::path::PathBuf,
}

impl Drop for Child {
    fn drop(&mut self) {
        if matches!(self.child.try_wait(), Ok(None)) {
            let _ = self.child.kill();
            let _ = self.child.wait();
        }
    }
}

/// The month run by `case.instances` real `loopbal serve` processes (the binary of this build,
/// `--run-grace 0 --run-tick 1 --run-workers W`, each its own `--instance-name`) on the
/// service's database, which has every period dirty: timed from their start until no dirty
/// mark is left (polled every 20 ms by the in-process service's store, which runs nothing),
/// then stopped with SIGTERM. CPU is the processes' own. Answers the pass and how many
/// "period run" lines each process logged.
pub async fn run_processes(svc: &Service, case: Case, postgres: bool) -> (Pass, String) {
    let dir = tempfile::tempdir().expect("temporary directory");
    let server0 = postgres.then(postgres_cpu_seconds).flatten();
    let t = Instant::now();
    let mut children = Vec::new();
    for i in 0..case.instances {
        let log = dir.path().join(format!("serve-{i}.log"));
        let child = std::process::Command::new(env!("CARGO_BIN_EXE_loopbal"))
            .args(["serve", "--listen", "127.0.0.1:0", "--database", &svc.url])
            .args(["--run-grace", "0", "--run-tick", "1", "--run-workers"])
            .arg(case.workers.to_string())
            .arg("--instance-name")
            .arg(format!("bench-proc-{i}"))
            .env_remove("RUST_LOG")
            .stdout(std::process::Stdio::null())
            .stderr(std::fs::File::create(&log).expect("log file"))
            .spawn()
            .expect("start loopbal serve");
        children.push(Child { child, log });
    }
    let mut cpu = Some(0.0);
    loop {
        assert!(
            t.elapsed() < RUN_DUE_LIMIT,
            "the processes did not run the month within {RUN_DUE_LIMIT:?}"
        );
        for c in &mut children {
            if let Ok(Some(status)) = c.child.try_wait() {
                panic!(
                    "loopbal serve exited ({status}): {}",
                    std::fs::read_to_string(&c.log).unwrap_or_default()
                );
            }
        }
        let dirty = svc
            .state()
            .store
            .dirty_periods(&svc.row)
            .await
            .expect("dirty periods");
        if dirty.is_empty() {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let wall = t.elapsed();
    for c in &children {
        cpu = cpu.zip(cpu_seconds_of(c.child.id())).map(|(a, b)| a + b);
    }
    let server_cpu = postgres
        .then(postgres_cpu_seconds)
        .flatten()
        .zip(server0)
        .map(|(b, a)| b - a);
    let mut logged = Vec::new();
    for mut c in children {
        let _ = std::process::Command::new("kill")
            .args(["-TERM", &c.child.id().to_string()])
            .status();
        let stop = Instant::now();
        while matches!(c.child.try_wait(), Ok(None)) && stop.elapsed() < Duration::from_secs(10) {
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
        let log = std::fs::read_to_string(&c.log).unwrap_or_default();
        refuse_unless(
            !log.contains("ERROR"),
            "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
            || format!("the log has an error: {log}"),
        );
        logged.push(log.lines().filter(|l| l.contains("period run")).count());
        drop(c);
    }
    let ran = logged.iter().sum();
    refuse_unless(
        ran == MONTH_HOURS,
        "tests/reliability/runs.rs two_live_instances_run_every_period_exactly_once",
        || format!("the processes logged {ran} runs for {MONTH_HOURS} periods"),
    );
    let pass = Pass {
        ran,
        each: logged.clone(),
        rounds: 1,
        wall,
        cpu,
        server_cpu,
    };
    let logs = logged
        .iter()
        .map(usize::to_string)
        .collect::<Vec<_>>()
        .join(" + ");
    (pass, logs)
}
