//! What a what-if holds as the base case has it, in words, and the quantity each
//! specification fixes (for a refusal naming it).

use crate::simulate::Spec;

use super::calibrate::Param;

/// A held quantity, in words.
#[derive(Debug, Clone, PartialEq)]
pub enum Hold {
    /// A fresh feed's flow and composition.
    Feed { stream: String },
    /// A fresh feed's composition (its flow is set).
    FeedComposition { stream: String },
    /// One value: the spec's.
    Value { what: String },
}

/// The held quantities with their values, in words.
pub fn holds(params: &[Param]) -> Vec<String> {
    params
        .iter()
        .filter_map(|p| {
            Some(match p.hold.as_ref()? {
                Hold::Feed { stream } => {
                    let total: f64 = params
                        .iter()
                        .filter_map(|q| match &q.spec {
                            Spec::ComponentFlow {
                                stream: s, value, ..
                            } if s == stream => Some(*value),
                            _ => None,
                        })
                        .sum();
                    format!("fresh feed \"{stream}\": {total:.6} kmol/h and its composition")
                }
                Hold::FeedComposition { stream } => {
                    format!("composition of fresh feed \"{stream}\"")
                }
                Hold::Value { what } => format!("{what}: {:.6}", p.spec.value()),
            })
        })
        .collect()
}

/// The quantity a specification fixes, in words (for a refusal naming it).
pub fn quantity(spec: &Spec) -> String {
    match spec {
        Spec::ComponentFlow {
            stream, component, ..
        } => format!("flow of \"{component}\" in stream \"{stream}\""),
        Spec::Extent { reaction, .. } => format!("extent of reaction \"{reaction}\""),
        Spec::Conversion { reaction, .. } => {
            format!("single-pass conversion of reaction \"{reaction}\"")
        }
        Spec::SplitFraction { stream, .. } => format!("split fraction of stream \"{stream}\""),
        Spec::Recovery {
            stream, component, ..
        } => format!("split of \"{component}\" to stream \"{stream}\""),
        Spec::InletFraction {
            unit, component, ..
        } => format!("mole fraction of \"{component}\" at the inlet of \"{unit}\""),
    }
}
