//! The posting side: batches and the test's ledger of what the database must hold, and the
//! historian tasks that post them.

use std::collections::{HashMap, HashSet};
use std::sync::{Arc, Mutex};

use chrono::{DateTime, SecondsFormat, TimeZone, Utc};
use rand::seq::SliceRandom;
use rand::Rng;
use rand_chacha::ChaCha8Rng;
use serde_json::Value;

use crate::support::OMBRASK_TAGS;

/// Largest batch, in readings.
const MAX_BATCH: f64 = 12_000.0;

/// Every tag has a reading slot every 10 s: 360 slots an hour.
const SLOT_MS: i64 = 10_000;

/// The ombrask model's period (tests/data/ombrask-loop.toml: period = "1h").
pub(super) const PERIOD_MS: i64 = 3_600_000;

/// A reading's identity: the index of its tag in OMBRASK_TAGS, its time in ms.
pub(super) type Key = (usize, i64);

/// A stored reading's value and quality.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Val {
    pub(super) value: f64,
    pub(super) quality: &'static str,
}

/// One reading of a batch, with what the test knew the database held for it when the batch
/// was made (None: a new reading).
#[derive(Debug, Clone)]
pub(super) struct Write {
    pub(super) key: Key,
    pub(super) val: Val,
    pub(super) prior: Option<Val>,
}

impl Write {
    pub(super) fn changes(&self) -> bool {
        self.prior != Some(self.val)
    }
}

/// A batch as posted: its readings in the order sent, as CSV or JSON.
#[derive(Debug)]
pub(super) struct Batch {
    id: u64,
    pub(super) writes: Vec<Write>,
    /// The regions (groups of keys written together) this batch holds while it is unsettled,
    /// so that no other batch writes the same keys meanwhile.
    regions: Vec<usize>,
    /// The region of its new readings, if it has any.
    fresh_region: Option<usize>,
    csv: bool,
}

impl Batch {
    pub(super) fn describe(&self) -> String {
        let new = self.writes.iter().filter(|w| w.prior.is_none()).count();
        let changed = self.writes.iter().filter(|w| w.changes()).count() - new;
        format!(
            "batch {} ({}, {} readings: {new} new, {changed} replacing, {} resent)",
            self.id,
            if self.csv { "CSV" } else { "JSON" },
            self.writes.len(),
            self.writes.len() - new - changed
        )
    }

    pub(super) fn body(&self) -> (String, &'static str) {
        if self.csv {
            let mut text = String::from("tag,time,value,quality\n");
            for w in &self.writes {
                text.push_str(&format!(
                    "{},{},{},{}\n",
                    OMBRASK_TAGS[w.key.0].0,
                    rfc3339(w.key.1),
                    w.val.value,
                    w.val.quality
                ));
            }
            (text, "text/csv")
        } else {
            let readings: Vec<Value> = self
                .writes
                .iter()
                .map(|w| {
                    serde_json::json!({
                        "tag": OMBRASK_TAGS[w.key.0].0,
                        "time": rfc3339(w.key.1),
                        "value": w.val.value,
                        "quality": w.val.quality,
                    })
                })
                .collect();
            (
                serde_json::json!({ "readings": readings }).to_string(),
                "application/json",
            )
        }
    }
}

pub(super) fn rfc3339(ms: i64) -> String {
    DateTime::from_timestamp_millis(ms)
        .expect("a time in range")
        .to_rfc3339_opts(SecondsFormat::Secs, true)
}

pub(super) fn period_of(ms: i64) -> i64 {
    ms.div_euclid(PERIOD_MS) * PERIOD_MS
}

/// What the test knows the database holds, and what is being written.
pub(super) struct Ledger {
    /// Every settled reading: acknowledged, or resolved after a kill.
    pub(super) values: HashMap<Key, Val>,
    /// Keys written together by a batch of new readings, for later batches to replace.
    regions: Vec<Vec<Key>>,
    /// Regions an unsettled batch is writing.
    busy: HashSet<usize>,
    next_slot: i64,
    next_id: u64,
    /// The instant of slot 0.
    pub(super) first_ms: i64,
}

impl Ledger {
    pub(super) fn new() -> Ledger {
        let first_ms = Utc
            .with_ymd_and_hms(2026, 1, 5, 0, 0, 0)
            .unwrap()
            .timestamp_millis();
        Ledger {
            values: HashMap::new(),
            regions: Vec::new(),
            busy: HashSet::new(),
            next_slot: 0,
            next_id: 1,
            first_ms,
        }
    }

    /// A new value for a reading of `tag`, different from `old`: near the tag's plausible
    /// value, quality mostly good.
    fn new_val(rng: &mut ChaCha8Rng, tag: usize, old: Option<Val>) -> Val {
        loop {
            let quality = match rng.gen_range(0..100) {
                0..=87 => "good",
                88..=95 => "uncertain",
                _ => "bad",
            };
            let value = OMBRASK_TAGS[tag].1 * (0.995 + 0.01 * rng.gen::<f64>());
            let val = Val { value, quality };
            if old.is_none_or(|o| o.value != val.value) {
                return val;
            }
        }
    }

