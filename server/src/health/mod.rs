//! Meter health over time (docs/methods.md §7): from each meter's record of reconciled periods since
//! its last recalibration or replacement, a sequential statistic on its normalised
//! adjustment, a pooled bias estimate, and the data screens (missing, frozen, out of range,
//! bad quality), summed up in one status.
//!
//! The sequential statistic is the two-sided tabular CUSUM of Page (1954) on the normalised
//! adjustment d = a / σ_a, which is N(0, 1) for a meter without bias:
//!
//!   S⁺ₕ = max(0, S⁺ₕ₋₁ + dₕ − k),   S⁻ₕ = max(0, S⁻ₕ₋₁ − dₕ − k),
//!
//! with reference value k = 0.5 (tuned to a shift of one σ of d) and two decision intervals:
//! `watch` at h = 5 and `suspect` at h = 10. By Siegmund's approximation of the average run
//! length, ARL ≈ (e^{−2Δb} + 2Δb − 1) / (2Δ²) with Δ = δ − k and b = h + 1.166 (Montgomery,
//! Introduction to Statistical Quality Control, §9.1), an unbiased meter reaches `watch` once
//! in about 470 periods and `suspect` once in about 70,000 periods (both sides together); a
//! shift of d by 1 (a bias of σ²/σ_a, e.g. 1.5 σ for a meter whose σ_a is 0.67 σ) reaches
//! `suspect` after about 19 periods on average.
//!
//! A bias b in meter i shifts the mean of its adjustment by −b σ_a² / σ² (adjustments are
//! reconciled − measured), so each period gives the estimate b̂ₕ = −a σ² / σ_a² with variance
//! σ⁴ / σ_a², and the periods of the evidence pool into the weighted mean with weights
//! σ_a² / σ⁴ (the generalised likelihood ratio estimate of a constant bias over independent
//! periods).
//!
//! Adjustments are shared: a bias in one meter also moves the adjustments of the meters its
//! balances tie it to, by less (the normalised adjustment of the biased meter has the largest
//! expected shift: Mah & Tamhane 1982, the maximum-power property under uncorrelated
//! measurement errors). So of the meters whose CUSUM reached `suspect` and that share a
//! balance neighbourhood, only those whose pooled evidence is the strongest are `suspect`; the
//! others are on `watch`, with the reason.

mod memo;
mod running;

use std::collections::BTreeMap;

use chrono::{DateTime, Utc};
use serde::Serialize;
use utoipa::ToSchema;

pub use memo::{Assessed, Memo, MemoKey};
pub use running::Running;

/// CUSUM reference value k, in units of σ of the normalised adjustment.
pub const CUSUM_K: f64 = 0.5;
/// CUSUM decision interval for `watch`.
pub const CUSUM_WATCH: f64 = 5.0;
/// CUSUM decision interval for `suspect`.
pub const CUSUM_SUSPECT: f64 = 10.0;
/// A meter whose measured value is identical over this many consecutive periods is frozen.
pub const FROZEN_PERIODS: usize = 6;

/// One reconciled period of one meter, as the run recorded it.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterPeriod {
    pub period_start: DateTime<Utc>,
    pub measured: Option<f64>,
    pub reconciled: Option<f64>,
    pub sigma: Option<f64>,
    pub adjustment: Option<f64>,
    pub adjustment_sigma: Option<f64>,
    pub normalized: Option<f64>,
    pub redundant: bool,
    /// The period's identification named the meter, or its measurement test failed.
    pub flagged: bool,
    pub readings: i64,
    pub bad_readings: i64,
    pub out_of_range_readings: i64,
    /// Correlation of this meter's adjustment with other meters' this period (|ρ| ≥ 0.2).
    pub correlations: BTreeMap<String, f64>,
}

