//! Plants, their model revisions and the meters of each revision.

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;

use super::rows::{self, MeterRow, ModelRevision, PlantRow};
use super::values::Millis;
use super::{pg, sqlite, Result, Store, StoreError, Tx};

const REVISION_COLUMNS: &str = "revision, effective_from, model_json, source, created_at";

impl Store {
    pub async fn create_plant(&self, name: &str) -> Result<PlantRow> {
        const SQL: &str = "INSERT INTO plants (name, created_at) VALUES ($1, $2)
                           ON CONFLICT (name) DO NOTHING RETURNING id";
        let created_at = Millis::now();
        let id: Option<i64> = on_backend!(self, s => sqlx::query_scalar(SQL)
            .bind(name)
            .bind(created_at)
            .fetch_optional(&s.pool)
            .await?);
        let Some(id) = id else {
            return Err(StoreError::PlantExists(name.to_string()));
        };
        Ok(PlantRow {
            id,
            name: name.to_string(),
            created_at: created_at.to_utc()?,
        })
    }

    pub async fn plant(&self, name: &str) -> Result<Option<PlantRow>> {
        const SQL: &str = "SELECT id, name, created_at FROM plants WHERE name = $1";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(name)
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::plant)
            .transpose())
    }

    pub async fn plants(&self) -> Result<Vec<PlantRow>> {
        const SQL: &str = "SELECT id, name, created_at FROM plants ORDER BY name";
        on_backend!(self, s => sqlx::query(SQL)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::plant)
            .collect())
    }

    /// Store a new, immutable model revision and its meters; returns its number (1, 2, ...).
    /// The caller has validated `spec` (reconcile::Plant::new) first.
    pub async fn put_model_revision(
        &self,
        plant: &PlantRow,
        spec: &ModelSpec,
        source: &str,
        effective_from: DateTime<Utc>,
    ) -> Result<i64> {
        const SQL: &str = "
            INSERT INTO model_revisions
                (plant_id, revision, effective_from, model_json, source, created_at)
            SELECT $1, COALESCE(MAX(revision), 0) + 1, $2, $3, $4, $5
            FROM model_revisions WHERE plant_id = $1
            RETURNING revision";
        let model_json = serde_json::to_string(spec)
            .map_err(|e| StoreError::Corrupt(format!("model does not serialise: {e}")))?;
        // The number is taken inside a transaction in which concurrent puts for the plant take
        // turns, so no two take the same one.
        let mut tx = self.write_for(plant).await?;
        let revision: i64 = in_tx!(&mut tx, t => sqlx::query_scalar(SQL)
            .bind(plant.id)
            .bind(Millis::from(effective_from))
            .bind(&model_json)
            .bind(source)
            .bind(Millis::now())
            .fetch_one(&mut **t)
            .await?);
        match &mut tx {
            Tx::Sqlite(t) => sqlite::insert_meters(t, plant, revision, &spec.meters).await?,
            Tx::Postgres(t) => pg::insert_meters(t, plant, revision, &spec.meters).await?,
        }
        tx.commit().await?;
        Ok(revision)
    }

    /// The revision in effect at `at`: the latest effective_from not after `at`, and of two
    /// with the same effective_from the later revision.
    pub async fn current_model(
        &self,
        plant: &PlantRow,
        at: DateTime<Utc>,
    ) -> Result<Option<ModelRevision>> {
        let sql = format!(
            "SELECT {REVISION_COLUMNS} FROM model_revisions
             WHERE plant_id = $1 AND effective_from <= $2
             ORDER BY effective_from DESC, revision DESC LIMIT 1"
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(Millis::from(at))
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::revision)
            .transpose())
    }

    pub async fn model_revision(
        &self,
        plant: &PlantRow,
        revision: i64,
    ) -> Result<Option<ModelRevision>> {
        let sql = format!(
            "SELECT {REVISION_COLUMNS} FROM model_revisions
             WHERE plant_id = $1 AND revision = $2"
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .bind(revision)
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::revision)
            .transpose())
    }

    pub async fn list_revisions(&self, plant: &PlantRow) -> Result<Vec<ModelRevision>> {
        let sql = format!(
            "SELECT {REVISION_COLUMNS} FROM model_revisions
             WHERE plant_id = $1 ORDER BY revision"
        );
        on_backend!(self, s => sqlx::query(&sql)
            .bind(plant.id)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::revision)
            .collect())
    }

    pub async fn meters(&self, plant: &PlantRow, revision: i64) -> Result<Vec<MeterRow>> {
        const SQL: &str = "
            SELECT tag, stream, quantity, component, uom, range_lo, range_hi
            FROM meters WHERE plant_id = $1 AND revision = $2 ORDER BY tag";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(plant.id)
            .bind(revision)
            .fetch_all(&s.pool)
            .await?
            .iter()
            .map(rows::meter)
            .collect())
    }
}
