//! What the web workspace reads besides the results: the token's role, the plants, the loop's
//! drawing, thinned figure series; and the page itself with its security headers.

use super::*;

#[tokio::test]
async fn the_token_route_says_each_roles_reach_and_the_plant_list_only_readable_plants() {
    let (dir, s, t) = fresh(&["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    let db = dir.path().join("loopbal.sqlite");
    let scoped = token(&db, "admin", Some("another-plant"));
    let me = |tok: String| {
        let req = c.get(s.url("/api/v1/token")).bearer_auth(tok);
        async move { json_ok(req.send().await.unwrap()).await }
    };
    for (role, tok) in [
        ("admin", &t.admin),
        ("ingest", &t.ingest),
        ("read", &t.read),
        ("maintain", &t.maintain),
    ] {
        let info = me(tok.clone()).await;
        assert_eq!(info["role"], role);
        assert_eq!(info["plant"], Value::Null);
        for (what, may) in info["may"].as_object().unwrap() {
            assert_eq!(
                may,
                &json!(role == "admin" || what == role),
                "{role} {what}"
            );
        }
    }
    assert_eq!(me(scoped.clone()).await["plant"], "another-plant");
    let r = c.get(s.url("/api/v1/token")).send().await.unwrap();
    problem(r, StatusCode::UNAUTHORIZED).await;

    // Before any model: no plants. Then one plant, reconciled.
    let plants = |tok: &str| c.get(s.url("/api/v1/plants")).bearer_auth(tok).send();
    assert_eq!(
        json_ok(plants(&t.read).await.unwrap()).await["plants"],
        json!([])
    );
    create_ombrask(&c, &s, &t.admin).await;
    post_ok(
        &c,
        &s,
        &t.ingest,
        &csv(&day_rows("2026-03-02", 1.0)),
        "text/csv",
    )
    .await;
    wait_for_periods(
        &c,
        &s,
        &t.read,
        PLANT,
        "2026-03-02T00:00:00Z",
        "2026-03-03T00:00:00Z",
        |p| p.iter().all(|p| p["runs"].as_i64() > Some(0)),
    )
    .await;
    let list = json_ok(plants(&t.read).await.unwrap()).await;
    let one = &list["plants"][0];
    assert_eq!(one["name"], PLANT, "{list}");
    assert_eq!(one["revision"], 1);
    assert_eq!(one["period_seconds"], 3600);
    assert_eq!(
        one["last_period"]["start"], "2026-03-02T23:00:00Z",
        "{list}"
    );
    assert!(
        one["last_period"]["global_test"]["passed"].is_boolean(),
        "{list}"
    );
    let meters: u64 = one["meters"]
        .as_object()
        .unwrap()
        .values()
        .map(|n| n.as_u64().unwrap())
        .sum();
    assert_eq!(meters as usize, OMBRASK_TAGS.len(), "{list}");
    let list_schema = conforms(&c, &s, "get", "/api/v1/plants", &list).await;
    assert!(list_schema.is_valid(&list));

    // A token of another plant sees none of this one; ingest and maintain may not list.
    let scoped_list = json_ok(plants(&scoped).await.unwrap()).await;
    assert_eq!(scoped_list["plants"], json!([]));
    for tok in [&t.ingest, &t.maintain] {
        let body = problem(plants(tok).await.unwrap(), StatusCode::FORBIDDEN).await;
        assert!(body["detail"].as_str().unwrap().contains("read"), "{body}");
    }
}

#[tokio::test]
async fn the_flowsheet_places_every_unit_stream_and_meter_of_the_model() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/flowsheet")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
    create_ombrask(&c, &s, &t.admin).await;
    let sheet = get_ok(&c, &s, &t.read, "/flowsheet").await;
    let model = get_ok(&c, &s, &t.read, "/model").await;
    let ids = |v: &Value, key: &str| -> BTreeSet<String> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x[key].as_str().unwrap().to_string())
            .collect()
    };
    assert_eq!(
        ids(&sheet["units"], "id"),
        ids(&model["model"]["unit"], "id")
    );
    assert_eq!(
        ids(&sheet["streams"], "id"),
        ids(&model["model"]["stream"], "id")
    );
    assert_eq!(
        ids(&sheet["meters"], "tag"),
        ids(&model["model"]["meter"], "tag")
    );
    assert!(sheet["streams"]
        .as_array()
        .unwrap()
        .iter()
        .any(|s| s["recycle"] == true));
    assert_eq!(sheet["revision"], 1);
    conforms(&c, &s, "get", "/api/v1/plants/{plant}/flowsheet", &sheet).await;
    // The same model draws the same.
    assert_eq!(get_ok(&c, &s, &t.read, "/flowsheet").await, sheet);
}

