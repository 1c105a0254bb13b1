//! The problems a model has, collected: validation never stops at the first, so a user fixes a
//! model file in one pass.

use std::collections::{HashMap, HashSet};

use crate::model::ModelProblem;
use crate::names;
use crate::text::quote;

/// The problems found so far, each naming its item.
pub(super) struct Problems(pub(super) Vec<ModelProblem>);

impl Problems {
    pub(super) fn add(&mut self, item: impl Into<String>, message: impl Into<String>) {
        self.0.push(ModelProblem {
            item: item.into(),
            message: message.into(),
        });
    }
}

/// Index of ids, each empty or repeated id a problem, and with `checked` each id that is not
/// a safe name ([`names`]). An unsafe id is still indexed, so that what refers to it is not
/// also reported as unknown: one problem per id at fault.
pub(super) fn index_ids<'a>(
    kind: &str,
    ids: impl Iterator<Item = &'a str>,
    checked: bool,
    problems: &mut Vec<ModelProblem>,
) -> HashMap<String, usize> {
    let mut map = HashMap::new();
    let mut seen = HashSet::new();
    for (i, id) in ids.enumerate() {
        if id.trim().is_empty() {
            problems.push(ModelProblem {
                item: format!("{kind} #{}", i + 1),
                message: "has an empty id".into(),
            });
            continue;
        }
        if !seen.insert(id) {
            problems.push(ModelProblem {
                item: format!("{kind} {}", quote(id)),
                message: "is defined more than once".into(),
            });
            continue;
        }
        if let Some(why) = checked.then(|| names::fault(id)).flatten() {
            problems.push(ModelProblem {
                item: format!("{kind} {}", quote(id)),
                message: format!("id {why}"),
            });
        }
        map.insert(id.to_string(), i);
    }
    map
}
