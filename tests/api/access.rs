//! Who may do what: every endpoint against tokens of each role and of another plant, the
//! OpenAPI document listing every route, and a log without tokens or reading values.

use super::*;

/// Every secured operation of the API with the role docs/api.md gives it.
const SECURED: [(&str, &str, &str); 16] = [
    ("put", "/api/v1/plants/{plant}/model", "admin"),
    ("get", "/api/v1/plants/{plant}/model", "read"),
    ("get", "/api/v1/plants/{plant}/model/revisions", "read"),
    ("post", "/api/v1/plants/{plant}/readings", "ingest"),
    ("get", "/api/v1/plants/{plant}/readings", "read"),
    ("get", "/api/v1/plants/{plant}/periods", "read"),
    ("get", "/api/v1/plants/{plant}/periods/{start}", "read"),
    (
        "post",
        "/api/v1/plants/{plant}/periods/{start}/reconcile",
        "admin",
    ),
    ("get", "/api/v1/plants/{plant}/figures", "read"),
    ("get", "/api/v1/plants/{plant}/balances", "read"),
    ("post", "/api/v1/plants/{plant}/what-if", "read"),
    ("get", "/api/v1/plants/{plant}/meter-value", "read"),
    ("get", "/api/v1/plants/{plant}/meters", "read"),
    ("get", "/api/v1/plants/{plant}/meters/{tag}", "read"),
    ("get", "/api/v1/plants/{plant}/flowsheet", "read"),
    (
        "post",
        "/api/v1/plants/{plant}/meters/{tag}/notes",
        "maintain",
    ),
];
/// Secured operations of no one plant (tests/api/workspace.rs checks who may use them).
const UNSCOPED: [(&str, &str); 2] = [("get", "/api/v1/token"), ("get", "/api/v1/plants")];
const OPEN: [(&str, &str); 4] = [
    ("get", "/"),
    ("get", "/healthz"),
    ("get", "/metrics"),
    ("get", "/api/v1/openapi.json"),
];

fn request(
    c: &Client,
    s: &Server,
    method: &str,
    path: &str,
    plant: &str,
) -> reqwest::RequestBuilder {
    let url = s.url(
        &path
            .replace("{plant}", plant)
            .replace("{start}", "2026-03-02T05:00:00Z")
            .replace("{tag}", "OB2-FI-101"),
    );
    match method {
        "get" => c.get(url),
        "put" => c.put(url),
        "post" => c.post(url),
        other => panic!("method {other}"),
    }
}

#[tokio::test]
async fn every_endpoint_needs_a_suitable_token_and_the_openapi_document_lists_every_route() {
    let (dir, s, t) = fresh(&[]);
    let c = client();
    let db = dir.path().join("loopbal.sqlite");
    let other_plant_admin = token(&db, "admin", Some("another-plant"));

    // The document parses as OpenAPI 3 and lists exactly the routes served.
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    assert!(
        doc["openapi"].as_str().unwrap().starts_with("3."),
        "{}",
        doc["openapi"]
    );
    let mut documented = BTreeSet::new();
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for method in ["get", "put", "post", "delete", "patch"] {
            if let Some(op) = item.get(method) {
                let secured = op.get("security").is_some();
                documented.insert((method.to_string(), path.clone(), secured));
            }
        }
    }
    let expected: BTreeSet<(String, String, bool)> = SECURED
        .iter()
        .map(|(m, p, _)| (m.to_string(), p.to_string(), true))
        .chain(
            UNSCOPED
                .iter()
                .map(|(m, p)| (m.to_string(), p.to_string(), true)),
        )
        .chain(
            OPEN.iter()
                .map(|(m, p)| (m.to_string(), p.to_string(), false)),
        )
        .collect();
    assert_eq!(documented, expected);

    for (method, path) in OPEN {
        let r = request(&c, &s, method, path, PLANT).send().await.unwrap();
        assert_eq!(
            r.status(),
            StatusCode::OK,
            "{method} {path} without a token"
        );
    }
    let roles = [
        ("admin", &t.admin),
        ("ingest", &t.ingest),
        ("read", &t.read),
        ("maintain", &t.maintain),
    ];
    for (method, path, role) in SECURED {
        // No token, a malformed header and an unknown token: 401 with a challenge. A route the
        // router did not serve would answer the fallback's 404 instead.
        for auth in [None, Some("Basic dXNlcjpwYXNz"), Some("Bearer lb_0000")] {
            let mut req = request(&c, &s, method, path, PLANT);
            if let Some(a) = auth {
                req = req.header("authorization", a);
            }
            let r = req.send().await.unwrap();
            assert!(
                r.headers().contains_key("www-authenticate"),
                "{method} {path}"
            );
            problem(r, StatusCode::UNAUTHORIZED).await;
        }
        // Every role but the one needed (and admin): 403.
        for (name, tok) in roles {
            if name == role || name == "admin" {
                continue;
            }
            let r = request(&c, &s, method, path, PLANT)
                .bearer_auth(tok)
                .send()
                .await
                .unwrap();
            let body = problem(r, StatusCode::FORBIDDEN).await;
            assert!(body["detail"].as_str().unwrap().contains(role), "{body}");
        }
        // An admin token of another plant: 403 as well.
        let r = request(&c, &s, method, path, PLANT)
            .bearer_auth(&other_plant_admin)
            .send()
            .await
            .unwrap();
        problem(r, StatusCode::FORBIDDEN).await;
    }
}

