//! Units of measure of meters (docs/model.md, `[[meter]]`) and their conversion from the engine's base units:
//! kmol/h for molar flows, kg/h for mass flows, mole or mass fraction (0–1) for compositions.
//!
//! Every factor is derived from exact definitions named beside it, never typed as a bare
//! number: the SI's own prefixes and time units, the international pound and foot (NIST
//! Special Publication 811, 2008 edition, appendix B), the standard acceleration of gravity
//! (NIST SP 811, 2008) and the molar gas constant (CODATA 2018). Standard volumes are converted
//! to amounts of substance as an ideal gas at the unit's reference conditions, as common
//! practice does for metered gases; `vol %` and `ppmv` are read as mole fractions on the same
//! ideal-gas assumption and so are accepted for mole fractions only.

use serde::{Deserialize, Serialize};
use std::fmt;

/// Molar volume of an ideal gas at 273.15 K and 101.325 kPa, m³/kmol (= L/mol).
/// Source: CODATA 2018 recommended values, 22.413 969 54 L/mol.
pub const MOLAR_VOLUME_NORMAL: f64 = 22.413_969_54;

/// Molar volume of an ideal gas at 288.15 K and 101.325 kPa (the ISO 13443 standard reference
/// conditions), m³/kmol: the CODATA value scaled by 288.15 / 273.15 (ideal-gas law).
pub const MOLAR_VOLUME_STANDARD: f64 = MOLAR_VOLUME_NORMAL * 288.15 / 273.15;

/// The molar gas constant R, J/(mol·K): exact since the 2019 redefinition of the SI (CODATA
/// 2018, 8.314 462 618 J/(mol·K)).
pub const MOLAR_GAS_CONSTANT: f64 = 8.314_462_618;

/// The international pound, kg: exactly 0.453 592 37 kg (NIST SP 811, 2008, appendix B).
pub const POUND: f64 = 0.453_592_37;

/// The international foot, m: exactly 0.3048 m (NIST SP 811, 2008, appendix B).
pub const FOOT: f64 = 0.3048;

/// The inch, m: exactly 0.0254 m (NIST SP 811, 2008, appendix B).
pub const INCH: f64 = 0.0254;

/// The standard acceleration of gravity g_n, m/s²: exactly 9.806 65 m/s² (NIST SP 811, 2008).
pub const STANDARD_GRAVITY: f64 = 9.806_65;

/// The pound-force per square inch, Pa: one pound under standard gravity over a square inch,
/// lb × g_n / in² = 6 894.757 293 168 Pa (NIST SP 811, 2008, appendix B: 6.894 757 E+03 Pa).
pub const PSI: f64 = POUND * STANDARD_GRAVITY / (INCH * INCH);

/// Pressure of the US standard cubic foot, 14.696 psia, in Pa (= 101 325.353 Pa: one standard
/// atmosphere is 14.695 949 psi, so 14.696 psia lies 0.35 Pa above it).
pub const SCF_PRESSURE: f64 = 14.696 * PSI;

/// Temperature of the US standard cubic foot, 60 °F, in K: (60 + 459.67) × 5/9 =
/// 288.705 556 K (15.5556 °C; the degree Fahrenheit and Rankine of NIST SP 811, 2008,
/// appendix B).
pub const SCF_TEMPERATURE: f64 = (60.0 + 459.67) * 5.0 / 9.0;

/// Molar volume of an ideal gas at 60 °F and 14.696 psia, m³/kmol: V = R T / p.
pub const MOLAR_VOLUME_SCF: f64 = MOLAR_GAS_CONSTANT * SCF_TEMPERATURE / SCF_PRESSURE * 1000.0;

/// Standard cubic feet (60 °F, 14.696 psia) per kmol: the molar volume over a cubic foot.
pub const SCF_PER_KMOL: f64 = MOLAR_VOLUME_SCF / (FOOT * FOOT * FOOT);

/// Seconds in an hour and hours in a day (non-SI units accepted for use with the SI: SI
/// Brochure, 9th edition, table 8).
const SECONDS_PER_HOUR: f64 = 3600.0;
const HOURS_PER_DAY: f64 = 24.0;

/// What a meter measures; [`Uom::allowed_for`] gives the units each one accepts.
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, Hash)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    MolarFlow,
    MassFlow,
    StdVolumeFlow,
    ComponentFlow,
    MoleFraction,
    MassFraction,
}

