//! The service in-process on a fresh database with the Vantle model PUT, the readings POSTed
//! to it, another instance on the same database, and what the bench counts in that database.

use std::time::{Duration, Instant};

use chrono::{DateTime, Utc};
use loopbal_server::api::{AppState, Limits};
use loopbal_server::schedule::{self, Claimant};
use loopbal_server::store::{PlantRow, Store};
use reconcile::simulate::{self, ReadingPlan};
use reconcile::{Plant, Reading};
use sqlx::Connection;
use testkit::bench::{csv_batch, refuse_unless, InProcess};

use crate::{BATCH, LEASE};

/// The service in-process on a fresh database (a SQLite file or a scratch PostgreSQL database),
/// claiming periods as instance `bench-a`: an admin token, the router on 127.0.0.1:0, and the
/// Vantle model PUT in effect from `from`.
pub struct Service {
    pub served: InProcess,
    pub row: PlantRow,
    /// The database's URL (a file path for SQLite).
    pub url: String,
}

/// A claimant for the bench's instance `label`.
fn claimant(label: &str) -> Claimant {
    Claimant {
        instance: schedule::instance_name(Some(label)),
        lease: LEASE,
    }
}

impl Service {
    pub async fn start(url: String, model_text: &str, plant: &str, from: DateTime<Utc>) -> Service {
        let store = Store::open(&url).await.expect("open store");
        let state =
            AppState::new(store.clone(), Limits::default()).with_claimant(claimant("bench-a"));
        let served = InProcess::start(state, model_text, plant, Some(from)).await;
        let row = store
            .plant(plant)
            .await
            .expect("plant")
            .expect("the PUT created the plant");
        Service { served, row, url }
    }

    /// The service's state (its store, its claimant).
    pub fn state(&self) -> &AppState {
        &self.served.state
    }

    /// POST the readings as CSV batches of BATCH; every one must be new.
    pub async fn post(&self, readings: &[Reading]) -> Duration {
        let bodies: Vec<(usize, String)> = readings
            .chunks(BATCH)
            .map(|b| (b.len(), csv_batch(b)))
            .collect();
        let t = Instant::now();
        for (n, body) in bodies {
            let (status, text) = self.served.post_csv(body).await;
            let answer: serde_json::Value = serde_json::from_str(&text).unwrap_or_default();
            refuse_unless(
                status.is_success() && answer["accepted"].as_u64() == Some(n as u64),
                "tests/api/readings.rs a_historians_life",
                || format!("POST readings answered {status}, not every reading new: {text}"),
            );
        }
        t.elapsed()
    }

    pub async fn stop(self) {
        self.served.stop().await;
    }

    /// Another instance on the same database: its own `Store::open` (its own connection pool)
    /// and its own claimant, no HTTP.
    pub async fn other_instance(&self, label: &str) -> AppState {
        let store = Store::open(&self.url).await.expect("open store again");
        AppState::new(store, Limits::default()).with_claimant(claimant(label))
    }

    /// Every run stored for the plant, counted in SQL on a connection of its own.
    pub async fn total_runs(&self) -> i64 {
        let sql = "SELECT COUNT(*) FROM runs WHERE plant_id = ";
        if self.url.starts_with("postgres") {
            let mut c = sqlx::PgConnection::connect(&self.url)
                .await
                .expect("connect");
            let n = sqlx::query_scalar(&format!("{sql}$1"))
                .bind(self.row.id)
                .fetch_one(&mut c)
                .await
                .expect("count runs");
            let _ = c.close().await;
            n
        } else {
            let options = sqlx::sqlite::SqliteConnectOptions::new().filename(&self.url);
            let mut c = sqlx::SqliteConnection::connect_with(&options)
                .await
                .expect("connect");
            let n = sqlx::query_scalar(&format!("{sql}?"))
                .bind(self.row.id)
                .fetch_one(&mut c)
                .await
                .expect("count runs");
            let _ = c.close().await;
            n
        }
    }

    /// The SQLite file with its WAL and shared memory.
    pub fn db_bytes(&self) -> u64 {
        let mut total = 0;
        for suffix in ["", "-wal", "-shm"] {
            let mut p = std::ffi::OsString::from(&self.url);
            p.push(suffix);
            total += std::fs::metadata(&p).map_or(0, |m| m.len());
        }
        total
    }
}

/// Noisy readings of the true state z for `hours` hours from `start`.
pub fn readings(
    plant: &Plant,
    z: &[f64],
    start: DateTime<Utc>,
    hours: usize,
    per_hour: usize,
    seed: u64,
) -> Vec<Reading> {
    simulate::readings(
        plant,
        z,
        &ReadingPlan {
            start,
            hours,
            per_hour,
            seed,
            faults: Vec::new(),
        },
    )
}
