//! The real `loopbal` binary as a service on a free loopback port with a temporary database,
//! for end-to-end tests that talk HTTP to it as a historian or an engineer would.
//!
//! Cargo gives the binary's path (`CARGO_BIN_EXE_loopbal`) only to the tests of the package
//! that builds it, so the harness takes it as a [`Loopbal`] value: each test binary of
//! `loopbal-server` makes one with [`crate::e2e_support!`], which also re-exports this module.
//!
//! The database is an SQLite file at the path a test names, unless `LOOPBAL_TEST_BACKEND` is
//! `postgres`: then every path stands for a scratch PostgreSQL database `loopbal_e2e_<random>`
//! made on the server of `LOOPBAL_TEST_POSTGRES_URL` the first time the path is used (its URL is
//! kept in a file beside the path, so a restart finds the same database). The same suites thus
//! run on both backends (`.ci/run` runs them on PostgreSQL and drops the scratch databases).

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdout, Command, Stdio};
use std::time::{Duration, Instant};

use loopbal_server::store::with_database;

/// The `loopbal` binary under test, by path; every process the harness starts runs it.
#[derive(Debug, Clone, Copy)]
pub struct Loopbal {
    bin: &'static str,
}

impl Loopbal {
    /// The binary at `bin`: `env!("CARGO_BIN_EXE_loopbal")` in a test of the server package.
    pub const fn new(bin: &'static str) -> Loopbal {
        Loopbal { bin }
    }

    pub fn path(&self) -> &'static str {
        self.bin
    }

    /// Start `loopbal serve` on `database` (created if absent) with extra `serve` options.
    pub fn serve(&self, database: &Path, extra: &[&str]) -> Server {
        self.serve_logging(database, extra, "warn")
    }

    /// As `serve`, with `RUST_LOG` set to `log`; the log goes to `server.log` beside the
    /// database (a file, so a chatty server never blocks on a full pipe).
    pub fn serve_logging(&self, database: &Path, extra: &[&str], log: &str) -> Server {
        self.serve_on(database, &database_arg(database), extra, log)
    }

    /// Start on the database `url` (an SQLite path or a postgres:// URL), logging beside
    /// `log_at` (a path in the test's temporary folder): for tests that need one particular
    /// database, such as several instances sharing one.
    pub fn serve_on(&self, log_at: &Path, url: &str, extra: &[&str], log: &str) -> Server {
        Server::start_on(self.bin, log_at, url, extra, log)
    }

    /// `loopbal token create` on the database: the printed token.
    pub fn token(&self, database: &Path, role: &str, plant: Option<&str>) -> String {
        self.token_on(&database_arg(database), role, plant)
    }

    /// `loopbal token create` on the database `url` (a path or a postgres:// URL).
    pub fn token_on(&self, url: &str, role: &str, plant: Option<&str>) -> String {
        let mut cmd = Command::new(self.bin);
        cmd.args(["token", "create", "--role", role, "--database", url]);
        if let Some(p) = plant {
            cmd.args(["--plant", p]);
        }
        let out = cmd.output().expect("run loopbal token create");
        assert!(
            out.status.success(),
            "token create failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        let token = String::from_utf8(out.stdout)
            .expect("utf-8")
            .trim()
            .to_string();
        assert!(token.starts_with("lb_"), "token {token:?}");
        token
    }
}

/// A running `loopbal serve`. Dropping it kills the process.
pub struct Server {
    bin: &'static str,
    child: Option<Child>,
    // Kept open so a later line on stdout never meets a closed pipe.
    _stdout: BufReader<ChildStdout>,
    pub base: String,
    /// The path the test named (the log is written beside it).
    pub database: PathBuf,
    /// What `--database` was given: the path, or the scratch PostgreSQL database's URL.
    pub database_url: String,
    extra: Vec<String>,
}

