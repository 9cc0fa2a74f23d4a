//! Deadlines: a call ends with `DEADLINE_EXCEEDED` at the caller's deadline (the
//! `grpc-timeout` header) or the server's own limit, whichever comes first. The answer is given
//! just before the caller's deadline (2 % early, between 2 and 20 ms, at most half the
//! deadline) so it reaches the caller before its own timer gives up with a bare cancellation.
//!
//! Work already running on the blocking pool is told to stop (its cancellation flag) and its
//! result is dropped; its admission permit is kept until it has stopped.

use super::send_guard::send_guarded;
use super::shed::Admitted;
use super::{call_names, route_service, BoxFuture};
use crate::cancel::{Cancel, CancelOnDrop};
use crate::runtime::{BlockGap, Computing, StreamDeadline, Work};
use std::future::Future;
use std::task::{Context, Poll};
use std::time::Duration;
use tonic::body::Body;
use tonic::codegen::http;
use tonic::Status;

/// Longest wait for stopped work to wind down after its deadline answer, holding its permit.
pub const STOP_GRACE: Duration = Duration::from_secs(5);

/// Deadlines: a call ends with `DEADLINE_EXCEEDED` at the caller's `grpc-timeout` or the
/// server's limit, whichever comes first (tower's `Timeout` would end it with a transport error
/// that tonic reports as CANCELLED).
#[derive(Debug, Clone)]
pub struct DeadlineLayer {
    timeout: Duration,
    stream_timeout: Duration,
    computing: Computing,
}

impl DeadlineLayer {
    /// Every call ended after `timeout` at most, a live stream ([`LIVE_STREAMS`]) after
    /// `stream_timeout`; calls get the server's gauge of running computations `computing` with
    /// their cancellation flag.
    pub fn new(timeout: Duration, stream_timeout: Duration, computing: Computing) -> Self {
        Self { timeout, stream_timeout, computing }
    }
}

impl<S> tower::Layer<S> for DeadlineLayer {
    type Service = Deadline<S>;

    fn layer(&self, inner: S) -> Deadline<S> {
        Deadline {
            inner,
            timeout: self.timeout,
            stream_timeout: self.stream_timeout,
            computing: self.computing.clone(),
        }
    }
}

/// The service [`DeadlineLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct Deadline<S> {
    inner: S,
    timeout: Duration,
    stream_timeout: Duration,
    computing: Computing,
}

/// Methods whose answer is a stream that lives as long as a test run: they get the stream
/// time limit, and end their own stream at it with DEADLINE_EXCEEDED ([`StreamDeadline`]).
pub const LIVE_STREAMS: &[&str] = &["/jetloop.v1.SpectrumService/TrackTones"];

/// Methods that take a recording of any length as a stream of blocks and answer once: the
/// whole call gets the stream time limit, and the per-call limit applies to the wait for each
/// block ([`BlockGap`]), so a stalled upload lets go of its samples as soon as a short call
/// would, and a long recording streaming steadily is not cut off.
pub const UPLOAD_STREAMS: &[&str] = &[
    "/jetloop.v1.SpectrumService/ExtractTonesStream",
    "/jetloop.v1.SpectrumService/CrossSpectraStream",
    "/jetloop.v1.SpectrumService/AnalyseRampStream",
];

/// Time after a live stream's limit before a stream that has not ended is cut with its
/// connection (the handler ends it at the limit; this covers a client that stopped reading).
pub const STREAM_END_GRACE: Duration = Duration::from_secs(5);

/// Parses a `grpc-timeout` value (up to 8 digits and a unit: H, M, S, m, u, n).
pub fn parse_grpc_timeout(v: &str) -> Option<Duration> {
    if v.len() < 2 || v.len() > 9 {
        return None;
    }
    let (digits, unit) = v.split_at(v.len() - 1);
    let n: u64 = digits.parse().ok()?;
    Some(match unit {
        "H" => Duration::from_secs(n.saturating_mul(3600)),
        "M" => Duration::from_secs(n.saturating_mul(60)),
        "S" => Duration::from_secs(n),
        "m" => Duration::from_millis(n),
        "u" => Duration::from_micros(n),
        "n" => Duration::from_nanos(n),
        _ => return None,
    })
}

/// How long a call may run, and why that long.
fn time_limit(headers: &http::HeaderMap, server: Duration) -> (Duration, Why) {
    let caller = headers.get("grpc-timeout").and_then(|v| v.to_str().ok()).and_then(parse_grpc_timeout);
    match caller {
        Some(t) if t < server => {
            // Early enough to reach the caller before its own timer gives up locally.
            let early = (t / 50).clamp(Duration::from_millis(2), Duration::from_millis(20)).min(t / 2);
            (t - early, Why::Caller(t))
        }
        _ => (server, Why::Server(server)),
    }
}

/// Which limit ends a call (formatted only when it does: most calls end well before).
#[derive(Debug, Clone, Copy)]
enum Why {
    /// The caller's `grpc-timeout`.
    Caller(Duration),
    /// The server's own limit.
    Server(Duration),
}

impl std::fmt::Display for Why {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Why::Caller(t) => write!(f, "the caller's deadline of {:.3} s passed", t.as_secs_f64()),
            Why::Server(t) => write!(f, "the server's time limit of {} s per call passed", t.as_secs_f64()),
        }
    }
}

