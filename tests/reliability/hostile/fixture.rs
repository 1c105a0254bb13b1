//! The answers and what every one must keep; the service with its two plants and the snapshot
//! of ombrask-ob2 that must not change.

use super::*;

#[derive(Debug)]
pub(crate) struct Answer {
    pub(crate) status: u16,
    pub(crate) ctype: String,
    pub(crate) body: Vec<u8>,
}

impl Answer {
    pub(crate) fn json(&self) -> Value {
        serde_json::from_slice(&self.body).unwrap_or(Value::Null)
    }

    pub(crate) fn text(&self) -> String {
        let text = String::from_utf8_lossy(&self.body);
        text.chars().take(600).collect()
    }
}

pub(crate) async fn send(req: RequestBuilder, what: &str) -> Answer {
    // A transport error (no HTTP answer at all) is sent once more on a new connection, and
    // said on stderr: it was seen, rarely, on a loaded machine and could not be reproduced (an
    // open question in the issue notes). A server that is down or that never answers fails
    // the second time too.
    let again = req.try_clone();
    let r = match req.send().await {
        Ok(r) => r,
        Err(first) => {
            let Some(again) = again else {
                panic!("{what}: no answer ({first:?})")
            };
            eprintln!("{what}: transport error, sending once more: {first:?}");
            tokio::time::sleep(Duration::from_millis(100)).await;
            again
                .send()
                .await
                .unwrap_or_else(|e| panic!("{what}: no answer ({first:?}; then {e:?})"))
        }
    };
    let status = r.status().as_u16();
    let ctype = crate::support::content_type(&r);
    let body = r
        .bytes()
        .await
        .unwrap_or_else(|e| panic!("{what}: the answer was cut off ({e})"))
        .to_vec();
    Answer {
        status,
        ctype,
        body,
    }
}

/// What every answer of the service keeps: no 5xx, and a 4xx is problem details.
pub(crate) fn check(a: &Answer, what: &str) {
    assert!(
        a.status < 500,
        "{what}: answered {}: {}",
        a.status,
        a.text()
    );
    if (400..500).contains(&a.status) {
        assert_eq!(
            a.ctype,
            "application/problem+json",
            "{what}: a {} that is not problem details: {}",
            a.status,
            a.text()
        );
        let p: Value = serde_json::from_slice(&a.body)
            .unwrap_or_else(|e| panic!("{what}: the problem is not JSON ({e}): {}", a.text()));
        crate::support::check_problem(&p, a.status, what);
    }
}

pub(crate) fn expect(a: &Answer, want: &[u16], what: &str) {
    check(a, what);
    assert!(
        want.contains(&a.status),
        "{what}: answered {}, expected one of {want:?}: {}",
        a.status,
        a.text()
    );
}

// ---------------------------------------------------------------------------------------------
// The service, its two plants and the snapshot

pub(crate) struct Fixture {
    pub(crate) _dir: tempfile::TempDir,
    pub(crate) s: Server,
    pub(crate) c: Client,
    pub(crate) admin: String,
    pub(crate) ingest: String,
    pub(crate) read: String,
    pub(crate) maintain: String,
    pub(crate) before: BTreeMap<String, Value>,
    /// Hostile model files the service took as valid revisions of ombrask-ob2 (in 2999).
    pub(crate) accepted_models: usize,
}

pub(crate) fn scratch_model() -> String {
    let model = support::ombrask_model();
    let renamed = model.replace(
        &format!("name = \"{PLANT}\""),
        &format!("name = \"{SCRATCH}\""),
    );
    assert_ne!(renamed, model);
    renamed
}

pub(crate) fn known_tags() -> Vec<&'static str> {
    OMBRASK_TAGS.iter().map(|(t, _)| *t).collect()
}

