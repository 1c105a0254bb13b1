//! Oversize bodies and HTTP framing, over a bare connection where a client library will not go.

use super::*;

pub(crate) struct RawAnswer {
    pub(crate) status: u16,
    pub(crate) ctype: String,
    pub(crate) body: Vec<u8>,
}

/// Send `bytes` on a new connection (the writing half stays open), read until the server
/// closes or `wait` passes; the answer, if one came.
pub(crate) async fn raw(base: &str, bytes: Vec<u8>, wait: Duration) -> Option<RawAnswer> {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};
    let addr = base.trim_start_matches("http://");
    let stream = tokio::net::TcpStream::connect(addr)
        .await
        .expect("connect to the service");
    let (mut rd, mut wr) = stream.into_split();
    // A server that answers before reading everything stops reading: write aside.
    let writer = tokio::spawn(async move {
        let _ = wr.write_all(&bytes).await;
        wr
    });
    let mut out = Vec::new();
    let _ = tokio::time::timeout(wait, async {
        let mut buf = vec![0u8; 16 * 1024];
        loop {
            match rd.read(&mut buf).await {
                Ok(0) | Err(_) => break,
                Ok(n) => out.extend_from_slice(&buf[..n]),
            }
        }
    })
    .await;
    writer.abort();
    let end = out.windows(4).position(|w| w == b"\r\n\r\n")?;
    let head = String::from_utf8_lossy(&out[..end]).to_string();
    let status = head.split_whitespace().nth(1)?.parse().ok()?;
    let header = |name: &str| {
        head.lines()
            .filter_map(|l| l.split_once(':'))
            .find(|(k, _)| k.trim().eq_ignore_ascii_case(name))
            .map(|(_, v)| v.trim().to_string())
    };
    let mut body = out[end + 4..].to_vec();
    if let Some(n) = header("content-length").and_then(|n| n.parse::<usize>().ok()) {
        body.truncate(n);
    }
    Some(RawAnswer {
        status,
        ctype: header("content-type").unwrap_or_default(),
        body,
    })
}

pub(crate) fn request_head(method: &str, path: &str, token: &str, headers: &[u8]) -> Vec<u8> {
    let mut head = format!(
        "{method} {path} HTTP/1.1\r\nHost: loopbal\r\nConnection: close\r\n\
         Authorization: Bearer {token}\r\n"
    )
    .into_bytes();
    head.extend_from_slice(headers);
    head.extend_from_slice(b"\r\n");
    head
}

pub(crate) fn chunked(body: &[u8], piece: usize) -> Vec<u8> {
    let mut out = Vec::with_capacity(body.len() + body.len() / piece * 8 + 8);
    for c in body.chunks(piece) {
        out.extend_from_slice(format!("{:x}\r\n", c.len()).as_bytes());
        out.extend_from_slice(c);
        out.extend_from_slice(b"\r\n");
    }
    out.extend_from_slice(b"0\r\n\r\n");
    out
}

/// Valid readings of ombrask-ob2, past the body limit: stored only if the limit failed.
pub(crate) fn oversized_csv() -> Vec<u8> {
    let mut csv = String::from("tag,time,value,quality\n");
    let mut k = 0u64;
    while csv.len() <= MAX_BODY + 4096 {
        let (tag, value) = OMBRASK_TAGS[(k % 11) as usize];
        let (day, second) = (k / 11 / 86_400, k / 11 % 86_400);
        csv += &format!(
            "{tag},2026-04-{:02}T{:02}:{:02}:{:02}Z,{value},good\n",
            1 + day,
            second / 3600,
            second / 60 % 60,
            second % 60
        );
        k += 1;
    }
    csv.into_bytes()
}

pub(crate) struct RawCase {
    pub(crate) name: &'static str,
    pub(crate) bytes: Vec<u8>,
    /// The statuses the contract allows.
    pub(crate) want: &'static [u16],
    /// Malformed HTTP, which hyper answers before a request exists (an empty 4xx), or which
    /// it may pass on to the service.
    pub(crate) protocol: bool,
    /// The answer must come within this time.
    pub(crate) within: Duration,
}

