//! Stored reports read back through the engine's own report types: the parts of each current
//! report a range answer needs, never a hand-copied look-alike of them.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::report::StreamReport;
use reconcile::ReportStatus;
use serde::Deserialize;

use super::{PeriodRange, ResultsError};
use crate::store::{PlantRow, Store};

/// A part of a stored report, as the engine's [`reconcile::Report`] writes it. Only the
/// fields asked of the store are present.
#[derive(Debug, Clone, Deserialize)]
pub struct ReportPart {
    pub status: ReportStatus,
    #[serde(default)]
    pub period_end: Option<String>,
    #[serde(default)]
    pub streams: Option<Vec<StreamReport>>,
}

/// The status, end and streams of the current report of every period of the range that has
/// one, by period start.
pub async fn current_parts(
    store: &Store,
    plant: &PlantRow,
    range: &PeriodRange,
) -> Result<BTreeMap<DateTime<Utc>, ReportPart>, ResultsError> {
    let fields: &[&str] = &["status", "period_end", "streams"];
    let stored = store
        .current_reports(plant, range.first(), range.to, fields)
        .await?;
    stored
        .into_iter()
        .map(|(start, value)| {
            let part = ReportPart::deserialize(value).map_err(|e| ResultsError::Corrupt {
                plant: plant.name.clone(),
                period: start,
                reason: e.to_string(),
            })?;
            Ok((start, part))
        })
        .collect()
}
