//! Plants, their model revisions and the meters of each revision, in PostgreSQL.

use chrono::{DateTime, Utc};
use reconcile::ModelSpec;
use sqlx::postgres::PgRow;
use sqlx::Row;

use super::super::{from_ms, now_ms, to_ms, MeterRow, ModelRevision, PlantRow, Result, StoreError};
use super::PgStore;

impl PgStore {
    pub(in crate::store) async fn create_plant(&self, name: &str) -> Result<PlantRow> {
        let created_at = now_ms();
        let inserted = sqlx::query(
            "INSERT INTO plants (name, created_at) VALUES ($1, $2)
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

    pub(in crate::store) async fn plant(&self, name: &str) -> Result<Option<PlantRow>> {
        let row = sqlx::query("SELECT id, name, created_at FROM plants WHERE name = $1")
            .bind(name)
            .fetch_optional(&self.pool)
            .await?;
        row.map(|r| plant_row(&r)).transpose()
    }

    pub(in crate::store) async fn plants(&self) -> Result<Vec<PlantRow>> {
        let rows = sqlx::query("SELECT id, name, created_at FROM plants ORDER BY name")
            .fetch_all(&self.pool)
            .await?;
        rows.iter().map(plant_row).collect()
    }

    pub(in crate::store) async fn put_model_revision(
        &self,
        plant: &PlantRow,
        spec: &ModelSpec,
        source: &str,
        effective_from: DateTime<Utc>,
    ) -> Result<i64> {
        let model_json = serde_json::to_string(spec)
            .map_err(|e| StoreError::Corrupt(format!("model does not serialise: {e}")))?;
        let mut tx = self.pool.begin().await?;
        // The plant's row lock orders concurrent puts for one plant: the second waits until
        // the first commits and then sees its revision, so no two take the same number.
        super::lock_plant(&mut tx, plant).await?;
        let revision: i64 = sqlx::query_scalar(
            "INSERT INTO model_revisions
                 (plant_id, revision, effective_from, model_json, source, created_at)
             SELECT $1, COALESCE(MAX(revision), 0) + 1, $2, $3, $4, $5
             FROM model_revisions WHERE plant_id = $1
             RETURNING revision",
        )
        .bind(plant.id)
        .bind(to_ms(effective_from))
        .bind(&model_json)
        .bind(source)
        .bind(now_ms())
        .fetch_one(&mut *tx)
        .await?;
        let meters = &spec.meters;
        sqlx::query(
            "INSERT INTO meters
                 (plant_id, revision, tag, stream, quantity, component, uom, range_lo, range_hi)
             SELECT $1, $2, m.*
             FROM UNNEST($3::text[], $4::text[], $5::text[], $6::text[], $7::text[],
                         $8::float8[], $9::float8[]) AS m",
        )
        .bind(plant.id)
        .bind(revision)
        .bind(meters.iter().map(|m| m.tag.as_str()).collect::<Vec<_>>())
        .bind(meters.iter().map(|m| m.stream.as_str()).collect::<Vec<_>>())
        .bind(
            meters
                .iter()
                .map(|m| m.quantity.as_str())
                .collect::<Vec<_>>(),
        )
        .bind(
            meters
                .iter()
                .map(|m| m.component.as_deref())
                .collect::<Vec<_>>(),
        )
        .bind(meters.iter().map(|m| m.uom.as_str()).collect::<Vec<_>>())
        .bind(
            meters
                .iter()
                .map(|m| m.range.map(|r| r[0]))
                .collect::<Vec<_>>(),
        )
        .bind(
            meters
                .iter()
                .map(|m| m.range.map(|r| r[1]))
                .collect::<Vec<_>>(),
        )
        .execute(&mut *tx)
        .await?;
        tx.commit().await?;
        Ok(revision)
    }

    pub(in crate::store) async fn current_model(
        &self,
        plant: &PlantRow,
        at: DateTime<Utc>,
    ) -> Result<Option<ModelRevision>> {
        let row = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = $1 AND effective_from <= $2
             ORDER BY effective_from DESC, revision DESC LIMIT 1",
        )
        .bind(plant.id)
        .bind(to_ms(at))
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| revision_row(&r)).transpose()
    }

    pub(in crate::store) async fn model_revision(
        &self,
        plant: &PlantRow,
        revision: i64,
    ) -> Result<Option<ModelRevision>> {
        let row = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = $1 AND revision = $2",
        )
        .bind(plant.id)
        .bind(revision)
        .fetch_optional(&self.pool)
        .await?;
        row.map(|r| revision_row(&r)).transpose()
    }

    pub(in crate::store) async fn list_revisions(
        &self,
        plant: &PlantRow,
    ) -> Result<Vec<ModelRevision>> {
        let rows = sqlx::query(
            "SELECT revision, effective_from, model_json, source, created_at
             FROM model_revisions WHERE plant_id = $1 ORDER BY revision",
        )
        .bind(plant.id)
        .fetch_all(&self.pool)
        .await?;
        rows.iter().map(revision_row).collect()
    }

    pub(in crate::store) async fn meters(
        &self,
        plant: &PlantRow,
        revision: i64,
    ) -> Result<Vec<MeterRow>> {
        let rows = sqlx::query(
            "SELECT tag, stream, quantity, component, uom, range_lo, range_hi
             FROM meters WHERE plant_id = $1 AND revision = $2 ORDER BY tag",
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

fn plant_row(r: &PgRow) -> Result<PlantRow> {
    Ok(PlantRow {
        id: r.try_get("id")?,
        name: r.try_get("name")?,
        created_at: from_ms(r.try_get("created_at")?)?,
    })
}

fn revision_row(r: &PgRow) -> Result<ModelRevision> {
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
