//! The test plants of `tests/data/`, as text and as paths. All three are invented:
//!
//! - `purge-design`: a small ammonia synthesis loop with an argon purge, run at an operating
//!   case whose steady state is derived by hand (`crate::purge_design`,
//!   reconcile/tests/purge_design.rs);
//! - the Ombrask Flats OB-2 ammonia loop (`ombrask-loop.toml`), the service's usual plant;
//! - the Vantle Cross VC-3 methanol loop (`vantle-methanol.toml`), two reactions and 26 meters
//!   (true state in `crate::vantle`).

/// The folder of the shared fixtures, `tests/data/` at the workspace's root.
pub const DATA: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/../tests/data");

pub const PURGE_DESIGN_PATH: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/../tests/data/purge-design.toml"
);
pub const OMBRASK_PATH: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/../tests/data/ombrask-loop.toml"
);
pub const VANTLE_PATH: &str = concat!(
    env!("CARGO_MANIFEST_DIR"),
    "/../tests/data/vantle-methanol.toml"
);

/// The purge-design model's text (plant `purge-design`).
pub const PURGE_DESIGN: &str = include_str!("../../tests/data/purge-design.toml");
/// The Ombrask Flats OB-2 model's text (plant `ombrask-ob2`).
pub const OMBRASK: &str = include_str!("../../tests/data/ombrask-loop.toml");
/// The Vantle Cross VC-3 model's text.
pub const VANTLE: &str = include_str!("../../tests/data/vantle-methanol.toml");

/// A fixture of `tests/data/` by file name.
pub fn data_path(file: &str) -> std::path::PathBuf {
    std::path::Path::new(DATA).join(file)
}
