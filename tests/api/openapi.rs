//! The OpenAPI document the service serves, checked against the OpenAPI 3.1 JSON Schema
//! published by the OpenAPI Initiative (tests/data/openapi/): valid, its query parameters
//! declared in the query and every path parameter in its path, its times `date-time`.

use super::*;

/// The OpenAPI 3.1 schema, compiled.
fn oas_3_1() -> jsonschema::Validator {
    let schema: Value = serde_json::from_str(include_str!("../data/openapi/oas-3.1-schema.json"))
        .expect("the vendored schema is JSON");
    jsonschema::validator_for(&schema).expect("the OpenAPI 3.1 schema compiles")
}

#[tokio::test]
async fn the_openapi_document_is_valid_openapi_3_1_and_says_where_each_parameter_goes() {
    let (_dir, s, _t) = fresh(&[]);
    let c = client();
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    let validator = oas_3_1();
    let errors: Vec<String> = validator
        .iter_errors(&doc)
        .map(|e| format!("{e} at {}", e.instance_path))
        .collect();
    assert!(errors.is_empty(), "{errors:#?}");

    // Not vacuous: the schema refuses a parameter in a place OpenAPI does not know, and a path
    // parameter that is not required.
    let figures = "/api/v1/plants/{plant}/figures";
    let mut bad = doc.clone();
    bad["paths"][figures]["get"]["parameters"][1]["in"] = json!("body");
    assert!(!validator.is_valid(&bad));
    let mut bad = doc.clone();
    bad["paths"][figures]["get"]["parameters"][0]["required"] = json!(false);
    assert!(!validator.is_valid(&bad));

    // Every path parameter stands in its path; every other parameter is in the query; every
    // time is a date-time.
    let mut query = 0;
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for (method, op) in item.as_object().expect("operations") {
            for p in op["parameters"].as_array().into_iter().flatten() {
                let name = p["name"].as_str().expect("a name");
                let place = p["in"].as_str().expect("a place");
                let what = format!("{method} {path}: {name} in {place}");
                if path.contains(&format!("{{{name}}}")) {
                    assert_eq!(place, "path", "{what}");
                } else {
                    assert_eq!(place, "query", "{what}");
                    query += 1;
                }
                if ["from", "to", "period", "effective_from"].contains(&name) {
                    assert_eq!(p["schema"]["format"], "date-time", "{what}");
                }
            }
        }
    }
    assert!(query >= 15, "{query} query parameters");
}

#[tokio::test]
async fn the_document_types_the_bodies_names_and_links_the_service_takes() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    // A schema of the document's components, resolved against the document itself.
    let schema_of = |schema: Value| {
        let mut root = schema;
        root["components"] = doc["components"].clone();
        jsonschema::validator_for(&root).expect("the document's schema compiles")
    };
    let ops = &doc["paths"];

    // The model's JSON body: a real model file passes, a model without its name does not.
    let put = &ops["/api/v1/plants/{plant}/model"]["put"];
    let model = schema_of(put["requestBody"]["content"]["application/json"]["schema"].clone());
    let spec = reconcile::ModelSpec::from_toml(&ombrask_model()).expect("the test model");
    let mut json_model = serde_json::to_value(&spec).unwrap();
    assert!(model.is_valid(&json_model), "{json_model}");
    json_model.as_object_mut().unwrap().remove("name");
    assert!(!model.is_valid(&json_model));

    // Readings as JSON: the quality words, times as date-time.
    let post = &ops["/api/v1/plants/{plant}/readings"]["post"];
    let batch = schema_of(post["requestBody"]["content"]["application/json"]["schema"].clone());
    let one = |quality: &str| json!({"readings": [{"tag": "OB2-FI-101", "time": "2026-03-02T05:00:00Z", "value": 1.5, "quality": quality}]});
    assert!(batch.is_valid(&one("uncertain")));
    assert!(!batch.is_valid(&one("so-so")));
    assert!(!batch.is_valid(&json!({"readings": [{"tag": "OB2-FI-101", "value": 1.5}]})));

    // A note's kind is one of the five words; the stored model reads back as the model schema.
    let note = schema_of(json!({"$ref": "#/components/schemas/NewNote"}));
    for kind in [
        "checked",
        "recalibrated",
        "replaced",
        "out_of_service",
        "back_in_service",
    ] {
        assert!(
            note.is_valid(&json!({"kind": kind, "text": "zero checked"})),
            "{kind}"
        );
    }
    assert!(!note.is_valid(&json!({"kind": "inspected", "text": "zero checked"})));
    let get = &ops["/api/v1/plants/{plant}/model"]["get"];
    let answer =
        schema_of(get["responses"]["200"]["content"]["application/json"]["schema"].clone());
    create_ombrask(&c, &s, &t.admin).await;
    let stored = get_ok(&c, &s, &t.read, "/model").await;
    let errors: Vec<String> = answer.iter_errors(&stored).map(|e| e.to_string()).collect();
    assert!(errors.is_empty(), "{errors:?}");
    let mut bad = stored.clone();
    bad["model"]["meter"][0]["quantity"] = json!("pressure");
    assert!(!answer.is_valid(&bad), "the model is typed, not any object");

    // The plant name's pattern, as the service checks it.
    let plant = put["parameters"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["name"] == "plant")
        .expect("the plant parameter");
    let name = schema_of(plant["schema"].clone());
    for good in ["ombrask-ob2", "a", "Plant_7.x"] {
        assert!(name.is_valid(&json!(good)), "{good}");
    }
    for bad in [".hidden", "", "a b", "x/y", &"p".repeat(65)] {
        assert!(!name.is_valid(&json!(bad)), "{bad}");
    }

    // Every link names an operation of the document and only parameters that operation has.
    let mut operations = std::collections::HashMap::new();
    for item in ops.as_object().unwrap().values() {
        for op in item.as_object().unwrap().values() {
            if let Some(id) = op["operationId"].as_str() {
                operations.insert(id.to_string(), op.clone());
            }
        }
    }
    let mut links = 0;
    for item in ops.as_object().unwrap().values() {
        for op in item.as_object().unwrap().values() {
            for response in op["responses"].as_object().unwrap().values() {
                for (name, link) in response["links"].as_object().into_iter().flatten() {
                    links += 1;
                    let target = &operations[link["operationId"].as_str().expect(name)];
                    for param in link["parameters"].as_object().unwrap().keys() {
                        assert!(
                            target["parameters"]
                                .as_array()
                                .unwrap()
                                .iter()
                                .any(|p| &p["name"] == param),
                            "link {name}: {param}"
                        );
                    }
                }
            }
        }
    }
    assert!(links >= 8, "{links} links");
}