impl Quantity {
    /// Whether a meter of this quantity names the component it measures.
    pub fn needs_component(self) -> bool {
        match self {
            Quantity::ComponentFlow | Quantity::MoleFraction | Quantity::MassFraction => true,
            Quantity::MolarFlow | Quantity::MassFlow | Quantity::StdVolumeFlow => false,
        }
    }

    pub fn as_str(self) -> &'static str {
        match self {
            Quantity::MolarFlow => "molar_flow",
            Quantity::MassFlow => "mass_flow",
            Quantity::StdVolumeFlow => "std_volume_flow",
            Quantity::ComponentFlow => "component_flow",
            Quantity::MoleFraction => "mole_fraction",
            Quantity::MassFraction => "mass_fraction",
        }
    }
}

/// A meter's unit of measure, spelled exactly as docs/model.md lists it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Uom {
    KmolPerHour,
    MolPerSecond,
    /// kmol/s.
    KmolPerSecond,
    /// lbmol/h: the pound-mole, 453.592 37 mol.
    LbmolPerHour,
    KgPerHour,
    TonnePerHour,
    /// t/d: tonnes per day.
    TonnePerDay,
    /// kg/s.
    KgPerSecond,
    /// lb/h: international pounds per hour.
    LbPerHour,
    /// klb/h: thousand pounds per hour.
    KlbPerHour,
    /// Nm3/h: 0 °C, 101.325 kPa.
    NormalM3PerHour,
    /// Sm3/h: 15 °C, 101.325 kPa.
    StandardM3PerHour,
    /// Nm3/d: 0 °C, 101.325 kPa, per day.
    NormalM3PerDay,
    /// SCFH: standard cubic feet (60 °F, 14.696 psia) per hour.
    Scfh,
    /// MSCFD: thousand standard cubic feet (60 °F, 14.696 psia) per day.
    Mscfd,
    /// MMSCFD: million standard cubic feet (60 °F, 14.696 psia) per day.
    Mmscfd,
    Fraction,
    Percent,
    Ppm,
    /// mol %: mole percent (mole fractions only).
    MolPercent,
    /// vol %: volume percent of an ideal gas, a mole percent (mole fractions only).
    VolPercent,
    /// ppmv: parts per million by volume of an ideal gas, by mole (mole fractions only).
    Ppmv,
}

/// Per quantity, the units it accepts, in the order messages and docs/model.md list them.
const MOLAR_FLOW_UNITS: [Uom; 4] = [
    Uom::KmolPerHour,
    Uom::MolPerSecond,
    Uom::KmolPerSecond,
    Uom::LbmolPerHour,
];
const MASS_FLOW_UNITS: [Uom; 6] = [
    Uom::KgPerHour,
    Uom::TonnePerHour,
    Uom::TonnePerDay,
    Uom::KgPerSecond,
    Uom::LbPerHour,
    Uom::KlbPerHour,
];
const STD_VOLUME_FLOW_UNITS: [Uom; 6] = [
    Uom::NormalM3PerHour,
    Uom::StandardM3PerHour,
    Uom::NormalM3PerDay,
    Uom::Scfh,
    Uom::Mscfd,
    Uom::Mmscfd,
];
const MOLE_FRACTION_UNITS: [Uom; 6] = [
    Uom::Fraction,
    Uom::Percent,
    Uom::Ppm,
    Uom::MolPercent,
    Uom::VolPercent,
    Uom::Ppmv,
];
const MASS_FRACTION_UNITS: [Uom; 3] = [Uom::Fraction, Uom::Percent, Uom::Ppm];

impl Uom {
    /// Every unit, each once.
    pub const ALL: [Uom; 22] = [
        Uom::KmolPerHour,
        Uom::MolPerSecond,
        Uom::KmolPerSecond,
        Uom::LbmolPerHour,
        Uom::KgPerHour,
        Uom::TonnePerHour,
        Uom::TonnePerDay,
        Uom::KgPerSecond,
        Uom::LbPerHour,
        Uom::KlbPerHour,
        Uom::NormalM3PerHour,
        Uom::StandardM3PerHour,
        Uom::NormalM3PerDay,
        Uom::Scfh,
        Uom::Mscfd,
        Uom::Mmscfd,
        Uom::Fraction,
        Uom::Percent,
        Uom::Ppm,
        Uom::MolPercent,
        Uom::VolPercent,
        Uom::Ppmv,
    ];