impl Server {
    /// Start on the database `url` (an SQLite path or a postgres:// URL), logging beside
    /// `log_at` (a path in the test's temporary folder): for tests that need one particular
    /// database, such as several instances sharing one.
    fn start_on(bin: &'static str, log_at: &Path, url: &str, extra: &[&str], log: &str) -> Server {
        let database = log_at;
        let log_file = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(log_path(database))
            .expect("open the server log");
        let mut child = Command::new(bin)
            .arg("serve")
            .arg("--listen")
            .arg("127.0.0.1:0")
            .arg("--database")
            .arg(url)
            .args(extra)
            .env("RUST_LOG", log)
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::from(log_file))
            .spawn()
            .expect("start loopbal serve");
        let mut stdout = BufReader::new(child.stdout.take().expect("stdout piped"));
        let mut line = String::new();
        stdout
            .read_line(&mut line)
            .expect("read the listening line");
        let Some(base) = line.trim().strip_prefix("loopbal: listening on ") else {
            let _ = child.kill();
            let _ = child.wait();
            let err = std::fs::read_to_string(log_path(database)).unwrap_or_default();
            panic!("server did not start: stdout {line:?}, stderr {err}");
        };
        Server {
            bin,
            base: base.to_string(),
            child: Some(child),
            _stdout: stdout,
            database: database.to_path_buf(),
            database_url: url.to_string(),
            extra: extra.iter().map(|s| s.to_string()).collect(),
        }
    }

    /// Everything the server has logged so far.
    pub fn log(&self) -> String {
        std::fs::read_to_string(log_path(&self.database)).unwrap_or_default()
    }

    pub fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    pub fn pid(&self) -> u32 {
        self.child.as_ref().expect("running").id()
    }

    /// SIGTERM, then wait (at most 30 s) for a clean exit; returns whether it exited 0.
    pub fn stop(mut self) -> bool {
        let mut child = self.child.take().expect("running");
        let _ = Command::new("kill")
            .arg("-TERM")
            .arg(child.id().to_string())
            .status();
        let deadline = Instant::now() + Duration::from_secs(30);
        loop {
            if let Some(status) = child.try_wait().expect("wait") {
                return status.success();
            }
            if Instant::now() > deadline {
                let _ = child.kill();
                let _ = child.wait();
                return false;
            }
            std::thread::sleep(Duration::from_millis(20));
        }
    }

    /// Stop (SIGTERM) and return everything the server logged.
    pub fn stop_and_log(self) -> String {
        let path = log_path(&self.database);
        self.stop();
        std::fs::read_to_string(path).unwrap_or_default()
    }

    /// Stop and start again on the same database with the same options.
    pub fn restart(self) -> Server {
        let database = self.database.clone();
        let url = self.database_url.clone();
        let extra = self.extra.clone();
        let bin = self.bin;
        assert!(self.stop(), "the server exits 0 on SIGTERM");
        let extra: Vec<&str> = extra.iter().map(String::as_str).collect();
        Server::start_on(bin, &database, &url, &extra, "warn")
    }

    /// SIGKILL: the process dies at once, with no chance to finish anything.
    pub fn kill9(mut self) {
        if let Some(mut child) = self.child.take() {
            let _ = child.kill();
            let _ = child.wait();
        }
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        if let Some(mut child) = self.child.take() {
            let _ = child.kill();
            let _ = child.wait();
        }
    }
}

fn log_path(database: &Path) -> PathBuf {
    database.with_extension("log")
}

/// The environment variable naming the backend of the end-to-end suites (`sqlite`, the
/// default, or `postgres`).
pub const BACKEND_VAR: &str = "LOOPBAL_TEST_BACKEND";
/// The URL of a database on the PostgreSQL server the scratch databases are made on.
pub const POSTGRES_URL_VAR: &str = "LOOPBAL_TEST_POSTGRES_URL";

/// Whether the suites run on PostgreSQL (`LOOPBAL_TEST_BACKEND=postgres`).
pub fn on_postgres() -> bool {
    match std::env::var(BACKEND_VAR).as_deref() {
        Ok("postgres") => true,
        Ok("sqlite") | Ok("") | Err(_) => false,
        Ok(other) => panic!("{BACKEND_VAR}={other:?}: expected sqlite or postgres"),
    }
}

