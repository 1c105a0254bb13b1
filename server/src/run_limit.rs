//! How long a period run may take, and how long a period whose run was abandoned waits before
//! it is tried again.
//!
//! The limit is on the run's computation (the screens, the engine and the per-meter records,
//! on the blocking thread; not the store's reads and writes around it). A run that passes it
//! is abandoned (the engine stops at its next checkpoint, `reconcile::Cancel`), its claim is
//! given up and the failure recorded (`store::failures`), and the period is retried after a
//! backoff, so one period the engine cannot finish never holds a worker, nor its claim, for
//! good, and the other periods and plants go on.
//!
//! By default the limit grows with the model, since the engine's work on a period grows with
//! its states (about linearly for the estimate and the sparse classification; see
//! docs/performance.md): max(5 s, 3 s per 100 states). That is two orders of magnitude above
//! the measured times (the 2,002-stream network's 16,478 states get 494 s for a period the
//! benchmark reconciles in under 1 s), so only a run that has gone wrong reaches it.
//! `--run-timeout` sets one fixed limit for every model instead.

use std::time::Duration;

use reconcile::equations::Layout;
use reconcile::Plant;

/// The least limit of the default rule.
pub const FLOOR: Duration = Duration::from_secs(5);
/// The default rule's time per state: 3 s per 100 states.
pub const PER_STATE: Duration = Duration::from_millis(30);

/// The backoff after a period's first abandoned run; it doubles with each further one.
pub const FIRST_BACKOFF: Duration = Duration::from_secs(60);
/// The longest backoff.
pub const MAX_BACKOFF: Duration = Duration::from_secs(3600);

/// How long a period run may take.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum RunLimit {
    /// max([`FLOOR`], [`PER_STATE`] × the model's states): the default.
    #[default]
    PerModel,
    /// The same limit for every model (`--run-timeout`). The command line takes whole
    /// seconds from 1; the library takes any (the tests give a few milliseconds).
    Fixed(Duration),
}

impl RunLimit {
    /// The limit of a run of `plant`.
    pub fn for_model(&self, plant: &Plant) -> Duration {
        match self {
            RunLimit::PerModel => per_model(states(plant)),
            RunLimit::Fixed(limit) => *limit,
        }
    }
}

/// The default rule for a model of `states` states.
pub fn per_model(states: usize) -> Duration {
    let states = u32::try_from(states).unwrap_or(u32::MAX);
    PER_STATE.saturating_mul(states).max(FLOOR)
}

/// The states the engine estimates for `plant` (each stream's component flows, each reaction's
/// extent, each splitter outlet's fraction): the `states` of a report's diagnostics.
pub fn states(plant: &Plant) -> usize {
    Layout::new(plant).n
}

/// How long a period waits after its `failures`-th abandoned run in a row (counting from 1):
/// [`FIRST_BACKOFF`], doubling with each, at most [`MAX_BACKOFF`].
pub fn backoff(failures: i64) -> Duration {
    let doublings = u32::try_from(failures.saturating_sub(1).clamp(0, 31)).unwrap_or(31);
    FIRST_BACKOFF
        .saturating_mul(1u32 << doublings)
        .min(MAX_BACKOFF)
}

/// A limit as the messages and the stored reason say it: seconds, without trailing zeros
/// (`5 s`, `0.02 s`, `124.2 s`).
pub fn seconds(limit: Duration) -> String {
    format!("{} s", limit.as_secs_f64())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_default_limit_is_three_seconds_per_hundred_states_and_at_least_five() {
        assert_eq!(per_model(0), FLOOR);
        assert_eq!(per_model(100), FLOOR);
        assert_eq!(per_model(200), Duration::from_secs(6));
        assert_eq!(per_model(4_140), Duration::from_millis(124_200));
        assert_eq!(seconds(per_model(4_140)), "124.2 s");
        assert_eq!(per_model(usize::MAX), PER_STATE * u32::MAX);
        // The tee of the shell's tests: one component on two streams.
        let tee = reconcile::parse_plant(&crate::test_plants::tee_with_feed_meter()).unwrap();
        assert_eq!(states(&tee), 2);
        assert_eq!(RunLimit::PerModel.for_model(&tee), FLOOR);
        let fixed = Duration::from_millis(20);
        assert_eq!(RunLimit::Fixed(fixed).for_model(&tee), fixed);
        assert_eq!(seconds(fixed), "0.02 s");
    }

    #[test]
    fn the_backoff_doubles_from_a_minute_up_to_an_hour() {
        let minutes = |n: i64| backoff(n).as_secs() / 60;
        assert_eq!(
            (1..=8).map(minutes).collect::<Vec<_>>(),
            [1, 2, 4, 8, 16, 32, 60, 60]
        );
        assert_eq!(backoff(i64::MAX), MAX_BACKOFF);
        // Never less than the first, whatever the count says.
        assert_eq!(backoff(0), FIRST_BACKOFF);
        assert_eq!(backoff(-3), FIRST_BACKOFF);
    }
}