    /// The next batch: new readings, a replacement of part of an earlier batch's readings not
    /// being written by anyone else, or both.
    pub(super) fn next_batch(&mut self, rng: &mut ChaCha8Rng) -> Batch {
        let id = self.next_id;
        self.next_id += 1;
        // Log-uniform sizes from 3 to MAX_BATCH readings.
        let size = 10f64
            .powf(rng.gen_range(0.5..MAX_BATCH.log10()))
            .round()
            .max(1.0) as usize;
        let free: Vec<usize> = (0..self.regions.len())
            .filter(|r| !self.busy.contains(r) && !self.regions[*r].is_empty())
            .collect();
        let roll = rng.gen_range(0..100);
        let replace = !free.is_empty() && roll < 45;
        let fresh = !replace || roll < 15;
        let mut writes = Vec::new();
        let mut regions = Vec::new();
        let mut fresh_region = None;
        if replace {
            let r = *free.choose(rng).expect("a free region");
            let keys = &self.regions[r];
            let n = size.min(keys.len());
            let from = rng.gen_range(0..=keys.len() - n);
            for &key in &keys[from..from + n] {
                let old = self.values[&key];
                // A few identical resends: they must change nothing.
                let val = if rng.gen_bool(0.1) {
                    old
                } else {
                    Ledger::new_val(rng, key.0, Some(old))
                };
                writes.push(Write {
                    key,
                    val,
                    prior: Some(old),
                });
            }
            self.busy.insert(r);
            regions.push(r);
        }
        if fresh {
            let n = if replace { size / 4 + 1 } else { size };
            let tags = OMBRASK_TAGS.len();
            let keys: Vec<Key> = (0..n)
                .map(|i| {
                    let slot = self.next_slot + (i / tags) as i64;
                    (i % tags, self.first_ms + slot * SLOT_MS)
                })
                .collect();
            self.next_slot += n.div_ceil(tags) as i64;
            for &key in &keys {
                writes.push(Write {
                    key,
                    val: Ledger::new_val(rng, key.0, None),
                    prior: None,
                });
            }
            fresh_region = Some(self.regions.len());
            self.busy.insert(self.regions.len());
            regions.push(self.regions.len());
            self.regions.push(keys);
        }
        writes.shuffle(rng);
        Batch {
            id,
            writes,
            regions,
            fresh_region,
            csv: rng.gen_bool(0.5),
        }
    }

    /// The batch is in the database: its values are now the settled ones.
    pub(super) fn apply(&mut self, batch: &Batch) {
        for w in &batch.writes {
            self.values.insert(w.key, w.val);
        }
    }

    /// The batch died unstored: its new readings do not exist, so nothing may replace them.
    pub(super) fn discard(&mut self, batch: &Batch) {
        if let Some(r) = batch.fresh_region {
            self.regions[r].clear();
        }
    }

    pub(super) fn release(&mut self, batch: &Batch) {
        for r in &batch.regions {
            self.busy.remove(r);
        }
    }
}

/// How a post ended.
#[derive(Debug)]
pub(super) enum Outcome {
    /// 200 and the answer.
    Acked(Value),
    /// No answer (the connection died, or never opened): the batch may or may not be stored.
    InFlight(String),
    /// Any other status: a failure of the test.
    Refused(u16, String),
}

async fn post(http: &reqwest::Client, url: &str, token: &str, batch: &Batch) -> Outcome {
    let (body, ctype) = batch.body();
    let sent = http
        .post(url)
        .bearer_auth(token)
        .header("content-type", ctype)
        .body(body)
        .send()
        .await;
    let r = match sent {
        Ok(r) => r,
        Err(e) => return Outcome::InFlight(e.to_string()),
    };
    let status = r.status().as_u16();
    match r.text().await {
        Err(e) => Outcome::InFlight(format!("status {status}, body lost: {e}")),
        Ok(text) if status == 200 => match serde_json::from_str(&text) {
            Ok(answer) => Outcome::Acked(answer),
            Err(e) => Outcome::Refused(status, format!("unreadable answer ({e}): {text}")),
        },
        Ok(text) => Outcome::Refused(status, text),
    }
}

/// A historian: posts batches one after another until one gets no answer (the server died)
/// or a refusal. An acknowledged batch is settled at once, so later batches may replace it.
pub(super) async fn historian(
    http: reqwest::Client,
    url: String,
    token: String,
    ledger: Arc<Mutex<Ledger>>,
    mut rng: ChaCha8Rng,
) -> Vec<(Batch, Outcome)> {
    let mut log = Vec::new();
    loop {
        let batch = ledger.lock().unwrap().next_batch(&mut rng);
        let outcome = post(&http, &url, &token, &batch).await;
        let acked = matches!(outcome, Outcome::Acked(_));
        if acked {
            let mut ledger = ledger.lock().unwrap();
            ledger.apply(&batch);
            ledger.release(&batch);
        }
        log.push((batch, outcome));
        if !acked {
            return log;
        }
    }
}
