//! Who claims periods, and for how long: this instance among those sharing one database. The
//! service holds it; the scheduler's claims (`schedule::claims`) are made in its name.

use std::time::Duration;

/// This instance's name and lease in its claims on periods.
#[derive(Debug, Clone)]
pub struct Claimant {
    /// This instance's name in its claims: unique among the instances sharing the database.
    pub instance: String,
    /// How long a claim lasts unless renewed; a run renews it every third of this.
    pub lease: Duration,
}

impl Default for Claimant {
    fn default() -> Claimant {
        Claimant {
            instance: instance_name(None),
            lease: Duration::from_secs(60),
        }
    }
}

/// An instance name for claims: `label` (the host's name when absent or blank), the process id
/// and a random suffix, so that two instances never share one even when given the same label.
pub fn instance_name(label: Option<&str>) -> String {
    let host = || {
        std::fs::read_to_string("/proc/sys/kernel/hostname")
            .ok()
            .or_else(|| std::env::var("HOSTNAME").ok())
            .map(|h| h.trim().to_string())
            .filter(|h| !h.is_empty())
            .unwrap_or_else(|| "loopbal".into())
    };
    let label = label
        .map(str::trim)
        .filter(|l| !l.is_empty())
        .map_or_else(host, str::to_string);
    format!(
        "{label}/{}/{:08x}",
        std::process::id(),
        rand::random::<u32>()
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn instance_names_never_collide_and_keep_their_label() {
        let a = instance_name(Some("unit-7"));
        let b = instance_name(Some("unit-7"));
        assert!(a.starts_with("unit-7/"), "{a}");
        assert_ne!(a, b, "the same label twice still makes two names");
        assert!(a.contains(&format!("/{}/", std::process::id())), "{a}");
        // A blank label is no label: the host's name (never an empty one) stands in.
        let blank = instance_name(Some("  "));
        assert!(!blank.starts_with('/'), "{blank}");
    }
}
