//! Stopping an analysis that has run too long. The caller hands the analysis a [`Cancel`]: a
//! deadline, or none. The analysis looks at it at its natural checkpoints (each iteration of
//! the solve, each restart, each round and each unit's leak signature of fault
//! identification, each block of the sparse path's solves for the adjustment covariance, and
//! between the report's stages) and, once the deadline has passed, stops with [`Cancelled`]
//! instead of a report.
//!
//! A deadline never changes an answer: an analysis either finishes with exactly the report it
//! gives without one, or gives none. So the engine's rule "same input, same output" holds for
//! every report it gives; the clock is read only to compare it with the deadline, and never
//! at all with [`Cancel::never`].

use std::time::{Duration, Instant};

/// When to give up an analysis: never, or at a deadline on the monotonic clock. Cheap to copy
/// and to check (one clock read; none for `never`).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Cancel {
    deadline: Option<Instant>,
}

/// The analysis passed its deadline and stopped before it had an answer.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("the analysis passed its deadline and was stopped before it had an answer")]
pub struct Cancelled;

impl Cancel {
    /// Never give up: what the entry points without a deadline use.
    pub const fn never() -> Cancel {
        Cancel { deadline: None }
    }

    /// Give up once `deadline` has passed.
    pub fn at(deadline: Instant) -> Cancel {
        Cancel {
            deadline: Some(deadline),
        }
    }

    /// Give up `limit` from now; never if that instant is beyond what the clock can hold.
    pub fn after(limit: Duration) -> Cancel {
        Cancel {
            deadline: Instant::now().checked_add(limit),
        }
    }

    /// Has the deadline passed? Once true, true for good (the clock is monotonic).
    pub fn is_cancelled(&self) -> bool {
        self.deadline.is_some_and(|d| Instant::now() >= d)
    }

    /// `Err(Cancelled)` once the deadline has passed: a checkpoint, with `?`.
    pub fn check(&self) -> Result<(), Cancelled> {
        if self.is_cancelled() {
            Err(Cancelled)
        } else {
            Ok(())
        }
    }
}

/// The outcome of a step run with [`Cancel::never`], which is never cancelled: how the entry
/// points without a deadline call their cancellable forms.
pub(crate) fn uncancelled<T>(outcome: Result<T, Cancelled>) -> T {
    match outcome {
        Ok(value) => value,
        Err(Cancelled) => unreachable!("Cancel::never() never cancels"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn never_is_never_cancelled_and_a_past_deadline_always_is() {
        assert!(!Cancel::never().is_cancelled());
        assert_eq!(Cancel::never().check(), Ok(()));
        assert_eq!(Cancel::default(), Cancel::never());
        let past = Cancel::at(Instant::now());
        assert!(past.is_cancelled());
        assert_eq!(past.check(), Err(Cancelled));
        let later = Cancel::after(Duration::from_secs(3600));
        assert!(!later.is_cancelled());
        // Beyond what the clock holds: never.
        assert_eq!(Cancel::after(Duration::MAX), Cancel::never());
    }

    #[test]
    fn a_deadline_passes_and_stays_passed() {
        let soon = Cancel::after(Duration::from_millis(5));
        std::thread::sleep(Duration::from_millis(10));
        assert!(soon.is_cancelled());
        assert!(soon.is_cancelled());
    }
}
