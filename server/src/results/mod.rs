//! Results read back from stored runs and readings and shaped for the people who use them:
//! the period listing, range balances and their coverage, figure series, the meter ranking
//! and one meter's history, the what-if of a stored period and what each meter is worth. Plain async functions over the [`Service`](crate::service::Service) and
//! pure functions over stored report parts; nothing here knows of HTTP (the API turns a
//! [`ResultsError`] into a problem answer).

pub mod balances;
pub mod figures;
#[cfg(test)]
mod health_tests;
pub mod meter_value;
pub mod meters;
mod notes;
pub mod out_of_service;
pub mod periods;
pub mod range;
pub mod rerun;
pub mod stored;
pub mod what_if;

use chrono::{DateTime, Utc};

use crate::revisions::RevisionError;
use crate::store::StoreError;

pub use range::{rfc3339, PeriodRange, MAX_PERIODS};

/// Why a result could not be given.
#[derive(Debug, thiserror::Error)]
pub enum ResultsError {
    /// The caller asked for something malformed (the sentence says what).
    #[error("{0}")]
    Refused(String),
    /// The range asked for is too long for one answer.
    #[error(
        "the range holds {count} periods, more than the {MAX_PERIODS} one answer covers; ask \
         for a shorter range"
    )]
    TooManyPeriods { count: i64 },
    /// Nothing of that name (a figure, a subject, a meter, a period's run).
    #[error("{0}")]
    NotFound(String),
    /// No figure of that name or subject in the range; the sentence names those there are.
    #[error("{0}")]
    NoSuchFigure(String),
    #[error(transparent)]
    Revision(#[from] RevisionError),
    #[error(transparent)]
    Store(#[from] StoreError),
    /// A what-if refused: a setting, sweep or value at fault (named), or a base case that
    /// cannot carry it.
    #[error(transparent)]
    WhatIf(reconcile::whatif::WhatIfError),
    /// A meter-value request the estimate cannot answer (the item at fault named).
    #[error(transparent)]
    MeterValue(reconcile::meter_value::RequestError),
    /// The period's estimate failed, so nothing can be valued on it.
    #[error("{0}")]
    NotReconciled(String),
    /// The engine's task ended without an answer (it panicked): a fault of ours.
    #[error("the engine stopped unexpectedly: {0}")]
    Task(String),
    /// A stored report that does not read as the engine's report: a fault of ours.
    #[error("the stored report of period {period} of plant \"{plant}\" does not read: {reason}")]
    Corrupt {
        plant: String,
        period: DateTime<Utc>,
        reason: String,
    },
}
