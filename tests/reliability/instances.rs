//! (to be written: two instances on one PostgreSQL)
#[allow(unused_imports)]
use crate::support::Backend;

crate::both_backends! {
    /// The harness's pair of tests builds and names its backends.
    async fn backend_pair_smoke(backend: Backend) {
        let dir = tempfile::tempdir().unwrap();
        let (log_at, url) = backend.fresh(dir.path(), "smoke");
        let s = crate::support::Server::start_on(&log_at, &url, &[], "warn");
        let r = crate::support::client().get(s.url("/healthz")).send().await.unwrap();
        assert!(r.status().is_success());
        assert_eq!(url.starts_with("postgres://"), backend == Backend::Postgres);
    }
}