/// The states of meter health (docs/api.md, "Meter health"), worst first in [`Status::rank`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    Ok,
    Watch,
    Suspect,
    Frozen,
    OutOfRange,
    Missing,
    Untestable,
    /// A technician's note took the meter out of service (set by the meter list from the
    /// notes, never by [`assess`]).
    OutOfService,
}

impl Status {
    /// Order of attention for a technician: suspect first. What loopbal found and nobody has
    /// acted on yet comes before a meter a technician already took out of service, which
    /// comes before the quieter states.
    pub fn rank(self) -> u8 {
        match self {
            Status::Suspect => 0,
            Status::Frozen => 1,
            Status::OutOfRange => 2,
            Status::Watch => 3,
            Status::OutOfService => 4,
            Status::Missing => 5,
            Status::Untestable => 6,
            Status::Ok => 7,
        }
    }
}

/// A meter's health at the end of its record.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Health {
    pub status: Status,
    /// Why, in a sentence.
    pub reason: String,
    /// Current CUSUM sums (high side: the meter reads high; low side: reads low).
    pub cusum_high: f64,
    pub cusum_low: f64,
    /// The larger of the two: the evidence for ranking.
    pub statistic: f64,
    /// Pooled bias estimate in the meter's uom (positive: reads high) over the periods of the
    /// evidence, or over the whole record when there is none; null without testable periods.
    pub bias: Option<f64>,
    pub bias_sigma: Option<f64>,
    /// bias / bias_sigma.
    pub bias_z: Option<f64>,
    /// First period of the current evidence (where the CUSUM last left zero); null when the
    /// statistic is zero.
    pub evidence_since: Option<DateTime<Utc>>,
    /// Periods whose own tests flagged the meter.
    pub periods_flagged: usize,
    /// Periods in the record, and of those, with a testable adjustment.
    pub periods: usize,
    pub periods_tested: usize,
    pub periods_missing: usize,
    pub periods_out_of_range: usize,
    pub periods_bad_quality: usize,
    /// The last period of the record.
    pub last_period: Option<DateTime<Utc>>,
    /// Suspect meters the meter set cannot tell apart from this one (see [`attribute`]).
    pub equivalent: Vec<String>,
}

/// One period's part of a pooled bias: (−a/σ², σ_a²/σ⁴), when the period has a testable
/// adjustment.
fn bias_terms(p: &MeterPeriod) -> Option<(f64, f64)> {
    let (Some(a), Some(sa), Some(s)) = (p.adjustment, p.adjustment_sigma, p.sigma) else {
        return None;
    };
    if !(sa > 0.0 && s > 0.0 && p.redundant) || p.normalized.is_none() {
        return None;
    }
    // b̂ₕ = −a σ²/σ_a² with weight σ_a²/σ⁴: Σ w b̂ = Σ −a/σ², Σ w = Σ σ_a²/σ⁴.
    Some((-a / (s * s), (sa * sa) / (s * s * s * s)))
}

/// Pooled bias of a run of periods: (estimate, σ).
fn pooled_bias(periods: &[&MeterPeriod]) -> Option<(f64, f64)> {
    let (mut num, mut info) = (0.0, 0.0);
    for (n, i) in periods.iter().filter_map(|p| bias_terms(p)) {
        num += n;
        info += i;
    }
    (info > 0.0).then(|| (num / info, 1.0 / info.sqrt()))
}

/// The normalised adjustment a period's CUSUM step takes, when the period is testable.
fn cusum_input(p: &MeterPeriod) -> Option<f64> {
    p.normalized.filter(|d| d.is_finite() && p.redundant)
}

/// One step of both CUSUM sides on the normalised adjustment `d`: (high, low) after it.
fn cusum_step(hi: f64, lo: f64, d: f64) -> (f64, f64) {
    // A meter reading high is adjusted down: d < 0 drives the high side.
    let up = -d;
    ((hi + up - CUSUM_K).max(0.0), (lo - up - CUSUM_K).max(0.0))
}

