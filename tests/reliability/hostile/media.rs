//! Media types, deep nesting and oversize: models and readings sent with every kind of
//! Content-Type and nested past any parser's recursion limit.

use super::*;

/// A body sent with a Content-Type, and the status the contract gives it.
type MediaCase = (&'static str, Vec<u8>, Option<&'static str>, u16);

/// The Content-Types refused with 415 whatever the body, models and readings alike: none, an
/// empty one, text/plain with and without a charset, `body` as the part `name` (file
/// `file`, of type `ctype`) of a multipart form, a URL-encoded form, XML and parameters alone.
fn refused_whatever_the_body(body: &[u8], name: &str, file: &str, ctype: &str) -> Vec<MediaCase> {
    let multipart = [
        format!("--ombrask\r\nContent-Disposition: form-data; name=\"{name}\"; filename=\"{file}\"\r\nContent-Type: {ctype}\r\n\r\n").as_bytes(),
        body,
        b"\r\n--ombrask--\r\n",
    ]
    .concat();
    vec![
        ("no Content-Type", body.to_vec(), None, 415),
        ("an empty Content-Type", body.to_vec(), Some(""), 415),
        ("text/plain", body.to_vec(), Some("text/plain"), 415),
        (
            "text/plain with a charset",
            body.to_vec(),
            Some("text/plain; charset=utf-8"),
            415,
        ),
        (
            "multipart",
            multipart,
            Some("multipart/form-data; boundary=ombrask"),
            415,
        ),
        (
            "a form",
            body.to_vec(),
            Some("application/x-www-form-urlencoded"),
            415,
        ),
        ("xml", body.to_vec(), Some("application/xml"), 415),
        (
            "only parameters",
            body.to_vec(),
            Some("; charset=utf-8"),
            415,
        ),
    ]
}

/// Models sent with every kind of Content-Type, each expected as the contract says.
pub(crate) async fn model_media_types(fx: &mut Fixture) {
    let toml = model_base(false);
    let json = model_base(true);
    let mut cases = refused_whatever_the_body(&toml, "model", "ombrask.toml", "application/toml");
    cases.extend([
        (
            "octet-stream",
            toml.clone(),
            Some("application/octet-stream"),
            415,
        ),
        (
            "a +toml suffix",
            toml.clone(),
            Some("application/vnd.ombrask+toml"),
            415,
        ),
        (
            "TOML sent as JSON",
            toml.clone(),
            Some("application/json"),
            422,
        ),
        (
            "JSON sent as TOML",
            json.clone(),
            Some("application/toml"),
            422,
        ),
        (
            "JSON sent as text/toml",
            json.clone(),
            Some("text/toml"),
            422,
        ),
        (
            "TOML sent as a +json type",
            toml.clone(),
            Some("application/vnd.ombrask+json"),
            422,
        ),
        // The contract's types with parameters and in capitals are the same types: accepted,
        // as revisions in 2999.
        (
            "TOML with a charset",
            toml.clone(),
            Some("application/toml; charset=utf-8"),
            201,
        ),
        (
            "JSON in capitals",
            json.clone(),
            Some("APPLICATION/JSON"),
            201,
        ),
        (
            "JSON as a +json type",
            json.clone(),
            Some("application/vnd.ombrask+json"),
            201,
        ),
    ]);
    let mut budget = Budget::new("model media types", cases.len());
    for (name, body, media, want) in cases {
        let what = format!("model media types: {name} ({media:?})");
        let (verdict, why) = model_verdict(&body, media, PLANT);
        assert_eq!(
            verdict, want,
            "{what}: the case is not what it claims ({why})"
        );
        let a = fx.put_model(PLANT, media, Some(FUTURE), body, &what).await;
        check_model_answer(fx, &a, want, &why, &what);
        budget.count(a.status);
    }
    budget.done();
}

