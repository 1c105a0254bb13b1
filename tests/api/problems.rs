//! Bad requests get problem details and change nothing.

use super::*;

#[tokio::test]
async fn bad_requests_get_problem_details_and_change_nothing() {
    let (_dir, s, t) = fresh(&["--max-body-bytes", "4096"]);
    let c = client();
    // Readings for a plant that does not exist yet.
    let r = post_readings(&c, &s, &t.ingest, PLANT, "tag,time,value\n", "text/csv").await;
    problem(r, StatusCode::NOT_FOUND).await;
    create_ombrask(&c, &s, &t.admin).await;

    let big = csv(&day_rows("2026-03-02", 1.0));
    assert!(big.len() > 4096);
    let r = post_readings(&c, &s, &t.ingest, PLANT, &big, "text/csv").await;
    let body = problem(r, StatusCode::PAYLOAD_TOO_LARGE).await;
    assert!(body["detail"].as_str().unwrap().contains("4096"), "{body}");

    for (body, ctype, status) in [
        (
            "tag,time,value\n",
            "application/xml",
            StatusCode::UNSUPPORTED_MEDIA_TYPE,
        ),
        (
            "{\"readings\": [",
            "application/json",
            StatusCode::BAD_REQUEST,
        ),
        (
            "{\"rows\": []}",
            "application/json",
            StatusCode::BAD_REQUEST,
        ),
        ("", "text/csv", StatusCode::BAD_REQUEST),
    ] {
        let r = post_readings(&c, &s, &t.ingest, PLANT, body, ctype).await;
        problem(r, status).await;
    }
    let r = post_readings(
        &c,
        &s,
        &t.ingest,
        PLANT,
        "tag,time,value\n\u{0}\u{ff}",
        "text/csv",
    )
    .await;
    assert!(
        r.status().is_client_error() || r.status() == StatusCode::OK,
        "{}",
        r.status()
    );

    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .query(&[("from", "yesterday"), ("to", "2026-03-03T00:00:00Z")])
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = c.get(s.url("/api/v1/nothing")).send().await.unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
    let r = c
        .delete(s.url(&format!("/api/v1/plants/{PLANT}/model")))
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::METHOD_NOT_ALLOWED).await;
    let r = c
        .put(s.url("/api/v1/plants/..%2Fetc/model"))
        .bearer_auth(&t.admin)
        .header("content-type", "application/toml")
        .body(ombrask_model())
        .send()
        .await
        .unwrap();
    assert!(r.status().is_client_error(), "{}", r.status());

    // Nothing of the above was stored.
    let stored = readings(
        &c,
        &s,
        &t.read,
        "1970-01-01T00:00:00Z",
        "9999-01-01T00:00:00Z",
    )
    .await;
    assert!(stored.is_empty(), "{stored:?}");
    let health = c.get(s.url("/healthz")).send().await.unwrap();
    assert_eq!(health.status(), StatusCode::OK);
}

/// A JSON body sent as something else is 415 on every JSON route, as on readings; two
/// Authorization headers are refused, whichever comes first; nothing is stored.
#[tokio::test]
async fn a_json_body_without_its_content_type_is_415_and_two_tokens_are_refused() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    let notes = s.url(&format!("/api/v1/plants/{PLANT}/meters/OB2-FI-401/notes"));
    let what_if = s.url(&format!("/api/v1/plants/{PLANT}/what-if"));
    for (url, token, body) in [
        (
            &notes,
            &t.maintain,
            r#"{"kind": "checked", "text": "zero checked"}"#,
        ),
        (&what_if, &t.read, r#"{"period": "2026-03-02T05:00:00Z"}"#),
    ] {
        for ctype in [Some("text/plain"), None] {
            let mut r = c.post(url.as_str()).bearer_auth(token).body(body);
            if let Some(ct) = ctype {
                r = r.header("content-type", ct);
            }
            let answer = problem(r.send().await.unwrap(), StatusCode::UNSUPPORTED_MEDIA_TYPE).await;
            assert!(
                answer["detail"]
                    .as_str()
                    .unwrap()
                    .contains("application/json"),
                "{url} {ctype:?}: {answer}"
            );
        }
    }
    let meter = get_ok(&c, &s, &t.read, "/meters/OB2-FI-401").await;
    assert!(
        meter["notes"].as_array().is_none_or(|n| n.is_empty()),
        "{meter}"
    );

    for (first, second) in [(&t.read, &t.admin), (&t.admin, &t.read)] {
        let r = c
            .get(s.url(&format!("/api/v1/plants/{PLANT}/model")))
            .header("authorization", format!("Bearer {first}"))
            .header("authorization", format!("Bearer {second}"))
            .send()
            .await
            .unwrap();
        let answer = problem(r, StatusCode::BAD_REQUEST).await;
        assert!(answer["detail"]
            .as_str()
            .unwrap()
            .contains("more than one Authorization"));
    }
}

/// Instants outside the supported years (0000 to 9998 in UTC) are refused at the door, each
/// naming the parameter, so the service never writes an end of period past year 9999; nothing
/// is stored.
#[tokio::test]
async fn instants_past_the_supported_years_are_refused_naming_the_parameter() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    let late = "9999-11-30T23:00:00Z";
    let plant = format!("/api/v1/plants/{PLANT}");
    for (path, name) in [
        (
            format!("{plant}/periods?from={late}&to=9999-12-31T00:00:00Z"),
            "from",
        ),
        (
            format!("{plant}/figures?from=2026-01-01T00:00:00Z&to={late}"),
            "to",
        ),
        (
            format!("{plant}/readings?from={late}&to=9999-12-31T00:00:00Z"),
            "from",
        ),
        (format!("{plant}/periods/{late}"), "start"),
    ] {
        let r = c
            .get(s.url(&path))
            .bearer_auth(&t.read)
            .send()
            .await
            .unwrap();
        let answer = problem(r, StatusCode::BAD_REQUEST).await;
        let detail = answer["detail"].as_str().unwrap();
        assert!(
            detail.contains(name) && detail.contains("9998"),
            "{path}: {detail}"
        );
    }
    let r = c
        .post(s.url(&format!("{plant}/meters/OB2-FI-401/notes")))
        .bearer_auth(&t.maintain)
        .json(&json!({"kind": "checked", "text": "late", "effective_at": late}))
        .send()
        .await
        .unwrap();
    let answer = problem(r, StatusCode::BAD_REQUEST).await;
    assert!(
        answer["detail"].as_str().unwrap().contains("effective_at"),
        "{answer}"
    );
    let r = c
        .post(s.url(&format!("{plant}/what-if")))
        .bearer_auth(&t.read)
        .json(&json!({"period": late}))
        .send()
        .await
        .unwrap();
    let answer = problem(r, StatusCode::BAD_REQUEST).await;
    assert!(
        answer["detail"].as_str().unwrap().contains("period"),
        "{answer}"
    );
    let meter = get_ok(&c, &s, &t.read, "/meters/OB2-FI-401").await;
    assert!(
        meter["notes"].as_array().is_none_or(|n| n.is_empty()),
        "{meter}"
    );
}
