//! What the service does with clients that are slow or send too much: a request head sent a
//! byte at a time is cut off, a trickled or stalled body gets 408, a declared length over the
//! limit gets 413 before any of the body is read, and a body of the wrong kind gets 415 on
//! every route that takes one. The slow clients are raw TCP on loopback, every loop bounded in
//! count and time.

use std::io::{ErrorKind, Read, Write};
use std::net::TcpStream;
use std::sync::Arc;
use std::time::Instant;

use super::*;

/// One connection spoken to byte by byte.
/// Send `request` whole on a new raw connection and read what comes back for `listen`: the
/// connection and how long that took.
async fn exchange(server: &Arc<Server>, request: String, listen: Duration) -> (Raw, Duration) {
    let server = server.clone();
    tokio::task::spawn_blocking(move || {
        let mut raw = Raw::connect(&server);
        let began = Instant::now();
        assert!(raw.send(request.as_bytes()));
        raw.read_for(listen);
        (raw, began.elapsed())
    })
    .await
    .unwrap()
}

struct Raw {
    stream: TcpStream,
    answer: Vec<u8>,
    closed: bool,
}

impl Raw {
    fn connect(s: &Server) -> Raw {
        let addr = s.base.strip_prefix("http://").expect("http base");
        let stream = TcpStream::connect(addr).expect("connect on loopback");
        stream.set_nodelay(true).expect("nodelay");
        Raw {
            stream,
            answer: Vec::new(),
            closed: false,
        }
    }

    /// Send `bytes`; false when the connection is gone.
    fn send(&mut self, bytes: &[u8]) -> bool {
        self.stream.write_all(bytes).is_ok()
    }

    /// Read what the server sends for up to `limit`, stopping early once it closes.
    fn read_for(&mut self, limit: Duration) {
        let deadline = Instant::now() + limit;
        let mut buf = [0u8; 4096];
        while !self.closed {
            let left = deadline.saturating_duration_since(Instant::now());
            if left.is_zero() {
                return;
            }
            self.stream
                .set_read_timeout(Some(left.min(Duration::from_millis(100))))
                .expect("read timeout");
            match self.stream.read(&mut buf) {
                Ok(0) => self.closed = true,
                Ok(n) => self.answer.extend_from_slice(&buf[..n]),
                Err(e) if matches!(e.kind(), ErrorKind::WouldBlock | ErrorKind::TimedOut) => {}
                Err(_) => self.closed = true,
            }
        }
    }

    fn text(&self) -> String {
        String::from_utf8_lossy(&self.answer).into_owned()
    }

    /// The status line of the answer read so far.
    fn status_line(&self) -> String {
        self.text().lines().next().unwrap_or("").to_string()
    }

    /// The answer's body as a problem details object of `status`.
    fn problem(&self, status: u16) -> Value {
        let text = self.text();
        let (head, body) = text.split_once("\r\n\r\n").expect("a whole answer");
        assert!(
            head.to_ascii_lowercase()
                .contains("content-type: application/problem+json"),
            "{head}"
        );
        let p: Value = serde_json::from_str(body).expect("problem JSON");
        support::check_problem(&p, status, "raw answer");
        p
    }
}

/// A client that keeps no connection for reuse: with the short header timeouts of these
/// servers, a pooled connection would be closed under it while idle.
fn unpooled() -> Client {
    Client::builder()
        .timeout(Duration::from_secs(30))
        .pool_max_idle_per_host(0)
        .build()
        .expect("http client")
}

