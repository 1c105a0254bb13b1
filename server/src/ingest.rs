//! A batch of readings from a historian, from body to store: every line checked (known tag,
//! RFC 3339 time, finite value, quality word), repeats within the batch refused, the good
//! lines stored in one transaction, and an answer that accounts for every line.
//!
//! HTTP-free, so the service, the demo and the benchmarks post batches the same way
//! (`Service::ingest` adds the scheduler's wake-up and the counts).

use std::collections::{HashMap, HashSet};

use chrono::{DateTime, Utc};
use reconcile::{Quality, Reading};
use serde::Serialize;
use utoipa::ToSchema;

use reconcile::plausible::Kind;

use crate::readings::{self, BadList, BadReading, Format, Place, Problem, ReadingsError};
use crate::revisions::in_effect;
use crate::store::{PlantRow, Store, StoreError};

/// At most this many rejected lines are listed one by one; the count covers them all.
pub const MAX_LISTED_REJECTIONS: usize = 1_000;

/// Bytes of JSON the listed rejections may take: the first lines refused are listed while they
/// fit, so the whole answer stays well under 64 KiB however long the reasons. One rejection
/// takes at most about 4 KiB (four reasons, each quoting at most 200 characters), so at least
/// the first ten are always listed.
pub const LISTED_REJECTIONS_BYTES: usize = 48 * 1024;

/// What the screens need of each meter of one revision (unit, quantity, instrument range), by
/// tag.
type Kinds = HashMap<String, Kind>;

/// The meters a batch may name: every tag of every model revision of the plant (a reading
/// outlives the revision it was taken under). A reading's instrument range is that of the
/// revision in effect at its time (see [`in_effect`]).
#[derive(Debug, Clone)]
pub struct Catalogue {
    known: HashSet<String>,
    /// (effective_from, revision) of each revision, as [`in_effect`] takes them: built once,
    /// not per reading.
    keys: Vec<(DateTime<Utc>, i64)>,
    /// The kinds of each revision's meters, beside `keys`.
    kinds: Vec<Kinds>,
    period_seconds: i64,
}

impl Catalogue {
    /// `None` when the plant has no model yet.
    pub async fn load(store: &Store, plant: &PlantRow) -> Result<Option<Catalogue>, StoreError> {
        let revisions = store.list_revisions(plant).await?;
        let keys: Vec<(DateTime<Utc>, i64)> = revisions
            .iter()
            .map(|r| (r.effective_from, r.revision))
            .collect();
        let Some(now) = in_effect(&keys, Utc::now()) else {
            return Ok(None);
        };
        let current = &revisions[now];
        let period_seconds =
            reconcile::model::parse_period(&current.spec.period).ok_or_else(|| {
                StoreError::Corrupt(format!(
                    "revision {} has period \"{}\"",
                    current.revision, current.spec.period
                ))
            })?;
        let known = revisions
            .iter()
            .flat_map(|r| r.spec.meters.iter().map(|m| m.tag.clone()))
            .collect();
        let kinds = revisions
            .iter()
            .map(|r| {
                r.spec
                    .meters
                    .iter()
                    .filter_map(|m| Some((m.tag.clone(), Kind::of_spec(m)?)))
                    .collect()
            })
            .collect();
        Ok(Some(Catalogue {
            known,
            keys,
            kinds,
            period_seconds,
        }))
    }

    pub fn knows(&self, tag: &str) -> bool {
        self.known.contains(tag)
    }

    /// The kind of the reading's meter in the revision in effect at the reading's time.
    fn kind(&self, r: &Reading) -> Option<&Kind> {
        in_effect(&self.keys, r.time).and_then(|i| self.kinds[i].get(&r.tag))
    }

    /// Outside the range its meter has in the revision in effect at the reading's time, or a
    /// value no meter of its kind could give (the plausibility screen): the stored flag.
    pub fn out_of_range(&self, r: &Reading) -> bool {
        self.flags(r).0
    }

    /// (the stored flag, a value no meter of its kind could give), from one look at the
    /// reading's meter. An implausible reading is stored flagged and never averaged.
    fn flags(&self, r: &Reading) -> (bool, bool) {
        let Some(kind) = self.kind(r) else {
            return (false, false);
        };
        let implausible = kind.screen(r.value).is_some();
        let outside = kind
            .range
            .is_some_and(|[lo, hi]| !(lo..=hi).contains(&r.value));
        (outside || implausible, implausible)
    }
}

/// One refused line and every reason for it.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct Rejection {
    /// Physical line of a CSV body (the header is line 1).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<u64>,
    /// Index in the `readings` array of a JSON body.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub index: Option<usize>,
    pub reasons: Vec<String>,
}

