//! The plausibility screen of a period's preparation: a reading that no meter of its kind could
//! give (a flow past any plant's throughput, a composition far outside 0 to 1, a value many
//! spans outside its meter's instrument range) is a transmission or typing fault, not a
//! measurement. It is kept where it is stored, flagged in the period's report, and left out of
//! its meter's mean, so one meter's absurd value never costs the other meters their period.
//!
//! The screen is deliberately wide: a reading merely outside its instrument range, or a
//! composition a little below zero from an analyser's zero drift, is a measurement (flagged as
//! out of range, used); the measurement test, not this screen, judges it.

use std::fmt;

use crate::model::{Meter, MeterSpec};
use crate::uom::{Quantity, Uom};

/// The largest molar flow a meter of any plant could read, kmol/h (component, molar and
/// standard-volume flows, in the engine's base unit). The largest synthesis loops circulate
/// of the order of 10⁵ kmol/h (common practice, no single source); the ceiling leaves a
/// hundredfold margin.
pub const MOLAR_FLOW_CEILING: f64 = 1.0e7;

/// The largest mass flow a meter of any plant could read, kg/h: the molar ceiling at a molar
/// mass of 100 kg/kmol.
pub const MASS_FLOW_CEILING: f64 = 1.0e9;

/// How far a composition may lie outside 0 to 1 (as a fraction) and still be an analyser's
/// reading: 25 percentage points, far beyond any calibration drift (common practice).
pub const FRACTION_MARGIN: f64 = 0.25;

/// How many instrument spans beyond either end of its range a reading may lie and still be a
/// reading of that instrument: a transmitter saturates a little past its range, never ten
/// spans past it (common practice).
pub const RANGE_SPANS: f64 = 10.0;

/// Why a value cannot be a reading of its meter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Implausible {
    NotFinite,
    /// Past the ceiling of its kind, in the meter's uom.
    PastCeiling {
        ceiling: f64,
    },
    /// A composition outside the widened 0-to-1 band, given in the meter's uom.
    NotAComposition {
        lo: f64,
        hi: f64,
    },
    /// Beyond [`RANGE_SPANS`] spans outside the instrument range.
    FarOutsideRange {
        lo: f64,
        hi: f64,
    },
}

impl fmt::Display for Implausible {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Implausible::NotFinite => f.write_str("not a finite number"),
            Implausible::PastCeiling { ceiling } => {
                write!(
                    f,
                    "past ±{ceiling:e}, more than any plant's meter of its kind reads"
                )
            }
            Implausible::NotAComposition { lo, hi } => {
                write!(f, "outside {lo} to {hi}, which no composition can be")
            }
            Implausible::FarOutsideRange { lo, hi } => write!(
                f,
                "more than {RANGE_SPANS} spans outside its instrument range ({lo} to {hi})"
            ),
        }
    }
}

/// Why `value` (in the meter's uom) cannot be a reading of `meter`, or `None` when it can.
pub fn screen(meter: &Meter, value: f64) -> Option<Implausible> {
    Kind::of(meter).screen(value)
}

/// What the screen needs of a meter: what it measures, in which unit, over which range.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Kind {
    pub quantity: Quantity,
    pub uom: Uom,
    pub range: Option<[f64; 2]>,
}

impl Kind {
    pub fn of(meter: &Meter) -> Kind {
        Kind {
            quantity: meter.quantity,
            uom: meter.uom,
            range: meter.range,
        }
    }

    /// The kind of a meter as a model file gives it; `None` for a unit the engine does not
    /// know (a model that would not validate).
    pub fn of_spec(spec: &MeterSpec) -> Option<Kind> {
        Some(Kind {
            quantity: spec.quantity,
            uom: Uom::parse(&spec.uom)?,
            range: spec.range,
        })
    }

    /// Why `value` (in the meter's uom) cannot be a reading of a meter of this kind.
    pub fn screen(&self, value: f64) -> Option<Implausible> {
        screen_kind(self, value)
    }
}

