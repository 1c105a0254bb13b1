//! Which model revision applies when. A plant's revisions are never changed once stored, and
//! each takes effect from its instant; this module is the one home of that rule, for the
//! period runs, the API's period grid and ingestion's instrument ranges alike.

pub mod admit;

use std::collections::HashMap;
use std::sync::{Arc, Mutex};

use chrono::{DateTime, Utc};
use reconcile::Plant;

use crate::store::{ModelRevision, PlantRow, Store, StoreError};

/// Why no model could be given.
#[derive(Debug, thiserror::Error)]
pub enum RevisionError {
    #[error("plant \"{plant}\" has no model (asked for the one in effect at {at})")]
    NoModel { plant: String, at: DateTime<Utc> },
    /// A stored revision that validated when it was stored but no longer does: the engine's
    /// rules changed under it. A fault of ours, not of the caller.
    #[error("revision {revision} of plant \"{plant}\" no longer validates: {reason}")]
    Invalid {
        plant: String,
        revision: i64,
        reason: String,
    },
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Which revision applies at `t`: the one with the latest `effective_from` not after `t` (of
/// two with the same instant, the higher number); before the first revision takes effect,
/// the earliest one, since a plant's first model also describes the history a historian
/// back-fills. `revisions` holds (effective_from, number) pairs in any order.
pub fn in_effect(revisions: &[(DateTime<Utc>, i64)], t: DateTime<Utc>) -> Option<usize> {
    let by_key = |i: &usize| revisions[*i];
    (0..revisions.len())
        .filter(|&i| revisions[i].0 <= t)
        .max_by_key(by_key)
        .or_else(|| (0..revisions.len()).min_by_key(by_key))
}

/// A plant's model revisions, each validated: which one applies at a time.
#[derive(Debug, Clone)]
pub struct Models {
    plant: String,
    /// (effective_from, revision number, validated model).
    revisions: Vec<(DateTime<Utc>, i64, Arc<Plant>)>,
}

impl Models {
    /// Every revision of the plant, each validated now (see [`ModelCache`] to validate once).
    pub async fn load(store: &Store, plant: &PlantRow) -> Result<Models, RevisionError> {
        let revisions = store.list_revisions(plant).await?;
        Models::from_revisions(plant, revisions, |rev| validate(plant, rev))
    }

    fn from_revisions(
        plant: &PlantRow,
        revisions: Vec<ModelRevision>,
        mut validated: impl FnMut(ModelRevision) -> Result<Arc<Plant>, RevisionError>,
    ) -> Result<Models, RevisionError> {
        let revisions = revisions
            .into_iter()
            .map(|rev| {
                let (from, number) = (rev.effective_from, rev.revision);
                Ok((from, number, validated(rev)?))
            })
            .collect::<Result<_, RevisionError>>()?;
        Ok(Models {
            plant: plant.name.clone(),
            revisions,
        })
    }

    /// The model in effect at `t` (see [`in_effect`]) and its revision number.
    pub fn at(&self, t: DateTime<Utc>) -> Result<(Arc<Plant>, i64), RevisionError> {
        let keys: Vec<_> = self.revisions.iter().map(|(f, n, _)| (*f, *n)).collect();
        let i = in_effect(&keys, t).ok_or_else(|| RevisionError::NoModel {
            plant: self.plant.clone(),
            at: t,
        })?;
        let (_, revision, model) = &self.revisions[i];
        Ok((Arc::clone(model), *revision))
    }
}

fn validate(plant: &PlantRow, rev: ModelRevision) -> Result<Arc<Plant>, RevisionError> {
    let revision = rev.revision;
    // Admitted under the rules of its day: a revision stored before the rule on names keeps
    // working (its names are quoted and neutralised where they are written).
    Plant::revalidate(rev.spec)
        .map(Arc::new)
        .map_err(|e| RevisionError::Invalid {
            plant: plant.name.clone(),
            revision,
            reason: e.to_string(),
        })
}

/// The validated model of the revision in effect at `t`, and its number (validated on every
/// call; a [`ModelCache`] keeps them).
pub async fn model_at(
    store: &Store,
    plant: &PlantRow,
    t: DateTime<Utc>,
) -> Result<(Arc<Plant>, i64), RevisionError> {
    Models::load(store, plant).await?.at(t)
}

/// Validated models by (plant id, revision number), for one store. A stored revision never
/// changes, so each is validated once per process instead of once per batch, pass or request;
/// the list of revisions is still read every time, so a new one is seen at once.
#[derive(Debug, Default)]
pub struct ModelCache {
    models: Mutex<HashMap<(i64, i64), Arc<Plant>>>,
}

impl ModelCache {
    /// Every revision of the plant, those not seen before validated now.
    pub async fn models(&self, store: &Store, plant: &PlantRow) -> Result<Models, RevisionError> {
        let revisions = store.list_revisions(plant).await?;
        Models::from_revisions(plant, revisions, |rev| {
            let key = (plant.id, rev.revision);
            if let Some(model) = self.lock().get(&key) {
                return Ok(Arc::clone(model));
            }
            // Validated outside the lock: a big model takes a while, and two passes that
            // validate the same revision at once merely agree.
            let model = validate(plant, rev)?;
            Ok(Arc::clone(self.lock().entry(key).or_insert(model)))
        })
    }

    /// The model in effect at `t` and its revision number.
    pub async fn model_at(
        &self,
        store: &Store,
        plant: &PlantRow,
        t: DateTime<Utc>,
    ) -> Result<(Arc<Plant>, i64), RevisionError> {
        self.models(store, plant).await?.at(t)
    }

    /// How many validated revisions are kept.
    pub fn len(&self) -> usize {
        self.lock().len()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn lock(&self) -> std::sync::MutexGuard<'_, HashMap<(i64, i64), Arc<Plant>>> {
        // The map is only ever inserted into; one left by a panicking holder is still whole.
        self.models
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }
}

#[cfg(test)]
mod tests {
    use chrono::TimeZone;

    use super::*;

    fn t(day: u32) -> DateTime<Utc> {
        Utc.with_ymd_and_hms(2026, 3, day, 0, 0, 0).unwrap()
    }

    #[test]
    fn the_revision_in_effect_is_the_latest_started_and_the_first_covers_the_past() {
        // Revision 1 from the 10th, 2 from the 20th, 3 also from the 20th, 4 from the 5th
        // (a late correction of the early history).
        let revs = [(t(10), 1), (t(20), 2), (t(20), 3), (t(5), 4)];
        assert_eq!(
            in_effect(&revs, t(1)),
            Some(3),
            "before all: the earliest (revision 4)"
        );
        assert_eq!(in_effect(&revs, t(5)), Some(3));
        assert_eq!(in_effect(&revs, t(12)), Some(0));
        assert_eq!(
            in_effect(&revs, t(20)),
            Some(2),
            "same instant: the higher number"
        );
        assert_eq!(in_effect(&revs, t(28)), Some(2));
        assert_eq!(in_effect(&[], t(28)), None);
    }

    #[tokio::test]
    async fn the_cache_validates_each_revision_once_and_sees_new_ones() {
        let dir = tempfile::tempdir().unwrap();
        let url = dir.path().join("revisions.sqlite");
        let store = Store::open(url.to_str().unwrap()).await.unwrap();
        let plant = store.create_plant("tee").await.unwrap();
        let cache = ModelCache::default();
        let none = cache.model_at(&store, &plant, t(1)).await;
        assert!(
            matches!(&none, Err(RevisionError::NoModel { plant, at }) if plant == "tee" && *at == t(1)),
            "{none:?}"
        );
        let model = crate::test_plants::tee_with_feed_meter();
        let spec = reconcile::ModelSpec::from_toml(&model).unwrap();
        store
            .put_model_revision(&plant, &spec, &model, t(10))
            .await
            .unwrap();
        let (first, n) = cache.model_at(&store, &plant, t(1)).await.unwrap();
        assert_eq!((n, cache.len()), (1, 1));
        let (again, _) = cache.model_at(&store, &plant, t(12)).await.unwrap();
        assert!(Arc::ptr_eq(&first, &again), "validated once, then shared");
        store
            .put_model_revision(&plant, &spec, &model, t(20))
            .await
            .unwrap();
        let (_, n) = cache.model_at(&store, &plant, t(21)).await.unwrap();
        assert_eq!((n, cache.len()), (2, 2));
    }
}
