//! Model revisions: an invalid model refused with every problem, and a new revision that
//! leaves the stored readings alone.

use super::*;

/// A model with three independent problems: a meter on a stream that does not exist, a
/// negative sigma, and a splitter with a single outlet.
const BROKEN_MODEL: &str = r#"
name = "ombrask-ob2"
[[component]]
id = "N2"
molar_mass = 28.0134
[[unit]]
id = "tee"
kind = "splitter"
[[stream]]
id = "in"
from = "outside"
to = "tee"
[[stream]]
id = "out"
from = "tee"
to = "outside"
[[meter]]
tag = "T-1"
stream = "nowhere"
quantity = "molar_flow"
uom = "kmol/h"
sigma = 1.0
[[meter]]
tag = "T-2"
stream = "in"
quantity = "molar_flow"
uom = "kmol/h"
sigma = -2.0
"#;

#[tokio::test]
async fn an_invalid_model_is_refused_with_every_problem_and_nothing_is_stored() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let r = put_model(&c, &s, &t.admin, PLANT, BROKEN_MODEL, "application/toml").await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    let errors = body["errors"].as_array().expect("errors listed");
    let items: Vec<String> = errors
        .iter()
        .map(|e| {
            format!(
                "{}: {}",
                e["item"].as_str().unwrap(),
                e["message"].as_str().unwrap()
            )
        })
        .collect();
    for needle in ["nowhere", "T-2", "tee"] {
        assert!(
            items.iter().any(|i| i.contains(needle)),
            "no problem names {needle}: {items:?}"
        );
    }
    assert!(errors.len() >= 3, "{items:?}");

    // Not TOML at all: the syntax error is reported with its position.
    let r = put_model(
        &c,
        &s,
        &t.admin,
        PLANT,
        "name = \n[[unit",
        "application/toml",
    )
    .await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert!(body["detail"].as_str().unwrap().contains("TOML"), "{body}");

    // The same model as JSON is read as JSON.
    let r = put_model(&c, &s, &t.admin, PLANT, "{\"name\": 3}", "application/json").await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert!(body["detail"].as_str().unwrap().contains("JSON"), "{body}");

    // Neither TOML nor JSON by its media type.
    let r = put_model(&c, &s, &t.admin, PLANT, &ombrask_model(), "text/html").await;
    problem(r, StatusCode::UNSUPPORTED_MEDIA_TYPE).await;

    // A model sent to a plant of another name.
    let r = put_model(
        &c,
        &s,
        &t.admin,
        "ombrask-ob3",
        &ombrask_model(),
        "application/toml",
    )
    .await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert_eq!(body["errors"][0]["item"], "name");

    // None of it created the plant or a revision.
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/model/revisions")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
}

#[tokio::test]
async fn a_new_revision_leaves_stored_readings_alone() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let put_from = |body: String, from: &'static str| {
        c.put(s.url(&format!("/api/v1/plants/{PLANT}/model")))
            .query(&[("effective_from", from)])
            .bearer_auth(&t.admin)
            .header("content-type", "application/toml")
            .body(body)
            .send()
    };
    let r = put_from(ombrask_model(), "2026-03-01T00:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let day = day_rows("2026-03-02", 1.0);
    post_ok(&c, &s, &t.ingest, &csv(&day), "text/csv").await;
    let (from, to) = ("2026-03-02T00:00:00Z", "2026-03-03T00:00:00Z");
    let before = readings(&c, &s, &t.read, from, to).await;

    // Revision 2 narrows the purge meter's range below every stored value and changes a sigma.
    let revised = ombrask_model()
        .replace("range = [0.0, 200.0]", "range = [0.0, 10.0]")
        .replace("sigma = 40.0", "sigma = 35.0");
    assert_ne!(revised, ombrask_model());
    let r = put_from(revised.clone(), "2026-03-02T12:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let after = readings(&c, &s, &t.read, from, to).await;
    assert_eq!(
        before, after,
        "stored readings are not re-judged by a new revision"
    );

    // Revision 3 takes effect in the future: revision 2 stays the one in effect.
    let r = put_from(ombrask_model(), "2099-01-01T00:00:00Z")
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::CREATED);
    let current = get_ok(&c, &s, &t.read, "/model").await;
    assert_eq!(current["revision"], 2);
    assert_eq!(current["source"], revised.as_str());
    assert_eq!(current["model"]["name"], PLANT);
    let list = get_ok(&c, &s, &t.read, "/model/revisions").await;
    let numbers: Vec<i64> = list
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["revision"].as_i64().unwrap())
        .collect();
    assert_eq!(numbers, [1, 2, 3]);
    assert_eq!(list[2]["effective_from"], "2099-01-01T00:00:00Z");

    // A new reading is judged by the range of the revision in effect at its time: revision 2
    // from noon of the 2nd, revision 1 before it.
    let late =
        "tag,time,value\nOB2-FI-401,2026-03-03T00:00:00Z,48\nOB2-FI-401,2026-03-01T00:00:00Z,48\n";
    let answer = post_ok(&c, &s, &t.ingest, late, "text/csv").await;
    assert_eq!(answer["out_of_range"], 1, "{answer}");
    let flags: Vec<(String, bool)> = readings(
        &c,
        &s,
        &t.read,
        "2026-03-01T00:00:00Z",
        "2026-03-04T00:00:00Z",
    )
    .await
    .iter()
    .filter(|r| r["tag"] == "OB2-FI-401" && !r["time"].as_str().unwrap().starts_with("2026-03-02"))
    .map(|r| {
        (
            r["time"].as_str().unwrap().to_string(),
            r["out_of_range"].as_bool().unwrap(),
        )
    })
    .collect();
    assert_eq!(
        flags,
        [
            ("2026-03-01T00:00:00Z".to_string(), false),
            ("2026-03-03T00:00:00Z".to_string(), true)
        ]
    );
}

