//! Builds the PostgreSQL store tests as ignored (with the reason) unless
//! LOOPBAL_TEST_POSTGRES_URL is set, so that `cargo test` on a machine without PostgreSQL
//! reports them as not run rather than as passed (server/src/store/tests/, DEVELOPERS.md).

fn main() {
    println!("cargo::rustc-check-cfg=cfg(loopbal_postgres_tests)");
    println!("cargo::rerun-if-changed=build.rs");
    println!("cargo::rerun-if-env-changed=LOOPBAL_TEST_POSTGRES_URL");
    if std::env::var_os("LOOPBAL_TEST_POSTGRES_URL").is_some_and(|url| !url.is_empty()) {
        println!("cargo::rustc-cfg=loopbal_postgres_tests");
    }
}