#[tokio::test]
async fn a_long_figure_series_is_thinned_on_request_and_whole_as_csv() {
    let (_dir, s, t) = fresh(&["--run-grace", "0", "--run-tick", "1"]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    let mut rows = Vec::new();
    for day in ["2026-03-02", "2026-03-03", "2026-03-04"] {
        rows.extend(day_rows(day, 1.0));
    }
    post_ok(&c, &s, &t.ingest, &csv(&rows), "text/csv").await;
    let (from, to) = ("2026-03-02T00:00:00Z", "2026-03-05T00:00:00Z");
    wait_for_periods(&c, &s, &t.read, PLANT, from, to, |p| {
        p.iter().all(|p| p["runs"].as_i64() > Some(0))
    })
    .await;
    let url = |extra: &str| format!("/figures?from={from}&to={to}&name=purge_fraction{extra}");
    let full = get_ok(&c, &s, &t.read, &url("")).await;
    let thin = get_ok(&c, &s, &t.read, &url("&points=12")).await;
    assert_eq!(full["bucket_seconds"], Value::Null);
    assert_eq!(thin["bucket_seconds"], 12 * 3600, "72 periods in 6 buckets");
    let all = full["series"][0]["points"].as_array().unwrap();
    let kept = thin["series"][0]["points"].as_array().unwrap();
    assert_eq!(all.len(), 72);
    assert!(kept.len() <= 12 && kept.len() >= 6, "{}", kept.len());
    let value = |p: &Value| p["value"].as_f64().unwrap();
    let top = all.iter().map(value).fold(f64::MIN, f64::max);
    assert_eq!(kept.iter().map(value).fold(f64::MIN, f64::max), top);
    assert!(
        all.iter().all(|p| p["global_test_passed"].is_boolean()),
        "{full}"
    );
    for p in kept {
        assert!(all.contains(p), "a kept point is a period's own: {p}");
    }
    conforms(&c, &s, "get", "/api/v1/plants/{plant}/figures", &thin).await;
    // CSV is every period whatever `points` says; bad counts are refused naming them.
    let r = c
        .get(s.url(&format!(
            "/api/v1/plants/{PLANT}/figures?from={from}&to={to}&name=purge_fraction&points=12&format=csv"
        )))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    assert_eq!(r.text().await.unwrap().lines().count(), 73);
    for bad in ["1", "100001", "-3", "many"] {
        let r = c
            .get(s.url(&format!(
                "/api/v1/plants/{PLANT}/figures?from={from}&to={to}&points={bad}"
            )))
            .bearer_auth(&t.read)
            .send()
            .await
            .unwrap();
        let body = problem(r, StatusCode::BAD_REQUEST).await;
        assert!(
            body["detail"].as_str().unwrap().contains("points"),
            "{bad}: {body}"
        );
    }
}

#[tokio::test]
async fn every_answer_carries_the_security_headers_and_the_page_needs_no_token() {
    let (_dir, s, _t) = fresh(&[]);
    let c = client();
    for path in ["/", "/healthz", "/api/v1/plants", "/no/such/path"] {
        let r = c.get(s.url(path)).send().await.unwrap();
        let h = r.headers();
        let csp = h["content-security-policy"].to_str().unwrap();
        assert!(
            csp.contains("default-src 'self'") && csp.contains("frame-ancestors 'none'"),
            "{path}"
        );
        assert!(!csp.contains("unsafe-inline"), "{path}");
        assert_eq!(h["x-content-type-options"], "nosniff", "{path}");
        assert_eq!(h["x-frame-options"], "DENY", "{path}");
    }
    let r = c.get(s.url("/")).send().await.unwrap();
    assert_eq!(r.status(), StatusCode::OK);
    assert!(content_type(&r).starts_with("text/html"));
    let etag = r.headers()["etag"].to_str().unwrap().to_string();
    let page = r.text().await.unwrap();
    assert!(
        page.contains("<script type=\"module\""),
        "the page loads its module"
    );
    assert!(!page.contains("<script>"), "no inline script");
    let r = c
        .get(s.url("/"))
        .header("if-none-match", &etag)
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), StatusCode::NOT_MODIFIED);
    // Every script and style the page names is served with its media type.
    for src in page.split(['"', '\'']).filter(|x| x.starts_with("/app/")) {
        let r = c.get(s.url(src)).send().await.unwrap();
        assert_eq!(r.status(), StatusCode::OK, "{src}");
        let media = content_type(&r);
        let want = if src.ends_with(".js") {
            "text/javascript"
        } else if src.ends_with(".css") {
            "text/css"
        } else {
            ""
        };
        assert!(media.starts_with(want), "{src}: {media}");
    }
    let r = c.get(s.url("/app/../../etc/passwd")).send().await.unwrap();
    assert_eq!(r.status(), StatusCode::NOT_FOUND);
    let r = c.get(s.url("/app/no-such.js")).send().await.unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
}