/// The `--database` argument standing for the test's database `path`: the path itself, or on
/// PostgreSQL the URL of the scratch database made for it (made on first use).
pub fn database_arg(path: &Path) -> String {
    if !on_postgres() {
        return path.to_str().expect("a UTF-8 temporary path").to_string();
    }
    let marker = path.with_extension("pgurl");
    if let Ok(url) = std::fs::read_to_string(&marker) {
        return url;
    }
    let url = scratch_postgres("loopbal_e2e");
    std::fs::write(&marker, &url).expect("note the scratch database's URL");
    url
}

/// A new empty database `<prefix>_<random>` on the server of LOOPBAL_TEST_POSTGRES_URL; its
/// URL. `.ci/run` drops every `loopbal_e2e_*` database after the suites.
pub fn scratch_postgres(prefix: &str) -> String {
    let server = std::env::var(POSTGRES_URL_VAR)
        .unwrap_or_else(|_| panic!("{POSTGRES_URL_VAR} must name a PostgreSQL database"));
    let name = format!("{prefix}_{:016x}", rand::random::<u64>());
    let admin = server.clone();
    let create = format!("CREATE DATABASE {name}");
    // The tests are async; a connection of our own on a thread of our own.
    std::thread::spawn(move || {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("runtime");
        rt.block_on(async move {
            use sqlx::Connection;
            let mut c = sqlx::PgConnection::connect(&admin)
                .await
                .unwrap_or_else(|e| panic!("connecting to {POSTGRES_URL_VAR}: {e}"));
            sqlx::query(&create)
                .execute(&mut c)
                .await
                .expect("create the scratch database");
            c.close().await.expect("close");
        })
    })
    .join()
    .expect("scratch database made");
    with_database(&server, &name)
}

/// The Ombrask Flats OB-2 model file's text (testkit::plants).
pub fn ombrask_model() -> String {
    crate::plants::OMBRASK.to_string()
}

/// The tags of the ombrask model with a plausible value for each (mid-range of its meter).
pub const OMBRASK_TAGS: [(&str, f64); 11] = [
    ("OB2-FI-101", 20_500.0),
    ("OB2-AI-102", 0.30),
    ("OB2-AI-103", 74.1),
    ("OB2-AI-104", 0.85),
    ("OB2-FI-201", 5_400.0),
    ("OB2-AI-202", 4.1),
    ("OB2-FI-301", 13.2),
    ("OB2-FI-401", 48.0),
    ("OB2-AI-402", 5.0),
    ("OB2-AI-403", 13.0),
    ("OB2-FI-501", 4_300.0),
];

/// An HTTP client for the tests: generous timeout, keep-alive.
pub fn client() -> reqwest::Client {
    reqwest::Client::builder()
        .timeout(Duration::from_secs(60))
        .build()
        .expect("http client")
}

/// A 200 answer's JSON (the body is shown when the status is not 200).
pub async fn json_ok(r: reqwest::Response) -> serde_json::Value {
    let status = r.status();
    let text = r.text().await.expect("body");
    assert_eq!(status, reqwest::StatusCode::OK, "{text}");
    serde_json::from_str(&text).expect("JSON answer")
}

/// `PUT /api/v1/plants/{plant}/model` with `body` of the media type `ctype`.
pub async fn put_model(
    c: &reqwest::Client,
    s: &Server,
    token: &str,
    plant: &str,
    body: &str,
    ctype: &str,
) -> reqwest::Response {
    let put = c.put(s.url(&format!("/api/v1/plants/{plant}/model")));
    with_body(put, token, body, ctype).await.expect("PUT model")
}

/// `POST /api/v1/plants/{plant}/readings` with `body` of the media type `ctype`.
pub async fn post_readings(
    c: &reqwest::Client,
    s: &Server,
    token: &str,
    plant: &str,
    body: &str,
    ctype: &str,
) -> reqwest::Response {
    let post = c.post(s.url(&format!("/api/v1/plants/{plant}/readings")));
    with_body(post, token, body, ctype)
        .await
        .expect("POST readings")
}