/// What a batch did to the store, line by line accounted.
#[derive(Debug, Clone, Default, Serialize, ToSchema)]
pub struct IngestAnswer {
    /// Readings new to the store.
    pub accepted: usize,
    /// Stored readings whose value or quality this batch changed (their periods will be run
    /// again).
    pub replaced: usize,
    /// Identical resends: already stored exactly so, nothing changed.
    pub unchanged: usize,
    /// Lines refused, all counted; the first are listed in `rejections` (up to 1,000, as many
    /// as fit in 48 KiB).
    pub rejected: usize,
    /// Stored readings outside their meter's instrument range: kept and flagged (the
    /// implausible ones among them).
    pub out_of_range: usize,
    /// Stored readings no meter of their kind could give (a flow past any plant's throughput,
    /// a composition far outside 0 to 1, ten spans outside the instrument range): kept and
    /// flagged, left out of every period's mean.
    pub implausible: usize,
    /// Stored readings with quality `bad`: kept, not used in any balance.
    pub bad_quality: usize,
    /// The first refused lines, in body order, each with every reason.
    pub rejections: Vec<Rejection>,
}

/// Why a batch as a whole was refused (nothing stored).
#[derive(Debug, thiserror::Error)]
pub enum BatchError {
    #[error("{0}")]
    Unreadable(String),
    /// Checking the batch stopped before it finished (its thread panicked or was cancelled).
    #[error("checking the batch stopped unexpectedly: {0}")]
    Interrupted(String),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Check a body (CPU work: call it off the async threads for big bodies).
pub fn check_batch(
    body: &[u8],
    format: Format,
    catalogue: &Catalogue,
) -> Result<Checked, BatchError> {
    let sorted = readings::sort(
        body,
        format,
        &|tag| catalogue.knows(tag),
        MAX_LISTED_REJECTIONS,
    )
    .map_err(|e| match e {
        ReadingsError::File(msg) => BatchError::Unreadable(msg),
        ReadingsError::Bad(_) => BatchError::Unreadable("unreadable batch".into()),
    })?;
    let mut repeats = BadList::new(MAX_LISTED_REJECTIONS);
    let mut good = Vec::with_capacity(sorted.good.len());
    // A second line for one (tag, instant) in one batch is refused, not silently preferred:
    // which of two conflicting values is right is the historian's call. A later batch that
    // resends the instant is a correction and replaces it.
    let mut first: HashMap<(String, DateTime<Utc>), Place> = HashMap::new();
    for (place, reading) in sorted.good {
        match first.get(&(reading.tag.clone(), reading.time)) {
            Some(&earlier) => repeats.push(BadReading {
                place,
                problems: vec![Problem::Repeated { earlier }],
            }),
            None => {
                first.insert((reading.tag.clone(), reading.time), place);
                good.push(reading);
            }
        }
    }
    Ok(Checked {
        good,
        bad: sorted.bad.merge(repeats),
    })
}

/// A checked batch: the readings to store and the refused lines (the first listed, all
/// counted).
#[derive(Debug)]
pub struct Checked {
    pub good: Vec<Reading>,
    pub bad: BadList,
}

/// Store the good readings of a checked batch in one transaction and account for every line.
pub async fn store_batch(
    store: &Store,
    plant: &PlantRow,
    catalogue: &Catalogue,
    checked: Checked,
) -> Result<IngestAnswer, BatchError> {
    let (out_of_range, implausible) = checked.good.iter().fold((0, 0), |(out, odd), r| {
        let (flagged, absurd) = catalogue.flags(r);
        (out + usize::from(flagged), odd + usize::from(absurd))
    });
    let counts = if checked.good.is_empty() {
        Default::default()
    } else {
        store
            .ingest_readings(
                plant,
                &checked.good,
                catalogue.period_seconds,
                &|r: &Reading| catalogue.out_of_range(r),
            )
            .await?
    };
    Ok(IngestAnswer {
        accepted: counts.accepted,
        replaced: counts.replaced,
        unchanged: counts.unchanged,
        rejected: checked.bad.total,
        out_of_range,
        implausible,
        bad_quality: checked
            .good
            .iter()
            .filter(|r| r.quality == Quality::Bad)
            .count(),
        rejections: rejections(&checked.bad.listed),
    })
}

/// The first refused lines as the answer lists them: in order, while they fit in
/// [`LISTED_REJECTIONS_BYTES`] of JSON (the first always does).
fn rejections(bad: &[BadReading]) -> Vec<Rejection> {
    let mut listed = Vec::new();
    let mut bytes = 0;
    for b in bad.iter().take(MAX_LISTED_REJECTIONS) {
        let (line, index) = match b.place {
            Place::Line(n) => (Some(n), None),
            Place::Index(i) => (None, Some(i)),
        };
        let r = Rejection {
            line,
            index,
            reasons: b.problems.iter().map(|p| p.to_string()).collect(),
        };
        // The separating comma included.
        let size = serde_json::to_vec(&r).map_or(usize::MAX, |v| v.len() + 1);
        if !listed.is_empty() && bytes + size > LISTED_REJECTIONS_BYTES {
            break;
        }
        bytes += size;
        listed.push(r);
    }
    listed
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_batch_refuses_a_second_reading_within_the_same_millisecond() {
        // The store keeps instants to the millisecond: two such readings would be one row.
        let catalogue = Catalogue {
            known: ["F-1".to_string()].into_iter().collect(),
            keys: Vec::new(),
            kinds: Vec::new(),
            period_seconds: 3600,
        };
        let body =
            "tag,time,value\nF-1,2026-03-02T05:00:00.1234Z,1\nF-1,2026-03-02T05:00:00.1239Z,2\n";
        let checked = check_batch(body.as_bytes(), Format::Csv, &catalogue).unwrap();
        assert_eq!(checked.good.len(), 1);
        assert_eq!(checked.good[0].value, 1.0, "the first is kept");
        assert_eq!(
            checked.bad.listed[0].problems,
            [Problem::Repeated {
                earlier: Place::Line(2)
            }]
        );
    }

    fn catalogue(tags: &[&str]) -> Catalogue {
        Catalogue {
            known: tags.iter().map(|t| t.to_string()).collect(),
            keys: Vec::new(),
            kinds: Vec::new(),
            period_seconds: 3600,
        }
    }

    #[test]
    fn a_batch_bad_throughout_lists_its_first_lines_in_order_and_counts_them_all() {
        // Bad lines and repeats interleaved: the listing is by line, whichever the reason.
        let mut body = String::from("tag,time,value\n");
        for k in 0..3_000 {
            if k % 2 == 0 {
                body += &format!("F-1,2026-03-02T05:00:00Z,{k}\n");
            } else {
                body += &format!("F-1,2026-03-02T05:00:00Z,{}\n", "x".repeat(500));
            }
        }
        let checked = check_batch(body.as_bytes(), Format::Csv, &catalogue(&["F-1"])).unwrap();
        assert_eq!(checked.good.len(), 1);
        assert_eq!(checked.bad.total, 2_999);
        assert_eq!(checked.bad.listed.len(), MAX_LISTED_REJECTIONS);
        let lines: Vec<u64> = checked
            .bad
            .listed
            .iter()
            .map(|b| match b.place {
                Place::Line(n) => n,
                Place::Index(_) => unreachable!("a CSV body"),
            })
            .collect();
        let expected: Vec<u64> = (3..3 + MAX_LISTED_REJECTIONS as u64).collect();
        assert_eq!(lines, expected);
        assert!(matches!(
            checked.bad.listed[0].problems[..],
            [Problem::NotANumber(_)]
        ));
        assert!(matches!(
            checked.bad.listed[1].problems[..],
            [Problem::Repeated { .. }]
        ));

        let listed = rejections(&checked.bad.listed);
        let size = serde_json::to_vec(&listed).unwrap().len();
        assert!(size <= LISTED_REJECTIONS_BYTES, "{size}");
        assert!(listed.len() > 10, "{}", listed.len());
        assert!(
            listed[0].reasons[0].ends_with("…\" (500 characters) is not a number"),
            "{:?}",
            listed[0].reasons
        );
    }

    #[test]
    fn the_longest_reasons_still_list_the_first_lines_within_the_budget() {
        // Every field of every line too long and wrong: four reasons each, each cut.
        let long = "\u{202e}".repeat(10_000);
        let mut body = String::from("tag,time,value,quality\n");
        for _ in 0..50 {
            body += &format!("{long},{long},{long},{long}\n");
        }
        let checked = check_batch(body.as_bytes(), Format::Csv, &catalogue(&["F-1"])).unwrap();
        assert_eq!(checked.bad.total, 50);
        let listed = rejections(&checked.bad.listed);
        assert!(listed.len() >= 10, "{}", listed.len());
        assert_eq!(listed[0].line, Some(2));
        assert_eq!(listed[0].reasons.len(), 4);
        let size = serde_json::to_vec(&listed).unwrap().len();
        assert!(size <= LISTED_REJECTIONS_BYTES, "{size}");
        assert!(!listed[0].reasons[0].contains('\u{202e}'));
    }
}
