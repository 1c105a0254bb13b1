//! The plant model as users write it (TOML or JSON, docs/model.md), and the indexed [`Plant`] the
//! equations work on, which [`Plant::new`] (validate/) builds from it.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt;

/// The measurement quantities live with their units of measure.
pub use crate::uom::Quantity;
use crate::uom::Uom;

/// Where a stream starts or ends when it crosses the plant boundary.
pub const OUTSIDE: &str = "outside";

/// A model file as written, before validation.
#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ModelSpec {
    pub name: String,
    /// Reconciliation period, e.g. "15m", "1h", "1d".
    #[serde(default = "default_period")]
    pub period: String,
    /// Significance level of every test.
    #[serde(default = "default_alpha")]
    pub alpha: f64,
    #[serde(default, rename = "component")]
    pub components: Vec<ComponentSpec>,
    #[serde(default, rename = "unit")]
    pub units: Vec<UnitSpec>,
    #[serde(default, rename = "reaction")]
    pub reactions: Vec<ReactionSpec>,
    #[serde(default, rename = "stream")]
    pub streams: Vec<StreamSpec>,
    #[serde(default, rename = "meter")]
    pub meters: Vec<MeterSpec>,
}

fn default_period() -> String {
    "1h".to_string()
}

fn default_alpha() -> f64 {
    0.05
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ComponentSpec {
    pub id: String,
    /// g/mol (= kg/kmol).
    pub molar_mass: f64,
    #[serde(default)]
    pub inert: bool,
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Copy, Serialize, Deserialize, PartialEq, Eq, Hash)]
#[serde(rename_all = "snake_case")]
pub enum UnitKind {
    Mixer,
    Splitter,
    Reactor,
    Separator,
    Node,
}