#[tokio::test]
async fn a_request_head_sent_a_byte_a_second_is_cut_off_at_the_header_timeout() {
    let (_dir, s, _) = fresh(&["--header-timeout", "1"]);
    let head = b"GET /healthz HTTP/1.1\r\nHost: loopback\r\nUser-Agent: slow\r\n\r\n".to_vec();
    let s = Arc::new(s);
    let server = s.clone();
    let (raw, sent, waited) = tokio::task::spawn_blocking(move || {
        let mut raw = Raw::connect(&server);
        let began = Instant::now();
        let mut sent = 0;
        // A byte a second, at most the whole head (about 60 s): a server without the timeout
        // would keep the connection to the end and answer.
        for byte in &head {
            if !raw.send(&[*byte]) {
                raw.closed = true;
                break;
            }
            sent += 1;
            raw.read_for(Duration::from_secs(1));
            if raw.closed || !raw.answer.is_empty() {
                break;
            }
        }
        raw.read_for(Duration::from_secs(2));
        (raw, sent, began.elapsed())
    })
    .await
    .unwrap();
    assert!(raw.closed, "still connected after {waited:?}");
    assert!(sent < 5, "{sent} bytes of the head were taken");
    assert!(waited < Duration::from_secs(5), "cut off after {waited:?}");
    // Whatever was said on the way out, it is not an answer to the request.
    assert!(!raw.text().contains(" 200 "), "{}", raw.text());

    // A client that sends its head at once is served as ever.
    let c = unpooled();
    let r = c.get(s.url("/healthz")).send().await.unwrap();
    assert_eq!(r.status(), StatusCode::OK);
}

#[tokio::test]
async fn a_trickled_or_stalled_body_gets_408_well_before_the_request_timeout() {
    let (_dir, s, t) = fresh(&[
        "--body-rate-grace",
        "1",
        "--body-idle-timeout",
        "2",
        "--request-timeout",
        "60",
    ]);
    let s = Arc::new(s);
    let head = |plant: &str, length: usize| {
        format!(
            "PUT /api/v1/plants/{plant}/model HTTP/1.1\r\nHost: loopback\r\n\
             Authorization: Bearer {}\r\nContent-Type: application/toml\r\n\
             Content-Length: {length}\r\n\r\n",
            t.admin
        )
    };

    // A byte every 100 ms (10 B/s against 1024): refused once the grace of 1 s is over.
    let trickle = head("trickled", 4096);
    let server = s.clone();
    let (raw, waited) = tokio::task::spawn_blocking(move || {
        let mut raw = Raw::connect(&server);
        let began = Instant::now();
        assert!(raw.send(trickle.as_bytes()));
        for _ in 0..100 {
            if !raw.send(b"#") {
                break;
            }
            raw.read_for(Duration::from_millis(100));
            if raw.closed || !raw.answer.is_empty() {
                break;
            }
        }
        raw.read_for(Duration::from_secs(2));
        (raw, began.elapsed())
    })
    .await
    .unwrap();
    assert!(
        raw.status_line().starts_with("HTTP/1.1 408"),
        "{}",
        raw.text()
    );
    let p = raw.problem(408);
    assert_eq!(p["type"], "urn:loopbal:problem:body-too-slow", "{p}");
    assert!(
        p["detail"]
            .as_str()
            .unwrap()
            .contains("1024 bytes a second"),
        "{p}"
    );
    assert!(waited < Duration::from_secs(5), "answered after {waited:?}");
    assert!(raw.closed, "the connection is closed after the 408");

    // A body that stops: with the rate rule off, refused once no byte came for 1 s.
    let (_dir2, idle, _) = fresh(&["--min-body-rate", "0", "--body-idle-timeout", "1"]);
    let db2 = idle.database.clone();
    let admin2 = token(&db2, "admin", None);
    let stalled = format!(
        "PUT /api/v1/plants/stalled/model HTTP/1.1\r\nHost: loopback\r\n\
         Authorization: Bearer {admin2}\r\nContent-Type: application/toml\r\n\
         Content-Length: 4096\r\n\r\nname = \"stalled\"\n"
    );
    let idle = Arc::new(idle);
    let (raw, waited) = exchange(&idle, stalled, Duration::from_secs(5)).await;
    assert!(
        raw.status_line().starts_with("HTTP/1.1 408"),
        "{}",
        raw.text()
    );
    let p = raw.problem(408);
    assert!(p["detail"].as_str().unwrap().contains("every 1 s"), "{p}");
    assert!(waited < Duration::from_secs(4), "answered after {waited:?}");

    // Nothing of either was stored; a body sent at once is taken as ever.
    let c = unpooled();
    for plant in ["trickled", "stalled"] {
        let server = if plant == "trickled" { &s } else { &idle };
        let tok = if plant == "trickled" {
            &t.admin
        } else {
            &admin2
        };
        let r = c
            .get(server.url(&format!("/api/v1/plants/{plant}/model")))
            .bearer_auth(tok)
            .send()
            .await
            .unwrap();
        problem(r, StatusCode::NOT_FOUND).await;
    }
    let r = put_model(
        &c,
        &s,
        &t.admin,
        PLANT,
        &ombrask_model(),
        "application/toml",
    )
    .await;
    assert_eq!(r.status(), StatusCode::CREATED);
    let m = metrics(&c, &s).await;
    assert!(m.contains("status=\"408\""), "{m}");
}

