//! Readings and periods (docs/readings.md): a reading belongs to the UTC-aligned period that contains
//! it; a meter's value for a period is the mean of its good and uncertain readings that pass
//! the plausibility screen ([`crate::plausible`]); bad readings are kept by the caller but not
//! used.

use chrono::{DateTime, TimeZone, Utc};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

use crate::model::{Meter, Plant};
use crate::plausible::{self, Implausible, Screened};

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "snake_case")]
pub enum Quality {
    #[default]
    Good,
    Uncertain,
    Bad,
}

impl Quality {
    pub fn parse(text: &str) -> Option<Quality> {
        match text {
            "" | "good" => Some(Quality::Good),
            "uncertain" => Some(Quality::Uncertain),
            "bad" => Some(Quality::Bad),
            _ => None,
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Reading {
    pub tag: String,
    pub time: DateTime<Utc>,
    pub value: f64,
    pub quality: Quality,
}

/// A meter's value for one period.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MeterValue {
    pub meter: usize,
    /// Mean of the good and uncertain readings, in the meter's uom.
    pub value: f64,
    pub readings: usize,
    pub used_uncertain: bool,
    /// Spread (max − min) of the readings averaged.
    pub spread: f64,
}

/// A meter the caller leaves out of one period's estimate (a technician took it out of
/// service, say), with the reason the report gives. Its value, if it has one, is still
/// reported as measured, but the estimate never sees it: it is neither adjusted nor tested.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct LeftOut {
    /// Index of the meter in the plant.
    pub meter: usize,
    /// Why, in a sentence, as the report's `not_used_reason` gives it.
    pub reason: String,
}

/// Everything the engine needs for one period.
#[derive(Debug, Clone, PartialEq)]
pub struct PeriodInput {
    pub start: DateTime<Utc>,
    pub end: DateTime<Utc>,
    pub values: Vec<MeterValue>,
    /// Meters not to be used this period, whatever their values.
    pub left_out: Vec<LeftOut>,
}

impl PeriodInput {
    /// Why `meter` is left out this period, if it is.
    pub fn left_out_reason(&self, meter: usize) -> Option<&str> {
        self.left_out
            .iter()
            .find(|l| l.meter == meter)
            .map(|l| l.reason.as_str())
    }
}

/// Start of the UTC-aligned period of `period_seconds` containing `time`.
pub fn period_start(time: DateTime<Utc>, period_seconds: i64) -> DateTime<Utc> {
    let t = time.timestamp();
    let start = t.div_euclid(period_seconds) * period_seconds;
    Utc.timestamp_opt(start, 0).single().expect("in range")
}

/// Group readings into the plant's periods, one input per period that has any reading (of any
/// quality), in time order. Readings of tags the plant does not know are ignored; readings the
/// plausibility screen refuses are left out of their meter's mean ([`prepare`] says which).
pub fn group_readings(plant: &Plant, readings: &[Reading]) -> Vec<PeriodInput> {
    prepare(plant, readings)
        .into_iter()
        .map(|(input, _)| input)
        .collect()
}

/// [`group_readings`], with each period's readings that the plausibility screen left out, per
/// meter.
pub fn prepare(plant: &Plant, readings: &[Reading]) -> Vec<(PeriodInput, Vec<Screened>)> {
    let mut by_period: BTreeMap<i64, BTreeMap<usize, Vec<&Reading>>> = BTreeMap::new();
    for r in readings {
        let Some(meter) = plant.meter_index(&r.tag) else {
            continue;
        };
        let start = period_start(r.time, plant.period_seconds).timestamp();
        by_period
            .entry(start)
            .or_default()
            .entry(meter)
            .or_default()
            .push(r);
    }
    by_period
        .into_iter()
        .map(|(start, meters)| {
            let mut screened = Vec::new();
            let values = meters
                .into_iter()
                .filter_map(|(meter, rs)| {
                    let (used, refused) = usable(&plant.meters[meter], &rs);
                    if let Some((first, why)) = refused.first().copied() {
                        screened.push(Screened {
                            meter,
                            readings: refused.len(),
                            first,
                            why,
                            all: used.is_empty(),
                        });
                    }
                    mean(meter, &used)
                })
                .collect();
            let input = PeriodInput {
                start: Utc.timestamp_opt(start, 0).single().expect("in range"),
                end: Utc
                    .timestamp_opt(start + plant.period_seconds, 0)
                    .single()
                    .expect("in range"),
                values,
                left_out: Vec::new(),
            };
            (input, screened)
        })
        .collect()
}

/// A meter's good and uncertain readings of one period, split into those its mean uses and
/// those the plausibility screen refuses (value and why).
fn usable<'a>(
    meter: &Meter,
    readings: &[&'a Reading],
) -> (Vec<&'a Reading>, Vec<(f64, Implausible)>) {
    let mut used = Vec::new();
    let mut refused = Vec::new();
    for r in readings.iter().filter(|r| r.quality != Quality::Bad) {
        match plausible::screen(meter, r.value) {
            None => used.push(*r),
            Some(why) => refused.push((r.value, why)),
        }
    }
    (used, refused)
}

/// The meter's value of the period: the mean of its usable readings, if it has any.
fn mean(meter: usize, used: &[&Reading]) -> Option<MeterValue> {
    if used.is_empty() {
        return None;
    }
    let sum: f64 = used.iter().map(|r| r.value).sum();
    let (lo, hi) = used
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), r| {
            (lo.min(r.value), hi.max(r.value))
        });
    Some(MeterValue {
        meter,
        value: sum / used.len() as f64,
        readings: used.len(),
        used_uncertain: used.iter().any(|r| r.quality == Quality::Uncertain),
        spread: hi - lo,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn periods_align_to_utc() {
        let t = DateTime::parse_from_rfc3339("2026-03-02T05:59:59.9+02:00")
            .unwrap()
            .with_timezone(&Utc);
        assert_eq!(
            period_start(t, 3600).to_rfc3339(),
            "2026-03-02T03:00:00+00:00"
        );
        assert_eq!(
            period_start(t, 86_400).to_rfc3339(),
            "2026-03-02T00:00:00+00:00"
        );
        assert_eq!(
            period_start(t, 900).to_rfc3339(),
            "2026-03-02T03:45:00+00:00"
        );
    }
}
