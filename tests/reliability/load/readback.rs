//! After the load: what the service stored and ran, read back over HTTP, and the figures'
//! helpers.

use super::*;

/// `GET /api/v1/plants/{plant}/{what}` over hours `from..to`: the JSON answer (200 asserted).
async fn over_hours(
    http: &Client,
    s: &Server,
    read: &str,
    plant: &str,
    what: &str,
    (from, to): (i64, i64),
) -> Value {
    let r = http
        .get(s.url(&format!("/api/v1/plants/{plant}/{what}")))
        .query(&[
            ("from", rfc3339(hour_start(from))),
            ("to", rfc3339(hour_start(to))),
        ])
        .bearer_auth(read)
        .send()
        .await
        .unwrap_or_else(|e| panic!("GET {what} after the load: {e}"));
    crate::support::json_ok(r).await
}

/// Every stored reading of `plant` over hours `0..=last`, keyed as the historians keep them.
pub(crate) async fn stored(
    http: &Client,
    s: &Server,
    read: &str,
    plant: &str,
    last: i64,
) -> Posted {
    let mut out = Posted::new();
    let mut from = 0;
    while from <= last {
        let to = (from + 1000).min(last + 1);
        let list = over_hours(http, s, read, plant, "readings", (from, to)).await;
        for r in list["readings"].as_array().expect("readings") {
            let time = DateTime::parse_from_rfc3339(r["time"].as_str().expect("time"))
                .expect("RFC 3339")
                .with_timezone(&Utc);
            let quality = match r["quality"].as_str() {
                Some("good") => "good",
                Some("uncertain") => "uncertain",
                other => panic!("unexpected quality {other:?} in {r}"),
            };
            let value = r["value"].as_f64().expect("value");
            let tag = r["tag"].as_str().expect("tag").to_string();
            assert!(
                out.insert((tag, time), (value, quality)).is_none(),
                "a reading listed twice: {r}"
            );
        }
        from = to;
    }
    out
}

/// The period listing of `plant` over hours `0..=last`, in ranges the listing accepts.
pub(crate) async fn periods(
    http: &Client,
    s: &Server,
    read: &str,
    plant: &str,
    last: i64,
) -> Vec<Value> {
    let mut out = Vec::new();
    let mut from = 0;
    while from <= last {
        let to = (from + 5000).min(last + 1);
        let list = over_hours(http, s, read, plant, "periods", (from, to)).await;
        out.extend(list["periods"].as_array().expect("periods").iter().cloned());
        from = to;
    }
    out
}

/// Nearest-rank percentile of sorted durations, in ms.
pub(crate) fn percentile(sorted: &[Duration], p: f64) -> f64 {
    let rank = ((p / 100.0) * sorted.len() as f64).ceil() as usize;
    sorted[rank.clamp(1, sorted.len()) - 1].as_secs_f64() * 1e3
}

pub(crate) fn loadavg() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}
