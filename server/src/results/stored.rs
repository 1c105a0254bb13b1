//! Stored reports read back through the engine's own report types: the parts of each current
//! report a range answer needs, never a hand-copied look-alike of them.

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use reconcile::report::{Figure, GlobalTestReport, StreamReport};
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
    #[serde(default)]
    pub figures: Option<Vec<Figure>>,
    #[serde(default)]
    pub global_test: Option<GlobalTestReport>,
}

/// Which parts of a report to read besides its status.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    /// `period_end` and `streams`.
    Streams,
    /// `figures`.
    Figures,
}

/// The current report of every period of the range that has one, by period start.
pub async fn current_parts(
    store: &Store,
    plant: &PlantRow,
    range: &PeriodRange,
    part: Part,
) -> Result<BTreeMap<DateTime<Utc>, ReportPart>, ResultsError> {
    let fields: &[&str] = match part {
        Part::Streams => &["status", "period_end", "streams"],
        Part::Figures => &["status", "figures", "global_test"],
    };
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