route_service!(Deadline, |self, req| {
    let mut req = req;
    let live = LIVE_STREAMS.contains(&req.uri().path());
    let upload = UPLOAD_STREAMS.contains(&req.uri().path());
    let server_limit = if live || upload { self.stream_timeout } else { self.timeout };
    let (limit, why) = time_limit(req.headers(), server_limit);
    if upload {
        req.extensions_mut().insert(BlockGap(self.timeout));
    }
    // A live stream's answer is ready at once and then streams: its handler ends it at the
    // limit, and the send guard cuts it only after a grace beyond that.
    let send_limit = if live {
        req.extensions_mut()
            .insert(StreamDeadline { at: tokio::time::Instant::now() + limit, why: why.to_string() });
        limit + STREAM_END_GRACE
    } else {
        limit
    };
    // The call's cancellation flag: handlers hand it to their computation, which checks
    // it between units of work.
    let cancel = Cancel::new();
    req.extensions_mut().insert(Work { cancel: cancel.clone(), computing: self.computing.clone() });
    let admitted = req.extensions().get::<Admitted>().cloned();
    let conn = crate::transport::ConnInfo::of(&req);
    let (method, peer, id) = call_names(&req);
    let started = tokio::time::Instant::now();
    let fut = self.inner.call(req);
    Box::pin(async move {
        // Dropped with this future (the caller went away): the work stops too.
        let guard = CancelOnDrop(cancel.clone());
        let mut fut = Box::pin(fut);
        // Most calls (physics answered on the reactor) are done at their first poll: they
        // need no timer, only one look at the clock.
        let first = std::future::poll_fn(|cx| Poll::Ready(fut.as_mut().poll(cx))).await;
        let (outcome, ready_at, finished) = match first {
            // Ready at once (physics answered on the reactor, or work that finished while the
            // first poll was held up): past the limit all the same if the clock says so.
            Poll::Ready(r) => {
                let now = tokio::time::Instant::now();
                (if now >= started + limit { Err(()) } else { Ok(r) }, now, true)
            }
            Poll::Pending => {
                // The limit is looked at first, and the clock after: an answer that became
                // ready only after the limit passed (a busy machine may wake this task late)
                // is still past it.
                let end = tokio::time::sleep_until(started + limit);
                let r = tokio::select! {
                    biased;
                    () = end => Err(()),
                    r = &mut fut => Ok(r),
                };
                // The timer may not have fired yet on a busy runtime: an answer that comes
                // after the limit is past it all the same.
                let finished = r.is_ok();
                let now = tokio::time::Instant::now();
                let r = if now >= started + limit { Err(()) } else { r };
                (r, now, finished)
            }
        };
        match outcome {
            // The answer is ready: the permit and the time limit now cover its sending.
            Ok(Ok(resp)) => Ok(send_guarded(resp, admitted, conn, started + send_limit, ready_at, method)),
            Ok(Err(e)) => Err(e),
            Err(_) => {
                // Answer now, stop the work, and keep the call's admission permit until
                // the work has really stopped (at most STOP_GRACE), so expired calls cannot
                // pile orphaned computations past the concurrency limit.
                cancel.cancel();
                tracing::info!(
                    %method,
                    peer = %peer,
                    request_id = %id,
                    code = "DEADLINE_EXCEEDED",
                    "call expired: {why}"
                );
                if finished {
                    // The work ended just past the limit: nothing left to wait for.
                    drop(admitted);
                    drop(guard);
                } else {
                    tokio::spawn(async move {
                        let _ = tokio::time::timeout(STOP_GRACE, fut).await;
                        drop(admitted);
                        drop(guard);
                    });
                }
                Ok(Status::deadline_exceeded(format!("stopped: {why}")).into_http())
            }
        }
    })
});

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grpc_timeout_values_parse_per_the_grpc_http2_protocol() {
        // Units of the gRPC over HTTP/2 protocol description (grpc/grpc PROTOCOL-HTTP2.md).
        assert_eq!(parse_grpc_timeout("2H"), Some(Duration::from_secs(7200)));
        assert_eq!(parse_grpc_timeout("3M"), Some(Duration::from_secs(180)));
        assert_eq!(parse_grpc_timeout("10S"), Some(Duration::from_secs(10)));
        assert_eq!(parse_grpc_timeout("250m"), Some(Duration::from_millis(250)));
        assert_eq!(parse_grpc_timeout("50u"), Some(Duration::from_micros(50)));
        assert_eq!(parse_grpc_timeout("99999999n"), Some(Duration::from_nanos(99_999_999)));
        for bad in ["", "S", "10", "10x", "123456789S", "-1S"] {
            assert_eq!(parse_grpc_timeout(bad), None, "{bad}");
        }
    }

    #[test]
    fn the_sooner_limit_wins_and_a_caller_deadline_is_answered_just_before_it() {
        let server = Duration::from_secs(60);
        let mut h = http::HeaderMap::new();
        assert_eq!(time_limit(&h, server).0, server);
        h.insert("grpc-timeout", http::HeaderValue::from_static("100m"));
        let (t, why) = time_limit(&h, server);
        assert_eq!(t, Duration::from_millis(98));
        h.insert("grpc-timeout", http::HeaderValue::from_static("5S"));
        assert_eq!(time_limit(&h, server).0, Duration::from_millis(4980));
        assert!(why.to_string().contains("caller"));
        h.insert("grpc-timeout", http::HeaderValue::from_static("1m"));
        assert_eq!(time_limit(&h, server).0, Duration::from_micros(500));
        h.insert("grpc-timeout", http::HeaderValue::from_static("2H"));
        assert!(time_limit(&h, server).1.to_string().contains("server"));
    }
}
