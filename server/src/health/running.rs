//! A meter's health kept as running sums, so that a run landing after the meter's last period
//! updates it in O(1) instead of a read of the whole record: the two CUSUM sides and where each
//! side's current excursion began, the pooled-bias sums since each excursion began and over the
//! whole record, the counts, and the frozen-run state. [`Running::health`] gives exactly what
//! [`super::assess`] gives over the same record, up to rounding in the whole record's bias
//! sums after periods were dropped from its front (see [`Running::drop_front`]).
//!
//! Dropping the oldest periods (the health window moved on) cannot be done to a CUSUM in
//! general, but it can in the case that matters: the tabular CUSUM started at any instant
//! is never above the one started earlier (by induction on S = max(0, S + x − k)), so once the
//! earlier one touches zero the two are equal from then on. A side whose current excursion
//! began at or after the new start, or that is at zero, is therefore already what a record
//! starting there gives; only a side whose excursion began before it needs the record read
//! again.

use chrono::{DateTime, TimeZone, Utc};

use super::{bias_terms, cusum_input, cusum_step, judge, End, Health, MeterPeriod};

/// Pooled-bias sums: Σ −a/σ², Σ σ_a²/σ⁴ and how many periods gave them.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
struct Sums {
    num: f64,
    info: f64,
    n: u64,
}

impl Sums {
    fn add(&mut self, terms: Option<(f64, f64)>) {
        if let Some((num, info)) = terms {
            self.num += num;
            self.info += info;
            self.n += 1;
        }
    }

    fn remove(&mut self, terms: Option<(f64, f64)>) {
        if let Some((num, info)) = terms {
            self.n -= 1;
            if self.n == 0 {
                // Exactly nothing, not a rounding residue of the subtractions.
                *self = Sums::default();
            } else {
                self.num -= num;
                self.info -= info;
            }
        }
    }

    /// (estimate, σ), as [`super::pooled_bias`] gives it.
    fn pooled(&self) -> Option<(f64, f64)> {
        (self.info > 0.0).then(|| (self.num / self.info, 1.0 / self.info.sqrt()))
    }
}

/// One meter's health state at the end of its record from `since` on.
#[derive(Debug, Clone, PartialEq)]
pub struct Running {
    /// The record starts at or after this instant (its last reset or the window's start).
    pub since: DateTime<Utc>,
    /// The first and the last period folded in.
    pub first: Option<DateTime<Utc>>,
    pub last: Option<DateTime<Utc>>,
    hi: f64,
    lo: f64,
    hi_start: Option<DateTime<Utc>>,
    lo_start: Option<DateTime<Utc>>,
    /// Sums of the periods since each side's excursion began.
    hi_sums: Sums,
    lo_sums: Sums,
    whole: Sums,
    periods: u64,
    tested: u64,
    flagged: u64,
    missing: u64,
    out_of_range: u64,
    bad_quality: u64,
    last_measured: Option<f64>,
    last_out_of_range: bool,
    /// The run of equal values up to the last period (may be longer than the record after a
    /// drop: [`Running::health`] caps it).
    frozen: u64,
}

/// The counts a period adds to: flagged, missing, out of range, bad quality.
fn marks(p: &MeterPeriod) -> [bool; 4] {
    [
        p.flagged,
        p.measured.is_none(),
        p.out_of_range_readings > 0,
        p.bad_readings > 0,
    ]
}

impl Running {
    /// The state of an empty record starting at `since`.
    pub fn fresh(since: DateTime<Utc>) -> Running {
        Running {
            since,
            first: None,
            last: None,
            hi: 0.0,
            lo: 0.0,
            hi_start: None,
            lo_start: None,
            hi_sums: Sums::default(),
            lo_sums: Sums::default(),
            whole: Sums::default(),
            periods: 0,
            tested: 0,
            flagged: 0,
            missing: 0,
            out_of_range: 0,
            bad_quality: 0,
            last_measured: None,
            last_out_of_range: false,
            frozen: 0,
        }
    }

