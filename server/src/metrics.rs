//! The service's counters, exposed at `GET /metrics` in the Prometheus text exposition format
//! (version 0.0.4). Kept by hand: a few atomics and two histograms need no library.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;
use std::time::Duration;

/// Upper bounds (seconds) of the latency buckets: 1 ms to 60 s, roughly ×2.5 apart.
const LATENCY_BUCKETS: [f64; 12] = [
    0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 5.0, 60.0,
];

/// A cumulative histogram of durations.
#[derive(Debug, Default)]
struct Histogram {
    counts: [u64; LATENCY_BUCKETS.len()],
    count: u64,
    sum: f64,
}

impl Histogram {
    fn observe(&mut self, seconds: f64) {
        for (bound, count) in LATENCY_BUCKETS.iter().zip(self.counts.iter_mut()) {
            if seconds <= *bound {
                *count += 1;
            }
        }
        self.count += 1;
        self.sum += seconds;
    }

    fn render(&self, out: &mut String, name: &str, labels: &str) {
        let sep = if labels.is_empty() { "" } else { "," };
        for (bound, count) in LATENCY_BUCKETS.iter().zip(self.counts.iter()) {
            let _ = writeln!(out, "{name}_bucket{{{labels}{sep}le=\"{bound}\"}} {count}");
        }
        let _ = writeln!(
            out,
            "{name}_bucket{{{labels}{sep}le=\"+Inf\"}} {}",
            self.count
        );
        let braces = if labels.is_empty() {
            String::new()
        } else {
            format!("{{{labels}}}")
        };
        let _ = writeln!(out, "{name}_sum{braces} {}", self.sum);
        let _ = writeln!(out, "{name}_count{braces} {}", self.count);
    }
}

/// Request key: (method, route template, status). The route is the template
/// (`/api/v1/plants/{plant}/readings`), never the raw path, so plant names do not multiply
/// series and no query string reaches the metrics.
type RequestKey = (String, String, u16);

#[derive(Debug, Default)]
pub struct Metrics {
    requests: Mutex<BTreeMap<RequestKey, u64>>,
    request_latency: Mutex<BTreeMap<String, Histogram>>,
    readings_accepted: AtomicU64,
    readings_replaced: AtomicU64,
    readings_unchanged: AtomicU64,
    readings_rejected: AtomicU64,
    runs: Mutex<BTreeMap<String, u64>>,
    run_duration: Mutex<Histogram>,
    runs_abandoned: AtomicU64,
}

fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    // A counter is still right after a panic elsewhere held the lock: keep counting.
    m.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

impl Metrics {
    pub fn request(&self, method: &str, route: &str, status: u16, latency: Duration) {
        *lock(&self.requests)
            .entry((method.to_string(), route.to_string(), status))
            .or_default() += 1;
        lock(&self.request_latency)
            .entry(route.to_string())
            .or_default()
            .observe(latency.as_secs_f64());
    }

    pub fn readings(&self, accepted: usize, replaced: usize, unchanged: usize, rejected: usize) {
        self.readings_accepted
            .fetch_add(accepted as u64, Ordering::Relaxed);
        self.readings_replaced
            .fetch_add(replaced as u64, Ordering::Relaxed);
        self.readings_unchanged
            .fetch_add(unchanged as u64, Ordering::Relaxed);
        self.readings_rejected
            .fetch_add(rejected as u64, Ordering::Relaxed);
    }

    /// A finished period run, by its report status.
    pub fn run(&self, status: &str, duration: Duration) {
        *lock(&self.runs).entry(status.to_string()).or_default() += 1;
        lock(&self.run_duration).observe(duration.as_secs_f64());
    }

    /// A period run abandoned at its time limit.
    pub fn run_abandoned(&self) {
        self.runs_abandoned.fetch_add(1, Ordering::Relaxed);
    }

