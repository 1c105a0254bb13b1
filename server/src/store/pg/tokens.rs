//! API tokens in PostgreSQL (see store/tokens.rs: only the SHA-256 of a token is stored).

use sqlx::Row;

use super::super::tokens::{hash, new_secret};
use super::super::{now_ms, Grant, NewToken, Result, Role, StoreError};
use super::PgStore;

impl PgStore {
    pub(in crate::store) async fn create_token(
        &self,
        role: Role,
        plant: Option<&str>,
    ) -> Result<NewToken> {
        let token = new_secret();
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO api_tokens (hash, role, plant, created_at) VALUES ($1, $2, $3, $4)
             RETURNING id",
        )
        .bind(hash(&token))
        .bind(role.as_str())
        .bind(plant)
        .bind(now_ms())
        .fetch_one(&self.pool)
        .await?;
        Ok(NewToken {
            id,
            token,
            role,
            plant: plant.map(str::to_string),
        })
    }

    pub(in crate::store) async fn verify_token(&self, token: &str) -> Result<Option<Grant>> {
        let row = sqlx::query(
            "SELECT id, role, plant FROM api_tokens WHERE hash = $1 AND revoked_at IS NULL",
        )
        .bind(hash(token))
        .fetch_optional(&self.pool)
        .await?;
        let Some(row) = row else {
            return Ok(None);
        };
        let role: String = row.try_get("role")?;
        Ok(Some(Grant {
            token_id: row.try_get("id")?,
            role: Role::parse(&role)
                .ok_or_else(|| StoreError::Corrupt(format!("token role \"{role}\"")))?,
            plant: row.try_get("plant")?,
        }))
    }

    pub(in crate::store) async fn revoke_token(&self, id: i64) -> Result<bool> {
        let done = sqlx::query(
            "UPDATE api_tokens SET revoked_at = $1 WHERE id = $2 AND revoked_at IS NULL",
        )
        .bind(now_ms())
        .bind(id)
        .execute(&self.pool)
        .await?;
        Ok(done.rows_affected() > 0)
    }
}
