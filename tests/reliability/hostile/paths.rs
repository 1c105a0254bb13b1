//! Paths and query strings: hostile plant segments, times, tags and junk on every endpoint.

use super::*;

/// Plant path segments, as sent (percent-encoding included).
pub(crate) const PLANT_SEGMENTS: &[&str] = &[
    PLANT,
    PLANT,
    PLANT,
    PLANT,
    SCRATCH,
    "ombrask-ob9",
    "OMBRASK-OB2",
    "..",
    ".",
    "%2E%2E",
    "..%2F..%2Fetc",
    "%00",
    "ombrask-ob2%00",
    "ombrask%00ob2",
    "ombrask%2Fob2",
    "%FF",
    "%C0%AE%C0%AE",
    "%E2%80%AE",
    "%20",
    "ombrask-ob2%20",
    ".hidden",
    "-",
    "ombrask-ob2;drop",
    "%25",
    "%",
];

/// Times in a query or a path, as sent (percent-encoding included).
pub(crate) const TIMES: &[&str] = &[
    "2026-03-02T00:00:00Z",
    "2026-03-02T01:00:00Z",
    "2026-03-02T03:00:00Z",
    "2026-03-02T01:30:00Z",
    "0000-01-01T00:00:00Z",
    "9999-12-31T23:59:59Z",
    "9999-12-31T23:59:59-23:59",
    "0000-01-01T00:00:00%2B23:59",
    "2026-03-02T00:00:00.999999999Z",
    "2026-06-30T23:59:60Z",
    "2026-03-02T00:00:00%2B01:00",
    "2026-03-02T00:00:00+01:00",
    "yesterday",
    "",
    "%00",
    "2026-03-02T00:00:00Z%00",
    "2026-02-30T00:00:00Z",
    "-2026-03-02T00:00:00Z",
    "2026-03-02T00:00:00%2B99:00",
    "%FF%FE",
    "1772409600",
    "2026-03-02",
    "%2B275760-09-13T00:00:00Z",
];

/// The time the service reads from `raw` in a query string (where `+` is a space) or a path.
pub(crate) fn decoded_time(
    raw: &str,
    in_query: bool,
) -> Option<chrono::DateTime<chrono::FixedOffset>> {
    if in_query && raw.contains('+') {
        return None;
    }
    let text = raw.replace("%2B", "+");
    if text.contains('%') {
        return None;
    }
    let t = chrono::DateTime::parse_from_rfc3339(text.trim()).ok()?;
    // The supported instants (docs/api.md, "Errors"): the years 0000 to 9998 in UTC, and
    // 9999-01-01T00:00:00Z as an end.
    let utc = t.with_timezone(&chrono::Utc);
    let year = chrono::Datelike::year(&utc);
    ((0..=9998).contains(&year) || utc.to_rfc3339() == "9999-01-01T00:00:00+00:00").then_some(t)
}

/// Whether a path segment percent-decodes to UTF-8 (else the path extractor refuses it).
pub(crate) fn decodes(segment: &str) -> bool {
    let b = segment.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut k = 0;
    while k < b.len() {
        let hex = b.get(k + 1..k + 3).and_then(|h| {
            std::str::from_utf8(h)
                .ok()
                .and_then(|h| u8::from_str_radix(h, 16).ok())
        });
        match (b[k], hex) {
            (b'%', Some(v)) => {
                out.push(v);
                k += 3;
            }
            (c, _) => {
                out.push(c);
                k += 1;
            }
        }
    }
    String::from_utf8(out).is_ok()
}

pub(crate) const QUERY_TAGS: &[&str] = &[
    "OB2-FI-101",
    "OB2-AI-402",
    "OB2-FI-999",
    "%00",
    "OB2-FI-101%00",
    "..",
    "%2F",
    "%FF",
    "ob2-fi-101",
];

