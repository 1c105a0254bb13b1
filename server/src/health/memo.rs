//! The service's memo of each plant's meter health (see [`Memo`]).

use super::Health;

/// Every meter's health of one plant as last assessed, and what it was assessed from, so
/// that the meter list, one meter's page and the plant list need not assess a long history
/// again on every request. The assessment is a function of the current model's tags, the
/// technicians' notes and the per-meter records of the runs; a new run of the plant (by any
/// instance), a new note or another set of tags makes it stale, and it is assessed again on
/// the next request.
#[derive(Debug, Default)]
pub struct Memo {
    plants: std::sync::Mutex<std::collections::HashMap<i64, (MemoKey, std::sync::Arc<Assessed>)>>,
}

/// What an assessment was made from: the tags in model order, the plant's runs (their count
/// and largest id: runs are never deleted) and its notes (count and largest id).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct MemoKey {
    pub tags: Vec<String>,
    pub runs: (i64, i64),
    pub notes: (usize, i64),
}

/// Every meter's health (after attribution among correlated suspects), where its record
/// starts (its last recalibration or replacement, or the health window's start, whichever is
/// later) and the first period of its record, in the order of the tags.
#[derive(Debug, Clone, PartialEq)]
pub struct Assessed {
    pub healths: Vec<Health>,
    pub since: Vec<chrono::DateTime<chrono::Utc>>,
    pub first: Vec<Option<chrono::DateTime<chrono::Utc>>>,
}

impl Memo {
    /// The assessment of `plant` made from `key`, if it is the one kept.
    pub fn get(&self, plant: i64, key: &MemoKey) -> Option<std::sync::Arc<Assessed>> {
        let plants = self.lock();
        plants
            .get(&plant)
            .filter(|(kept, _)| kept == key)
            .map(|(_, assessed)| std::sync::Arc::clone(assessed))
    }

    /// Keep `assessed`, made from `key`, for `plant` (replacing what was kept).
    pub fn put(&self, plant: i64, key: MemoKey, assessed: std::sync::Arc<Assessed>) {
        self.lock().insert(plant, (key, assessed));
    }

    fn lock(
        &self,
    ) -> std::sync::MutexGuard<
        '_,
        std::collections::HashMap<i64, (MemoKey, std::sync::Arc<Assessed>)>,
    > {
        // Entries are replaced whole; a map left by a panicking holder is still consistent.
        self.plants
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }
}