    pub fn render(&self) -> String {
        let mut out = String::new();
        out.push_str(
            "# HELP loopbal_http_requests_total HTTP requests answered, by method, route and status.\n\
             # TYPE loopbal_http_requests_total counter\n",
        );
        for ((method, route, status), n) in lock(&self.requests).iter() {
            let _ = writeln!(
                out,
                "loopbal_http_requests_total{{method=\"{method}\",route=\"{}\",status=\"{status}\"}} {n}",
                escape(route)
            );
        }
        out.push_str(
            "# HELP loopbal_http_request_duration_seconds Time to answer a request, by route.\n\
             # TYPE loopbal_http_request_duration_seconds histogram\n",
        );
        for (route, h) in lock(&self.request_latency).iter() {
            h.render(
                &mut out,
                "loopbal_http_request_duration_seconds",
                &format!("route=\"{}\"", escape(route)),
            );
        }
        let counters = [
            ("accepted", &self.readings_accepted, "new readings stored"),
            (
                "replaced",
                &self.readings_replaced,
                "stored readings whose value or quality changed",
            ),
            (
                "unchanged",
                &self.readings_unchanged,
                "identical resends of stored readings",
            ),
            (
                "rejected",
                &self.readings_rejected,
                "lines refused with a reason",
            ),
        ];
        for (name, counter, help) in counters {
            let _ = writeln!(
                out,
                "# HELP loopbal_readings_{name}_total Readings posted: {help}.\n\
                 # TYPE loopbal_readings_{name}_total counter\n\
                 loopbal_readings_{name}_total {}",
                counter.load(Ordering::Relaxed)
            );
        }
        out.push_str(
            "# HELP loopbal_runs_total Period runs finished, by report status.\n\
             # TYPE loopbal_runs_total counter\n",
        );
        for (status, n) in lock(&self.runs).iter() {
            let _ = writeln!(
                out,
                "loopbal_runs_total{{status=\"{}\"}} {n}",
                escape(status)
            );
        }
        out.push_str(
            "# HELP loopbal_run_duration_seconds Time to reconcile one period.\n\
             # TYPE loopbal_run_duration_seconds histogram\n",
        );
        lock(&self.run_duration).render(&mut out, "loopbal_run_duration_seconds", "");
        let _ = writeln!(
            out,
            "# HELP loopbal_runs_abandoned_total Period runs abandoned at their time limit.\n\
             # TYPE loopbal_runs_abandoned_total counter\n\
             loopbal_runs_abandoned_total {}",
            self.runs_abandoned.load(Ordering::Relaxed)
        );
        out
    }
}

/// Label values escape backslash, double quote and newline (exposition format).
fn escape(value: &str) -> String {
    value
        .replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn histogram_buckets_are_cumulative_and_counters_render() {
        let m = Metrics::default();
        m.request("GET", "/healthz", 200, Duration::from_millis(3));
        m.request("GET", "/healthz", 200, Duration::from_millis(700));
        m.readings(5, 1, 2, 3);
        let text = m.render();
        assert!(text.contains(
            "loopbal_http_requests_total{method=\"GET\",route=\"/healthz\",status=\"200\"} 2"
        ));
        // 3 ms falls in le=0.005 and above; 700 ms only from le=1 up.
        assert!(text.contains("route=\"/healthz\",le=\"0.0025\"} 0"));
        assert!(text.contains("route=\"/healthz\",le=\"0.005\"} 1"));
        assert!(text.contains("route=\"/healthz\",le=\"1\"} 2"));
        assert!(text.contains("route=\"/healthz\",le=\"+Inf\"} 2"));
        assert!(text.contains("loopbal_readings_rejected_total 3"));
        assert!(text.contains("loopbal_run_duration_seconds_count 0"));
        assert!(text.contains("\nloopbal_runs_abandoned_total 0\n"));
        m.run_abandoned();
        assert!(m.render().contains("\nloopbal_runs_abandoned_total 1\n"));
    }

    #[test]
    fn label_values_are_escaped() {
        assert_eq!(escape("a\"b\\c\nd"), "a\\\"b\\\\c\\nd");
    }
}