/// Ids a spreadsheet, a terminal or a reader could be fooled by: each meter of the model
/// renamed to one, as TOML writes it, and the name the problem gives it.
const UNSAFE_TAGS: [(&str, &str, &str); 9] = [
    ("OB2-FI-101", "\"=1+2\"", "=1+2"),
    ("OB2-AI-102", "\"@SUM(A1)\"", "@SUM(A1)"),
    ("OB2-AI-103", "\"OB2-AI\u{202e}103\"", "OB2-AI\u{202e}103"),
    ("OB2-AI-104", "\"OB2-AI\u{200b}104\"", "OB2-AI\u{200b}104"),
    ("OB2-FI-201", "\"OB2-FI\\n201\"", "OB2-FI\n201"),
    ("OB2-AI-202", "\"OB2-AI\\t202\"", "OB2-AI\t202"),
    ("OB2-FI-301", "\"+x\"", "+x"),
    ("OB2-FI-401", "\"-x\"", "-x"),
    (
        "OB2-AI-402",
        "\"AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA\"",
        "AAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAAA",
    ),
];

#[tokio::test]
async fn a_model_with_unsafe_names_is_refused_naming_each_and_nothing_is_stored() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let mut model = ombrask_model();
    for (tag, written, _) in UNSAFE_TAGS {
        model = model.replace(&format!("\"{tag}\""), written);
    }
    model = model.replace("\"OB2-AI-403\"", "\"\"");
    let r = put_model(&c, &s, &t.admin, PLANT, &model, "application/toml").await;
    let body = problem(r, StatusCode::UNPROCESSABLE_ENTITY).await;
    let errors: Vec<(String, String)> = body["errors"]
        .as_array()
        .expect("errors listed")
        .iter()
        .map(|e| {
            (
                e["item"].as_str().unwrap().to_string(),
                e["message"].as_str().unwrap().to_string(),
            )
        })
        .collect();
    assert_eq!(errors.len(), UNSAFE_TAGS.len() + 1, "{errors:#?}");
    for (_, _, name) in UNSAFE_TAGS {
        let item = format!("meter {}", reconcile::text::quote(name));
        assert!(
            errors
                .iter()
                .any(|(i, m)| *i == item && m.starts_with("id ")),
            "no problem names {item}: {errors:#?}"
        );
    }
    assert!(errors
        .iter()
        .any(|(i, m)| i == "meter #10" && m == "has an empty id"));
    // Escaped as the item names them: no answer carries the characters themselves.
    let text = body.to_string();
    for hidden in ['\u{202e}', '\u{200b}'] {
        assert!(!text.contains(hidden), "{text}");
    }
    assert!(errors.iter().any(|(i, _)| i == "meter \"OB2-FI\\n201\""));
    assert!(errors
        .iter()
        .any(|(i, m)| i == "meter \"=1+2\"" && m.contains("formula")));

    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/model/revisions")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;

    // Readings naming such tags are refused line by line as unknown, quoted safely.
    create_ombrask(&c, &s, &t.admin).await;
    let batch = "tag,time,value\n=1+2,2026-03-02T05:00:00Z,1\n\"OB2-FI-101\u{202e}\",2026-03-02T05:00:00Z,1\nOB2-FI-101,2026-03-02T05:00:00Z,20500\n";
    let answer = post_ok(&c, &s, &t.ingest, batch, "text/csv").await;
    assert_eq!(counts(&answer), [1, 0, 0, 2], "{answer}");
    assert_eq!(
        answer["rejections"][0]["reasons"][0],
        "unknown tag \"=1+2\" (no meter of the model has it)"
    );
    assert_eq!(
        answer["rejections"][1]["reasons"][0],
        "unknown tag \"OB2-FI-101\\u{202e}\" (no meter of the model has it)"
    );
}