#[tokio::test]
async fn a_declared_length_over_the_limit_gets_413_at_once_without_a_100_continue() {
    let (_dir, s, t) = fresh(&["--max-body-bytes", "1000"]);
    let s = Arc::new(s);
    for (length, with_token) in [
        ("10000000000", true),
        ("10000000000", false),
        ("1001", true),
    ] {
        let auth = if with_token {
            format!("Authorization: Bearer {}\r\n", t.ingest)
        } else {
            String::new()
        };
        // Expect: 100-continue, so a server that read the body first would say 100 and wait.
        let request = format!(
            "POST /api/v1/plants/{PLANT}/readings HTTP/1.1\r\nHost: loopback\r\n{auth}\
             Content-Type: text/csv\r\nContent-Length: {length}\r\nExpect: 100-continue\r\n\r\n"
        );
        let (raw, waited) = exchange(&s, request, Duration::from_secs(1)).await;
        assert!(
            raw.status_line().starts_with("HTTP/1.1 413"),
            "Content-Length {length}: {}",
            raw.text()
        );
        assert!(!raw.text().contains("100 Continue"), "{}", raw.text());
        let p = raw.problem(413);
        assert_eq!(p["type"], "urn:loopbal:problem:too-large", "{p}");
        let detail = p["detail"].as_str().unwrap();
        assert!(
            detail.contains(length) && detail.contains("1000 bytes"),
            "{p}"
        );
        assert!(waited < Duration::from_secs(1), "answered after {waited:?}");
        assert!(raw.closed, "the connection is closed after the 413");
    }
    // A client that sends the refused body anyway (no Expect) still reads the 413: the
    // service drains what comes before it closes, instead of resetting the connection. 17 MB,
    // more than the sockets' buffers hold, so that a reset would reach the client first.
    let oversized = "tag,time,value\n".repeat(1_200_000);
    for attempt in 0..3 {
        let r = unpooled()
            .post(s.url(&format!("/api/v1/plants/{PLANT}/readings")))
            .bearer_auth(&t.ingest)
            .header("content-type", "text/csv")
            .body(oversized.clone())
            .send()
            .await
            .unwrap_or_else(|e| panic!("attempt {attempt}: no answer but {e:?}"));
        problem(r, StatusCode::PAYLOAD_TOO_LARGE).await;
    }
    // At the limit the size is no reason to refuse: the request goes on to the plant (unknown
    // here).
    let c = unpooled();
    let r = post_readings(&c, &s, &t.ingest, PLANT, &"x".repeat(1000), "text/csv").await;
    problem(r, StatusCode::NOT_FOUND).await;
}

#[tokio::test]
async fn shutdown_does_not_wait_for_a_client_that_never_finishes_its_head() {
    let (_dir, s, _) = fresh(&["--header-timeout", "2"]);
    let s = Arc::new(s);
    let server = s.clone();
    let mut raw = tokio::task::spawn_blocking(move || {
        let mut raw = Raw::connect(&server);
        assert!(raw.send(b"GET /healthz HTTP/1.1\r\nHost: loo"));
        raw
    })
    .await
    .unwrap();
    let s = Arc::into_inner(s).expect("one owner");
    let began = Instant::now();
    let stopped = tokio::task::spawn_blocking(move || s.stop()).await.unwrap();
    assert!(stopped, "exit status 0 after SIGTERM");
    assert!(
        began.elapsed() < Duration::from_secs(5),
        "stopped after {:?}",
        began.elapsed()
    );
    let raw = tokio::task::spawn_blocking(move || {
        raw.read_for(Duration::from_secs(1));
        raw
    })
    .await
    .unwrap();
    assert!(raw.closed, "the half-sent request's connection is closed");
}

