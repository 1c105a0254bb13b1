//! The service's shared state, below both the HTTP API and the scheduler and knowing nothing of
//! either: the store, the metrics, the scheduler's wake-up, this instance's claimant, the time
//! limit of a period run and the validated model revisions. Ingestion goes through here so that every writer of readings
//! wakes the scheduler the same way.

use std::sync::Arc;

use chrono::{DateTime, Utc};
use reconcile::{LeftOut, Plant};
use tokio::sync::Notify;

use crate::claimant::Claimant;
use crate::ingest::{self, BatchError, Catalogue, IngestAnswer};
use crate::metrics::Metrics;
use crate::out_of_service::{self, Interval};
use crate::period_run::PeriodReading;
use crate::readings::Format;
use crate::revisions::{ModelCache, Models, RevisionError};
use crate::run_limit::RunLimit;
use crate::store::{PlantRow, Store, StoreError};

/// What the handlers and the scheduler share. Cheap to clone: every part is shared.
#[derive(Clone)]
pub struct Service {
    pub store: Store,
    pub metrics: Arc<Metrics>,
    /// Wakes the scheduler when a batch changed stored readings.
    pub wake: Arc<Notify>,
    /// This instance's name and lease in its claims on periods.
    pub claimant: Arc<Claimant>,
    /// How long a period run may take, the scheduler's and an administrator's re-run alike.
    pub run_limit: RunLimit,
    models: Arc<ModelCache>,
    /// Each plant's meter health as last assessed (crate::health::Memo).
    pub health: Arc<crate::health::Memo>,
    /// How far back from the plant's latest period meter health looks (at most; a
    /// recalibration or replacement since starts it later).
    pub health_window: chrono::TimeDelta,
}

/// The health window when none is given: 90 days.
pub const DEFAULT_HEALTH_WINDOW_DAYS: u32 = 90;

impl Service {
    pub fn new(store: Store) -> Service {
        Service {
            store,
            metrics: Arc::new(Metrics::default()),
            wake: Arc::new(Notify::new()),
            claimant: Arc::new(Claimant::default()),
            run_limit: RunLimit::default(),
            models: Arc::new(ModelCache::default()),
            health: Arc::new(crate::health::Memo::default()),
            health_window: chrono::TimeDelta::days(DEFAULT_HEALTH_WINDOW_DAYS.into()),
        }
    }

    /// The same service with meter health looking back `window` from the latest period.
    pub fn with_health_window(mut self, window: chrono::TimeDelta) -> Service {
        self.health_window = window;
        self
    }

    /// The same service claiming periods as `claimant`.
    pub fn with_claimant(mut self, claimant: Claimant) -> Service {
        self.claimant = Arc::new(claimant);
        self
    }

    /// The same service with `limit` on its period runs.
    pub fn with_run_limit(mut self, limit: RunLimit) -> Service {
        self.run_limit = limit;
        self
    }

    /// The plant's revisions, each validated once per process.
    pub async fn models(&self, plant: &PlantRow) -> Result<Models, RevisionError> {
        self.models.models(&self.store, plant).await
    }

    /// The validated model in effect at `t` and its revision number.
    pub async fn model_at(
        &self,
        plant: &PlantRow,
        t: DateTime<Utc>,
    ) -> Result<(Arc<Plant>, i64), RevisionError> {
        self.models.model_at(&self.store, plant, t).await
    }

    /// The stored readings of the period `start..start + seconds`, as a period run takes them.
    pub async fn period_readings(
        &self,
        plant: &PlantRow,
        start: DateTime<Utc>,
        seconds: i64,
    ) -> Result<Vec<PeriodReading>, StoreError> {
        let end = start + chrono::TimeDelta::seconds(seconds);
        Ok(self
            .store
            .readings_in(plant, start, end)
            .await?
            .into_iter()
            .map(|s| PeriodReading {
                reading: s.reading,
                out_of_range: s.out_of_range,
            })
            .collect())
    }

    /// The plant's out-of-service intervals, from its technicians' notes.
    pub async fn out_of_service(&self, plant: &PlantRow) -> Result<Vec<Interval>, StoreError> {
        Ok(out_of_service::intervals(
            &self.store.notes(plant, None).await?,
        ))
    }

    /// The meters of `model` out of service at `start` (by the plant's notes), which a run of
    /// the period leaves out of its estimate.
    pub async fn left_out(
        &self,
        plant: &PlantRow,
        model: &Plant,
        start: DateTime<Utc>,
    ) -> Result<Vec<LeftOut>, StoreError> {
        let intervals = self.out_of_service(plant).await?;
        Ok(out_of_service::left_out(model, &intervals, start))
    }

    /// The tags and ranges a batch of the plant is checked against; `None` before its first
    /// model.
    pub async fn catalogue(&self, plant: &PlantRow) -> Result<Option<Catalogue>, StoreError> {
        Catalogue::load(&self.store, plant).await
    }

    /// Check a batch (off the async threads: a big one is CPU work), store its good readings,
    /// wake the scheduler if anything changed, and count it.
    pub async fn ingest<B>(
        &self,
        plant: &PlantRow,
        catalogue: &Catalogue,
        body: B,
        format: Format,
    ) -> Result<IngestAnswer, BatchError>
    where
        B: AsRef<[u8]> + Send + 'static,
    {
        let cat = catalogue.clone();
        let checked =
            tokio::task::spawn_blocking(move || ingest::check_batch(body.as_ref(), format, &cat))
                .await
                .map_err(|e| BatchError::Interrupted(e.to_string()))??;
        let answer = ingest::store_batch(&self.store, plant, catalogue, checked).await?;
        if answer.accepted + answer.replaced > 0 {
            self.wake.notify_one();
        }
        self.metrics.readings(
            answer.accepted,
            answer.replaced,
            answer.unchanged,
            answer.rejected,
        );
        tracing::info!(
            accepted = answer.accepted,
            replaced = answer.replaced,
            unchanged = answer.unchanged,
            rejected = answer.rejected,
            "batch stored"
        );
        Ok(answer)
    }
}