/// Send `request` with `token` and `body` of the media type `ctype`.
async fn with_body(
    request: reqwest::RequestBuilder,
    token: &str,
    body: &str,
    ctype: &str,
) -> reqwest::Result<reqwest::Response> {
    request
        .bearer_auth(token)
        .header("content-type", ctype)
        .body(body.to_string())
        .send()
        .await
}

/// Poll the plant's period listing of [from, to) until `done` holds for it (at most 60 s).
pub async fn wait_for_periods(
    c: &reqwest::Client,
    s: &Server,
    token: &str,
    plant: &str,
    from: &str,
    to: &str,
    done: impl Fn(&[serde_json::Value]) -> bool,
) -> Vec<serde_json::Value> {
    let deadline = Instant::now() + Duration::from_secs(60);
    loop {
        let r = c
            .get(s.url(&format!("/api/v1/plants/{plant}/periods")))
            .query(&[("from", from), ("to", to)])
            .bearer_auth(token)
            .send()
            .await
            .unwrap();
        let list = json_ok(r).await;
        let periods = list["periods"].as_array().unwrap().clone();
        if done(&periods) {
            return periods;
        }
        assert!(
            Instant::now() < deadline,
            "periods never settled: {periods:?}"
        );
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
}

/// The service's metrics, as `GET /metrics` gives them.
pub async fn metrics(c: &reqwest::Client, s: &Server) -> String {
    c.get(s.url("/metrics"))
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap()
}

/// A problem details answer: checks the media type, the status, a sentence in `detail` and a
/// URN `type`; returns the object.
pub async fn problem(r: reqwest::Response, status: reqwest::StatusCode) -> serde_json::Value {
    assert_eq!(r.status(), status);
    assert_eq!(content_type(&r), "application/problem+json");
    let body: serde_json::Value = r.json().await.expect("problem JSON");
    check_problem(&body, status.as_u16(), "problem details");
    body
}

/// The answer's media type as sent (empty when it has none).
pub fn content_type(r: &reqwest::Response) -> String {
    r.headers()
        .get("content-type")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string()
}

/// A problem details object of the answer `what`: its `status`, a sentence in `detail` and a
/// URN `type`.
pub fn check_problem(p: &serde_json::Value, status: u16, what: &str) {
    assert_eq!(p["status"], status, "{what}: {p}");
    assert!(
        p["detail"].as_str().is_some_and(|d| !d.is_empty()),
        "{what}: {p}"
    );
    assert!(
        p["type"].as_str().is_some_and(|t| t.starts_with("urn:")),
        "{what}: {p}"
    );
}

/// Assert that `answer` conforms to the schema the service's own OpenAPI document gives the
/// 200 answer of `method path` (`path` as the document writes it, `{plant}` and all); that
/// schema, for more answers.
pub async fn conforms(
    c: &reqwest::Client,
    s: &Server,
    method: &str,
    path: &str,
    answer: &serde_json::Value,
) -> jsonschema::Validator {
    let doc = json_ok(c.get(s.url("/api/v1/openapi.json")).send().await.unwrap()).await;
    let op = &doc["paths"][path][method];
    let mut root = op["responses"]["200"]["content"]["application/json"]["schema"].clone();
    assert!(
        root.is_object(),
        "{method} {path}: no JSON 200 answer in the document"
    );
    root["components"] = doc["components"].clone();
    let schema = jsonschema::validator_for(&root).expect("the document's schema compiles");
    let errors: Vec<String> = schema
        .iter_errors(answer)
        .take(10)
        .map(|e| format!("{} at {}", e, e.instance_path))
        .collect();
    assert!(errors.is_empty(), "{method} {path}: {errors:#?}");
    schema
}

/// The purge-design model's text and `hours` hours of its readings as CSV from
/// 2026-06-01T00:00Z at its design case (testkit::purge_design), from the engine's simulator
/// (three per meter and hour, noise at each meter's σ, fixed seed), less those `skip(tag, hour)`
/// names.
pub fn purge_design_csv(hours: usize, skip: &dyn Fn(&str, usize) -> bool) -> (String, String) {
    use reconcile::simulate::{steady_state, ReadingPlan};
    let model = crate::plants::PURGE_DESIGN.to_string();
    let plant = reconcile::parse_plant(&model).unwrap();
    let z = steady_state(&plant, &crate::purge_design::specs()).unwrap();
    let plan = ReadingPlan {
        start: chrono::DateTime::parse_from_rfc3339("2026-06-01T00:00:00Z")
            .unwrap()
            .with_timezone(&chrono::Utc),
        hours,
        per_hour: 3,
        seed: 7,
        faults: vec![],
    };
    let csv = crate::readings_csv(&plant, &z, &plan, skip);
    (model, csv)
}

/// A database backend, for tests written once and run on each.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    Sqlite,
    Postgres,
}