impl Fixture {
    pub(crate) async fn start(backend: Backend, name: &str) -> Fixture {
        let dir = tempfile::tempdir().expect("temp dir");
        let (log_at, url) = backend.fresh(dir.path(), name);
        let token = |role| support::token_on(&url, role, None);
        let (admin, ingest, read, maintain) = (
            token("admin"),
            token("ingest"),
            token("read"),
            token("maintain"),
        );
        let max = MAX_BODY.to_string();
        let timeout = REQUEST_TIMEOUT_S.to_string();
        let s = support::LOOPBAL.serve_on(
            &log_at,
            &url,
            &[
                "--max-body-bytes",
                &max,
                "--request-timeout",
                &timeout,
                "--run-grace",
                "0",
                "--run-tick",
                "1",
            ],
            "warn",
        );
        // A fresh connection per request: the server may close a connection after refusing a
        // body it did not read, and a pooled connection reused in that instant fails on the
        // client's side without the server being at fault. A dead server still fails every
        // request (connection refused), and `/healthz` is checked at the end.
        let c = Client::builder()
            .timeout(Duration::from_secs(30))
            .pool_max_idle_per_host(0)
            .build()
            .expect("http client");
        let mut fx = Fixture {
            _dir: dir,
            s,
            c,
            admin,
            ingest,
            read,
            maintain,
            before: BTreeMap::new(),
            accepted_models: 0,
        };

        // ombrask-ob2: its model from March 2026, three hours of readings, their runs, a note.
        let a = fx
            .put_model(
                PLANT,
                Some("application/toml"),
                Some("2026-03-01T00:00:00Z"),
                support::ombrask_model().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());
        let mut csv = String::from("tag,time,value,quality\n");
        for hour in 0..3 {
            for (i, (tag, value)) in OMBRASK_TAGS.iter().enumerate() {
                let quality = if hour == 1 && i == 3 {
                    "uncertain"
                } else {
                    "good"
                };
                let value = value * (1.0 + 0.002 * hour as f64);
                csv += &format!(
                    "{tag},2026-03-02T{hour:02}:{:02}:00Z,{value},{quality}\n",
                    10 + i
                );
            }
        }
        let a = fx
            .post_readings(PLANT, Some("text/csv"), csv.into_bytes(), "set-up")
            .await;
        assert_eq!(a.status, 200, "{}", a.text());
        assert_eq!(a.json()["accepted"], 33, "{}", a.text());
        let periods = fx
            .settle(PLANT, "2026-03-02T00:00:00Z", "2026-03-02T03:00:00Z")
            .await;
        assert!(
            periods.iter().all(|p| p["run_id"].is_i64()),
            "every hour of ombrask-ob2 has a run: {periods:?}"
        );
        let note = json!({"kind": "checked", "text": "zero checked on site", "effective_at": "2026-03-02T02:30:00Z"});
        let a = fx
            .post_note(
                PLANT,
                "OB2-FI-201",
                Some("application/json"),
                note.to_string().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());

        // ombrask-ob3: the same model, no readings yet.
        let a = fx
            .put_model(
                SCRATCH,
                Some("application/toml"),
                Some("2026-03-01T00:00:00Z"),
                scratch_model().into_bytes(),
                "set-up",
            )
            .await;
        assert_eq!(a.status, 201, "{}", a.text());

        fx.before = fx.snapshot().await;
        fx
    }