pub(crate) const JUNK: &[&str] = &[
    "",
    "",
    "",
    "&from=2026-03-02T02:00:00Z",
    "&%00=1",
    "&tag[]=1",
    "&&&",
    "&=",
    "&name=%00",
    "&format=csv",
    "&format=%FF",
    "&x=%",
];

pub(crate) const ENDPOINTS: usize = 11;

#[derive(Debug, Clone)]
pub(crate) struct QueryCase {
    pub(crate) endpoint: usize,
    pub(crate) method: &'static str,
    pub(crate) plant: &'static str,
    pub(crate) from: Option<&'static str>,
    pub(crate) to: Option<&'static str>,
    pub(crate) start: &'static str,
    pub(crate) tag: &'static str,
    /// A plant name of this many letters instead.
    pub(crate) long: Option<usize>,
    pub(crate) junk: &'static str,
}

pub(crate) fn query_time() -> impl Strategy<Value = Option<&'static str>> {
    prop_oneof![
        6 => prop::sample::select(TIMES).prop_map(Some),
        1 => Just(None),
    ]
}

pub(crate) fn query_case() -> impl Strategy<Value = QueryCase> {
    (
        0..ENDPOINTS,
        prop_oneof![
            12 => Just("GET"),
            1 => prop::sample::select(vec!["DELETE", "PATCH", "OPTIONS", "TRACE"]),
        ],
        prop::sample::select(PLANT_SEGMENTS),
        query_time(),
        query_time(),
        prop::sample::select(TIMES),
        prop::sample::select(QUERY_TAGS),
        prop_oneof![
            8 => Just(None),
            1 => prop::sample::select(vec![65usize, 300, 8_000]).prop_map(Some),
        ],
        prop::sample::select(JUNK),
    )
        .prop_map(
            |(endpoint, method, plant, from, to, start, tag, long, junk)| QueryCase {
                endpoint,
                method,
                plant,
                from,
                to,
                start,
                tag,
                long,
                junk,
            },
        )
}

impl QueryCase {
    /// Endpoints 9 (re-run a period) and 10 (PUT a model with `effective_from`) may change a
    /// plant's data: they are sent to ombrask-ob3 when the case names ombrask-ob2.
    pub(crate) fn writes(&self) -> bool {
        self.endpoint >= 9
    }

    pub(crate) fn plant(&self) -> String {
        match self.long {
            Some(n) => "k".repeat(n),
            None if self.writes() && self.plant == PLANT => SCRATCH.into(),
            None => self.plant.into(),
        }
    }

    /// The method, the URL, the token and the body.
    pub(crate) fn request(&self, fx: &Fixture) -> (Method, String, String, Option<Vec<u8>>) {
        let (method, token) = match self.endpoint {
            9 => ("POST", &fx.admin),
            10 => ("PUT", &fx.admin),
            _ => (self.method, &fx.read),
        };
        let mut range = String::new();
        if let Some(t) = self.from {
            range += &format!("&from={t}");
        }
        if let Some(t) = self.to {
            range += &format!("&to={t}");
        }
        let base = format!("/api/v1/plants/{}", self.plant());
        let (start, tag, junk) = (self.start, self.tag, self.junk);
        let path = match self.endpoint {
            0 => format!("{base}/model?{junk}"),
            1 => format!("{base}/model/revisions?{junk}"),
            2 => format!("{base}/readings?tag={tag}{range}{junk}"),
            3 => format!("{base}/periods?{range}{junk}"),
            4 => format!("{base}/periods/{start}?{junk}"),
            5 => format!("{base}/figures?name=single_pass_conversion{range}{junk}"),
            6 => format!("{base}/balances?{range}{junk}"),
            7 => format!("{base}/meters?{junk}"),
            8 => format!("{base}/meters/{tag}?{junk}"),
            9 => format!("{base}/periods/{start}/reconcile?{junk}"),
            _ => format!("{base}/model?effective_from={start}{junk}"),
        };
        let body = (self.endpoint == 10).then(|| scratch_model().into_bytes());
        (
            Method::from_bytes(method.as_bytes()).expect("a method"),
            fx.s.url(&path),
            token.clone(),
            body,
        )
    }

