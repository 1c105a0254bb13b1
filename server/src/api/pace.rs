//! Request bodies must keep moving: a client that trickles its body (or stalls) would otherwise
//! hold its request open until the request timeout. Every body is wrapped so that reading it
//! fails once the client falls below the minimum pace, and the request is then answered 408
//! (problem details) whatever the handler made of the failed read.
//!
//! The pace is measured from the first time the body is read (hyper sends `100 Continue` only
//! then, so a client that waits for it is not counted against).

use std::future::Future;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Duration;

use axum::body::{Body, Bytes};
use axum::extract::{Request, State};
use axum::http::{header, HeaderValue, StatusCode};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use http_body::{Frame, SizeHint};
use tokio::time::{Instant, Sleep};

use super::problem::Problem;
use super::Limits;

/// The least a request body must keep up.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Pace {
    /// Longest wait for the next byte of a body.
    pub idle: Duration,
    /// Least average rate in bytes a second, counted once `grace` has passed; 0: no rate rule.
    pub min_rate: u64,
    /// How long a body may take before its average rate is checked.
    pub grace: Duration,
}

impl Pace {
    pub fn of(limits: &Limits) -> Pace {
        Pace {
            idle: limits.body_idle_timeout,
            min_rate: limits.min_body_rate,
            grace: limits.body_rate_grace,
        }
    }

    /// When a body first read at `started`, that has had `received` bytes, the last at
    /// `last`, falls behind: the next byte's deadline, or the time the average drops below
    /// the rate (never before the grace is over), whichever comes first.
    pub fn deadline(&self, started: Instant, last: Instant, received: u64) -> Instant {
        let idle = last + self.idle;
        if self.min_rate == 0 {
            return idle;
        }
        let earned = Duration::from_secs_f64(received as f64 / self.min_rate as f64);
        idle.min(started + self.grace.max(earned))
    }

    fn detail(&self) -> String {
        let rate = if self.min_rate == 0 {
            String::new()
        } else {
            format!(
                " and at least {} bytes a second on average after the first {} s",
                self.min_rate,
                self.grace.as_secs_f64()
            )
        };
        format!(
            "the request body arrived too slowly and the request was abandoned; the service \
             needs a byte at least every {} s{rate}",
            self.idle.as_secs_f64()
        )
    }
}

/// The failure of a body read that fell behind the pace.
#[derive(Debug)]
struct TooSlow;

impl std::fmt::Display for TooSlow {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("the request body arrived too slowly")
    }
}

impl std::error::Error for TooSlow {}

/// A body that fails once its client falls behind `pace`, and says so in `tripped`.
struct Paced {
    inner: Body,
    pace: Pace,
    tripped: Arc<AtomicBool>,
    started: Option<Instant>,
    last: Instant,
    received: u64,
    timer: Option<Pin<Box<Sleep>>>,
}

impl Paced {
    fn trip(&mut self) -> Poll<Option<Result<Frame<Bytes>, axum::Error>>> {
        self.tripped.store(true, Ordering::Release);
        self.timer = None;
        Poll::Ready(Some(Err(axum::Error::new(TooSlow))))
    }
}

impl http_body::Body for Paced {
    type Data = Bytes;
    type Error = axum::Error;

