//! Plants, their model revisions and the meters of each revision.

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;
use sqlx::Row;

use super::{from_ms, now_ms, to_ms, Result, SqliteStore, StoreError};

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PlantRow {
    pub id: i64,
    pub name: String,
    pub created_at: DateTime<Utc>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct ModelRevision {
    pub revision: i64,
    pub effective_from: DateTime<Utc>,
    pub spec: ModelSpec,
    /// The model as the user sent it (TOML or JSON).
    pub source: String,
    pub created_at: DateTime<Utc>,
}

/// One meter of one revision, as the service queries them by tag.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterRow {
    pub tag: String,
    pub stream: String,
    pub quantity: String,
    pub component: Option<String>,
    pub uom: String,
    pub range: Option<[f64; 2]>,
}

impl SqliteStore {
    pub(super) async fn create_plant(&self, name: &str) -> Result<PlantRow> {
        let created_at = now_ms();
        let inserted = sqlx::query(
            "INSERT INTO plants (name, created_at) VALUES (?, ?)
             ON CONFLICT (name) DO NOTHING RETURNING id",
        )
        .bind(name)
        .bind(created_at)
        .fetch_optional(&self.pool)
        .await?;
        let Some(row) = inserted else {
            return Err(StoreError::PlantExists(name.to_string()));
        };
        Ok(PlantRow {
            id: row.try_get("id")?,
            name: name.to_string(),
            created_at: from_ms(created_at)?,
        })
    }

    pub(super) async fn plant(&self, name: &str) -> Result<Option<PlantRow>> {
        let row = sqlx::query("SELECT id, name, created_at FROM plants WHERE name = ?")
            .bind(name)
            .fetch_optional(&self.pool)
            .await?;
        row.map(|r| plant_row(&r)).transpose()
    }

    pub(super) async fn plants(&self) -> Result<Vec<PlantRow>> {
        let rows = sqlx::query("SELECT id, name, created_at FROM plants ORDER BY name")
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(plant_row).collect()
    }

    pub(super) async fn put_model_revision(
        &self,
        plant: &PlantRow,
        spec: &ModelSpec,
        source: &str,
        effective_from: DateTime<Utc>,
    ) -> Result<i64> {
        let model_json = serde_json::to_string(spec)
            .map_err(|e| StoreError::Corrupt(format!("model does not serialise: {e}")))?;
        let mut tx = self.write().await?;
        // The number is taken inside the write transaction, so two concurrent puts cannot both
        // take the same one.
        let revision: i64 = sqlx::query_scalar(
            "INSERT INTO model_revisions
                 (plant_id, revision, effective_from, model_json, source, created_at)
             SELECT ?, COALESCE(MAX(revision), 0) + 1, ?, ?, ?, ?
             FROM model_revisions WHERE plant_id = ?
             RETURNING revision",
        )
        .bind(plant.id)
        .bind(to_ms(effective_from))
        .bind(&model_json)
        .bind(source)
        .bind(now_ms())
        .bind(plant.id)
        .fetch_one(&mut *tx)
        .await?;
        for m in &spec.meters {
            sqlx::query(
                "INSERT INTO meters
                     (plant_id, revision, tag, stream, quantity, component, uom,
                      range_lo, range_hi)
                 VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
            )
            .bind(plant.id)
            .bind(revision)
            .bind(&m.tag)
            .bind(&m.stream)
            .bind(m.quantity.as_str())
            .bind(&m.component)
            .bind(&m.uom)
            .bind(m.range.map(|r| r[0]))
            .bind(m.range.map(|r| r[1]))
            .execute(&mut *tx)
            .await?;
        }
        tx.commit().await?;
        Ok(revision)
    }

    pub(super) async fn current_model(
        &self,
        plant: &PlantRow,
        at: DateTime<Utc>,
    ) -> Result<Option<ModelRevision>> {
        let row = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = ? AND effective_from <= ?
             ORDER BY effective_from DESC, revision DESC LIMIT 1",
        )
        .bind(plant.id)
        .bind(to_ms(at))
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| revision_row(&r)).transpose()
    }

    pub(super) async fn model_revision(
        &self,
        plant: &PlantRow,
        revision: i64,
    ) -> Result<Option<ModelRevision>> {
        let row = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = ? AND revision = ?",
        )
        .bind(plant.id)
        .bind(revision)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| revision_row(&r)).transpose()
    }

    pub(super) async fn list_revisions(&self, plant: &PlantRow) -> Result<Vec<ModelRevision>> {
        let rows = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = ? ORDER BY revision",
        )
        .bind(plant.id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(revision_row).collect()
    }

    pub(super) async fn meters(&self, plant: &PlantRow, revision: i64) -> Result<Vec<MeterRow>> {
        let rows = sqlx::query(
            "SELECT tag, stream, quantity, component, uom, range_lo, range_hi
             FROM meters WHERE plant_id = ? AND revision = ? ORDER BY tag",
        )
        .bind(plant.id)
        .bind(revision)
        .fetch_all(&self.pool)
        .await?;
        rows.iter()
            .map(|r| {
                let lo: Option<f64> = r.try_get("range_lo")?;
                let hi: Option<f64> = r.try_get("range_hi")?;
                Ok(MeterRow {
                    tag: r.try_get("tag")?,
                    stream: r.try_get("stream")?,
                    quantity: r.try_get("quantity")?,
                    component: r.try_get("component")?,
                    uom: r.try_get("uom")?,
                    range: lo.zip(hi).map(|(lo, hi)| [lo, hi]),
                })
            })
            .collect()
    }
}

fn plant_row(r: &sqlx::sqlite::SqliteRow) -> Result<PlantRow> {
    Ok(PlantRow {
        id: r.try_get("id")?,
        name: r.try_get("name")?,
        created_at: from_ms(r.try_get("created_at")?)?,
    })
}

fn revision_row(r: &sqlx::sqlite::SqliteRow) -> Result<ModelRevision> {
    let revision: i64 = r.try_get("revision")?;
    let json: String = r.try_get("model_json")?;
    let spec = serde_json::from_str(&json).map_err(|e| {
        StoreError::Corrupt(format!("model revision {revision} does not parse: {e}"))
    })?;
    Ok(ModelRevision {
        revision,
        effective_from: from_ms(r.try_get("effective_from")?)?,
        spec,
        source: r.try_get("source")?,
        created_at: from_ms(r.try_get("created_at")?)?,
    })
}