    /// The state of `record` (oldest first, every period at or after `since`).
    pub fn of<'a>(since: DateTime<Utc>, record: impl IntoIterator<Item = &'a MeterPeriod>) -> Self {
        let mut state = Running::fresh(since);
        for p in record {
            state.fold(p);
        }
        state
    }

    /// Add period `p`, later than every period folded in so far.
    pub fn fold(&mut self, p: &MeterPeriod) {
        let t = p.period_start;
        self.first.get_or_insert(t);
        self.last = Some(t);
        self.periods += 1;
        let [flagged, missing, out, bad] = marks(p);
        self.flagged += u64::from(flagged);
        self.missing += u64::from(missing);
        self.out_of_range += u64::from(out);
        self.bad_quality += u64::from(bad);
        let terms = bias_terms(p);
        self.whole.add(terms);
        if let Some(d) = cusum_input(p) {
            self.tested += 1;
            (self.hi, self.lo) = cusum_step(self.hi, self.lo, d);
            for (side, start, sums) in [
                (self.hi, &mut self.hi_start, &mut self.hi_sums),
                (self.lo, &mut self.lo_start, &mut self.lo_sums),
            ] {
                if side > 0.0 {
                    if start.is_none() {
                        *start = Some(t);
                        *sums = Sums::default();
                    }
                } else {
                    *start = None;
                    *sums = Sums::default();
                }
            }
        }
        if self.hi_start.is_some() {
            self.hi_sums.add(terms);
        }
        if self.lo_start.is_some() {
            self.lo_sums.add(terms);
        }
        self.frozen = match p.measured {
            Some(v) if self.last_measured == Some(v) => self.frozen + 1,
            Some(_) => 1,
            None => 0,
        };
        self.last_measured = p.measured;
        self.last_out_of_range = out;
    }

    /// Start the record at `since` instead: `dropped` are the folded periods before it (oldest
    /// first) and `first` the first period at or after it. False, and nothing changed, when a
    /// CUSUM side's current excursion began before `since` (the record must be read again
    /// from `since`).
    pub fn drop_front(
        &mut self,
        since: DateTime<Utc>,
        dropped: &[MeterPeriod],
        first: Option<DateTime<Utc>>,
    ) -> bool {
        let began_before =
            |side: f64, start: Option<DateTime<Utc>>| side > 0.0 && start.is_none_or(|s| s < since);
        if began_before(self.hi, self.hi_start) || began_before(self.lo, self.lo_start) {
            return false;
        }
        if dropped.len() as u64 >= self.periods {
            *self = Running::fresh(since);
            return true;
        }
        for p in dropped {
            self.periods -= 1;
            let [flagged, missing, out, bad] = marks(p);
            self.flagged -= u64::from(flagged);
            self.missing -= u64::from(missing);
            self.out_of_range -= u64::from(out);
            self.bad_quality -= u64::from(bad);
            self.tested -= u64::from(cusum_input(p).is_some());
            self.whole.remove(bias_terms(p));
        }
        self.since = since;
        self.first = first;
        true
    }

    /// The meter's health at the end of the record, before the neighbourhood rule.
    pub fn health(&self) -> Health {
        let statistic = self.hi.max(self.lo);
        let (start, sums) = if self.hi >= self.lo {
            (self.hi_start, self.hi_sums)
        } else {
            (self.lo_start, self.lo_sums)
        };
        let bias = match start {
            Some(_) if statistic >= super::CUSUM_WATCH => sums.pooled(),
            _ => self.whole.pooled(),
        };
        let count = |n: u64| n as usize;
        judge(End {
            hi: self.hi,
            lo: self.lo,
            start,
            bias,
            periods: count(self.periods),
            tested: count(self.tested),
            flagged: count(self.flagged),
            missing: count(self.missing),
            out_of_range: count(self.out_of_range),
            bad_quality: count(self.bad_quality),
            last: self
                .last
                .map(|t| (t, self.last_measured.is_some(), self.last_out_of_range)),
            frozen: count(self.frozen.min(self.periods)),
        })
    }

    /// The state as bytes, for the store (read back by [`Running::decode`]).
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::with_capacity(200);
        out.push(FORMAT);
        let time = |out: &mut Vec<u8>, t: Option<DateTime<Utc>>| {
            opt(out, t.map(|t| t.timestamp_millis().to_le_bytes()))
        };
        out.extend(self.since.timestamp_millis().to_le_bytes());
        time(&mut out, self.first);
        time(&mut out, self.last);
        out.extend(self.hi.to_le_bytes());
        out.extend(self.lo.to_le_bytes());
        time(&mut out, self.hi_start);
        time(&mut out, self.lo_start);
        for s in [self.hi_sums, self.lo_sums, self.whole] {
            out.extend(s.num.to_le_bytes());
            out.extend(s.info.to_le_bytes());
            out.extend(s.n.to_le_bytes());
        }
        for n in [
            self.periods,
            self.tested,
            self.flagged,
            self.missing,
            self.out_of_range,
            self.bad_quality,
            self.frozen,
        ] {
            out.extend(n.to_le_bytes());
        }
        opt(&mut out, self.last_measured.map(f64::to_le_bytes));
        out.push(u8::from(self.last_out_of_range));
        out
    }

    /// The state [`Running::encode`] wrote; none when the bytes are not one (another format:
    /// the state is then read again from the record).
    pub fn decode(bytes: &[u8]) -> Option<Running> {
        let mut r = Reader(bytes);
        if r.take::<1>()? != [FORMAT] {
            return None;
        }
        let since = instant(i64::from_le_bytes(r.take()?))?;
        let first = r.time()?;
        let last = r.time()?;
        let hi = f64::from_le_bytes(r.take()?);
        let lo = f64::from_le_bytes(r.take()?);
        let hi_start = r.time()?;
        let lo_start = r.time()?;
        let mut sums = [Sums::default(); 3];
        for s in &mut sums {
            s.num = f64::from_le_bytes(r.take()?);
            s.info = f64::from_le_bytes(r.take()?);
            s.n = u64::from_le_bytes(r.take()?);
        }
        let mut counts = [0u64; 7];
        for n in &mut counts {
            *n = u64::from_le_bytes(r.take()?);
        }
        let last_measured = match r.take::<1>()? {
            [0] => None,
            [1] => Some(f64::from_le_bytes(r.take()?)),
            _ => return None,
        };
        let last_out_of_range = match r.take::<1>()? {
            [b] if b <= 1 => b == 1,
            _ => return None,
        };
        let [periods, tested, flagged, missing, out_of_range, bad_quality, frozen] = counts;
        let [hi_sums, lo_sums, whole] = sums;
        r.0.is_empty().then_some(Running {
            since,
            first,
            last,
            hi,
            lo,
            hi_start,
            lo_start,
            hi_sums,
            lo_sums,
            whole,
            periods,
            tested,
            flagged,
            missing,
            out_of_range,
            bad_quality,
            last_measured,
            last_out_of_range,
            frozen,
        })
    }
}