/// Bodies past `--max-body-bytes` on every endpoint that takes one, with Content-Length and
/// chunked; Content-Length lies; bodies that stall; malformed chunks and requests. All go to
/// ombrask-ob2 and must be refused.
pub(crate) async fn oversize_and_framing(fx: &mut Fixture) {
    let limit = MAX_BODY.to_string();
    let big_csv = oversized_csv();
    let mut big_model = support::ombrask_model();
    while big_model.len() <= MAX_BODY {
        big_model.push_str("# padding of the ombrask model past the body limit\n");
    }
    let big_note = json!({"kind": "checked", "text": "x".repeat(MAX_BODY)}).to_string();

    let readings = format!("/api/v1/plants/{PLANT}/readings");
    let model = format!("/api/v1/plants/{PLANT}/model?effective_from={FUTURE}");
    let note = format!("/api/v1/plants/{PLANT}/meters/OB2-FI-101/notes");
    let quick = Duration::from_secs(5);
    let stall = Duration::from_secs(REQUEST_TIMEOUT_S + 10);
    let with = |method: &str, path: &str, token: &str, headers: &[u8], body: &[u8]| {
        let mut bytes = request_head(method, path, token, headers);
        bytes.extend_from_slice(body);
        bytes
    };
    let csv_chunked: &[u8] = b"Content-Type: text/csv\r\nTransfer-Encoding: chunked\r\n";
    let header = b"tag,time,value\n";
    let (ingest, admin, maintain, read) = (&fx.ingest, &fx.admin, &fx.maintain, &fx.read);
    let case = |name, bytes, want, protocol, within| RawCase {
        name,
        bytes,
        want,
        protocol,
        within,
    };
    let many_headers: String = (0..200)
        .map(|i| format!("X-Ombrask-{i}: {i}\r\n"))
        .collect();
    let cases =
        vec![
        case("chunked readings past the limit",
            with("POST", &readings, ingest, csv_chunked, &chunked(&big_csv, 8192)),
            &[413], false, quick),
        case("chunked readings past the limit in one chunk",
            with("POST", &readings, ingest, csv_chunked, &chunked(&big_csv, big_csv.len())),
            &[413], false, quick),
        case("a chunked model past the limit",
            with("PUT", &model, admin,
                b"Content-Type: application/toml\r\nTransfer-Encoding: chunked\r\n",
                &chunked(big_model.as_bytes(), 4096)),
            &[413], false, quick),
        case("a chunked note past the limit",
            with("POST", &note, maintain,
                b"Content-Type: application/json\r\nTransfer-Encoding: chunked\r\n",
                &chunked(big_note.as_bytes(), 4096)),
            &[413], false, quick),
        case("readings with a Content-Length of a terabyte",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 1000000000000\r\n", header),
            &[413], false, quick),
        case("a model with a Content-Length of a terabyte",
            with("PUT", &model, admin,
                b"Content-Type: application/toml\r\nContent-Length: 1000000000000\r\n", b"name = "),
            &[413], false, quick),
        case("a note with a Content-Length of a terabyte",
            with("POST", &note, maintain,
                b"Content-Type: application/json\r\nContent-Length: 1000000000000\r\n", b"{"),
            &[413], false, quick),
        case("a body that stalls",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 100\r\n", header),
            &[408], false, stall),
        case("a chunked body that stalls",
            with("POST", &readings, ingest, csv_chunked, b"f\r\ntag,time,value\n\r\n"),
            &[408], false, stall),
        case("a malformed chunk size",
            with("POST", &readings, ingest, csv_chunked, b"zz\r\ntag,time,value\n\r\n0\r\n\r\n"),
            &[400], false, quick),
        case("a chunk longer than it says",
            with("POST", &readings, ingest, csv_chunked, b"2\r\ntag,time,value\n\r\n0\r\n\r\n"),
            &[400], false, quick),
        case("a Content-Type of bytes that are not text",
            with("POST", &readings, ingest,
                b"Content-Type: text/\xff\xfe\r\nContent-Length: 15\r\n", header),
            &[415], true, quick),
        case("a negative Content-Length",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: -5\r\n", header),
            &[400], true, quick),
        case("two Content-Lengths",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 10\r\nContent-Length: 15\r\n", header),
            &[400], true, quick),
        case("Content-Length beside chunked",
            with("POST", &readings, ingest,
                b"Content-Type: text/csv\r\nContent-Length: 3\r\nTransfer-Encoding: chunked\r\n",
                b"0\r\n\r\n"),
            &[400], true, quick),
        case("a request line of garbage",
            b"\x00\x01\x02 / HTTP/1.1\r\n\r\n".to_vec(), &[400], true, quick),
        case("HTTP/9.9",
            b"GET /healthz HTTP/9.9\r\nHost: loopbal\r\n\r\n".to_vec(), &[400], true, quick),
        case("a path of 70,000 bytes",
            request_head("GET", &format!("/api/v1/plants/{}/model", "k".repeat(70_000)), read, b""),
            &[414], true, quick),
        case("a NUL in the path",
            request_head("GET", "/api/v1/plants/ombrask\0ob2/model", read, b""),
            &[400], true, quick),
        case("200 headers",
            request_head("GET", "/healthz", read, many_headers.as_bytes()),
            &[431], true, quick),
    ];
    let mut budget = Budget::new("oversize and framing", cases.len() + 3);

    // With Content-Length, through the client library.
    for (name, path, token, media, body) in [
        (
            "readings",
            readings.clone(),
            ingest,
            "text/csv",
            big_csv.clone(),
        ),
        (
            "a model",
            model.clone(),
            admin,
            "application/toml",
            big_model.clone().into_bytes(),
        ),
        (
            "a note",
            note.clone(),
            maintain,
            "application/json",
            big_note.clone().into_bytes(),
        ),
    ] {
        let what = format!("oversize: {name} with Content-Length");
        let method = if name == "a model" {
            Method::PUT
        } else {
            Method::POST
        };
        let req =
            fx.c.request(method, fx.s.url(&path))
                .bearer_auth(token)
                .header("content-type", media)
                .body(body);
        let a = send(req, &what).await;
        expect(&a, &[413], &what);
        assert!(a.text().contains(&limit), "{what}: {}", a.text());
        budget.count(a.status);
    }

    // Over bare connections, all at once (two of them wait out the request timeout).
    let running: Vec<_> = cases
        .into_iter()
        .map(|case| {
            let base = fx.s.base.clone();
            tokio::spawn(async move {
                let started = Instant::now();
                let answer = raw(&base, case.bytes.clone(), case.within).await;
                (case, answer, started.elapsed())
            })
        })
        .collect();
    for task in running {
        let (case, answer, took) = task.await.expect("a framing case ran");
        let what = format!("framing: {}", case.name);
        let a = answer.unwrap_or_else(|| panic!("{what}: no answer within {:?}", case.within));
        let a = Answer {
            status: a.status,
            ctype: a.ctype,
            body: a.body,
        };
        if case.protocol && a.ctype.is_empty() {
            // hyper's own answer: no body to check.
            assert!(
                case.want.contains(&a.status),
                "{what}: answered {}, expected one of {:?}",
                a.status,
                case.want
            );
        } else if case.protocol {
            // Passed on to the service, which must refuse it as a client error.
            check(&a, &what);
            assert!(
                (400..500).contains(&a.status),
                "{what}: answered {}",
                a.status
            );
        } else {
            expect(&a, case.want, &what);
        }
        assert!(took <= case.within, "{what}: answered only after {took:?}");
        budget.count(a.status);
    }
    budget.done();
}
