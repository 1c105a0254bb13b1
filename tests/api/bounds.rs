//! Answers stay small whatever the input: a header of megabytes, a batch bad throughout, a
//! model with thousands of bad ids or one huge id each get an answer under 64 KiB that names
//! the first items at fault and counts them all, and the service's memory follows the body,
//! not a multiple of it.

use super::*;

/// Every error answer, and every ingestion answer, fits in this.
const BOUND: usize = 64 * 1024;

/// The answer's status and its body as text, the body's size asserted under [`BOUND`].
async fn small(r: reqwest::Response, status: StatusCode, what: &str) -> Value {
    assert_eq!(r.status(), status, "{what}");
    let text = r.text().await.expect("body");
    assert!(
        text.len() < BOUND,
        "{what}: a {} byte answer: {}…",
        text.len(),
        text.chars().take(500).collect::<String>()
    );
    serde_json::from_str(&text).expect("JSON answer")
}

/// The service's peak resident memory so far, in bytes (Linux).
fn peak_memory(s: &Server) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{}/status", s.pid())).ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

#[tokio::test]
async fn a_header_of_megabytes_gets_a_small_answer_naming_its_first_columns() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    let mut body = String::from("tag,time,value");
    let mut k = 0;
    while body.len() < 8 * 1024 * 1024 {
        body += &format!(",unknown-column-{k}");
        k += 1;
    }
    body += "\nOB2-FI-101,2026-03-02T05:00:00Z,1\n";
    let before = peak_memory(&s);
    let r = post_readings(&c, &s, &t.ingest, PLANT, &body, "text/csv").await;
    let answer = small(r, StatusCode::BAD_REQUEST, "8 MB header").await;
    let detail = answer["detail"].as_str().unwrap();
    assert!(
        detail.contains("unknown column \"unknown-column-0\""),
        "{detail}"
    );
    assert!(
        detail.contains(&format!("and {} more unknown column(s)", k - 5)),
        "{detail}"
    );
    // The body, its copy as one CSV record and the reader's buffers: the service's peak grows
    // by some copies of the body (it held a name and a message per column, and an answer
    // naming each, before: tens of copies).
    if let (Some(before), Some(after)) = (before, peak_memory(&s)) {
        assert!(
            after.saturating_sub(before) < 16 * body.len() as u64,
            "the peak grew from {before} to {after} bytes for a {} byte body",
            body.len()
        );
    }
    let stored = readings(
        &c,
        &s,
        &t.read,
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
    )
    .await;
    assert!(stored.is_empty(), "nothing of a refused batch is stored");
}

#[tokio::test]
async fn a_batch_of_200000_bad_lines_gets_a_small_answer_counting_them_all() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    // The first lines with fields of kilobytes (a bidirectional override among them), then
    // short bad lines; one good line at the end.
    let long = format!("{}\u{202e}", "L".repeat(5_000));
    let mut body = String::from("tag,time,value,quality\n");
    for k in 0..200_000 {
        if k < 50 {
            body += &format!("X{long},{long},{long},{long}\n");
        } else {
            body += &format!("OB2-XX-{k},noon,NaN,meh\n");
        }
    }
    body += "OB2-FI-101,2026-03-02T05:00:00Z,20500,good\n";
    let before = peak_memory(&s);
    let r = post_readings(&c, &s, &t.ingest, PLANT, &body, "text/csv").await;
    let answer = small(r, StatusCode::OK, "200,000 bad lines").await;
    assert_eq!(counts(&answer), [1, 0, 0, 200_000], "{answer}");
    let listed = answer["rejections"].as_array().unwrap();
    assert!(listed.len() >= 10, "{}", listed.len());
    assert_eq!(listed[0]["line"], 2);
    let reasons: Vec<&str> = listed[0]["reasons"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r.as_str().unwrap())
        .collect();
    assert_eq!(reasons.len(), 4, "{reasons:?}");
    assert!(
        reasons[0].starts_with("unknown tag \"XLLL")
            && reasons[0].contains("…\" (5002 characters)"),
        "{}",
        reasons[0]
    );
    assert!(reasons.iter().all(|r| !r.contains('\u{202e}')));
    // The lines listed are the first, in order.
    for (i, r) in listed.iter().enumerate() {
        assert_eq!(r["line"], i + 2);
    }
    // The bad lines past the listed ones are counted, not kept.
    if let (Some(before), Some(after)) = (before, peak_memory(&s)) {
        assert!(
            after.saturating_sub(before) < 4 * body.len() as u64,
            "the peak grew from {before} to {after} bytes for a {} byte body",
            body.len()
        );
    }

    // The same as JSON: a million-element array of non-objects.
    let json = format!("{{\"readings\": [{}0]}}", "0,".repeat(999_999));
    let r = post_readings(&c, &s, &t.ingest, PLANT, &json, "application/json").await;
    let answer = small(r, StatusCode::OK, "a million bad JSON readings").await;
    assert_eq!(answer["rejected"], 1_000_000);
    let listed = answer["rejections"].as_array().unwrap();
    assert!(
        (100..=loopbal_server::ingest::MAX_LISTED_REJECTIONS).contains(&listed.len()),
        "{}",
        listed.len()
    );
    for (i, r) in listed.iter().enumerate() {
        assert_eq!(r["index"], i);
    }
}