/// The version of the byte layout of [`Running::encode`].
const FORMAT: u8 = 1;

fn opt(out: &mut Vec<u8>, value: Option<[u8; 8]>) {
    match value {
        Some(bytes) => {
            out.push(1);
            out.extend(bytes);
        }
        None => out.push(0),
    }
}

fn instant(ms: i64) -> Option<DateTime<Utc>> {
    Utc.timestamp_millis_opt(ms).single()
}

struct Reader<'a>(&'a [u8]);

impl Reader<'_> {
    fn take<const N: usize>(&mut self) -> Option<[u8; N]> {
        let (head, rest) = self.0.split_first_chunk::<N>()?;
        self.0 = rest;
        Some(*head)
    }

    /// An optional instant: none on bad bytes, `Some(None)` when absent.
    fn time(&mut self) -> Option<Option<DateTime<Utc>>> {
        match self.take::<1>()? {
            [0] => Some(None),
            [1] => instant(i64::from_le_bytes(self.take()?)).map(Some),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::health::assess;
    use crate::health::tests::{record, same};

    #[test]
    fn folding_period_by_period_gives_what_the_whole_record_gives() {
        for seed in 0..10 {
            let rec = record(300, 0.7, 1.2, 120, seed);
            let since = rec[0].period_start;
            let mut running = Running::fresh(since);
            for n in 0..rec.len() {
                running.fold(&rec[n]);
                // Folded sums are the from-scratch sums in the same order: equal to the bit.
                assert_eq!(running.health(), assess(&rec[..=n]), "seed {seed}, {n}");
                let again = Running::decode(&running.encode()).expect("decodes");
                assert_eq!(again, running);
            }
        }
    }

    #[test]
    fn dropping_the_front_gives_what_the_shorter_record_gives_or_refuses() {
        let (mut dropped_ok, mut refused) = (0, 0);
        for seed in 0..10 {
            let rec = record(400, 0.7, if seed % 2 == 0 { 1.5 } else { 0.0 }, 200, seed);
            for cut in [1, 24, 150, 250, 399, 400] {
                let mut running = Running::of(rec[0].period_start, &rec);
                let since = rec
                    .get(cut)
                    .map_or(rec[399].period_start + chrono::TimeDelta::hours(1), |p| {
                        p.period_start
                    });
                let first = rec.get(cut).map(|p| p.period_start);
                if running.drop_front(since, &rec[..cut], first) {
                    dropped_ok += 1;
                    let scratch = assess(&rec[cut..]);
                    assert!(same(&running.health(), &scratch), "seed {seed}, cut {cut}");
                    assert_eq!(running.first, first);
                } else {
                    refused += 1;
                    let excursion = running.health().evidence_since.unwrap();
                    assert!(excursion < since, "seed {seed}, cut {cut}");
                }
            }
        }
        // Both paths were taken.
        assert!(dropped_ok > 10 && refused > 0, "{dropped_ok} {refused}");
    }

    #[test]
    fn bad_bytes_are_not_a_state() {
        let running = Running::of(
            record(5, 0.7, 0.0, 0, 1)[0].period_start,
            &record(5, 0.7, 0.0, 0, 1),
        );
        let bytes = running.encode();
        assert!(Running::decode(&bytes[..bytes.len() - 1]).is_none());
        let mut other = bytes.clone();
        other[0] = 9;
        assert!(Running::decode(&other).is_none());
        assert!(Running::decode(&[]).is_none());
    }
}