fn screen_kind(meter: &Kind, value: f64) -> Option<Implausible> {
    if !value.is_finite() {
        return Some(Implausible::NotFinite);
    }
    let factor = meter.uom.factor_from_base();
    match meter.quantity {
        Quantity::MolarFlow | Quantity::ComponentFlow | Quantity::StdVolumeFlow => {
            let ceiling = MOLAR_FLOW_CEILING * factor;
            if value.abs() > ceiling {
                return Some(Implausible::PastCeiling { ceiling });
            }
        }
        Quantity::MassFlow => {
            let ceiling = MASS_FLOW_CEILING * factor;
            if value.abs() > ceiling {
                return Some(Implausible::PastCeiling { ceiling });
            }
        }
        Quantity::MoleFraction | Quantity::MassFraction => {
            let (lo, hi) = (-FRACTION_MARGIN * factor, (1.0 + FRACTION_MARGIN) * factor);
            if !(lo..=hi).contains(&value) {
                return Some(Implausible::NotAComposition { lo, hi });
            }
        }
    }
    if let Some([lo, hi]) = meter.range {
        let span = hi - lo;
        if span > 0.0 {
            let (wide_lo, wide_hi) = (lo - RANGE_SPANS * span, hi + RANGE_SPANS * span);
            if !(wide_lo..=wide_hi).contains(&value) {
                return Some(Implausible::FarOutsideRange { lo, hi });
            }
        }
    }
    None
}

/// The readings of one meter in one period that the screen left out.
#[derive(Debug, Clone, PartialEq)]
pub struct Screened {
    /// Index of the meter in the plant.
    pub meter: usize,
    /// How many of its good and uncertain readings were left out.
    pub readings: usize,
    /// The first of them, in the meter's uom, and why it was left out.
    pub first: f64,
    pub why: Implausible,
    /// Whether every good and uncertain reading of the meter in the period was left out, so
    /// the meter has no value this period.
    pub all: bool,
}