/// The state at the end of a meter's record that its health is judged from, however it was
/// reached: by [`assess`] over the whole record, or by [`Running`] period by period.
#[derive(Debug, Clone, PartialEq)]
struct End {
    hi: f64,
    lo: f64,
    /// Where the larger side's current excursion began.
    start: Option<DateTime<Utc>>,
    /// Pooled bias over the evidence (or the whole record): (estimate, σ).
    bias: Option<(f64, f64)>,
    periods: usize,
    tested: usize,
    flagged: usize,
    missing: usize,
    out_of_range: usize,
    bad_quality: usize,
    /// The last period: its start, whether it had a value, whether out of range.
    last: Option<(DateTime<Utc>, bool, bool)>,
    /// How many of the last periods repeat the last measured value exactly.
    frozen: usize,
}

/// The health of one meter from its record (oldest first), before the neighbourhood rule:
/// the whole record read from scratch.
pub fn assess(record: &[MeterPeriod]) -> Health {
    let (mut hi, mut lo) = (0.0f64, 0.0f64);
    // Index where each side's current excursion began.
    let (mut hi_start, mut lo_start) = (None::<usize>, None::<usize>);
    let mut tested = 0;
    for (i, p) in record.iter().enumerate() {
        let Some(d) = cusum_input(p) else {
            continue;
        };
        tested += 1;
        (hi, lo) = cusum_step(hi, lo, d);
        hi_start = if hi > 0.0 { hi_start.or(Some(i)) } else { None };
        lo_start = if lo > 0.0 { lo_start.or(Some(i)) } else { None };
    }
    let statistic = hi.max(lo);
    let start = if hi >= lo { hi_start } else { lo_start };
    let evidence: Vec<&MeterPeriod> = match start {
        Some(s) if statistic >= CUSUM_WATCH => record[s..].iter().collect(),
        _ => record.iter().collect(),
    };
    let count = |f: &dyn Fn(&MeterPeriod) -> bool| record.iter().filter(|p| f(p)).count();
    judge(End {
        hi,
        lo,
        start: start.map(|s| record[s].period_start),
        bias: pooled_bias(&evidence),
        periods: record.len(),
        tested,
        flagged: count(&|p| p.flagged),
        missing: count(&|p| p.measured.is_none()),
        out_of_range: count(&|p| p.out_of_range_readings > 0),
        bad_quality: count(&|p| p.bad_readings > 0),
        last: record.last().map(|p| {
            (
                p.period_start,
                p.measured.is_some(),
                p.out_of_range_readings > 0,
            )
        }),
        frozen: frozen_run(record),
    })
}

/// The health the end of a record shows: the screens first (missing, frozen, out of range),
/// then the statistic.
fn judge(end: End) -> Health {
    let (hi, lo) = (end.hi, end.lo);
    let statistic = hi.max(lo);
    let frozen = end.frozen;
    let (status, reason) = if end.periods == 0 {
        (
            Status::Ok,
            "no reconciled period since the history started".to_string(),
        )
    } else if end.last.is_some_and(|(_, measured, _)| !measured) {
        (
            Status::Missing,
            "no usable reading in the last period".to_string(),
        )
    } else if frozen >= FROZEN_PERIODS {
        (
            Status::Frozen,
            format!("the same value in the last {frozen} periods: the transmitter may be stuck"),
        )
    } else if end.last.is_some_and(|(_, _, out)| out) {
        (
            Status::OutOfRange,
            "readings outside the instrument range in the last period".to_string(),
        )
    } else if end.tested == 0 {
        (
            Status::Untestable,
            "not redundant in any period: the meter set cannot check it".to_string(),
        )
    } else if statistic >= CUSUM_SUSPECT {
        (
            Status::Suspect,
            format!(
                "CUSUM {statistic:.1} ≥ {CUSUM_SUSPECT}: the adjustments have leaned one way \
                 since {}",
                end.start.map(|s| s.to_rfc3339()).unwrap_or_default()
            ),
        )
    } else if statistic >= CUSUM_WATCH {
        (
            Status::Watch,
            format!("CUSUM {statistic:.1} ≥ {CUSUM_WATCH}: evidence building"),
        )
    } else {
        (
            Status::Ok,
            "adjustments within their expected spread".to_string(),
        )
    };
    let bias = end.bias;
    Health {
        status,
        reason,
        cusum_high: hi,
        cusum_low: lo,
        statistic,
        bias: bias.map(|b| b.0),
        bias_sigma: bias.map(|b| b.1),
        bias_z: bias.map(|(b, s)| b / s),
        evidence_since: end.start.filter(|_| statistic > 0.0),
        periods_flagged: end.flagged,
        periods: end.periods,
        periods_tested: end.tested,
        periods_missing: end.missing,
        periods_out_of_range: end.out_of_range,
        periods_bad_quality: end.bad_quality,
        last_period: end.last.map(|(t, _, _)| t),
        equivalent: Vec::new(),
    }
}