/// The `(method, path)` of every operation the OpenAPI document lists, with whether it takes a
/// request body.
async fn operations(c: &Client, s: &Server) -> Vec<(String, String, bool)> {
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    let mut ops = Vec::new();
    for (path, item) in doc["paths"].as_object().expect("paths") {
        for method in ["get", "put", "post", "delete", "patch"] {
            if let Some(op) = item.get(method) {
                ops.push((
                    method.to_string(),
                    path.clone(),
                    op.get("requestBody").is_some(),
                ));
            }
        }
    }
    ops
}

fn concrete(path: &str) -> String {
    path.replace("{plant}", PLANT)
        .replace("{start}", "2026-03-02T05:00:00Z")
        .replace("{tag}", "OB2-FI-101")
}

#[tokio::test]
async fn a_body_of_the_wrong_kind_is_415_on_every_route_that_takes_one_and_ignored_elsewhere() {
    let (_dir, s, t) = fresh(&[]);
    let c = client();
    create_ombrask(&c, &s, &t.admin).await;
    let ops = operations(&c, &s).await;
    let with_body: BTreeSet<(String, String)> = ops
        .iter()
        .filter(|(_, _, body)| *body)
        .map(|(m, p, _)| (m.clone(), p.clone()))
        .collect();
    let expected: BTreeSet<(String, String)> = [
        ("put", "/api/v1/plants/{plant}/model"),
        ("post", "/api/v1/plants/{plant}/readings"),
        ("post", "/api/v1/plants/{plant}/meters/{tag}/notes"),
        ("post", "/api/v1/plants/{plant}/what-if"),
    ]
    .iter()
    .map(|(m, p)| (m.to_string(), p.to_string()))
    .collect();
    assert_eq!(with_body, expected);

    let send = |method: &str, url: String| match method {
        "get" => c.get(url),
        "put" => c.put(url),
        "post" => c.post(url),
        other => panic!("method {other}"),
    };
    for (method, path, takes_body) in &ops {
        let url = s.url(&concrete(path));
        if *takes_body {
            // A media type the route does not take, none at all, and one with a query that is
            // wrong as well: 415 each time, before the query or the body is looked at.
            let bodies: [(Option<&str>, &str); 3] = [
                (Some("text/plain"), ""),
                (None, ""),
                (
                    Some("application/x-www-form-urlencoded"),
                    "?effective_from=never",
                ),
            ];
            for (ctype, query) in bodies {
                let mut req = send(method, format!("{url}{query}"))
                    .bearer_auth(&t.admin)
                    .body("\u{FFFD} not what this route takes {");
                if let Some(ct) = ctype {
                    req = req.header("content-type", ct);
                }
                let r = req.send().await.unwrap();
                let p = problem(r, StatusCode::UNSUPPORTED_MEDIA_TYPE).await;
                assert_eq!(
                    p["type"], "urn:loopbal:problem:unsupported-media-type",
                    "{method} {path} {ctype:?}: {p}"
                );
            }
        } else {
            // A body where none is taken is not read: the answer is the one without it.
            let bare = send(method, url.clone())
                .bearer_auth(&t.admin)
                .send()
                .await
                .unwrap()
                .status();
            let with = send(method, url.clone())
                .bearer_auth(&t.admin)
                .header("content-type", "text/plain")
                .body("stray words")
                .send()
                .await
                .unwrap()
                .status();
            assert_eq!(with, bare, "{method} {path}");
            assert!(!with.is_server_error(), "{method} {path}: {with}");
        }
    }
}