impl Screened {
    /// The sentence a period report gives.
    pub fn warning(&self, meter: &Meter) -> String {
        let left = if self.all {
            "the meter has no value this period"
        } else {
            "its mean is of its other readings"
        };
        format!(
            "implausible: meter \"{}\": {} reading(s) left out of the period's mean, the first \
             {:e} {}: {}; {left}. The readings are kept as stored",
            meter.tag, self.readings, self.first, meter.uom, self.why
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::Sigma;

    fn meter(quantity: Quantity, uom: Uom, range: Option<[f64; 2]>) -> Meter {
        Meter {
            tag: "T".into(),
            stream: 0,
            quantity,
            component: quantity.needs_component().then_some(0),
            basis: None,
            uom,
            sigma: Sigma::Absolute(1.0),
            range,
        }
    }

    #[test]
    fn flows_past_the_ceiling_are_implausible_in_every_uom() {
        let kmol = meter(Quantity::MolarFlow, Uom::KmolPerHour, None);
        assert_eq!(screen(&kmol, 2.5e5), None, "a large loop's recycle");
        assert_eq!(
            screen(&kmol, -40.0),
            None,
            "a meter reading a little below zero"
        );
        assert!(matches!(
            screen(&kmol, 1.7e308),
            Some(Implausible::PastCeiling { .. })
        ));
        assert!(screen(&kmol, -2.0e7).is_some());
        // The same ceiling in mol/s: 1e7 kmol/h = 2.78e6 mol/s.
        let mols = meter(Quantity::MolarFlow, Uom::MolPerSecond, None);
        assert_eq!(screen(&mols, 2.7e6), None);
        assert!(screen(&mols, 2.8e6).is_some());
        let tonnes = meter(Quantity::MassFlow, Uom::TonnePerHour, None);
        assert_eq!(screen(&tonnes, 9.9e5), None);
        assert!(screen(&tonnes, 1.1e6).is_some());
        assert_eq!(screen(&kmol, f64::NAN), Some(Implausible::NotFinite));
    }

    #[test]
    fn customary_units_are_screened_against_the_same_ceilings() {
        // 10⁹ kg/h = 10⁹ / 0.453 592 37 lb/h = 2.204 6·10⁹ lb/h (NIST SP 811 pound).
        let lb = meter(Quantity::MassFlow, Uom::LbPerHour, None);
        assert_eq!(screen(&lb, 2.2e9), None, "just under 10⁹ kg/h");
        match screen(&lb, 2.21e9) {
            Some(Implausible::PastCeiling { ceiling }) => {
                assert!((ceiling - 2.204_622_621_8e9).abs() < 1.0, "{ceiling}")
            }
            other => panic!("{other:?}"),
        }
        // A big plant's 5·10⁶ lb/h (2268 t/h) is a reading.
        assert_eq!(screen(&lb, 5.0e6), None);
        let klb = meter(Quantity::MassFlow, Uom::KlbPerHour, None);
        assert_eq!(screen(&klb, 2.2e6), None);
        assert!(screen(&klb, 2.21e6).is_some());
        // 10⁷ kmol/h ≈ 2.0·10⁵ MMSCFD (1 MMSCFD ≈ 49.8 kmol/h).
        let mmscfd = meter(Quantity::StdVolumeFlow, Uom::Mmscfd, None);
        assert_eq!(screen(&mmscfd, 350.0), None, "a large gas plant's feed");
        assert_eq!(screen(&mmscfd, 2.0e5), None);
        assert!(matches!(
            screen(&mmscfd, 2.01e5),
            Some(Implausible::PastCeiling { .. })
        ));
        let scfh = meter(Quantity::StdVolumeFlow, Uom::Scfh, None);
        assert_eq!(screen(&scfh, 8.3e9), None);
        assert!(screen(&scfh, 8.4e9).is_some());
        let lbmol = meter(Quantity::ComponentFlow, Uom::LbmolPerHour, None);
        assert_eq!(screen(&lbmol, 2.2e7), None);
        assert!(screen(&lbmol, 2.21e7).is_some());
        // Compositions: -25 % to 125 % in mol % and vol %, -2.5·10⁵ to 1.25·10⁶ ppmv.
        for u in [Uom::MolPercent, Uom::VolPercent] {
            let pct = meter(Quantity::MoleFraction, u, None);
            assert_eq!(screen(&pct, 99.0), None, "{u}");
            assert_eq!(
                screen(&pct, 130.0),
                Some(Implausible::NotAComposition {
                    lo: -25.0,
                    hi: 125.0
                }),
                "{u}"
            );
        }
        let ppmv = meter(Quantity::MoleFraction, Uom::Ppmv, None);
        assert_eq!(screen(&ppmv, 3.0e5), None);
        assert!(screen(&ppmv, 1.3e6).is_some());
    }

    #[test]
    fn compositions_far_outside_zero_to_one_are_implausible() {
        let pct = meter(Quantity::MoleFraction, Uom::Percent, None);
        assert_eq!(screen(&pct, -0.4), None, "zero drift");
        assert_eq!(screen(&pct, 101.0), None);
        assert!(screen(&pct, 130.0).is_some());
        assert!(screen(&pct, -30.0).is_some());
        let ppm = meter(Quantity::MoleFraction, Uom::Ppm, None);
        assert!(screen(&ppm, 1.3e6).is_some());
        assert_eq!(screen(&ppm, 3.0e5), None);
    }

    #[test]
    fn a_reading_ten_spans_outside_its_range_is_implausible() {
        // A 0-20 ppm trace analyser saturates near 20; 250 ppm is not its reading.
        let trace = meter(Quantity::MoleFraction, Uom::Ppm, Some([0.0, 20.0]));
        assert_eq!(
            screen(&trace, 25.0),
            None,
            "out of range is still a reading"
        );
        assert_eq!(screen(&trace, 220.0), None);
        assert!(matches!(
            screen(&trace, 250.0),
            Some(Implausible::FarOutsideRange { .. })
        ));
        assert!(screen(&trace, -201.0).is_some());
        let flow = meter(Quantity::MolarFlow, Uom::KmolPerHour, Some([0.0, 5000.0]));
        assert_eq!(screen(&flow, 54_000.0), None);
        assert!(screen(&flow, 56_000.0).is_some());
    }
}
