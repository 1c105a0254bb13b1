//! Meters out of service, read from the technicians' notes: an `out_of_service` note takes its
//! meter out of the estimate from its `effective_at` until the next `back_in_service` note's
//! (open-ended without one). Every period whose start lies in such an interval runs without
//! the meter: its readings stay stored and are reported, but the engine is told to leave it
//! out ([`left_out`]). Pure: no store, no clock, so the scheduler, the what-if and the meter
//! list read the same intervals from the same notes.
//!
//! The intervals of a meter never overlap and only the last may be open: [`check`] refuses a
//! note that would break that, so the notes always pair up in order.

use chrono::{DateTime, SecondsFormat, Utc};
use reconcile::{LeftOut, Plant};

use crate::store::{MeterNote, NoteKind};

/// One interval a meter was (or is) out of service.
#[derive(Debug, Clone, PartialEq)]
pub struct Interval {
    pub tag: String,
    /// The `out_of_service` note's effective instant, id and text.
    pub since: DateTime<Utc>,
    pub note_id: i64,
    pub text: String,
    /// The `back_in_service` note's effective instant; none while still out.
    pub until: Option<DateTime<Utc>>,
}

impl Interval {
    /// Does a period starting at `t` run without the meter?
    pub fn covers(&self, t: DateTime<Utc>) -> bool {
        self.since <= t && self.until.is_none_or(|u| t < u)
    }

    /// The sentence a report gives for the meter it leaves out.
    pub fn reason(&self) -> String {
        let since = time(self.since);
        if self.text.trim().is_empty() {
            format!("out of service since {since}")
        } else {
            format!("out of service since {since}: {}", self.text)
        }
    }
}

fn time(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::Secs, true)
}

/// The out-of-service intervals the notes record, per tag in the notes' order (oldest effective
/// first, then by id): an `out_of_service` note opens one, the next `back_in_service` note of
/// its tag closes it. A note that pairs with nothing (which [`check`] never admits) is passed
/// over.
pub fn intervals(notes: &[MeterNote]) -> Vec<Interval> {
    let mut ordered: Vec<&MeterNote> = notes.iter().collect();
    ordered.sort_by_key(|n| (n.effective_at, n.id));
    let mut out: Vec<Interval> = Vec::new();
    for n in ordered {
        let open = out.iter_mut().find(|i| i.tag == n.tag && i.until.is_none());
        match (n.kind, open) {
            (NoteKind::OutOfService, None) => out.push(Interval {
                tag: n.tag.clone(),
                since: n.effective_at,
                note_id: n.id,
                text: n.text.clone(),
                until: None,
            }),
            (NoteKind::BackInService, Some(i)) if i.since < n.effective_at => {
                i.until = Some(n.effective_at);
            }
            _ => {}
        }
    }
    out
}

/// The interval of `tag` that covers a period starting at `t`, if any.
pub fn covering<'a>(
    intervals: &'a [Interval],
    tag: &str,
    t: DateTime<Utc>,
) -> Option<&'a Interval> {
    intervals.iter().find(|i| i.tag == tag && i.covers(t))
}

/// The meters of `plant` a period starting at `start` runs without, each with its reason.
pub fn left_out(plant: &Plant, intervals: &[Interval], start: DateTime<Utc>) -> Vec<LeftOut> {
    plant
        .meters
        .iter()
        .enumerate()
        .filter_map(|(meter, m)| {
            covering(intervals, &m.tag, start).map(|i| LeftOut {
                meter,
                reason: i.reason(),
            })
        })
        .collect()
}

/// Check a new note of `kind` on `tag` at `at` against the tag's notes. Admitted, the answer
/// is the instant from which the tag's periods already run must run again: an
/// `out_of_service` note's own instant (every period from it on now runs without the meter),
/// a `back_in_service` note's (every period from it on runs with the meter again); none for
/// the other kinds. Refused, the sentence says why, naming the existing note's time.
pub fn check(
    notes: &[MeterNote],
    tag: &str,
    kind: NoteKind,
    at: DateTime<Utc>,
) -> Result<Option<DateTime<Utc>>, String> {
    let intervals: Vec<Interval> = intervals(notes)
        .into_iter()
        .filter(|i| i.tag == tag)
        .collect();
    match kind {
        NoteKind::OutOfService => check_out(&intervals, tag, at).map(Some),
        NoteKind::BackInService => check_back(&intervals, tag, at).map(Some),
        NoteKind::Checked | NoteKind::Recalibrated | NoteKind::Replaced => Ok(None),
    }
}