/// The ombrask model with more meters, of these tags, on its purge stream.
fn with_meters(tags: impl Iterator<Item = String>) -> String {
    let mut text = ombrask_model();
    for tag in tags {
        text += &format!(
            "\n[[meter]]\ntag = \"{tag}\"\nstream = \"purge\"\nquantity = \"molar_flow\"\n\
             uom = \"kmol/h\"\nsigma = 1.0\n"
        );
    }
    text
}

#[tokio::test]
async fn a_model_with_ten_thousand_bad_ids_or_a_huge_one_gets_a_small_answer() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let model = with_meters((0..10_000).map(|k| format!("=M{k}")));
    let r = put_model(&c, &s, &t.admin, PLANT, &model, "application/toml").await;
    let answer = small(r, StatusCode::UNPROCESSABLE_ENTITY, "10,000 bad ids").await;
    let errors = answer["errors"].as_array().unwrap();
    assert!(
        !errors.is_empty() && errors.len() <= 100,
        "{}",
        errors.len()
    );
    assert_eq!(errors[0]["item"], "meter \"=M0\"");
    assert!(errors[0]["message"]
        .as_str()
        .unwrap()
        .starts_with("id begins with '='"));
    assert_eq!(
        errors.len() + answer["errors_omitted"].as_u64().unwrap() as usize,
        10_000
    );
    let detail = answer["detail"].as_str().unwrap();
    assert!(detail.contains("10000 problem(s)"), "{detail}");

    let huge = "Q".repeat(3_000_000);
    let model = with_meters(std::iter::once(huge.clone()));
    let r = put_model(&c, &s, &t.admin, PLANT, &model, "application/toml").await;
    let answer = small(r, StatusCode::UNPROCESSABLE_ENTITY, "a huge id").await;
    assert_eq!(answer["errors"].as_array().unwrap().len(), 1, "{answer}");
    let item = answer["errors"][0]["item"].as_str().unwrap();
    assert!(
        item.starts_with("meter \"QQQ") && item.ends_with("…\" (3000000 characters)"),
        "{item}"
    );
    assert!(answer.get("errors_omitted").is_none());

    // A syntax error on a line of megabytes, in TOML and in JSON.
    let toml = format!("name = \"{PLANT}\"\nperiod = {huge}\n");
    let r = put_model(&c, &s, &t.admin, PLANT, &toml, "application/toml").await;
    small(
        r,
        StatusCode::UNPROCESSABLE_ENTITY,
        "a TOML error on a huge line",
    )
    .await;
    let json = format!("{{\"name\": \"{PLANT}\", \"{huge}\": 1}}");
    let r = put_model(&c, &s, &t.admin, PLANT, &json, "application/json").await;
    small(
        r,
        StatusCode::UNPROCESSABLE_ENTITY,
        "a JSON error on a huge key",
    )
    .await;

    // None of it was stored.
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/model/revisions")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
}
