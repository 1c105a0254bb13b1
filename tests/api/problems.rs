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
