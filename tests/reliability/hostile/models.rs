//! Model files: mutated TOML and JSON PUT to ombrask-ob2, each answer what the engine's own
//! parser and validator say of the same bytes.

use super::*;

pub(crate) fn model_base(json: bool) -> Vec<u8> {
    let toml = support::ombrask_model();
    if json {
        let spec = ModelSpec::from_toml(&toml).expect("the ombrask model parses");
        serde_json::to_string_pretty(&spec)
            .expect("a model serialises")
            .into_bytes()
    } else {
        toml.into_bytes()
    }
}

pub(crate) fn parse_model(text: &str, json: bool) -> Result<ModelSpec, reconcile::ModelError> {
    if json {
        ModelSpec::from_json(text)
    } else {
        ModelSpec::from_toml(text)
    }
}

#[derive(Debug, Clone)]
pub(crate) struct ModelCase {
    pub(crate) json: bool,
    pub(crate) edits: Vec<Edit>,
    /// The Content-Type sent when not the body's own (`Some(None)`: none at all).
    pub(crate) media: Option<Option<&'static str>>,
}

impl ModelCase {
    pub(crate) fn body(&self, bases: &[Vec<u8>; 2]) -> Vec<u8> {
        let mut body = bases[usize::from(self.json)].clone();
        for e in &self.edits {
            e.apply(&mut body);
        }
        body
    }

    pub(crate) fn media(&self) -> Option<&'static str> {
        self.media.unwrap_or(Some(if self.json {
            "application/json"
        } else {
            "application/toml"
        }))
    }
}

pub(crate) const MODEL_MEDIA: &[Option<&str>] = &[
    None,
    Some(""),
    Some("application/json"),
    Some("application/toml"),
    Some("text/toml"),
    Some("text/x-toml"),
    Some("APPLICATION/JSON"),
    Some("application/toml; charset=utf-8"),
    Some("application/vnd.ombrask+json"),
    Some("text/plain"),
    Some("text/csv"),
    Some("application/octet-stream"),
    Some("multipart/form-data; boundary=ombrask"),
    Some("application/x-www-form-urlencoded"),
    Some(";"),
];

pub(crate) fn model_case() -> impl Strategy<Value = ModelCase> {
    (
        any::<bool>(),
        prop::collection::vec(edit(), 1..=3),
        prop_oneof![
            9 => Just(None),
            1 => prop::sample::select(MODEL_MEDIA).prop_map(Some),
        ],
    )
        .prop_map(|(json, edits, media)| ModelCase { json, edits, media })
}

/// What the service must answer to a model PUT to `plant`: decided by the engine's own parser
/// and validator on the same bytes, and the order of the checks in docs/api.md (size, media
/// type, UTF-8, content).
pub(crate) fn model_verdict(body: &[u8], media: Option<&str>, plant: &str) -> (u16, String) {
    if body.len() > MAX_BODY {
        return (413, "the body is over the limit".into());
    }
    let m = media
        .and_then(|m| m.split(';').next())
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    let json = if m == "application/json" || m.ends_with("+json") {
        true
    } else if matches!(m.as_str(), "application/toml" | "text/toml" | "text/x-toml") {
        false
    } else {
        return (415, format!("{media:?} is neither TOML nor JSON"));
    };
    let Ok(text) = std::str::from_utf8(body) else {
        return (400, "the body is not UTF-8".into());
    };
    let spec = match parse_model(text, json) {
        Ok(spec) => spec,
        Err(e) => return (422, format!("the engine cannot parse it: {e}")),
    };
    if spec.name != plant {
        return (422, format!("it is named {:?}", spec.name));
    }
    let with_nul = serde_json::to_string(&spec)
        .expect("a model serialises")
        .contains("\\u0000");
    if let Err(e) = Plant::new(spec) {
        return (422, format!("the engine's validator refuses it: {e}"));
    }
    if with_nul {
        return (422, "a text of the model holds U+0000".into());
    }
    (201, "it is a valid model of the plant".into())
}

pub(crate) async fn model_files(fx: &mut Fixture, count: usize) {
    let mut family = Family::draw("model files", count, model_case());
    let bases = [model_base(false), model_base(true)];
    while let Some((i, case)) = family.next() {
        let body = case.body(&bases);
        let media = case.media();
        let (want, why) = model_verdict(&body, media, PLANT);
        let what = family.describe(i, &case, &body);
        let a = fx.put_model(PLANT, media, Some(FUTURE), body, &what).await;
        check_model_answer(fx, &a, want, &why, &what);
        family.count(a.status);
    }
    family.done();
}

pub(crate) fn check_model_answer(fx: &mut Fixture, a: &Answer, want: u16, why: &str, what: &str) {
    check(a, what);
    assert_eq!(
        a.status,
        want,
        "{what}: expected {want} because {why}; got {}",
        a.text()
    );
    match a.status {
        201 => {
            fx.accepted_models += 1;
            let body = a.json();
            assert_eq!(
                body["revision"],
                1 + fx.accepted_models as i64,
                "{what}: {body}"
            );
            assert_eq!(body["effective_from"], FUTURE, "{what}: {body}");
        }
        422 => {
            let errors = a.json()["errors"].as_array().map_or(0, Vec::len);
            assert!(errors > 0, "{what}: a 422 lists no problem: {}", a.text());
        }
        _ => {}
    }
}