    pub(crate) async fn put_model(
        &self,
        plant: &str,
        media: Option<&str>,
        effective_from: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .put(self.s.url(&format!("/api/v1/plants/{plant}/model")))
            .bearer_auth(&self.admin)
            .body(body);
        if let Some(t) = effective_from {
            req = req.query(&[("effective_from", t)]);
        }
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    pub(crate) async fn post_readings(
        &self,
        plant: &str,
        media: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .post(self.s.url(&format!("/api/v1/plants/{plant}/readings")))
            .bearer_auth(&self.ingest)
            .body(body);
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    pub(crate) async fn post_note(
        &self,
        plant: &str,
        tag: &str,
        media: Option<&str>,
        body: Vec<u8>,
        what: &str,
    ) -> Answer {
        let mut req = self
            .c
            .post(
                self.s
                    .url(&format!("/api/v1/plants/{plant}/meters/{tag}/notes")),
            )
            .bearer_auth(&self.maintain)
            .body(body);
        if let Some(m) = media {
            req = req.header("content-type", m);
        }
        send(req, what).await
    }

    /// A read that must answer 200 with JSON.
    pub(crate) async fn get(&self, path: &str, query: &[(&str, &str)]) -> Value {
        let what = format!("GET {path} {query:?}");
        let a = send(
            self.c
                .get(self.s.url(path))
                .query(query)
                .bearer_auth(&self.read),
            &what,
        )
        .await;
        assert_eq!(a.status, 200, "{what}: {}", a.text());
        serde_json::from_slice(&a.body).unwrap_or_else(|e| panic!("{what}: not JSON ({e})"))
    }

    /// Every stored reading of a plant, by (tag, time).
    pub(crate) async fn readings(&self, plant: &str) -> BTreeMap<(String, String), Value> {
        let list = self
            .get(
                &format!("/api/v1/plants/{plant}/readings"),
                &[("from", ALL_FROM), ("to", ALL_TO)],
            )
            .await;
        list["readings"]
            .as_array()
            .expect("readings")
            .iter()
            .map(|r| {
                let key = (
                    r["tag"].as_str().unwrap_or_default().to_string(),
                    r["time"].as_str().unwrap_or_default().to_string(),
                );
                (key, r.clone())
            })
            .collect()
    }

    /// Wait (at most 60 s) until no period of the range is pending or due for a new run.
    pub(crate) async fn settle(&self, plant: &str, from: &str, to: &str) -> Vec<Value> {
        let deadline = Instant::now() + Duration::from_secs(60);
        loop {
            let list = self
                .get(
                    &format!("/api/v1/plants/{plant}/periods"),
                    &[("from", from), ("to", to)],
                )
                .await;
            let periods = list["periods"].as_array().expect("periods").clone();
            if periods
                .iter()
                .all(|p| p["status"] != "pending" && p["rerun_due"] == false)
            {
                return periods;
            }
            if Instant::now() > deadline {
                let log = self.s.log();
                let tail: Vec<&str> = log.lines().rev().take(40).collect();
                panic!(
                    "the periods of {plant} never settled: {periods:?}\nlog, last lines first:\n{}",
                    tail.join("\n")
                );
            }
            tokio::time::sleep(Duration::from_millis(200)).await;
        }
    }

    /// Everything readable about ombrask-ob2.
    pub(crate) async fn snapshot(&self) -> BTreeMap<String, Value> {
        let base = format!("/api/v1/plants/{PLANT}");
        let window = [
            ("from", "2026-03-02T00:00:00Z"),
            ("to", "2026-03-02T03:00:00Z"),
        ];
        let mut m = BTreeMap::new();
        m.insert(
            "revisions".into(),
            self.get(&format!("{base}/model/revisions"), &[]).await,
        );
        m.insert(
            "model".into(),
            self.get(&format!("{base}/model"), &[]).await,
        );
        m.insert(
            "readings".into(),
            self.get(
                &format!("{base}/readings"),
                &[("from", ALL_FROM), ("to", ALL_TO)],
            )
            .await,
        );
        let periods = self
            .get(
                &format!("{base}/periods"),
                &[
                    ("from", "2026-01-01T00:00:00Z"),
                    ("to", "2027-01-01T00:00:00Z"),
                ],
            )
            .await;
        for p in periods["periods"].as_array().expect("periods") {
            if p["run_id"].is_i64() {
                let start = p["start"].as_str().expect("start");
                m.insert(
                    format!("period {start}"),
                    self.get(&format!("{base}/periods/{start}"), &[]).await,
                );
            }
        }
        m.insert("periods".into(), periods);
        m.insert(
            "meters".into(),
            self.get(&format!("{base}/meters"), &[]).await,
        );
        for tag in known_tags() {
            m.insert(
                format!("meter {tag}"),
                self.get(&format!("{base}/meters/{tag}"), &[]).await,
            );
        }
        m.insert(
            "figures".into(),
            self.get(&format!("{base}/figures"), &window).await,
        );
        m.insert(
            "balances".into(),
            self.get(&format!("{base}/balances"), &window).await,
        );
        m
    }

    /// The service is alive, its log is clean and ombrask-ob2 is as it was.
    pub(crate) async fn finish(self) {
        let a = send(self.c.get(self.s.url("/healthz")), "healthz").await;
        assert_eq!(a.status, 200, "the service is not healthy: {}", a.text());
        let after = self.snapshot().await;
        let old = self.before["revisions"].as_array().expect("revisions");
        let new = after["revisions"].as_array().expect("revisions");
        assert_eq!(
            new.len(),
            old.len() + self.accepted_models,
            "ombrask-ob2 has revisions other than the accepted valid ones: {new:?}"
        );
        assert_eq!(&new[..old.len()], &old[..], "a stored revision changed");
        for r in &new[old.len()..] {
            assert_eq!(r["effective_from"], FUTURE, "{r}");
        }
        assert_eq!(
            after.keys().collect::<Vec<_>>(),
            self.before.keys().collect::<Vec<_>>(),
            "periods were run or lost"
        );
        for (key, was) in &self.before {
            if key != "revisions" {
                assert_eq!(&after[key], was, "ombrask-ob2's {key} changed");
            }
        }
        let log = self.s.log();
        assert!(!log.contains("panicked"), "the server panicked:\n{log}");
        let errors: Vec<&str> = log
            .lines()
            .filter(|l| l.split_whitespace().nth(1) == Some("ERROR"))
            .collect();
        assert!(
            errors.is_empty(),
            "the server logged errors:\n{}",
            errors.join("\n")
        );
        eprintln!(
            "hostile: ombrask-ob2 unchanged ({} parts compared, {} valid hostile revisions in 2999)",
            self.before.len(),
            self.accepted_models
        );
    }
}