    /// The statuses the contract allows where it is specific; `None` where only the general
    /// rules apply.
    pub(crate) fn expected(&self) -> Option<Vec<u16>> {
        // A dot segment is resolved away by the client: no route has the path left.
        if self.long.is_none() && ["..", ".", "%2E%2E"].contains(&self.plant) {
            return Some(vec![404]);
        }
        if !self.writes() && self.method != "GET" {
            return matches!(self.method, "DELETE" | "PATCH").then(|| vec![405]);
        }
        if self.long.is_some() || !self.junk.is_empty() {
            return None;
        }
        // A dot tag is resolved away by the client too: another path, whose answer is not ours
        // to predict here.
        if self.endpoint == 8 && self.tag == ".." {
            return None;
        }
        // The plant segment is decoded by the access check, after the role: one that is not
        // UTF-8 is no plant's (404), nor a name a first model could create (400).
        if !decodes(self.plant) {
            return Some(vec![if self.endpoint == 10 { 400 } else { 404 }]);
        }
        let ours = [PLANT, SCRATCH].contains(&self.plant);
        // The plant of the path is looked up before its query and its other segments are read
        // (docs/api.md, Errors).
        if !ours && self.endpoint <= 9 {
            return Some(vec![404]);
        }
        let others: &[&str] = match self.endpoint {
            4 | 9 => &[self.start],
            8 => &[self.tag],
            _ => &[],
        };
        if !others.iter().all(|s| decodes(s)) {
            return Some(vec![400]);
        }
        let ranged = matches!(self.endpoint, 2 | 3 | 5 | 6);
        let from = self.from.and_then(|t| decoded_time(t, true));
        let to = self.to.and_then(|t| decoded_time(t, true));
        let range_ok = matches!((from, to), (Some(f), Some(t)) if f < t);
        if ranged && !range_ok {
            return Some(vec![400]);
        }
        let unknown = ["ombrask-ob9", "OMBRASK-OB2"].contains(&self.plant);
        let start_ok = decoded_time(self.start, self.endpoint == 10).is_some();
        match self.endpoint {
            0 | 1 | 7 if ours => Some(vec![200]),
            8 if ours && ["OB2-FI-101", "OB2-AI-402"].contains(&self.tag) => Some(vec![200]),
            0..=9 if unknown => Some(vec![404]),
            8 if ours => Some(vec![404]),
            4 | 9 if ours && !start_ok => Some(vec![400]),
            10 if !start_ok => Some(vec![400]),
            10 if unknown => Some(vec![422]),
            10 if ours => Some(vec![201]),
            _ => None,
        }
    }
}

pub(crate) async fn queries(fx: &mut Fixture, count: usize) {
    let mut family = Family::draw("queries", count, query_case());
    while let Some((i, case)) = family.next() {
        let (method, url, token, body) = case.request(fx);
        let what = format!(
            "queries case {i} (seed {}): {case:?}: {method} {url}",
            seed()
        );
        let mut req = fx.c.request(method, &url).bearer_auth(token);
        if let Some(body) = body {
            req = req.header("content-type", "application/toml").body(body);
        }
        let a = send(req, &what).await;
        check(&a, &what);
        if let Some(want) = case.expected() {
            expect(&a, &want, &what);
        }
        if a.status == 200 {
            let ours = [PLANT, SCRATCH].contains(&case.plant) && case.long.is_none();
            assert!(
                ours,
                "{what}: a 200 for a plant that does not exist: {}",
                a.text()
            );
            if a.ctype.starts_with("application/json") {
                serde_json::from_slice::<Value>(&a.body)
                    .unwrap_or_else(|e| panic!("{what}: a 200 that is not JSON ({e})"));
            }
        }
        family.count(a.status);
    }
    family.done();
}