/// Models nested past any parser's recursion limit, and models over the size limit.
pub(crate) async fn model_nesting(fx: &mut Fixture) {
    let deep = 100_000;
    let cases: Vec<(&str, String, &str, u16)> = vec![
        (
            "JSON components nested 100,000 deep",
            format!(
                "{{\"name\": \"{PLANT}\", \"component\": {}}}",
                Nest::Array.render(deep)
            ),
            "application/json",
            422,
        ),
        (
            "JSON objects nested 40,000 deep",
            format!(
                "{{\"name\": \"{PLANT}\", \"unit\": {}}}",
                Nest::JsonObject.render(40_000)
            ),
            "application/json",
            422,
        ),
        (
            "TOML array nested 100,000 deep",
            format!(
                "name = \"{PLANT}\"\ncomponent = {}\n",
                Nest::Array.render(deep)
            ),
            "application/toml",
            422,
        ),
        (
            "TOML inline tables nested 50,000 deep",
            format!(
                "name = \"{PLANT}\"\nalpha = {}\n",
                Nest::TomlTable.render(50_000)
            ),
            "application/toml",
            422,
        ),
        (
            "TOML dotted table header 60,000 keys long",
            format!("name = \"{PLANT}\"\n[{}a]\n", "a.".repeat(60_000)),
            "application/toml",
            422,
        ),
        (
            "TOML array of tables header nested",
            format!("name = \"{PLANT}\"\n[[{}a]]\n", "a.".repeat(60_000)),
            "application/toml",
            422,
        ),
        (
            "a model one byte over the limit",
            {
                let mut m = support::ombrask_model();
                while m.len() < MAX_BODY + 1 {
                    m.push_str("# padding of the ombrask model past the body limit\n");
                }
                m
            },
            "application/toml",
            413,
        ),
        (
            "a 300,000-character name",
            format!("name = \"{}\"\n", "k".repeat(300_000)),
            "application/toml",
            413,
        ),
    ];
    let mut budget = Budget::new("model nesting and size", cases.len());
    for (name, body, media, want) in cases {
        let body = body.into_bytes();
        let what = format!("model nesting and size: {name}, body {}", preview(&body));
        let (verdict, why) = model_verdict(&body, Some(media), PLANT);
        assert_eq!(
            verdict, want,
            "{what}: the case is not what it claims ({why})"
        );
        let a = fx
            .put_model(PLANT, Some(media), Some(FUTURE), body, &what)
            .await;
        check_model_answer(fx, &a, want, &why, &what);
        if want == 413 {
            assert!(
                a.text().contains(&MAX_BODY.to_string()),
                "{what}: {}",
                a.text()
            );
        }
        budget.count(a.status);
    }
    budget.done();
}

