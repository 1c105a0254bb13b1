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
