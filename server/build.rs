//! Two things at build time:
//! - Builds the PostgreSQL store tests as ignored (with the reason) unless
//!   LOOPBAL_TEST_POSTGRES_URL is set, so that `cargo test` on a machine without PostgreSQL
//!   reports them as not run rather than as passed (server/src/store/tests/, DEVELOPERS.md).
//! - Embeds the web workspace: every file under `web/` becomes an entry of `WEB_ASSETS` (its
//!   path relative to `web/`, its bytes), so the binary serves the workspace with nothing to
//!   fetch or build at run time.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

fn main() {
    println!("cargo::rustc-check-cfg=cfg(loopbal_postgres_tests)");
    println!("cargo::rerun-if-changed=build.rs");
    println!("cargo::rerun-if-env-changed=LOOPBAL_TEST_POSTGRES_URL");
    if std::env::var_os("LOOPBAL_TEST_POSTGRES_URL").is_some_and(|url| !url.is_empty()) {
        println!("cargo::rustc-cfg=loopbal_postgres_tests");
    }
    embed_web();
}

fn embed_web() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("web");
    println!("cargo:rerun-if-changed={}", root.display());
    let mut files = Vec::new();
    collect(&root, &mut files);
    files.sort();
    let mut code = String::from("/// Every file of `web/`: its path below `web/` and its bytes.\n");
    code.push_str("pub static WEB_ASSETS: &[(&str, &[u8])] = &[\n");
    for file in &files {
        println!("cargo:rerun-if-changed={}", file.display());
        let relative = file
            .strip_prefix(&root)
            .expect("below web/")
            .to_str()
            .expect("web asset paths are UTF-8")
            .replace('\\', "/");
        writeln!(
            code,
            "    ({relative:?}, include_bytes!({:?})),",
            file.to_str().expect("UTF-8 path")
        )
        .expect("write to a string");
    }
    code.push_str("];\n");
    let out = PathBuf::from(std::env::var("OUT_DIR").expect("cargo sets OUT_DIR"));
    std::fs::write(out.join("web_assets.rs"), code).expect("write web_assets.rs");
}

/// The files below `dir`, folders followed, hidden entries (editor and OS files) left out.
fn collect(dir: &Path, files: &mut Vec<PathBuf>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let path = entry.path();
        if entry.file_name().to_string_lossy().starts_with('.') {
            continue;
        }
        if path.is_dir() {
            println!("cargo:rerun-if-changed={}", path.display());
            collect(&path, files);
        } else {
            files.push(path);
        }
    }
}
