//! The problems a model has, collected: validation never stops at the first, so a user fixes a
//! model file in one pass.

use std::collections::{HashMap, HashSet};

use crate::model::ModelProblem;

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

/// Index of ids, each empty or repeated id a problem.
pub(super) fn index_ids<'a>(
    kind: &str,
    ids: impl Iterator<Item = &'a str>,
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
        if !seen.insert(id.to_string()) {
            problems.push(ModelProblem {
                item: format!("{kind} \"{id}\""),
                message: "is defined more than once".into(),
            });
            continue;
        }
        map.insert(id.to_string(), i);
    }
    map
}
