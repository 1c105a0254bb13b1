//! SQLite allocates with the C library's `malloc`, not Rust's allocator, and sqlx copies every
//! column of every row it reads (`sqlite3_value_dup`) on its connection thread; the request
//! frees those copies on its own thread when it drops the rows.
//!
//! With glibc's default settings the freed blocks wait in the connection thread's "fast bins",
//! and the next larger allocation on that thread merges them all at once
//! (`malloc_consolidate`). A request that read a year of every loop figure (175,000 rows,
//! about a million copies) left the next query on its connection, whatever it was, about
//! 150 ms to pay: the plant list took 120–230 ms instead of 2–3 ms (measured with `perf` on
//! `loopbal serve` over a year of stored runs, 2026-12-04; docs/performance.md). Without fast
//! bins a freed block is merged with its free neighbours as it is freed, a cost spread over
//! the frees instead of a pause for whoever comes next. The same year's read took as long
//! either way (0.53–0.70 s).

use std::sync::Once;

/// Turn glibc's fast bins off (`M_MXFAST` = 0), once per process, before the first
/// connection. Elsewhere (another C library or operating system) nothing changes.
pub(super) fn tune() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        #[cfg(all(target_os = "linux", target_env = "gnu"))]
        {
            // SAFETY: mallopt sets one of the allocator's tunables; it takes no pointer, is
            // thread-safe, and M_MXFAST = 0 is a documented value (mallopt(3)).
            let done = unsafe { libc::mallopt(libc::M_MXFAST, 0) };
            if done != 1 {
                tracing::warn!("could not turn the C allocator's fast bins off (mallopt)");
            }
        }
    });
}
