//! Admitting a new model revision: the model text parsed in its format, named for the plant
//! it is sent to, passed by the engine's validator, free of what no store keeps, and stored as
//! the plant's next revision (the plant is created by its first model). A model refused at
//! any step is never stored.

use chrono::{DateTime, Utc};
use reconcile::{ModelError, ModelProblem, ModelSpec, Plant};

use crate::store::{ModelRevision, Store, StoreError};

/// The text formats of a model.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModelFormat {
    Toml,
    Json,
}

/// Why a model was not stored.
#[derive(Debug, thiserror::Error)]
pub enum Refusal {
    /// Not valid TOML or JSON, or refused by the engine's validator.
    #[error(transparent)]
    Model(#[from] ModelError),
    /// The model's own name differs from the plant it was sent to.
    #[error("the model is named \"{model}\" but was sent to plant \"{plant}\"")]
    Misnamed { model: String, plant: String },
    /// Some text of the model holds U+0000 (each place listed; none when only the raw text
    /// does).
    #[error("the model holds the character U+0000")]
    HoldsNul(Vec<ModelProblem>),
    #[error(transparent)]
    Store(#[from] StoreError),
}

/// Check `text` as a model of `plant` and store it as the plant's next revision, in effect
/// from `effective_from`.
pub async fn admit(
    store: &Store,
    plant: &str,
    text: &str,
    format: ModelFormat,
    effective_from: DateTime<Utc>,
) -> Result<ModelRevision, Refusal> {
    let spec = match format {
        ModelFormat::Json => ModelSpec::from_json(text),
        ModelFormat::Toml => ModelSpec::from_toml(text),
    }?;
    if spec.name != plant {
        return Err(Refusal::Misnamed {
            model: spec.name,
            plant: plant.to_string(),
        });
    }
    // The engine's validator decides; a model it refuses is never stored.
    Plant::new(spec.clone())?;
    let nul = nul_items(&spec);
    if !nul.is_empty() || text.contains('\0') {
        return Err(Refusal::HoldsNul(nul));
    }
    let row = match store.plant(plant).await? {
        Some(row) => row,
        None => match store.create_plant(plant).await {
            Ok(row) => row,
            // Another request created it in between: use that one.
            Err(StoreError::PlantExists(_)) => store
                .plant(plant)
                .await?
                .ok_or_else(|| StoreError::NoPlant(plant.to_string()))?,
            Err(e) => return Err(e.into()),
        },
    };
    let revision = store
        .put_model_revision(&row, &spec, text, effective_from)
        .await?;
    let stored = store.model_revision(&row, revision).await?.ok_or_else(|| {
        StoreError::Corrupt(format!("revision {revision} of plant \"{plant}\" vanished"))
    })?;
    tracing::info!(plant = %plant, revision, "model revision stored");
    Ok(stored)
}

/// Every text of the model (ids, references, names, keys) that holds U+0000, by its place in
/// the model (`meter[3].tag`). The engine has no quarrel with such ids, but no store keeps
/// them: PostgreSQL's text refuses the character.
fn nul_items(spec: &ModelSpec) -> Vec<ModelProblem> {
    fn walk(value: &serde_json::Value, at: &str, found: &mut Vec<ModelProblem>) {
        use serde_json::Value;
        let hit = |item: String| ModelProblem {
            item,
            message: "holds the character U+0000".into(),
        };
        match value {
            Value::String(s) if s.contains('\0') => found.push(hit(at.to_string())),
            Value::Array(items) => {
                for (i, v) in items.iter().enumerate() {
                    walk(v, &format!("{at}[{i}]"), found);
                }
            }
            Value::Object(fields) => {
                for (k, v) in fields {
                    let place = if at.is_empty() {
                        k.clone()
                    } else {
                        format!("{at}.{k}")
                    };
                    if k.contains('\0') {
                        found.push(hit(place.clone()));
                    }
                    walk(v, &place, found);
                }
            }
            _ => {}
        }
    }
    let mut found = Vec::new();
    if let Ok(value) = serde_json::to_value(spec) {
        walk(&value, "", &mut found);
    }
    found
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_nul_in_any_text_of_a_model_is_named_by_its_place() {
        let text = std::fs::read_to_string(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../tests/data/ombrask-loop.toml"
        ))
        .expect("the ombrask model");
        let mut spec = ModelSpec::from_toml(&text).expect("parses");
        assert!(nul_items(&spec).is_empty());
        spec.meters[10].tag = "OB2-FI-501\0".into();
        spec.components[0].id = "\0".into();
        let items: Vec<String> = nul_items(&spec).into_iter().map(|e| e.item).collect();
        assert_eq!(items, ["component[0].id", "meter[10].tag"]);
    }
}