/// A new interval from `at` runs until the next `back_in_service` note after it, so it
/// overlaps every existing interval that has not ended by `at`: one still open, one that
/// covers `at`, or one that starts later.
fn check_out(
    intervals: &[Interval],
    tag: &str,
    at: DateTime<Utc>,
) -> Result<DateTime<Utc>, String> {
    match intervals.iter().find(|i| i.until.is_none_or(|u| u > at)) {
        None => Ok(at),
        Some(i) => Err(format!(
            "effective_at {}: meter \"{tag}\" is already recorded out of service from {} ({}); \
             an out-of-service interval may not overlap another, so {}",
            time(at),
            time(i.since),
            match i.until {
                Some(u) => format!("back in service at {}", time(u)),
                None => "still open".to_string(),
            },
            match i.until {
                Some(_) if i.since > at => {
                    "a new one must start after the last one ends".to_string()
                }
                Some(_) => "this one must start when that one has ended".to_string(),
                None => "post back_in_service for it first".to_string(),
            }
        )),
    }
}

/// `back_in_service` ends the open interval, and only after it began.
fn check_back(
    intervals: &[Interval],
    tag: &str,
    at: DateTime<Utc>,
) -> Result<DateTime<Utc>, String> {
    if let Some(open) = intervals.iter().find(|i| i.until.is_none()) {
        if open.since < at {
            return Ok(at);
        }
        return Err(format!(
            "effective_at {}: meter \"{tag}\" is not out of service at that time: it went out \
             of service at {}; back_in_service must come after that",
            time(at),
            time(open.since)
        ));
    }
    let ended = intervals
        .iter()
        .find(|i| i.covers(at) || i.until == Some(at));
    Err(match ended {
        Some(i) => format!(
            "effective_at {}: meter \"{tag}\" is not out of service at that time: the interval \
             from {} already ended at {}",
            time(at),
            time(i.since),
            i.until.map(time).unwrap_or_default()
        ),
        None => format!(
            "effective_at {}: meter \"{tag}\" is not out of service at that time (no open \
             out_of_service note)",
            time(at)
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn t(hour: u32) -> DateTime<Utc> {
        use chrono::TimeZone;
        Utc.with_ymd_and_hms(2026, 6, 1, hour, 0, 0).unwrap()
    }

    fn note(id: i64, kind: NoteKind, hour: u32) -> MeterNote {
        MeterNote {
            id,
            tag: "FI-4".into(),
            kind,
            text: format!("note {id}"),
            effective_at: t(hour),
            created_at: t(0),
            as_found: None,
        }
    }

    #[test]
    fn notes_pair_into_intervals_and_cover_period_starts() {
        let notes = [
            note(1, NoteKind::OutOfService, 3),
            note(2, NoteKind::Checked, 4),
            note(3, NoteKind::BackInService, 6),
            note(4, NoteKind::OutOfService, 9),
        ];
        let got = intervals(&notes);
        assert_eq!(got.len(), 2);
        assert_eq!((got[0].since, got[0].until), (t(3), Some(t(6))));
        assert_eq!((got[1].since, got[1].until), (t(9), None));
        assert!(!got[0].covers(t(2)) && got[0].covers(t(3)) && got[0].covers(t(5)));
        assert!(!got[0].covers(t(6)), "back in service from its own instant");
        assert!(got[1].covers(t(23)));
        assert_eq!(
            got[0].reason(),
            "out of service since 2026-06-01T03:00:00Z: note 1"
        );
        assert!(covering(&got, "FI-4", t(7)).is_none());
        assert!(covering(&got, "FI-5", t(4)).is_none());
    }

    #[test]
    fn overlapping_or_unpaired_notes_are_refused_naming_the_existing_time() {
        let notes = [
            note(1, NoteKind::OutOfService, 3),
            note(2, NoteKind::BackInService, 6),
        ];
        let out = |h| check(&notes, "FI-4", NoteKind::OutOfService, t(h));
        assert_eq!(out(6), Ok(Some(t(6))), "adjacent intervals are fine");
        assert_eq!(out(8), Ok(Some(t(8))));
        for h in [1, 3, 5] {
            let why = out(h).unwrap_err();
            assert!(why.contains("2026-06-01T03:00:00Z"), "{why}");
        }
        let back = |h| check(&notes, "FI-4", NoteKind::BackInService, t(h));
        assert!(back(5)
            .unwrap_err()
            .contains("already ended at 2026-06-01T06:00:00Z"));
        assert!(back(8).unwrap_err().contains("not out of service"));

        let open = [note(1, NoteKind::OutOfService, 3)];
        assert_eq!(
            check(&open, "FI-4", NoteKind::BackInService, t(4)),
            Ok(Some(t(4)))
        );
        assert!(check(&open, "FI-4", NoteKind::BackInService, t(3)).is_err());
        assert!(check(&open, "FI-4", NoteKind::OutOfService, t(9))
            .unwrap_err()
            .contains("still open"));
        assert_eq!(check(&open, "FI-4", NoteKind::Checked, t(4)), Ok(None));
    }
}
