//! Units of measure of meters (docs/model.md, `[[meter]]`) and their conversion from the engine's base units:
//! kmol/h for molar flows, kg/h for mass flows, mole or mass fraction (0–1) for compositions.

use serde::{Deserialize, Serialize};
use std::fmt;

/// Molar volume of an ideal gas at 273.15 K and 101.325 kPa, m³/kmol (= L/mol).
/// Source: CODATA 2018 recommended values, 22.413 969 54 L/mol.
pub const MOLAR_VOLUME_NORMAL: f64 = 22.413_969_54;

/// Molar volume of an ideal gas at 288.15 K and 101.325 kPa (the ISO 13443 standard reference
/// conditions), m³/kmol: the CODATA value scaled by 288.15 / 273.15 (ideal-gas law).
pub const MOLAR_VOLUME_STANDARD: f64 = MOLAR_VOLUME_NORMAL * 288.15 / 273.15;

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
    KgPerHour,
    TonnePerHour,
    /// Nm3/h: 0 °C, 101.325 kPa.
    NormalM3PerHour,
    /// Sm3/h: 15 °C, 101.325 kPa.
    StandardM3PerHour,
    Fraction,
    Percent,
    Ppm,
}

impl Uom {
    pub fn parse(text: &str) -> Option<Uom> {
        Some(match text {
            "kmol/h" => Uom::KmolPerHour,
            "mol/s" => Uom::MolPerSecond,
            "kg/h" => Uom::KgPerHour,
            "t/h" => Uom::TonnePerHour,
            "Nm3/h" => Uom::NormalM3PerHour,
            "Sm3/h" => Uom::StandardM3PerHour,
            "fraction" => Uom::Fraction,
            "%" => Uom::Percent,
            "ppm" => Uom::Ppm,
            _ => return None,
        })
    }

    pub fn as_str(self) -> &'static str {
        match self {
            Uom::KmolPerHour => "kmol/h",
            Uom::MolPerSecond => "mol/s",
            Uom::KgPerHour => "kg/h",
            Uom::TonnePerHour => "t/h",
            Uom::NormalM3PerHour => "Nm3/h",
            Uom::StandardM3PerHour => "Sm3/h",
            Uom::Fraction => "fraction",
            Uom::Percent => "%",
            Uom::Ppm => "ppm",
        }
    }

    /// The uom strings a quantity accepts.
    pub fn allowed_for(quantity: Quantity) -> &'static [&'static str] {
        match quantity {
            Quantity::MolarFlow | Quantity::ComponentFlow => &["kmol/h", "mol/s"],
            Quantity::MassFlow => &["kg/h", "t/h"],
            Quantity::StdVolumeFlow => &["Nm3/h", "Sm3/h"],
            Quantity::MoleFraction | Quantity::MassFraction => &["fraction", "%", "ppm"],
        }
    }

    pub fn fits(self, quantity: Quantity) -> bool {
        Self::allowed_for(quantity).contains(&self.as_str())
    }

    /// Factor from the engine's base unit of the quantity to this uom: value_uom = factor ×
    /// value_base. The base is kmol/h for molar and standard-volume flows (the molar volume is
    /// folded in here), kg/h for mass flows and a plain fraction for compositions.
    pub fn factor_from_base(self) -> f64 {
        match self {
            Uom::KmolPerHour => 1.0,
            Uom::MolPerSecond => 1000.0 / 3600.0,
            Uom::KgPerHour => 1.0,
            Uom::TonnePerHour => 1.0e-3,
            Uom::NormalM3PerHour => MOLAR_VOLUME_NORMAL,
            Uom::StandardM3PerHour => MOLAR_VOLUME_STANDARD,
            Uom::Fraction => 1.0,
            Uom::Percent => 100.0,
            Uom::Ppm => 1.0e6,
        }
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
    fn conversions() {
        // 1 kmol/h = 1000 mol / 3600 s.
        assert!((Uom::MolPerSecond.factor_from_base() - 0.277_777_777_8).abs() < 1e-9);
        assert_eq!(Uom::TonnePerHour.factor_from_base(), 1e-3);
        assert_eq!(Uom::Percent.factor_from_base(), 100.0);
        assert_eq!(Uom::Ppm.factor_from_base(), 1e6);
        for s in [
            "kmol/h", "mol/s", "kg/h", "t/h", "Nm3/h", "Sm3/h", "fraction", "%", "ppm",
        ] {
            assert_eq!(Uom::parse(s).unwrap().as_str(), s);
        }
        assert!(Uom::parse("Kmol/h").is_none());
        assert!(Uom::KgPerHour.fits(Quantity::MassFlow));
        assert!(!Uom::KgPerHour.fits(Quantity::MolarFlow));
    }
}