impl Backend {
    /// A fresh database for a test in the temporary folder `dir`: `(log_at, url)`, where
    /// `log_at` is the path the server's log is written beside and `url` the `--database`
    /// argument (an SQLite file in `dir`, or a scratch PostgreSQL database).
    pub fn fresh(self, dir: &Path, name: &str) -> (PathBuf, String) {
        let path = dir.join(format!("{name}.sqlite"));
        let url = match self {
            Backend::Sqlite => path.to_str().expect("UTF-8 path").to_string(),
            Backend::Postgres => scratch_postgres("loopbal_e2e"),
        };
        (path, url)
    }
}

/// `testkit::both_backends! { async fn name(backend: Backend) { ... } }` makes the module `name` with
/// the tests `name::sqlite` and `name::postgres`. The PostgreSQL one is built ignored, with the
/// reason, unless LOOPBAL_TEST_POSTGRES_URL was set when the tests were built (server/build.rs sets
/// the cfg; the attribute is expanded, and the cfg read, in the calling test crate):
/// reported as not run, never as passed. Its scratch databases are `loopbal_e2e_*`.
#[macro_export]
macro_rules! both_backends {
    ($(#[$meta:meta])* async fn $name:ident($backend:ident: Backend) $body:block) => {
        $(#[$meta])*
        mod $name {
            #[allow(unused_imports)]
            use super::*;

            async fn run($backend: $crate::e2e::Backend) $body

            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            async fn sqlite() {
                run($crate::e2e::Backend::Sqlite).await
            }

            #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
            #[cfg_attr(
                not(loopbal_postgres_tests),
                ignore = "needs PostgreSQL: set LOOPBAL_TEST_POSTGRES_URL (DEVELOPERS.md)"
            )]
            async fn postgres() {
                run($crate::e2e::Backend::Postgres).await
            }
        }
    };
}

/// The harness bound to this package's `loopbal` binary, for a test crate's `support` module:
/// `mod support { testkit::e2e_support!(); }` (or a `support/mod.rs` holding the call). It
/// re-exports [`crate::e2e`] and defines `BIN` (the binary's path, read by `env!` in the
/// calling crate, the only place Cargo sets it), `LOOPBAL` and the `token` / `token_on`
/// shorthands.
#[macro_export]
macro_rules! e2e_support {
    () => {
        #[allow(unused_imports)]
        pub use $crate::e2e::*;

        /// The `loopbal` binary this package built.
        #[allow(dead_code)]
        pub const BIN: &str = env!("CARGO_BIN_EXE_loopbal");
        /// The harness on that binary.
        #[allow(dead_code)]
        pub const LOOPBAL: $crate::e2e::Loopbal = $crate::e2e::Loopbal::new(BIN);

        /// `loopbal token create` on the database: the printed token.
        #[allow(dead_code)]
        pub fn token(database: &std::path::Path, role: &str, plant: Option<&str>) -> String {
            LOOPBAL.token(database, role, plant)
        }

        /// `loopbal token create` on the database `url` (a path or a postgres:// URL).
        #[allow(dead_code)]
        pub fn token_on(url: &str, role: &str, plant: Option<&str>) -> String {
            LOOPBAL.token_on(url, role, plant)
        }
    };
}
