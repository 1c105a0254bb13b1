//! API tokens. Only the SHA-256 of a token is stored: tokens are 256 random bits, so a plain
//! fast hash is enough (no password stretching needed), and a copy of the database grants
//! nothing.

use std::fmt::Write as _;

use rand::RngCore;
use sha2::{Digest, Sha256};

use super::rows::{self, Grant, NewToken, Role};
use super::values::Millis;
use super::{Result, Store};

/// Prefix of every token, so a leaked one is recognisable (secret scanners, logs).
const PREFIX: &str = "lb_";

fn hex(bytes: &[u8]) -> String {
    bytes.iter().fold(String::new(), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}

fn hash(token: &str) -> String {
    hex(&Sha256::digest(token.as_bytes()))
}

/// A fresh token's plaintext: the prefix and 256 random bits from the OS, in hex.
fn new_secret() -> String {
    let mut secret = [0u8; 32];
    rand::rngs::OsRng.fill_bytes(&mut secret);
    format!("{PREFIX}{}", hex(&secret))
}

impl Store {
    /// A new API token: the plaintext is in the answer and nowhere else.
    pub async fn create_token(&self, role: Role, plant: Option<&str>) -> Result<NewToken> {
        const SQL: &str = "INSERT INTO api_tokens (hash, role, plant, created_at)
                           VALUES ($1, $2, $3, $4) RETURNING id";
        let token = new_secret();
        let id: i64 = on_backend!(self, s => sqlx::query_scalar(SQL)
            .bind(hash(&token))
            .bind(role.as_str())
            .bind(plant)
            .bind(Millis::now())
            .fetch_one(&s.pool)
            .await?);
        Ok(NewToken {
            id,
            token,
            role,
            plant: plant.map(str::to_string),
        })
    }

    /// What a presented token grants, if it is known and not revoked.
    pub async fn verify_token(&self, token: &str) -> Result<Option<Grant>> {
        // Looked up by hash: the index compares hashes, never the secret itself, so timing
        // tells an attacker nothing about the stored tokens.
        const SQL: &str =
            "SELECT id, role, plant FROM api_tokens WHERE hash = $1 AND revoked_at IS NULL";
        on_backend!(self, s => sqlx::query(SQL)
            .bind(hash(token))
            .fetch_optional(&s.pool)
            .await?
            .as_ref()
            .map(rows::grant)
            .transpose())
    }

    pub async fn revoke_token(&self, id: i64) -> Result<bool> {
        const SQL: &str =
            "UPDATE api_tokens SET revoked_at = $1 WHERE id = $2 AND revoked_at IS NULL";
        let done = on_backend!(self, s => sqlx::query(SQL)
            .bind(Millis::now())
            .bind(id)
            .execute(&s.pool)
            .await?
            .rows_affected());
        Ok(done > 0)
    }
}