/// How many of the last periods repeat the last measured value exactly.
fn frozen_run(record: &[MeterPeriod]) -> usize {
    let mut values = record.iter().rev().map(|p| p.measured);
    let Some(Some(last)) = values.next() else {
        return 0;
    };
    1 + values.take_while(|v| *v == Some(last)).count()
}

/// Meters whose adjustments correlate at least this much share evidence: a bias in one moves
/// the other's normalised adjustment by ρ times as much.
pub const NEIGHBOUR_CORRELATION: f64 = 0.3;

/// Of meters that reached `suspect` and share evidence (|ρ| ≥ [`NEIGHBOUR_CORRELATION`]), keep
/// `suspect` only for those with the strongest evidence; the others go to `watch`, naming the
/// meter that explains them. `evidence(i, j)` gives both meters' evidence over the same
/// periods (Σ d / √n from the earlier of their evidence starts: a drift grows, so evidence over
/// different windows does not compare). Two suspects whose evidence differs by less than its
/// noise, 2 √(2 (1 − |ρ|)) (twice the σ of the difference of two unit normals of correlation
/// ρ), cannot be told apart by the meter set: both stay `suspect`, each naming the other, and
/// neither is singled out. `correlation(i, j)` is the correlation of their adjustments, when
/// known.
pub fn attribute(
    tags: &[String],
    health: &mut [Health],
    correlation: &dyn Fn(usize, usize) -> Option<f64>,
    evidence: &dyn Fn(usize, usize) -> (f64, f64),
) {
    let suspects: Vec<usize> = (0..health.len())
        .filter(|&i| health[i].status == Status::Suspect)
        .collect();
    let mut demoted = Vec::new();
    for &i in &suspects {
        for &j in &suspects {
            let Some(rho) = correlation(i, j).filter(|_| i != j) else {
                continue;
            };
            let rho = rho.abs();
            if rho < NEIGHBOUR_CORRELATION {
                continue;
            }
            let (zi, zj) = evidence(i, j);
            let gap = zj.abs() - zi.abs();
            let noise = 2.0 * (2.0 * (1.0 - rho).max(0.0)).sqrt();
            if gap.abs() <= noise {
                if !health[i].equivalent.contains(&tags[j]) {
                    health[i].equivalent.push(tags[j].clone());
                }
            } else if gap > 0.0 {
                demoted.push((i, j, zi, zj));
            }
        }
    }
    for (i, j, zi, zj) in demoted {
        if health[i].status != Status::Suspect {
            continue;
        }
        health[i].status = Status::Watch;
        health[i].equivalent.clear();
        health[i].reason = format!(
            "{}; but a bias in {} explains the evidence better (over the same periods |z| {:.1} \
             against {:.1})",
            health[i].reason,
            tags[j],
            zj.abs(),
            zi.abs()
        );
    }
    for h in health.iter_mut() {
        if h.status == Status::Suspect && !h.equivalent.is_empty() {
            h.reason = format!(
                "{}; the meter set cannot tell it apart from {}: check them together",
                h.reason,
                h.equivalent.join(", ")
            );
        }
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use chrono::TimeZone;
    use rand::SeedableRng;
    use rand_distr::{Distribution, StandardNormal};

    use super::*;

    /// A record of `n` hourly periods of a meter with σ = 1, σ_a = `sa`, whose adjustment
    /// carries noise plus the effect of a bias `bias` from period `from`.
    pub(crate) fn record(n: usize, sa: f64, bias: f64, from: usize, seed: u64) -> Vec<MeterPeriod> {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
        (0..n)
            .map(|h| {
                let noise: f64 = StandardNormal.sample(&mut rng);
                let shift = if h >= from { -bias * sa * sa } else { 0.0 };
                let a = noise * sa + shift;
                MeterPeriod {
                    period_start: Utc
                        .timestamp_opt(1_780_000_000 + 3600 * h as i64, 0)
                        .unwrap(),
                    measured: Some(100.0 + noise),
                    reconciled: Some(100.0),
                    sigma: Some(1.0),
                    adjustment: Some(a),
                    adjustment_sigma: Some(sa),
                    normalized: Some(a / sa),
                    redundant: true,
                    flagged: false,
                    readings: 4,
                    bad_readings: 0,
                    out_of_range_readings: 0,
                    correlations: BTreeMap::new(),
                }
            })
            .collect()
    }

    /// Every field equal, the bias sums within rounding (1e-9 of their σ): the running state
    /// subtracts the periods it drops from its whole-record sums, where a sum from scratch never
    /// added them.
    pub(crate) fn same(a: &Health, b: &Health) -> bool {
        let close = |x: Option<f64>, y: Option<f64>, scale: f64| match (x, y) {
            (Some(x), Some(y)) => (x - y).abs() <= 1e-9 * scale,
            (x, y) => x == y,
        };
        let scale = a.bias_sigma.unwrap_or(1.0);
        let (mut a2, mut b2) = (a.clone(), b.clone());
        for h in [&mut a2, &mut b2] {
            (h.bias, h.bias_sigma, h.bias_z) = (None, None, None);
        }
        a2 == b2
            && close(a.bias, b.bias, scale)
            && close(a.bias_sigma, b.bias_sigma, scale)
            && close(a.bias_z, b.bias_z, 1.0)
    }

    #[test]
    fn an_unbiased_meter_stays_ok_and_its_pooled_bias_is_near_zero() {
        let h = assess(&record(168, 0.7, 0.0, 0, 1));
        assert_ne!(h.status, Status::Suspect);
        let (b, s) = (h.bias.unwrap(), h.bias_sigma.unwrap());
        assert!(b.abs() < 3.0 * s, "{b} ± {s}");
        // σ of the pooled estimate: σ² / (σ_a √n) = 1 / (0.7 √168).
        assert!((s - 1.0 / (0.7 * 168f64.sqrt())).abs() < 1e-12);
    }

    #[test]
    fn a_bias_of_one_and_a_half_sigma_turns_suspect_and_is_estimated() {
        // Bias 1.5 σ from hour 48; σ_a = 0.7 σ, so d shifts by 1.05.
        for seed in 0..20 {
            let rec = record(168, 0.7, 1.5, 48, seed);
            let h = assess(&rec);
            assert_eq!(h.status, Status::Suspect, "seed {seed}: {}", h.reason);
            let (b, s) = (h.bias.unwrap(), h.bias_sigma.unwrap());
            assert!((b - 1.5).abs() < 3.0 * s, "seed {seed}: {b} ± {s}");
            let since = h.evidence_since.unwrap();
            let first = rec[0].period_start;
            let hours = (since - first).num_hours();
            assert!(
                (30..=100).contains(&hours),
                "seed {seed}: evidence from hour {hours}"
            );
            // Within 48 hours of the start of the bias.
            let soon = assess(&rec[..96]);
            assert_eq!(soon.status, Status::Suspect, "seed {seed}: {}", soon.reason);
        }
    }

    #[test]
    fn unbiased_meters_rarely_reach_suspect() {
        // 200 meter-weeks: at an ARL of ~70,000 periods, the expected number of false
        // suspects is 200 × 168 / 70,000 ≈ 0.5; allow 3 (Poisson tail below 2 %).
        let false_suspects = (0..200)
            .filter(|&seed| {
                assess(&record(168, 0.8, 0.0, 0, 1000 + seed)).status == Status::Suspect
            })
            .count();
        assert!(false_suspects <= 3, "{false_suspects}");
    }

    #[test]
    fn screens_come_before_the_statistic() {
        let mut rec = record(24, 0.7, 0.0, 0, 3);
        for p in rec.iter_mut().skip(24 - FROZEN_PERIODS) {
            p.measured = Some(42.0);
        }
        assert_eq!(assess(&rec).status, Status::Frozen);
        let mut rec = record(24, 0.7, 0.0, 0, 3);
        rec.last_mut().unwrap().out_of_range_readings = 1;
        assert_eq!(assess(&rec).status, Status::OutOfRange);
        let mut rec = record(24, 0.7, 0.0, 0, 3);
        rec.last_mut().unwrap().measured = None;
        assert_eq!(assess(&rec).status, Status::Missing);
        let mut rec = record(24, 0.7, 0.0, 0, 3);
        for p in &mut rec {
            p.redundant = false;
            p.normalized = None;
        }
        assert_eq!(assess(&rec).status, Status::Untestable);
    }

    #[test]
    fn of_two_suspect_neighbours_the_weaker_is_on_watch_unless_they_cannot_be_told_apart() {
        let fresh = || {
            vec![
                assess(&record(168, 0.7, 1.5, 48, 5)),
                assess(&record(168, 0.7, 1.0, 48, 6)),
            ]
        };
        let mut health = fresh();
        assert!(health.iter().all(|h| h.status == Status::Suspect));
        let gap = health[0].bias_z.unwrap().abs() - health[1].bias_z.unwrap().abs();
        assert!(gap > 1.0, "the first is clearly stronger: {gap}");
        let tags = vec!["A".to_string(), "B".to_string()];
        let z: Vec<f64> = health.iter().map(|h| h.bias_z.unwrap()).collect();
        let evidence = |i: usize, j: usize| (z[i], z[j]);
        attribute(&tags, &mut health, &|_, _| Some(0.6), &evidence);
        assert_eq!(health[0].status, Status::Suspect);
        assert_eq!(health[1].status, Status::Watch);
        assert!(
            health[1].reason.contains("a bias in A explains"),
            "{}",
            health[1].reason
        );
        // Meters whose adjustments do not correlate are judged alone.
        let mut health = fresh();
        attribute(&tags, &mut health, &|_, _| Some(0.1), &evidence);
        assert!(health.iter().all(|h| h.status == Status::Suspect));
        let mut health = fresh();
        attribute(&tags, &mut health, &|_, _| None, &evidence);
        assert!(health.iter().all(|h| h.status == Status::Suspect));
        // Nearly equivalent meters (ρ = 0.999: noise of the gap 2 √0.002 ≈ 0.09) are still
        // told apart by a gap of several units; at ρ = 1 − 1e-6 only a gap under 0.003 is
        // noise. With equal evidence both stay suspect, each naming the other.
        let mut health = fresh();
        attribute(&tags, &mut health, &|_, _| Some(-0.999), &|_, _| {
            (9.0, -9.0)
        });
        assert!(health.iter().all(|h| h.status == Status::Suspect));
        assert_eq!(health[0].equivalent, ["B"]);
        assert_eq!(health[1].equivalent, ["A"]);
        assert!(health[1].reason.contains("cannot tell it apart from A"));
    }
}