    fn poll_frame(
        self: Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<Option<Result<Frame<Bytes>, axum::Error>>> {
        let this = self.get_mut();
        if this.tripped.load(Ordering::Acquire) {
            return Poll::Ready(Some(Err(axum::Error::new(TooSlow))));
        }
        let now = Instant::now();
        let started = *this.started.get_or_insert_with(|| {
            this.last = now;
            now
        });
        match Pin::new(&mut this.inner).poll_frame(cx) {
            Poll::Ready(Some(Ok(frame))) => {
                if let Some(data) = frame.data_ref() {
                    if !data.is_empty() {
                        this.received += data.len() as u64;
                        this.last = now;
                    }
                }
                return Poll::Ready(Some(Ok(frame)));
            }
            Poll::Ready(other) => {
                this.timer = None;
                return Poll::Ready(other);
            }
            Poll::Pending => {}
        }
        // Nothing to read now: wake up when the client would fall behind, unless it sends
        // something first (then the deadline moves on the next poll).
        let deadline = this.pace.deadline(started, this.last, this.received);
        if now >= deadline {
            return this.trip();
        }
        let timer = this
            .timer
            .get_or_insert_with(|| Box::pin(tokio::time::sleep_until(deadline)));
        if timer.deadline() != deadline {
            timer.as_mut().reset(deadline);
        }
        match timer.as_mut().poll(cx) {
            Poll::Ready(()) => this.trip(),
            Poll::Pending => Poll::Pending,
        }
    }

    fn is_end_stream(&self) -> bool {
        self.inner.is_end_stream()
    }

    fn size_hint(&self) -> SizeHint {
        self.inner.size_hint()
    }
}

/// Middleware: every request body read at the pace of `limits`, or the request answered 408.
pub async fn keep_pace(State(pace): State<Pace>, req: Request, next: Next) -> Response {
    if http_body::Body::is_end_stream(req.body()) {
        return next.run(req).await;
    }
    let tripped = Arc::new(AtomicBool::new(false));
    let watch = tripped.clone();
    let req = req.map(|inner| {
        Body::new(Paced {
            inner,
            pace,
            tripped: watch,
            started: None,
            last: Instant::now(),
            received: 0,
            timer: None,
        })
    });
    let response = next.run(req).await;
    if !tripped.load(Ordering::Acquire) {
        return response;
    }
    // Whatever the handler answered to the failed read, the cause is the slow client; what
    // is left of its body is never read, so the connection cannot carry another request.
    let mut answer =
        Problem::new(StatusCode::REQUEST_TIMEOUT, "body-too-slow", pace.detail()).into_response();
    answer
        .headers_mut()
        .insert(header::CONNECTION, HeaderValue::from_static("close"));
    answer
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pace(min_rate: u64) -> Pace {
        Pace {
            idle: Duration::from_secs(10),
            min_rate,
            grace: Duration::from_secs(5),
        }
    }

    #[test]
    fn the_deadline_is_the_earlier_of_the_next_byte_and_the_average_rate() {
        let t0 = Instant::now();
        let s = Duration::from_secs;
        // Nothing yet: the rate rule bites when the grace is over.
        assert_eq!(pace(1024).deadline(t0, t0, 0), t0 + s(5));
        // 20 KiB earn 20 s at 1 KiB/s, but a stall of 10 s comes first.
        assert_eq!(pace(1024).deadline(t0, t0 + s(3), 20 * 1024), t0 + s(13));
        // 7 KiB by 6 s: the average falls below 1 KiB/s at 7 s.
        assert_eq!(pace(1024).deadline(t0, t0 + s(6), 7 * 1024), t0 + s(7));
        // A fast body is held only to the next byte.
        assert_eq!(pace(1024).deadline(t0, t0 + s(2), 1 << 30), t0 + s(12));
        // Without a rate rule only the stall counts.
        assert_eq!(pace(0).deadline(t0, t0 + s(4), 1), t0 + s(14));
    }

    #[test]
    fn the_answer_names_the_pace() {
        let detail = pace(1024).detail();
        assert!(detail.contains("every 10 s"), "{detail}");
        assert!(detail.contains("1024 bytes a second"), "{detail}");
        assert!(detail.contains("first 5 s"), "{detail}");
        assert!(!pace(0).detail().contains("bytes a second"));
    }

    async fn read_all(body: Body) -> Result<Bytes, axum::Error> {
        axum::body::to_bytes(body, usize::MAX).await
    }

    fn paced(inner: Body, pace: Pace) -> (Body, Arc<AtomicBool>) {
        let tripped = Arc::new(AtomicBool::new(false));
        let body = Body::new(Paced {
            inner,
            pace,
            tripped: tripped.clone(),
            started: None,
            last: Instant::now(),
            received: 0,
            timer: None,
        });
        (body, tripped)
    }

    #[tokio::test]
    async fn a_stalled_body_fails_and_a_whole_one_passes() {
        let quick = Pace {
            idle: Duration::from_secs(2),
            min_rate: 1024,
            grace: Duration::from_millis(300),
        };
        let (body, tripped) = paced(Body::from("tag,time,value\n"), quick);
        assert_eq!(read_all(body).await.unwrap(), "tag,time,value\n");
        assert!(!tripped.load(Ordering::Acquire));

        // A body that never sends a byte: refused when the grace is over, not before.
        let (tx, rx) = tokio::sync::mpsc::channel(1);
        let (body, tripped) = paced(waiting_body(rx), quick);
        let began = Instant::now();
        let err = read_all(body).await.unwrap_err();
        let waited = began.elapsed();
        assert!(err.to_string().contains("too slowly"), "{err}");
        assert!(tripped.load(Ordering::Acquire));
        assert!(waited >= Duration::from_millis(300), "{waited:?}");
        assert!(waited < Duration::from_secs(2), "{waited:?}");
        drop(tx);
    }

    type Sent = Result<Frame<Bytes>, std::io::Error>;

    /// A body fed by a channel: never ready unless something is sent.
    fn waiting_body(rx: tokio::sync::mpsc::Receiver<Sent>) -> Body {
        struct Channel(tokio::sync::mpsc::Receiver<Sent>);
        impl http_body::Body for Channel {
            type Data = Bytes;
            type Error = std::io::Error;
            fn poll_frame(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Sent>> {
                self.0.poll_recv(cx)
            }
        }
        Body::new(Channel(rx))
    }
}