    /// The unit spelled exactly `text` (case, spaces and all); `None` for any other text.
    pub fn parse(text: &str) -> Option<Uom> {
        Self::ALL.into_iter().find(|u| u.as_str() == text)
    }

    pub fn as_str(self) -> &'static str {
        match self {
            Uom::KmolPerHour => "kmol/h",
            Uom::MolPerSecond => "mol/s",
            Uom::KmolPerSecond => "kmol/s",
            Uom::LbmolPerHour => "lbmol/h",
            Uom::KgPerHour => "kg/h",
            Uom::TonnePerHour => "t/h",
            Uom::TonnePerDay => "t/d",
            Uom::KgPerSecond => "kg/s",
            Uom::LbPerHour => "lb/h",
            Uom::KlbPerHour => "klb/h",
            Uom::NormalM3PerHour => "Nm3/h",
            Uom::StandardM3PerHour => "Sm3/h",
            Uom::NormalM3PerDay => "Nm3/d",
            Uom::Scfh => "SCFH",
            Uom::Mscfd => "MSCFD",
            Uom::Mmscfd => "MMSCFD",
            Uom::Fraction => "fraction",
            Uom::Percent => "%",
            Uom::Ppm => "ppm",
            Uom::MolPercent => "mol %",
            Uom::VolPercent => "vol %",
            Uom::Ppmv => "ppmv",
        }
    }

    /// The units a quantity accepts.
    pub fn units_for(quantity: Quantity) -> &'static [Uom] {
        match quantity {
            Quantity::MolarFlow | Quantity::ComponentFlow => &MOLAR_FLOW_UNITS,
            Quantity::MassFlow => &MASS_FLOW_UNITS,
            Quantity::StdVolumeFlow => &STD_VOLUME_FLOW_UNITS,
            Quantity::MoleFraction => &MOLE_FRACTION_UNITS,
            Quantity::MassFraction => &MASS_FRACTION_UNITS,
        }
    }

    /// The uom strings a quantity accepts.
    pub fn allowed_for(quantity: Quantity) -> Vec<&'static str> {
        Self::units_for(quantity)
            .iter()
            .map(|u| u.as_str())
            .collect()
    }

    /// The uom strings a quantity accepts, each in double quotes (some hold a space), for a
    /// message: `"fraction", "%", "ppm"`.
    pub fn allowed_list(quantity: Quantity) -> String {
        Self::units_for(quantity)
            .iter()
            .map(|u| format!("\"{}\"", u.as_str()))
            .collect::<Vec<_>>()
            .join(", ")
    }

    pub fn fits(self, quantity: Quantity) -> bool {
        Self::units_for(quantity).contains(&self)
    }

    /// The unit of `quantity` that `text` was most likely meant to be: one spelled the same
    /// but for case and spaces (`mol%` for `mol %`, `scfh` for `SCFH`). Such a text is still
    /// refused: a model spells its units exactly as docs/model.md lists them.
    pub fn near_miss(text: &str, quantity: Quantity) -> Option<Uom> {
        let squeeze = |s: &str| -> String {
            s.chars()
                .filter(|c| !c.is_whitespace())
                .flat_map(char::to_lowercase)
                .collect()
        };
        let wanted = squeeze(text);
        Self::units_for(quantity)
            .iter()
            .copied()
            .find(|u| u.as_str() != text && squeeze(u.as_str()) == wanted)
    }

    /// Why a unit that exists does not fit a quantity, beyond the list of those that do:
    /// `vol %` and `ppmv` are mole fractions of an ideal gas, never mass fractions.
    pub fn misfit_note(self, quantity: Quantity) -> Option<&'static str> {
        match (self, quantity) {
            (Uom::MolPercent | Uom::VolPercent | Uom::Ppmv, Quantity::MassFraction) => Some(
                "mol %, vol % and ppmv measure mole fractions only (vol % and ppmv those of an \
                 ideal gas)",
            ),
            _ => None,
        }
    }

    /// Factor from the engine's base unit of the quantity to this uom: value_uom = factor ×
    /// value_base. The base is kmol/h for molar and standard-volume flows (the molar volume is
    /// folded in here), kg/h for mass flows and a plain fraction for compositions.
    pub fn factor_from_base(self) -> f64 {
        match self {
            Uom::KmolPerHour => 1.0,
            // 1 kmol/h = 1000 mol / 3600 s.
            Uom::MolPerSecond => 1000.0 / SECONDS_PER_HOUR,
            Uom::KmolPerSecond => 1.0 / SECONDS_PER_HOUR,
            // 1 lbmol = 1000 POUND mol (the pound-mole: the amount whose mass in pounds is the
            // molar mass in g/mol), so 1 kmol = 1 / POUND lbmol.
            Uom::LbmolPerHour => 1.0 / POUND,
            Uom::KgPerHour => 1.0,
            Uom::TonnePerHour => 1.0e-3,
            Uom::TonnePerDay => 1.0e-3 * HOURS_PER_DAY,
            Uom::KgPerSecond => 1.0 / SECONDS_PER_HOUR,
            Uom::LbPerHour => 1.0 / POUND,
            Uom::KlbPerHour => 1.0 / (1.0e3 * POUND),
            Uom::NormalM3PerHour => MOLAR_VOLUME_NORMAL,
            Uom::StandardM3PerHour => MOLAR_VOLUME_STANDARD,
            Uom::NormalM3PerDay => MOLAR_VOLUME_NORMAL * HOURS_PER_DAY,
            Uom::Scfh => SCF_PER_KMOL,
            Uom::Mscfd => SCF_PER_KMOL * HOURS_PER_DAY / 1.0e3,
            Uom::Mmscfd => SCF_PER_KMOL * HOURS_PER_DAY / 1.0e6,
            Uom::Fraction => 1.0,
            Uom::Percent | Uom::MolPercent | Uom::VolPercent => 100.0,
            Uom::Ppm | Uom::Ppmv => 1.0e6,
        }
    }

    /// A value in this uom in the engine's base unit of its quantity.
    pub fn to_base(self, value: f64) -> f64 {
        value / self.factor_from_base()
    }

    /// A value in the engine's base unit of its quantity in this uom.
    pub fn from_base(self, value: f64) -> f64 {
        value * self.factor_from_base()
    }
}

