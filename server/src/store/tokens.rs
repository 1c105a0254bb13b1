//! API tokens. Only the SHA-256 of a token is stored: tokens are 256 random bits, so a plain
//! fast hash is enough (no password stretching needed), and a copy of the database grants
//! nothing.

use std::fmt;
use std::fmt::Write as _;

use rand::RngCore;
use sha2::{Digest, Sha256};
use sqlx::Row;

use super::{now_ms, Result, SqliteStore, StoreError};

/// The roles of docs/api.md ("Tokens and roles"); `admin` may do everything.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Role {
    Ingest,
    Read,
    Maintain,
    Admin,
}

impl Role {
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Ingest => "ingest",
            Role::Read => "read",
            Role::Maintain => "maintain",
            Role::Admin => "admin",
        }
    }

    pub fn parse(text: &str) -> Option<Role> {
        match text {
            "ingest" => Some(Role::Ingest),
            "read" => Some(Role::Read),
            "maintain" => Some(Role::Maintain),
            "admin" => Some(Role::Admin),
            _ => None,
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A token just made. `token` is the only copy of the plaintext: show it once.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct NewToken {
    pub id: i64,
    pub token: String,
    pub role: Role,
    pub plant: Option<String>,
}

/// What a verified token allows.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Grant {
    pub token_id: i64,
    pub role: Role,
    /// The one plant it may touch; every plant when `None`.
    pub plant: Option<String>,
}

impl Grant {
    /// May this token do what `needed` may, on `plant`?
    pub fn permits(&self, needed: Role, plant: &str) -> bool {
        let role_ok = self.role == Role::Admin || self.role == needed;
        let plant_ok = self.plant.as_deref().is_none_or(|p| p == plant);
        role_ok && plant_ok
    }
}

/// Prefix of every token, so a leaked one is recognisable (secret scanners, logs).
const PREFIX: &str = "lb_";

fn hex(bytes: &[u8]) -> String {
    bytes.iter().fold(String::new(), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}

pub(super) fn hash(token: &str) -> String {
    hex(&Sha256::digest(token.as_bytes()))
}

/// A fresh token's plaintext: the prefix and 256 random bits from the OS, in hex.
pub(super) fn new_secret() -> String {
    let mut secret = [0u8; 32];
    rand::rngs::OsRng.fill_bytes(&mut secret);
    format!("{PREFIX}{}", hex(&secret))
}

impl SqliteStore {
    pub(super) async fn create_token(&self, role: Role, plant: Option<&str>) -> Result<NewToken> {
        let token = new_secret();
        let id: i64 = sqlx::query_scalar(
            "INSERT INTO api_tokens (hash, role, plant, created_at) VALUES (?, ?, ?, ?)
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

    pub(super) async fn verify_token(&self, token: &str) -> Result<Option<Grant>> {
        // Looked up by hash: the index compares hashes, never the secret itself, so timing
        // tells an attacker nothing about the stored tokens.
        let row = sqlx::query(
            "SELECT id, role, plant FROM api_tokens WHERE hash = ? AND revoked_at IS NULL",
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

    pub(super) async fn revoke_token(&self, id: i64) -> Result<bool> {
        let done =
            sqlx::query("UPDATE api_tokens SET revoked_at = ? WHERE id = ? AND revoked_at IS NULL")
                .bind(now_ms())
                .bind(id)
                .execute(&self.pool)
                .await?;
        Ok(done.rows_affected() > 0)
    }
}
