//! Reliability: the service under process death, several instances, sustained load and hostile
//! input, and the correctness of the period runs the benchmarks time (`runs`). Every loop here
//! is bounded in count and time, and every server listens on loopback.
//!
//! One command runs it all: `cargo test -p loopbal-server --test reliability` (SQLite, and
//! PostgreSQL too when `LOOPBAL_TEST_POSTGRES_URL` is set; see DEVELOPERS.md). `.ci/run` runs
//! it both ways. The sustained load runs 60 s per backend; `LOOPBAL_LOAD_SECONDS` shortens it.

/// The end-to-end harness (testkit::e2e) bound to this package's `loopbal` binary.
mod support {
    testkit::e2e_support!();
}

mod crash;
mod hostile;
mod instances;
mod load;
mod runs;