impl fmt::Display for Uom {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rel_close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol * a.abs().max(b.abs())
    }

    #[test]
    fn normal_molar_volume_is_codata_2018() {
        // CODATA 2018: molar volume of ideal gas (273.15 K, 101.325 kPa) = 22.413 969 54 L/mol.
        assert!((MOLAR_VOLUME_NORMAL - 22.413_969_54).abs() < 1e-9);
        // Independent check from R T / p with CODATA 2018 R = 8.314 462 618 J/(mol K):
        let vm = 8.314_462_618 * 273.15 / 101_325.0 * 1000.0; // L/mol
        assert!((vm - MOLAR_VOLUME_NORMAL).abs() < 1e-6, "{vm}");
    }

    #[test]
    fn standard_molar_volume_at_iso_13443_conditions() {
        // ISO 13443 reference conditions 288.15 K, 101.325 kPa; ideal gas with CODATA 2018 R.
        let vm = 8.314_462_618 * 288.15 / 101_325.0 * 1000.0;
        assert!((vm - MOLAR_VOLUME_STANDARD).abs() < 1e-6, "{vm}");
        // 23.645 L/mol is the usual rounded figure (common practice).
        assert!((MOLAR_VOLUME_STANDARD - 23.645).abs() < 5e-4);
    }

    #[test]
    fn customary_units_are_nist_sp_811() {
        // NIST SP 811 (2008), appendix B: 1 lb = 0.453 592 37 kg, 1 ft = 0.3048 m exactly.
        assert_eq!(POUND, 0.453_592_37);
        assert_eq!(FOOT, 0.3048);
        // NIST SP 811 (2008), B.8: 1 ft³ = 2.831 685 E-02 m³ (to the printed digit).
        assert!((FOOT * FOOT * FOOT - 2.831_685e-2).abs() < 5e-9);
        // NIST SP 811 (2008), B.8: 1 psi = 6.894 757 E+03 Pa (to the printed digit).
        assert!((PSI - 6.894_757e3).abs() < 5e-4, "{PSI}");
        // One standard atmosphere (101 325 Pa) is 14.695 949 psi, so 14.696 psia lies just
        // above it (NIST SP 811 (2008), B.8: 1 atm = 1.013 25 E+05 Pa exactly).
        assert!(
            (101_325.0 / PSI - 14.695_949).abs() < 1e-6,
            "{}",
            101_325.0 / PSI
        );
        assert!((SCF_PRESSURE - 101_325.353).abs() < 1e-3, "{SCF_PRESSURE}");
        // 60 °F = 15.5556 °C = 288.7056 K (NIST SP 811 (2008), B.9: T/K = (t/°F + 459.67)/1.8).
        assert!((SCF_TEMPERATURE - 273.15 - 15.555_6).abs() < 1e-4);
        assert!((SCF_TEMPERATURE - 288.705_556).abs() < 1e-6);
    }

    #[test]
    fn scf_molar_volume_at_60_f_and_14_696_psia() {
        // Ideal gas, V = R T / p with CODATA 2018 R: 23.690 m³/kmol.
        let vm = 8.314_462_618 * ((60.0 + 459.67) / 1.8) / (14.696 * PSI) * 1000.0;
        assert!(rel_close(vm, MOLAR_VOLUME_SCF, 1e-12), "{vm}");
        assert!(
            (MOLAR_VOLUME_SCF - 23.690_3).abs() < 1e-4,
            "{MOLAR_VOLUME_SCF}"
        );
        // 379.48 scf per lbmol at 60 °F and 14.696 psia: the figure gas-processing handbooks
        // print (a handbook value quoted from memory, not from a copy at hand).
        let scf_per_lbmol = SCF_PER_KMOL * POUND;
        assert!((scf_per_lbmol - 379.48).abs() < 0.01, "{scf_per_lbmol}");
        // So 1 scf ≈ 0.001 195 3 kmol.
        assert!((1.0 / SCF_PER_KMOL - 0.001_195_3).abs() < 1e-7);
    }

    /// Every unit with its factor from base recomputed from its definition (independently of
    /// the constants above) and a published or hand-derived figure with its source.
    #[test]
    fn every_factor_against_its_derivation_and_a_published_value() {
        const LB: f64 = 0.453_592_37; // kg, NIST SP 811 (2008), appendix B, exact
        const FT3: f64 = 0.3048 * 0.3048 * 0.3048; // m³, NIST SP 811 (2008), appendix B, exact
        let psi = LB * 9.806_65 / (0.0254 * 0.0254); // Pa, NIST SP 811 (2008)
        let vm_scf = 8.314_462_618 * (519.67 * 5.0 / 9.0) / (14.696 * psi); // m³/mol
        let scf_per_kmol = vm_scf * 1000.0 / FT3;
        // (unit, factor from its definition, check, what the check is and its source)
        type Check = fn(f64) -> bool;
        let table: [(Uom, f64, Check, &str); 22] = [
            (Uom::KmolPerHour, 1.0, |f| f == 1.0, "the base unit"),
            (
                Uom::MolPerSecond,
                1000.0 / 3600.0,
                |f| (f - 0.277_777_777_8).abs() < 1e-10,
                "1 kmol/h = 1000 mol / 3600 s (SI prefixes; the hour, SI Brochure table 8)",
            ),
            (
                Uom::KmolPerSecond,
                1.0 / 3600.0,
                |f| (1.0 / f - 3600.0).abs() < 1e-9,
                "1 kmol/s = 3600 kmol/h",
            ),
            (
                Uom::LbmolPerHour,
                1000.0 / 453.592_37,
                // 1 lbmol = 453.592 37 mol exactly (the pound-mole, with NIST SP 811's pound).
                |f| (1000.0 / f - 453.592_37).abs() < 1e-9,
                "1 lbmol = 453.592 37 mol exactly",
            ),
            (Uom::KgPerHour, 1.0, |f| f == 1.0, "the base unit"),
            (Uom::TonnePerHour, 1.0e-3, |f| f == 1e-3, "1 t = 1000 kg"),
            (
                Uom::TonnePerDay,
                24.0 / 1000.0,
                |f| (f - 0.024).abs() < 1e-15,
                "1 kg/h = 24 kg/d = 0.024 t/d",
            ),
            (
                Uom::KgPerSecond,
                1.0 / 3600.0,
                |f| (1.0 / f - 3600.0).abs() < 1e-9,
                "1 kg/s = 3600 kg/h",
            ),
            (
                Uom::LbPerHour,
                1.0 / LB,
                // 1 lb/h = 0.453 592 37 kg/h (NIST SP 811 (2008), appendix B).
                |f| (1.0 / f - 0.453_592_37).abs() < 1e-15,
                "1 lb/h = 0.453 592 37 kg/h",
            ),
            (
                Uom::KlbPerHour,
                1.0 / (1000.0 * LB),
                |f| (1.0 / f - 453.592_37).abs() < 1e-9,
                "1 klb/h = 453.592 37 kg/h",
            ),
            (
                Uom::NormalM3PerHour,
                22.413_969_54,
                |f| (f - 22.413_969_54).abs() < 1e-12,
                "CODATA 2018: 22.413 969 54 L/mol at 273.15 K, 101.325 kPa",
            ),
            (
                Uom::StandardM3PerHour,
                22.413_969_54 * 288.15 / 273.15,
                |f| (f - 23.645).abs() < 5e-4,
                "ISO 13443 conditions: 23.645 m³/kmol, the usual rounded figure",
            ),
            (
                Uom::NormalM3PerDay,
                22.413_969_54 * 24.0,
                |f| (f - 537.935_269).abs() < 1e-6,
                "1 kmol/h = 24 × 22.413 969 54 Nm3/d (CODATA 2018)",
            ),
            (
                Uom::Scfh,
                scf_per_kmol,
                // 1 scf ≈ 0.001 195 3 kmol; 379.48 scf/lbmol is the handbook figure (from
                // memory), 379.48 / 0.453 592 37 = 836.6 scf/kmol.
                |f| (1.0 / f - 0.001_195_3).abs() < 1e-7 && (f - 836.6).abs() < 0.05,
                "1 scf (60 °F, 14.696 psia) ≈ 0.001 195 3 kmol",
            ),
            (
                Uom::Mscfd,
                scf_per_kmol * 24.0 / 1.0e3,
                |f| (1.0 / f - 0.049_80).abs() < 1e-4,
                "1 MSCFD ≈ 0.0498 kmol/h",
            ),
            (
                Uom::Mmscfd,
                scf_per_kmol * 24.0 / 1.0e6,
                // 1 MMSCFD = 10⁶ / 24 scf/h ≈ 49.8 kmol/h (handbook rule of thumb, from memory).
                |f| (1.0 / f - 49.8).abs() < 0.01,
                "1 MMSCFD ≈ 49.8 kmol/h",
            ),
            (Uom::Fraction, 1.0, |f| f == 1.0, "the base unit"),
            (Uom::Percent, 100.0, |f| f == 100.0, "1 = 100 %"),
            (Uom::Ppm, 1.0e6, |f| f == 1e6, "1 = 10⁶ ppm"),
            (Uom::MolPercent, 100.0, |f| f == 100.0, "1 = 100 mol %"),
            (
                Uom::VolPercent,
                100.0,
                |f| f == 100.0,
                "ideal gas: volume fraction = mole fraction (Amagat), 1 = 100 vol %",
            ),
            (
                Uom::Ppmv,
                1.0e6,
                |f| f == 1e6,
                "ideal gas: volume fraction = mole fraction (Amagat), 1 = 10⁶ ppmv",
            ),
        ];
        assert_eq!(table.len(), Uom::ALL.len());
        for (i, (uom, derived, check, what)) in table.iter().enumerate() {
            assert_eq!(*uom, Uom::ALL[i], "the table follows Uom::ALL");
            let f = uom.factor_from_base();
            assert!(rel_close(f, *derived, 1e-12), "{uom}: {f} vs {derived}");
            assert!(check(f), "{uom}: {f} fails the check \"{what}\"");
        }
    }

    #[test]
    fn every_unit_round_trips_and_parses_as_spelled() {
        for u in Uom::ALL {
            assert_eq!(Uom::parse(u.as_str()), Some(u), "{u}");
            assert_eq!(u.to_string(), u.as_str());
            for v in [0.0, 1.0, -3.5, 1_234.567_89, 6.02e-7, 4.2e8] {
                let back = u.from_base(u.to_base(v));
                assert!(
                    (back - v).abs() <= 4.0 * f64::EPSILON * v.abs(),
                    "{u}: {v} → {back}"
                );
                let there = u.to_base(u.from_base(v));
                assert!(
                    (there - v).abs() <= 4.0 * f64::EPSILON * v.abs(),
                    "{u}: {v}"
                );
            }
        }
        // Spelled exactly: case and spaces count.
        for bad in [
            "Kmol/h", "mol%", "Mol %", "vol%", "scfh", "MMscfd", "LB/H", "ppmV", " %",
        ] {
            assert_eq!(Uom::parse(bad), None, "{bad}");
        }
        assert_eq!(Uom::parse("mol %"), Some(Uom::MolPercent));
    }

    #[test]
    fn customary_conversions_by_hand() {
        // 1000 lb/h = 453.592 37 kg/h; 2204.622 62 lb/h = 1000 kg/h.
        assert!(rel_close(Uom::LbPerHour.to_base(1000.0), 453.592_37, 1e-15));
        assert!(rel_close(
            Uom::LbPerHour.from_base(1000.0),
            2_204.622_621_8,
            1e-10
        ));
        // 1 kg/s = 3.6 t/h = 86.4 t/d.
        assert!(rel_close(
            Uom::TonnePerDay.from_base(Uom::KgPerSecond.to_base(1.0)),
            86.4,
            1e-14
        ));
        // 100 lbmol/h = 45.359 237 kmol/h.
        assert!(rel_close(
            Uom::LbmolPerHour.to_base(100.0),
            45.359_237,
            1e-15
        ));
        // 1 kmol/s = 3600 kmol/h.
        assert!(rel_close(Uom::KmolPerSecond.to_base(1.0), 3600.0, 1e-15));
        // 1 MMSCFD = 1000 MSCFD = 10⁶/24 SCFH.
        let kmolh = Uom::Mmscfd.to_base(1.0);
        assert!(rel_close(Uom::Mscfd.from_base(kmolh), 1000.0, 1e-14));
        assert!(rel_close(Uom::Scfh.from_base(kmolh), 1.0e6 / 24.0, 1e-14));
        // 24 Nm3/h = 24 × 24 Nm3/d... and 1 Nm3/d = 1/24 Nm3/h.
        let n = Uom::NormalM3PerDay.to_base(24.0);
        assert!(rel_close(Uom::NormalM3PerHour.from_base(n), 1.0, 1e-14));
        // 2.5 mol % = 2.5 vol % = 25 000 ppmv = 0.025.
        for (u, v) in [
            (Uom::MolPercent, 2.5),
            (Uom::VolPercent, 2.5),
            (Uom::Ppmv, 25_000.0),
        ] {
            assert!(rel_close(u.to_base(v), 0.025, 1e-15), "{u}");
        }
    }

    #[test]
    fn which_quantity_takes_which_unit() {
        assert!(Uom::KgPerHour.fits(Quantity::MassFlow));
        assert!(!Uom::KgPerHour.fits(Quantity::MolarFlow));
        assert!(Uom::LbmolPerHour.fits(Quantity::ComponentFlow));
        assert!(!Uom::LbPerHour.fits(Quantity::MolarFlow));
        assert!(Uom::Mmscfd.fits(Quantity::StdVolumeFlow));
        for u in [Uom::MolPercent, Uom::VolPercent, Uom::Ppmv] {
            assert!(u.fits(Quantity::MoleFraction), "{u}");
            assert!(!u.fits(Quantity::MassFraction), "{u}");
            assert!(u.misfit_note(Quantity::MassFraction).is_some());
        }
        // Every unit fits some quantity, and each quantity's list names known units only.
        let quantities = [
            Quantity::MolarFlow,
            Quantity::MassFlow,
            Quantity::StdVolumeFlow,
            Quantity::ComponentFlow,
            Quantity::MoleFraction,
            Quantity::MassFraction,
        ];
        for u in Uom::ALL {
            assert!(quantities.iter().any(|&q| u.fits(q)), "{u}");
        }
        assert_eq!(
            Uom::allowed_list(Quantity::MassFraction),
            "\"fraction\", \"%\", \"ppm\""
        );
        assert_eq!(
            Uom::allowed_for(Quantity::MoleFraction),
            ["fraction", "%", "ppm", "mol %", "vol %", "ppmv"]
        );
        // A near miss points at the spelling, for the quantity's own units only.
        assert_eq!(
            Uom::near_miss("mol%", Quantity::MoleFraction),
            Some(Uom::MolPercent)
        );
        assert_eq!(
            Uom::near_miss("mmscfd", Quantity::StdVolumeFlow),
            Some(Uom::Mmscfd)
        );
        assert_eq!(Uom::near_miss("mol%", Quantity::MassFraction), None);
        assert_eq!(Uom::near_miss("kmol/hr", Quantity::MolarFlow), None);
    }
}
