//! The readings the cases post or insert: every meter of the model, hourly, near a typical
//! value, from a fixed generator.

use chrono::{DateTime, Utc};
use reconcile::{Quality, Reading};

/// A meter of the model and where its readings sit.
pub struct Meter {
    tag: String,
    centre: f64,
    spread: f64,
}

/// A typical value and spread for a meter: mid-range for ranged flows, and by unit of
/// measure for the analysers.
pub fn meter(m: &reconcile::model::MeterSpec) -> Meter {
    let (centre, spread) = match (m.range, m.uom.as_str()) {
        (Some([lo, hi]), _) => (lo + 0.6 * (hi - lo), 0.02 * (hi - lo)),
        (None, "%") => (8.0, 0.3),
        (None, "ppm") => (1500.0, 60.0),
        (None, "fraction") => (0.7, 0.01),
        (None, "t/h") => (32.0, 0.5),
        (None, _) => (100.0, 2.0),
    };
    Meter {
        tag: m.tag.clone(),
        centre,
        spread,
    }
}

/// A small deterministic generator (SplitMix64): the same readings every run.
struct Noise(u64);

impl Noise {
    fn next(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        // Uniform on [-1, 1).
        (z >> 11) as f64 / (1u64 << 52) as f64 - 1.0
    }
}

/// `count` readings from the `first`-th on: reading i is meter i mod m at hour i / m, so a
/// batch covers consecutive hours of every meter. Values are rounded to 4 significant
/// decimals as a historian would send them; `shift` makes a changed resend.
pub fn readings(
    meters: &[Meter],
    start: DateTime<Utc>,
    first: usize,
    count: usize,
    shift: f64,
) -> Vec<Reading> {
    let mut noise = Noise(first as u64);
    (first..first + count)
        .map(|i| {
            let m = &meters[i % meters.len()];
            let value = m.centre + m.spread * noise.next() + shift * m.spread;
            Reading {
                tag: m.tag.clone(),
                time: start + chrono::Duration::hours((i / meters.len()) as i64),
                value: (value * 1e4).round() / 1e4,
                quality: Quality::Good,
            }
        })
        .collect()
}