#[tokio::test]
async fn the_log_has_requests_but_no_token_and_no_reading_value() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("loopbal.sqlite");
    let admin = token(&db, "admin", None);
    // Debug is what an operator turns on to look closer; even then nothing secret shows.
    let s = support::LOOPBAL.serve_logging(&db, &[], "debug");
    let c = client();
    create_ombrask(&c, &s, &admin).await;
    let batch = "tag,time,value\nOB2-FI-101,2026-03-02T05:00:00Z,20417.123456\n";
    post_ok(&c, &s, &admin, batch, "text/csv").await;
    let r = post_readings(
        &c,
        &s,
        "lb_not_a_real_token_zqxwvk",
        PLANT,
        batch,
        "text/csv",
    )
    .await;
    assert_eq!(r.status(), StatusCode::UNAUTHORIZED);
    let s_log = s.stop_and_log();
    assert!(s_log.contains("/api/v1/plants/{plant}/readings"), "{s_log}");
    assert!(
        s_log.contains("ombrask-ob2"),
        "the plant is in the request span"
    );
    assert!(!s_log.contains(&admin[3..]), "a token is in the log");
    // Letters no number, time or identifier of the log could spell by chance (a numeric
    // suffix once matched a latency figure).
    assert!(!s_log.contains("zqxwvk"), "a presented token is in the log");
    assert!(!s_log.contains("20417.12"), "a reading value is in the log");
}

/// Plant segments no check after the role's should see first: not UTF-8, a dot name, a NUL, too
/// long, slashes, and a good name.
const HOSTILE_PLANTS: [&str; 6] = [
    "%FF%FE",
    ".hidden",
    "a%00b",
    "xxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxxx",
    "..%2F..%2Fetc",
    PLANT,
];
/// A query every route would refuse if it read it: times that are not times, a figure with a
/// NUL, a negative count, an unknown format.
const HOSTILE_QUERY: &str = "from=%FF&to=never&effective_from=garbage&period=x&figure=%00\
                             &add_best=-1&format=xml&tag=%FF";

#[tokio::test]
async fn the_role_is_checked_before_the_path_the_query_and_the_body_on_every_route() {
    let (dir, s, t) = fresh(&[]);
    let c = client();
    let db = dir.path().join("loopbal.sqlite");
    let other_plant_admin = token(&db, "admin", Some("another-plant"));
    create_ombrask(&c, &s, &t.admin).await;
    let roles = [
        ("ingest", &t.ingest),
        ("read", &t.read),
        ("maintain", &t.maintain),
    ];

    // Every secured operation of the document, with the role the table above gives it.
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    let mut walked = 0;
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for method in ["get", "put", "post", "delete", "patch"] {
            let Some(op) = item.get(method) else { continue };
            if op.get("security").is_none() || !path.contains("{plant}") {
                continue;
            }
            let role = SECURED
                .iter()
                .find(|(m, p, _)| *m == method && p == path)
                .map(|(_, _, role)| *role)
                .unwrap_or_else(|| panic!("{method} {path} is not in SECURED"));
            walked += 1;
            for plant in HOSTILE_PLANTS {
                let url = s.url(&format!(
                    "{}?{HOSTILE_QUERY}",
                    path.replace("{plant}", plant)
                        .replace("{start}", "%FF-not-a-time")
                        .replace("{tag}", "%00%FF")
                ));
                // With a body, one that is neither of the right kind nor readable.
                let bodies: &[Option<&str>] = if method == "get" {
                    &[None]
                } else {
                    &[Some("text/plain"), Some("application/json")]
                };
                for ctype in bodies {
                    let req = |auth: Option<&str>| {
                        let mut r = match method {
                            "get" => c.get(&url),
                            "put" => c.put(&url),
                            "post" => c.post(&url),
                            other => panic!("method {other}"),
                        };
                        if let Some(ct) = ctype {
                            r = r
                                .header("content-type", *ct)
                                .body(b"\xff\xfe{\"period\": [".to_vec());
                        }
                        if let Some(a) = auth {
                            r = r.bearer_auth(a);
                        }
                        r
                    };
                    let what = format!("{method} {url} {ctype:?}");
                    let r = req(None).send().await.unwrap();
                    assert_eq!(
                        r.status(),
                        StatusCode::UNAUTHORIZED,
                        "{what} without a token"
                    );
                    problem(r, StatusCode::UNAUTHORIZED).await;
                    for (name, tok) in roles {
                        if name == role {
                            continue;
                        }
                        let r = req(Some(tok)).send().await.unwrap();
                        assert_eq!(r.status(), StatusCode::FORBIDDEN, "{what} as {name}");
                        let p = problem(r, StatusCode::FORBIDDEN).await;
                        assert!(p["detail"].as_str().unwrap().contains(role), "{what}: {p}");
                    }
                    let r = req(Some(&other_plant_admin)).send().await.unwrap();
                    assert_eq!(
                        r.status(),
                        StatusCode::FORBIDDEN,
                        "{what} as the admin of another plant"
                    );
                }
            }
        }
    }
    assert_eq!(walked, SECURED.len());

    // The right role on the same hostile requests learns what was wrong, never with a 500.
    let r = c
        .put(s.url("/api/v1/plants/%FF%FE/model"))
        .bearer_auth(&t.admin)
        .header("content-type", "application/toml")
        .body("name = \"x\"")
        .send()
        .await
        .unwrap();
    let p = problem(r, StatusCode::BAD_REQUEST).await;
    assert!(p["detail"].as_str().unwrap().contains("not UTF-8"), "{p}");
    let r = c
        .get(s.url(&format!("/api/v1/plants/{PLANT}/meters/%FF")))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::BAD_REQUEST).await;
    let r = c
        .get(s.url("/api/v1/plants/%FF%FE/meters"))
        .bearer_auth(&t.read)
        .send()
        .await
        .unwrap();
    problem(r, StatusCode::NOT_FOUND).await;
}
