//! How values cross into and out of either database: [`Millis`] for instants, [`JsonText`] for
//! JSON kept as written, and [`StoreRow`], which reads a column of a row of either backend into
//! any type both backends decode, so each row type is decoded by one function.

use chrono::{DateTime, TimeZone, Utc};
use sqlx::encode::IsNull;
use sqlx::error::BoxDynError;
use sqlx::postgres::types::Oid;
use sqlx::postgres::{PgArgumentBuffer, PgRow, PgTypeInfo};
use sqlx::sqlite::{SqliteRow, SqliteTypeInfo};
use sqlx::{Database, Decode, Encode, Postgres, Row, Sqlite, Type};

use super::{Result, StoreError};

/// An instant as stored: integer milliseconds since the Unix epoch, UTC (migrations/0001
/// says why). Every `i64` is a value a column may hold, but not every one is an instant
/// chrono can represent: reading one that is not ([`Millis::to_utc`]) is corrupt data.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, sqlx::Type)]
#[sqlx(transparent)]
pub struct Millis(pub i64);

impl Millis {
    /// The clock is read here only, so every row written by one call shares one instant.
    pub fn now() -> Millis {
        Millis::from(Utc::now())
    }

    pub fn to_utc(self) -> Result<DateTime<Utc>> {
        Utc.timestamp_millis_opt(self.0)
            .single()
            .ok_or_else(|| StoreError::Corrupt(format!("instant {} ms is out of range", self.0)))
    }
}

/// Every `DateTime<Utc>` is within ±2^63 ms of the epoch, so this cannot fail; below the
/// millisecond is dropped (rounded towards the past, before 1970 too).
impl From<DateTime<Utc>> for Millis {
    fn from(t: DateTime<Utc>) -> Millis {
        Millis(t.timestamp_millis())
    }
}

impl TryFrom<Millis> for DateTime<Utc> {
    type Error = StoreError;

    fn try_from(ms: Millis) -> Result<DateTime<Utc>> {
        ms.to_utc()
    }
}

/// JSON text exactly as serde_json wrote it, for a JSON column: bound as TEXT in SQLite and
/// as `json` (not `jsonb`, which would reorder keys and respell numbers) in PostgreSQL, so one
/// statement serves both without a cast.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct JsonText(pub String);

impl JsonText {
    pub fn of<T: serde::Serialize + ?Sized>(value: &T) -> Result<JsonText> {
        serde_json::to_string(value)
            .map(JsonText)
            .map_err(|e| StoreError::Corrupt(format!("a value does not serialise as JSON: {e}")))
    }
}

impl Type<Sqlite> for JsonText {
    fn type_info() -> SqliteTypeInfo {
        <String as Type<Sqlite>>::type_info()
    }
}

impl<'q> Encode<'q, Sqlite> for JsonText {
    fn encode_by_ref(
        &self,
        buf: &mut <Sqlite as Database>::ArgumentBuffer<'q>,
    ) -> std::result::Result<IsNull, BoxDynError> {
        <String as Encode<'q, Sqlite>>::encode_by_ref(&self.0, buf)
    }
}

/// PostgreSQL's `json` type (its OID is fixed by the server's catalogue).
const PG_JSON: Oid = Oid(114);

impl Type<Postgres> for JsonText {
    fn type_info() -> PgTypeInfo {
        PgTypeInfo::with_oid(PG_JSON)
    }
}

impl Encode<'_, Postgres> for JsonText {
    fn encode_by_ref(
        &self,
        buf: &mut PgArgumentBuffer,
    ) -> std::result::Result<IsNull, BoxDynError> {
        // The binary form of `json` is its text.
        buf.extend_from_slice(self.0.as_bytes());
        Ok(IsNull::No)
    }
}

/// A type both backends decode from a column.
pub trait Column:
    Sized + for<'r> Decode<'r, Sqlite> + Type<Sqlite> + for<'r> Decode<'r, Postgres> + Type<Postgres>
{
}

impl<T> Column for T where
    T: for<'r> Decode<'r, Sqlite> + Type<Sqlite> + for<'r> Decode<'r, Postgres> + Type<Postgres>
{
}

/// A row of either backend, read by column name. Row types are decoded by functions generic
/// over this, once for both backends.
pub trait StoreRow: Row {
    fn read<T: Column>(&self, column: &str) -> Result<T>;

    /// An instant column.
    fn instant(&self, column: &str) -> Result<DateTime<Utc>> {
        self.read::<Millis>(column)?.to_utc()
    }
}

impl StoreRow for SqliteRow {
    fn read<T: Column>(&self, column: &str) -> Result<T> {
        Ok(self.try_get(column)?)
    }
}

impl StoreRow for PgRow {
    fn read<T: Column>(&self, column: &str) -> Result<T> {
        Ok(self.try_get(column)?)
    }
}

/// `rows` rows of `width` numbered parameters each, `($first, …), (…)`, for a multi-row
/// `VALUES` (the same text on both backends).
pub(super) fn value_rows(first: usize, rows: usize, width: usize) -> String {
    (0..rows)
        .map(|r| format!("({})", param_list(first + r * width, width)))
        .collect::<Vec<_>>()
        .join(", ")
}

/// `n` numbered parameters from `$first`, comma-separated, for `IN (…)` or a `VALUES` row.
pub(super) fn param_list(first: usize, n: usize) -> String {
    (first..first + n)
        .map(|i| format!("${i}"))
        .collect::<Vec<_>>()
        .join(", ")
}

#[cfg(test)]
mod placeholder_tests {
    #[test]
    fn value_rows_number_every_parameter_once_in_order() {
        assert_eq!(super::value_rows(2, 2, 3), "($2, $3, $4), ($5, $6, $7)");
        assert_eq!(super::param_list(1, 0), "");
    }
}
