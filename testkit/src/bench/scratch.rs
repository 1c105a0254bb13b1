//! Fresh databases for the service's benches: a file in a temporary directory, or a scratch
//! database `loopbal_bench_*` made on the PostgreSQL server named by
//! `LOOPBAL_BENCH_POSTGRES_URL` and dropped (`WITH (FORCE)`) when the bench ends, also when it
//! panics. Shared by the `ingest` and `runs` benches.

use std::path::Path;
use std::sync::Mutex;

use sqlx::postgres::PgConnection;
use sqlx::Connection;

use loopbal_server::store::with_database;

/// The URL of a database on a PostgreSQL server: when set, the benches measure PostgreSQL as
/// well, each case on a scratch database `loopbal_bench_*` made for it and dropped at the end.
pub const POSTGRES_VAR: &str = "LOOPBAL_BENCH_POSTGRES_URL";

/// The scratch databases' server, if `LOOPBAL_BENCH_POSTGRES_URL` is set and not empty.
pub fn from_env() -> Option<Scratch> {
    std::env::var(POSTGRES_VAR)
        .ok()
        .filter(|s| !s.is_empty())
        .map(Scratch::new)
}

/// Where a case's fresh database is made: a file in a temporary directory, or a scratch
/// database on the PostgreSQL server of `LOOPBAL_BENCH_POSTGRES_URL`.
#[derive(Clone, Copy)]
pub enum Db<'a> {
    Sqlite(&'a Path),
    Postgres(&'a Scratch),
}

impl Db<'_> {
    pub fn label(self) -> &'static str {
        match self {
            Db::Sqlite(_) => "SQLite",
            Db::Postgres(_) => "PostgreSQL",
        }
    }

    /// A new empty database for the case `case`: its URL (a path for SQLite).
    pub async fn fresh(self, case: &str) -> String {
        match self {
            Db::Sqlite(dir) => dir
                .join(format!("{case}.db"))
                .to_string_lossy()
                .into_owned(),
            Db::Postgres(scratch) => scratch.create(case).await,
        }
    }
}

/// The scratch databases made on a PostgreSQL server, dropped when this is (also when the
/// bench panics).
pub struct Scratch {
    /// The URL of a database that exists on the server (the scratch ones are made from it).
    server: String,
    made: Mutex<Vec<String>>,
}

impl Scratch {
    pub fn new(server: String) -> Scratch {
        Scratch {
            server,
            made: Mutex::new(Vec::new()),
        }
    }

    pub async fn create(&self, case: &str) -> String {
        let name = format!("loopbal_bench_{:08x}_{case}", rand::random::<u32>());
        let mut c = PgConnection::connect(&self.server)
            .await
            .unwrap_or_else(|e| panic!("connecting to {POSTGRES_VAR}: {e}"));
        sqlx::query(&format!("CREATE DATABASE {name}"))
            .execute(&mut c)
            .await
            .expect("create a scratch database");
        c.close().await.expect("close");
        self.made.lock().unwrap().push(name.clone());
        with_database(&self.server, &name)
    }

    /// The server's version and the settings that decide how fast a commit is.
    pub async fn describe(&self) -> String {
        let mut c = PgConnection::connect(&self.server)
            .await
            .unwrap_or_else(|e| panic!("connecting to {POSTGRES_VAR}: {e}"));
        let mut out = Vec::new();
        for setting in [
            "server_version",
            "fsync",
            "synchronous_commit",
            "shared_buffers",
        ] {
            let value: String = sqlx::query_scalar(&format!("SHOW {setting}"))
                .fetch_one(&mut c)
                .await
                .expect("SHOW a setting");
            out.push(format!("{setting}={value}"));
        }
        let _ = c.close().await;
        out.join(", ")
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let names = std::mem::take(&mut *self.made.lock().unwrap_or_else(|e| e.into_inner()));
        if names.is_empty() {
            return;
        }
        let server = self.server.clone();
        // Drop may run inside the bench's runtime: a runtime of its own on a thread of its own.
        let dropped = std::thread::spawn(move || {
            let rt = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .expect("runtime");
            rt.block_on(async move {
                let mut c = PgConnection::connect(&server).await.ok()?;
                for name in names {
                    let sql = format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)");
                    if let Err(e) = sqlx::query(&sql).execute(&mut c).await {
                        eprintln!("could not drop the scratch database {name}: {e}");
                    }
                }
                c.close().await.ok()
            })
        })
        .join();
        if !matches!(dropped, Ok(Some(()))) {
            eprintln!("could not reach {POSTGRES_VAR} to drop the scratch databases");
        }
    }
}
