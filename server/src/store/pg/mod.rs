//! The PostgreSQL backend: the same methods as the SQLite one, group by group in the modules
//! beside this one (`plants`, `readings`, `tokens`, `runs`, `meters`), on the schema of
//! migrations/postgres/, which is kept equivalent to the SQLite schema.
//!
//! Instants are BIGINT milliseconds as in SQLite; SQL is written only with bound parameters
//! (`$n`). Batches go to the server as arrays (`UNNEST`), one statement for many rows.

use sqlx::postgres::{PgConnection, PgPool, PgPoolOptions};

use super::{PlantRow, Result, StoreError};

mod claims;
mod meters;
mod plants;
mod readings;
mod runs;
mod tokens;

/// The PostgreSQL schema, embedded in the binary and applied at start-up. sqlx reads only the
/// files directly in a migration folder, so the SQLite migrator never sees this subfolder.
pub(super) static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("../migrations/postgres");

/// PostgreSQL through a connection pool. Concurrent writers are ordered by row locks and
/// constraints, not by one database-wide write lock as in SQLite.
#[derive(Debug, Clone)]
pub struct PgStore {
    pub(super) pool: PgPool,
}

impl PgStore {
    /// Connect to `url` (`postgres://...` or `postgresql://...`) and apply any newer
    /// migrations. The database itself must exist.
    pub(super) async fn open(url: &str) -> Result<PgStore> {
        let pool = PgPoolOptions::new().connect(url).await?;
        // sqlx takes an advisory lock while migrating, so two services starting together
        // apply each migration once.
        MIGRATOR.run(&pool).await?;
        Ok(PgStore { pool })
    }
}

/// Lock the plant's row until the transaction ends, so that writes which read before they
/// write (the next revision number, the current run to demote) take turns per plant, as
/// SQLite's one write lock makes them. NO KEY UPDATE does not conflict with the KEY SHARE
/// locks that foreign-key checks take, so ingestion into the plant goes on meanwhile.
async fn lock_plant(tx: &mut PgConnection, plant: &PlantRow) -> Result<()> {
    let locked = sqlx::query("SELECT id FROM plants WHERE id = $1 FOR NO KEY UPDATE")
        .bind(plant.id)
        .fetch_optional(&mut *tx)
        .await?;
    match locked {
        Some(_) => Ok(()),
        None => Err(StoreError::NoPlant(plant.name.clone())),
    }
}