impl fmt::Display for UnitKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self {
            UnitKind::Mixer => "mixer",
            UnitKind::Splitter => "splitter",
            UnitKind::Reactor => "reactor",
            UnitKind::Separator => "separator",
            UnitKind::Node => "node",
        };
        f.write_str(s)
    }
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct UnitSpec {
    pub id: String,
    pub kind: UnitKind,
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct ReactionSpec {
    pub id: String,
    pub unit: String,
    /// Stoichiometric coefficient per component id: negative consumed, positive produced.
    pub stoichiometry: BTreeMap<String, f64>,
    /// Key (limiting) reactant for conversion figures.
    #[serde(default)]
    pub key: Option<String>,
    /// An irreversible reaction has a non-negative extent.
    #[serde(default)]
    pub irreversible: bool,
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct StreamSpec {
    pub id: String,
    pub from: String,
    pub to: String,
    /// Components the stream can carry; every component when absent.
    #[serde(default)]
    pub components: Option<Vec<String>>,
}

#[cfg_attr(feature = "openapi", derive(utoipa::ToSchema))]
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
#[serde(deny_unknown_fields)]
pub struct MeterSpec {
    pub tag: String,
    pub stream: String,
    pub quantity: Quantity,
    #[serde(default)]
    pub component: Option<String>,
    /// For `mole_fraction` only: the components of the basis (e.g. a dry basis); every
    /// component of the stream when absent.
    #[serde(default)]
    pub basis: Option<Vec<String>>,
    /// Unit of measure, spelled exactly as listed (docs/model.md): molar_flow and
    /// component_flow: `kmol/h`, `mol/s`, `kmol/s`, `lbmol/h`; mass_flow: `kg/h`, `t/h`, `t/d`,
    /// `kg/s`, `lb/h`, `klb/h`; std_volume_flow: `Nm3/h`, `Sm3/h`, `Nm3/d`, `SCFH`, `MSCFD`,
    /// `MMSCFD`; mole_fraction: `fraction`, `%`, `ppm`, `mol %`, `vol %`, `ppmv`;
    /// mass_fraction: `fraction`, `%`, `ppm`.
    #[cfg_attr(feature = "openapi", schema(example = "kmol/h"))]
    pub uom: String,
    #[serde(default)]
    pub sigma: Option<f64>,
    #[serde(default)]
    pub sigma_pct: Option<f64>,
    #[serde(default)]
    pub sigma_pct_span: Option<f64>,
    #[serde(default)]
    pub range: Option<[f64; 2]>,
}

/// One problem found in a model, naming the item at fault.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, thiserror::Error)]
#[error("{item}: {message}")]
pub struct ModelProblem {
    /// The offending item, e.g. `stream "purge"` or `meter "FT-1001"`.
    pub item: String,
    pub message: String,
}

/// Everything wrong with a model file.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum ModelError {
    #[error("the model is not valid {format}: {message}")]
    Syntax {
        format: &'static str,
        message: String,
    },
    #[error("the model has {} problem(s):\n{}", .0.len(), list(.0))]
    Invalid(Vec<ModelProblem>),
}

/// Most problems a message lists one by one; the count covers them all.
pub const MAX_LISTED_PROBLEMS: usize = 50;

fn list(problems: &[ModelProblem]) -> String {
    let mut lines: Vec<String> = problems
        .iter()
        .take(MAX_LISTED_PROBLEMS)
        .map(|p| format!("  - {p}"))
        .collect();
    if problems.len() > MAX_LISTED_PROBLEMS {
        lines.push(format!(
            "  - and {} more problem(s)",
            problems.len() - MAX_LISTED_PROBLEMS
        ));
    }
    lines.join("\n")
}

/// Longest line of a parser's message kept (a TOML message quotes the source line at fault,
/// which may be megabytes long).
const SYNTAX_LINE_CHARS: usize = 300;
/// Most lines of a parser's message kept.
const SYNTAX_LINES: usize = 12;

impl ModelError {
    pub fn problems(&self) -> Vec<ModelProblem> {
        match self {
            ModelError::Syntax { message, .. } => vec![ModelProblem {
                item: "model".into(),
                message: message.clone(),
            }],
            ModelError::Invalid(p) => p.clone(),
        }
    }
}

impl ModelSpec {
    pub fn from_toml(text: &str) -> Result<Self, ModelError> {
        toml::from_str(text).map_err(|e| ModelError::Syntax {
            format: "TOML",
            message: crate::text::clip_lines(&e.to_string(), SYNTAX_LINE_CHARS, SYNTAX_LINES),
        })
    }

    pub fn from_json(text: &str) -> Result<Self, ModelError> {
        serde_json::from_str(text).map_err(|e| {
            // serde_json ends its message with the position, after any text it quotes (an
            // unknown key, a string of the wrong type): the text is cut, the position kept.
            let message = e.to_string();
            let position = format!(" at line {} column {}", e.line(), e.column());
            let message = match message.strip_suffix(&position) {
                Some(what) if e.line() > 0 => {
                    format!("{}{position}", crate::text::clip(what, SYNTAX_LINE_CHARS))
                }
                _ => crate::text::clip(&message, SYNTAX_LINE_CHARS),
            };
            ModelError::Syntax {
                format: "JSON",
                message,
            }
        })
    }
}

// ---------------------------------------------------------------------------------------------
// The validated, indexed plant.

#[derive(Debug, Clone)]
pub struct Component {
    pub id: String,
    pub molar_mass: f64,
    pub inert: bool,
}

#[derive(Debug, Clone)]
pub struct Unit {
    pub id: String,
    pub kind: UnitKind,
    /// Stream indices entering the unit.
    pub inlets: Vec<usize>,
    /// Stream indices leaving the unit, in model order.
    pub outlets: Vec<usize>,
    /// Reaction indices attached to the unit.
    pub reactions: Vec<usize>,
}

#[derive(Debug, Clone)]
pub struct Reaction {
    pub id: String,
    pub unit: usize,
    /// (component index, coefficient), components in model order.
    pub stoichiometry: Vec<(usize, f64)>,
    pub key: Option<usize>,
    pub irreversible: bool,
}

impl Reaction {
    pub fn coefficient(&self, component: usize) -> f64 {
        self.stoichiometry
            .iter()
            .find(|(c, _)| *c == component)
            .map_or(0.0, |(_, v)| *v)
    }
}

#[derive(Debug, Clone)]
pub struct Stream {
    pub id: String,
    /// Source unit, `None` for a feed from outside.
    pub from: Option<usize>,
    /// Destination unit, `None` for a product leaving the plant.
    pub to: Option<usize>,
    /// Component indices carried, in model order.
    pub components: Vec<usize>,
}

/// How a meter's σ is given.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Sigma {
    /// Absolute, in the meter's uom.
    Absolute(f64),
    /// Percent of the period's measured value.
    PercentOfReading(f64),
    /// Percent of the instrument range's width.
    PercentOfSpan(f64),
}