/// Readings with every kind of Content-Type. Types the contract refuses, and bodies of the
/// other format, go to ombrask-ob2 (refused whole); the contract's types spelt with parameters
/// or capitals go to ombrask-ob3 and must be read.
pub(crate) async fn readings_media_types(fx: &mut Fixture) {
    let (csv, json) = scratch_batch();
    let utf16: Vec<u8> = [0xFFu8, 0xFE]
        .into_iter()
        .chain(
            String::from_utf8(csv.clone())
                .expect("UTF-8")
                .encode_utf16()
                .flat_map(u16::to_le_bytes),
        )
        .collect();
    let mut refused = refused_whatever_the_body(&csv, "readings", "r.csv", "text/csv");
    refused.extend([
        ("application/csv", csv.clone(), Some("application/csv"), 415),
        ("text/csvx", csv.clone(), Some("text/csvx"), 415),
        (
            "problem+json",
            json.clone(),
            Some("application/problem+json"),
            415,
        ),
        ("a wildcard", csv.clone(), Some("*/*"), 415),
        ("TOML", csv.clone(), Some("application/toml"), 415),
        (
            "CSV sent as JSON",
            csv.clone(),
            Some("application/json"),
            400,
        ),
        (
            "CSV sent as JSON with a charset",
            csv.clone(),
            Some("application/json; charset=utf-8"),
            400,
        ),
        ("JSON sent as CSV", json.clone(), Some("text/csv"), 400),
        (
            "JSON sent as CSV with a charset",
            json.clone(),
            Some("text/csv; charset=utf-8"),
            400,
        ),
        ("UTF-16 CSV", utf16, Some("text/csv; charset=utf-16"), 400),
    ]);
    let mut budget = Budget::new("readings media types", refused.len() + 5);
    for (name, body, media, want) in refused {
        let what = format!("readings media types: {name} ({media:?})");
        let a = fx.post_readings(PLANT, media, body, &what).await;
        expect(&a, &[want], &what);
        budget.count(a.status);
    }
    let read: Vec<(&str, Vec<u8>, &str)> = vec![
        ("CSV with a charset", csv.clone(), "text/csv; charset=utf-8"),
        ("CSV in capitals", csv.clone(), "TEXT/CSV"),
        ("CSV with spaces", csv.clone(), "text/csv ; header=present"),
        (
            "JSON with a charset",
            json.clone(),
            "application/json; charset=utf-8",
        ),
        ("JSON in capitals", json.clone(), "Application/JSON"),
    ];
    for (name, body, media) in read {
        let what = format!("readings media types: {name} ({media:?})");
        let before = fx.readings(SCRATCH).await;
        let a = fx.post_readings(SCRATCH, Some(media), body, &what).await;
        expect(&a, &[200], &what);
        let answer = a.json();
        let n = |k: &str| answer[k].as_u64().unwrap_or(0);
        assert_eq!(
            n("accepted") + n("replaced") + n("unchanged"),
            OMBRASK_TAGS.len() as u64,
            "{what}: {answer}"
        );
        assert_eq!(n("rejected"), 0, "{what}: {answer}");
        check_ingest(&before, &fx.readings(SCRATCH).await, &a, &what);
        budget.count(a.status);
    }
    budget.done();
}

/// Readings nested far past any parser's limit: refused whole with 400, on ombrask-ob2.
pub(crate) async fn readings_nesting(fx: &mut Fixture) {
    let deep = 100_000;
    let one = "{\"tag\": \"OB2-FI-101\", \"time\": \"2026-03-02T00:00:00Z\", \"value\": ";
    let cases: Vec<(&str, String, &str)> = vec![
        (
            "100,000 open brackets",
            "[".repeat(deep),
            "application/json",
        ),
        (
            "100,000 closed brackets",
            Nest::Array.render(deep),
            "application/json",
        ),
        (
            "readings nested 100,000 deep",
            format!("{{\"readings\": {}}}", Nest::Array.render(deep)),
            "application/json",
        ),
        (
            "a value nested 100,000 deep",
            format!("{{\"readings\": [{one}{}}}]}}", Nest::Array.render(deep)),
            "application/json",
        ),
        (
            "objects nested 40,000 deep",
            Nest::JsonObject.render(40_000),
            "application/json",
        ),
        (
            "readings of objects nested 40,000 deep",
            format!("{{\"readings\": [{}]}}", Nest::JsonObject.render(40_000)),
            "application/json",
        ),
        ("100,000 open braces", "{".repeat(deep), "application/json"),
        ("brackets as CSV", Nest::Array.render(deep), "text/csv"),
        (
            "a CSV header of 100,000 quotes",
            "\"".repeat(deep),
            "text/csv",
        ),
    ];
    let mut budget = Budget::new("readings nesting", cases.len());
    for (name, body, media) in cases {
        let body = body.into_bytes();
        assert!(body.len() <= MAX_BODY);
        let what = format!("readings nesting: {name}, body {}", preview(&body));
        let a = fx.post_readings(PLANT, Some(media), body, &what).await;
        expect(&a, &[400], &what);
        budget.count(a.status);
    }
    budget.done();
}