#[derive(Debug, Clone)]
pub struct Meter {
    pub tag: String,
    pub stream: usize,
    pub quantity: Quantity,
    pub component: Option<usize>,
    /// For mole fractions: the basis components (indices); all carried components otherwise.
    pub basis: Option<Vec<usize>>,
    pub uom: Uom,
    pub sigma: Sigma,
    pub range: Option<[f64; 2]>,
}

impl Meter {
    /// One standard deviation in the meter's uom for a period whose measured value is `y`;
    /// `None` when the σ rule gives no positive value (a percent-of-reading meter reading 0).
    pub fn sigma_for(&self, y: f64) -> Option<f64> {
        let s = match self.sigma {
            Sigma::Absolute(s) => s,
            Sigma::PercentOfReading(p) => p / 100.0 * y.abs(),
            Sigma::PercentOfSpan(p) => {
                let [lo, hi] = self.range?;
                p / 100.0 * (hi - lo)
            }
        };
        (s.is_finite() && s > 0.0).then_some(s)
    }
}

/// A validated plant model with every reference resolved to an index.
#[derive(Debug, Clone)]
pub struct Plant {
    pub spec: ModelSpec,
    pub name: String,
    pub period_seconds: i64,
    pub alpha: f64,
    pub components: Vec<Component>,
    pub units: Vec<Unit>,
    pub reactions: Vec<Reaction>,
    pub streams: Vec<Stream>,
    pub meters: Vec<Meter>,
}

impl Plant {
    pub fn component_index(&self, id: &str) -> Option<usize> {
        self.components.iter().position(|c| c.id == id)
    }

    pub fn stream_index(&self, id: &str) -> Option<usize> {
        self.streams.iter().position(|s| s.id == id)
    }

    pub fn meter_index(&self, tag: &str) -> Option<usize> {
        self.meters.iter().position(|m| m.tag == tag)
    }
}

/// The longest reconciliation period accepted: 366 days.
pub const MAX_PERIOD_SECONDS: i64 = 366 * 86_400;

/// Parse a period length such as "15m", "1h", "1d" or "30s" into seconds.
pub fn parse_period(text: &str) -> Option<i64> {
    let text = text.trim();
    let split = text.find(|c: char| !c.is_ascii_digit())?;
    let (num, unit) = text.split_at(split);
    let n: i64 = num.parse().ok()?;
    let mult = match unit {
        "s" => 1,
        "m" | "min" => 60,
        "h" => 3600,
        "d" => 86_400,
        _ => return None,
    };
    let secs = n.checked_mul(mult)?;
    // Periods align to UTC, so they must divide a day evenly (or be whole days); at most
    // MAX_PERIOD_SECONDS, so that every period's end is a representable date.
    (secs > 0 && secs <= MAX_PERIOD_SECONDS && (86_400 % secs == 0 || secs % 86_400 == 0))
        .then_some(secs)
}

#[cfg(all(test, feature = "openapi"))]
mod tests {
    use super::*;

    /// The model file's JSON Schema (the service's OpenAPI document) describes `uom` with the
    /// list of units each quantity accepts, as [`Uom::units_for`] gives them.
    #[test]
    fn the_model_schema_lists_each_quantitys_units() {
        use utoipa::PartialSchema;
        let schema = serde_json::to_value(MeterSpec::schema()).unwrap();
        let described = schema["properties"]["uom"]["description"]
            .as_str()
            .expect("uom has a description")
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ");
        let list = |q: Quantity| {
            Uom::units_for(q)
                .iter()
                .map(|u| format!("`{u}`"))
                .collect::<Vec<_>>()
                .join(", ")
        };
        let expected = format!(
            "Unit of measure, spelled exactly as listed (docs/model.md): molar_flow and \
             component_flow: {}; mass_flow: {}; std_volume_flow: {}; mole_fraction: {}; \
             mass_fraction: {}.",
            list(Quantity::MolarFlow),
            list(Quantity::MassFlow),
            list(Quantity::StdVolumeFlow),
            list(Quantity::MoleFraction),
            list(Quantity::MassFraction)
        );
        assert_eq!(
            Uom::units_for(Quantity::ComponentFlow),
            Uom::units_for(Quantity::MolarFlow)
        );
        assert_eq!(described, expected);
        assert_eq!(schema["properties"]["uom"]["type"], "string");
    }
}
