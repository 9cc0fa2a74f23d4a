//! Admission and time limits around every call.
//!
//! - **Calls in flight**: at most `max_in_flight` calls run at once across the whole server. One
//!   more is refused at once with `UNAVAILABLE` and a `google.rpc.RetryInfo` hint, so a gRPC
//!   client with a retry policy backs off and tries again instead of queueing without bound.
//!   Health checks are exempt, so an orchestrator does not restart a server for being busy.
//! - **Deadlines**: a call ends with `DEADLINE_EXCEEDED` at the caller's deadline (the
//!   `grpc-timeout` header) or the server's own limit, whichever comes first. The answer is
//!   given just before the caller's deadline (2 % early, between 2 and 20 ms, at most half the
//!   deadline) so it reaches the caller before its own timer gives up with a bare cancellation.
//!
//! Work already running on the blocking pool is not interrupted; its result is dropped.

use crate::cancel::{Cancel, CancelOnDrop};
use crate::service::Computing;
use std::future::Future;
use std::pin::Pin;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Duration;
use tonic::body::Body;
use tonic::codegen::http;
use tonic::Status;
use tonic_types::{ErrorDetails, StatusExt};

/// Path prefix of the health service, which is never refused.
const HEALTH: &str = "/grpc.health.v1.Health/";
/// Longest wait for stopped work to wind down after its deadline answer, holding its permit.
pub const STOP_GRACE: Duration = Duration::from_secs(5);

/// An admitted call's permit, shared by the admission and deadline layers (released when the
/// last holder lets go).
#[derive(Debug, Clone)]
pub struct Admitted {
    _permit: Arc<Permit>,
}

/// One call counted in a [`ShedLayer`]'s calls in flight until dropped.
#[derive(Debug)]
struct Permit(Arc<AtomicUsize>);

impl Drop for Permit {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::AcqRel);
    }
}

/// Takes one of `limit` places in `in_flight`, or `None` when all are taken. A counter, not a
/// semaphore: calls never wait for a place (the excess is refused), so nothing needs a queue,
/// and letting a place go is one atomic operation (a semaphore takes its waiters' lock).
fn try_admit(in_flight: &Arc<AtomicUsize>, limit: usize) -> Option<Permit> {
    in_flight
        .fetch_update(Ordering::AcqRel, Ordering::Acquire, |n| (n < limit).then_some(n + 1))
        .ok()
        .map(|_| Permit(in_flight.clone()))
}

/// Suggested wait before retrying a refused call.
pub const RETRY_AFTER: Duration = Duration::from_millis(100);

/// Admission: at most `limit` calls at once server-wide, the excess refused at once with
/// `UNAVAILABLE` and a `RetryInfo` hint; health checks always pass.
///
/// tower's `ConcurrencyLimit` would queue the excess (unbounded waiting under overload) and
/// `LoadShed` answers a transport error without a gRPC status or retry hint: this one layer does
/// both jobs, taking a permit or refusing at once, and keeps the permit until the inner call's
/// future (deadline included) has finished.
#[derive(Debug, Clone)]
pub struct ShedLayer {
    /// Calls admitted and not yet answered (sent) or stopped.
    in_flight: Arc<AtomicUsize>,
    limit: usize,
    refusals: Arc<Refusals>,
    metrics: Option<Arc<crate::metrics::Metrics>>,
}

/// Refused calls, logged as one WARN summary per interval instead of a line each (a flood of
/// refusals under overload would otherwise drown the log).
#[derive(Debug)]
struct Refusals {
    since_last: std::sync::atomic::AtomicU64,
    last_log: std::sync::Mutex<Option<std::time::Instant>>,
}

/// Shortest time between two refusal summaries.
pub const REFUSAL_LOG_INTERVAL: Duration = Duration::from_secs(10);

impl Refusals {
    fn note(&self, limit: usize) {
        use std::sync::atomic::Ordering;
        let n = self.since_last.fetch_add(1, Ordering::Relaxed) + 1;
        // A poisoned lock only means a logging thread panicked; the timestamp is still usable.
        let mut last = self.last_log.lock().unwrap_or_else(|e| e.into_inner());
        let due = last.is_none_or(|t| t.elapsed() >= REFUSAL_LOG_INTERVAL);
        if due {
            let window = last.map_or(0.0, |t| t.elapsed().as_secs_f64());
            self.since_last.store(0, Ordering::Relaxed);
            *last = Some(std::time::Instant::now());
            tracing::warn!(
                refused = n,
                window_s = window,
                limit,
                "calls refused: the server is at its limit of calls in flight"
            );
        }
    }
}

impl ShedLayer {
    /// At most `max_in_flight` calls at once (at least 1).
    pub fn new(max_in_flight: usize) -> Self {
        let limit = max_in_flight.max(1);
        let refusals = Refusals { since_last: 0.into(), last_log: std::sync::Mutex::new(None) };
        Self { in_flight: Arc::default(), limit, refusals: Arc::new(refusals), metrics: None }
    }

    /// Refusals also counted in `metrics` (the `jetloop_shed_total` counter).
    pub fn with_metrics(mut self, metrics: Option<Arc<crate::metrics::Metrics>>) -> Self {
        self.metrics = metrics;
        self
    }
}

impl<S> tower::Layer<S> for ShedLayer {
    type Service = Shed<S>;

    fn layer(&self, inner: S) -> Shed<S> {
        Shed { inner, layer: self.clone() }
    }
}

/// The service [`ShedLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct Shed<S> {
    inner: S,
    layer: ShedLayer,
}

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

/// Time after a live stream's limit before a stream that has not ended is cut with its
/// connection (the handler ends it at the limit; this covers a client that stopped reading).
pub const STREAM_END_GRACE: Duration = Duration::from_secs(5);

/// When a live stream must end and why, for its handler (a request extension).
#[derive(Debug, Clone)]
pub struct StreamDeadline {
    /// The instant the stream ends.
    pub at: tokio::time::Instant,
    /// Why, for the status message.
    pub why: String,
}

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

fn refused(limit: usize) -> Status {
    let mut details = ErrorDetails::new();
    details.set_retry_info(Some(RETRY_AFTER));
    Status::with_error_details(
        tonic::Code::Unavailable,
        format!(
            "the server is running its limit of {limit} calls at once; retry after {} ms",
            RETRY_AFTER.as_millis()
        ),
        details,
    )
}

/// Least time an answer that is ready is given to be taken by its client.
pub const MIN_SEND_TIME: Duration = Duration::from_secs(1);

/// Wraps a ready answer so that the call's admission permit is held until the answer has left
/// the server (its body finished and at least as many bytes written to the connection since it
/// was ready as the body yielded: HTTP/2 may buffer a finished body that the client's window
/// does not let out), and so that an answer not out by `send_by` (the call's deadline, and at
/// least [`MIN_SEND_TIME`] after `ready_at`, when it was ready) closes the connection: a client
/// that never opens its HTTP/2 window cannot keep answers in server memory, nor their permits.
///
/// The permit is let go by the connection's own write that takes the answer's last byte out
/// (see [`crate::connections::ConnInfo::release_when_written`]), not by a task that has to be
/// scheduled first: under full load such tasks lag, and permits of answers already sent would
/// refuse new calls. A body dropped before its end (the call was reset) lets go at once.
fn send_guarded(
    resp: http::Response<Body>,
    admitted: Option<Admitted>,
    conn: Option<crate::connections::ConnInfo>,
    send_by: tokio::time::Instant,
    ready_at: tokio::time::Instant,
    method: Method,
) -> http::Response<Body> {
    use std::sync::atomic::Ordering::SeqCst;
    let at = send_by.max(ready_at + MIN_SEND_TIME);
    let written_at_ready = conn.as_ref().map_or(0, |c| c.written.load(SeqCst));
    // The time limit is kept by the connection's watching task (one per connection).
    let out = conn.as_ref().map(|c| c.watch_send(at, method.0.clone()));
    let pending = Pending { admitted, conn, written_at_ready, yielded: 0, out };
    let (parts, body) = resp.into_parts();
    http::Response::from_parts(
        parts,
        Body::new(Watched { inner: body, watch: SendGuard { pending: Some(pending) } }),
    )
}

/// What an answer's body holds until its last byte is out: the permit and the mark that
/// tells the connection's watching task the answer is out.
struct Pending {
    admitted: Option<Admitted>,
    conn: Option<crate::connections::ConnInfo>,
    written_at_ready: u64,
    yielded: u64,
    out: Option<crate::connections::OutOnDrop>,
}

/// Sees an answer's frames as they pass ([`Watched`]); dropped with the body.
pub(crate) trait FrameWatch: Send + Unpin + 'static {
    /// A frame the body yielded (data or trailers).
    fn frame(&mut self, frame: &http_body::Frame<bytes::Bytes>);
    /// The body ended without trailers.
    fn end(&mut self);
}

/// An answer's body passed through unchanged while its watch sees every frame.
pub(crate) struct Watched<W> {
    pub(crate) inner: Body,
    pub(crate) watch: W,
}

impl<W: FrameWatch> http_body::Body for Watched<W> {
    type Data = bytes::Bytes;
    type Error = Status;

    fn poll_frame(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<Option<Result<http_body::Frame<Self::Data>, Self::Error>>> {
        let r = Pin::new(&mut self.inner).poll_frame(cx);
        match &r {
            Poll::Ready(Some(Ok(f))) => self.watch.frame(f),
            Poll::Ready(None) => self.watch.end(),
            Poll::Ready(Some(Err(_))) | Poll::Pending => {}
        }
        r
    }

    fn is_end_stream(&self) -> bool {
        self.inner.is_end_stream()
    }

    fn size_hint(&self) -> http_body::SizeHint {
        self.inner.size_hint()
    }
}

/// Lets an answer's permit go once the answer has left (the watch of [`send_guarded`]).
struct SendGuard {
    pending: Option<Pending>,
}

impl SendGuard {
    /// The body ended (`sent`: its end was yielded, the bytes may still be queued) or was
    /// dropped before its end (nothing more will be sent).
    fn finish(&mut self, sent: bool) {
        let Some(p) = self.pending.take() else { return };
        match (&p.conn, sent) {
            (Some(c), true) => {
                let target = p.written_at_ready.saturating_add(p.yielded);
                c.clone().release_when_written(target, Box::new((p.admitted, p.out)));
            }
            _ => drop(p),
        }
    }
}

impl Drop for SendGuard {
    fn drop(&mut self) {
        self.finish(false);
    }
}

impl FrameWatch for SendGuard {
    fn frame(&mut self, f: &http_body::Frame<bytes::Bytes>) {
        if f.is_trailers() {
            self.finish(true);
        } else if let Some(p) = &mut self.pending {
            p.yielded += f.data_ref().map_or(0, |d| d.len() as u64);
        }
    }

    fn end(&mut self) {
        self.finish(true);
    }
}

/// Inbound errors are the caller's: tonic answers a request body that does not decode
/// (malformed protobuf, a truncated frame, a compressed flag without an encoding) with INTERNAL
/// and an over-limit message with OUT_OF_RANGE. This layer answers them INVALID_ARGUMENT (with a
/// `BadRequest` naming the request body) and RESOURCE_EXHAUSTED, the gRPC conventions for a
/// bad request and a size limit, so clients sort them correctly (retry nothing, fix the call).
#[derive(Debug, Clone, Copy, Default)]
pub struct InboundErrorsLayer;

impl<S> tower::Layer<S> for InboundErrorsLayer {
    type Service = InboundErrors<S>;

    fn layer(&self, inner: S) -> InboundErrors<S> {
        InboundErrors { inner }
    }
}

/// The service [`InboundErrorsLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct InboundErrors<S> {
    inner: S,
}

/// Messages tonic gives request bodies it cannot decode (tonic 0.14 `codec/decode.rs`,
/// tonic-prost `from_decode_error`).
const DECODE_FAILURES: [&str; 5] = [
    "failed to decode Protobuf message",
    "protocol error: received message with",
    "Error decompressing",
    "Unexpected EOF decoding stream",
    "Missing request message",
];
/// tonic's message for a request over the size limit.
const TOO_LARGE: &str = "Error, decoded message length too large";

/// The status a trailers-only error answer should carry instead, if any.
pub fn inbound_status(status: &Status) -> Option<Status> {
    let msg = status.message();
    match status.code() {
        tonic::Code::Internal if DECODE_FAILURES.iter().any(|p| msg.starts_with(p)) => {
            let mut details = ErrorDetails::new();
            details.add_bad_request_violation(
                "(request body)",
                format!("the request body is not a valid message of this RPC: {msg}"),
            );
            Some(Status::with_error_details(
                tonic::Code::InvalidArgument,
                format!("the request body could not be decoded: {msg}"),
                details,
            ))
        }
        tonic::Code::OutOfRange if msg.starts_with(TOO_LARGE) => {
            let mut details = ErrorDetails::new();
            details.add_bad_request_violation("(request body)", msg.to_string());
            Some(Status::with_error_details(
                tonic::Code::ResourceExhausted,
                format!("{msg}; send smaller messages (samples in blocks: ExtractTonesStream)"),
                details,
            ))
        }
        _ => None,
    }
}

/// The method path, the peer address and the request id of a call, for its log lines.
fn call_names<B>(req: &http::Request<B>) -> (Method, Peer, CallId) {
    let peer = req.extensions().get::<crate::connections::ConnInfo>().and_then(|c| c.remote_addr);
    let id = req.extensions().get::<CallId>().cloned().unwrap_or(CallId(http::HeaderValue::from_static("")));
    (Method(req.uri().clone()), Peer(peer), id)
}

/// A call's request id ([`RequestIdLayer`]), for log lines; empty outside that layer.
#[derive(Debug, Clone)]
struct CallId(http::HeaderValue);

impl std::fmt::Display for CallId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Ids are checked to be visible ASCII (or made here), so this is the whole id.
        f.write_str(self.0.to_str().unwrap_or(""))
    }
}

/// A call's method path, for log lines (the URI is shared, not copied, until printed).
#[derive(Debug, Clone)]
struct Method(http::Uri);

impl std::fmt::Display for Method {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.0.path())
    }
}

/// A call's peer address, for log lines.
#[derive(Debug, Clone, Copy)]
struct Peer(Option<std::net::SocketAddr>);

impl std::fmt::Display for Peer {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.0 {
            Some(a) => write!(f, "{a}"),
            None => f.write_str("unknown"),
        }
    }
}

/// The `tower::Service` shape every layer here shares (ready when the routes are, boxed
/// future); only `call` differs.
macro_rules! route_service {
    ($name:ident, |$self:ident, $req:ident| $call:block) => {
        impl<S, B> tower::Service<http::Request<B>> for $name<S>
        where
            S: tower::Service<http::Request<B>, Response = http::Response<Body>> + Send + 'static,
            S::Future: Send + 'static,
            S::Error: Send + 'static,
        {
            type Response = http::Response<Body>;
            type Error = S::Error;
            type Future = BoxFuture<Self::Response, Self::Error>;

            fn poll_ready(&mut self, cx: &mut Context<'_>) -> Poll<Result<(), Self::Error>> {
                self.inner.poll_ready(cx)
            }

            fn call(&mut $self, $req: http::Request<B>) -> Self::Future $call
        }
    };
}
pub(crate) use route_service;

/// The boxed future every layer answers with.
pub(crate) type BoxFuture<R, E> = Pin<Box<dyn Future<Output = Result<R, E>> + Send>>;

/// Bearer-token check: with tokens configured, every call but health checks must carry
/// `authorization: Bearer <token>` with one of them (compared in constant time), else it is
/// answered UNAUTHENTICATED at once. Without tokens it passes everything.
#[derive(Debug, Clone)]
pub struct AuthLayer {
    tokens: Arc<Vec<Vec<u8>>>,
}

impl AuthLayer {
    /// A check against `tokens` (empty: no check).
    pub fn new(tokens: &[String]) -> Self {
        Self { tokens: Arc::new(tokens.iter().map(|t| t.as_bytes().to_vec()).collect()) }
    }

    /// True when `header` (the authorization value) names one of the tokens. Every token is
    /// compared whole, whatever matched, so the time taken does not tell how much of a guess
    /// was right.
    fn accepts(&self, header: Option<&http::HeaderValue>) -> bool {
        let Some(given) = header.and_then(|h| h.as_bytes().strip_prefix(b"Bearer ")) else {
            return false;
        };
        self.tokens.iter().fold(false, |ok, t| ok | constant_time_eq(t, given))
    }
}

/// Equality of two byte strings in time that depends only on their lengths.
fn constant_time_eq(a: &[u8], b: &[u8]) -> bool {
    a.len() == b.len() && a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

impl<S> tower::Layer<S> for AuthLayer {
    type Service = Auth<S>;

    fn layer(&self, inner: S) -> Auth<S> {
        Auth { inner, layer: self.clone() }
    }
}

/// The service [`AuthLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct Auth<S> {
    inner: S,
    layer: AuthLayer,
}

/// Request ids: the caller's `x-request-id` (up to 64 visible ASCII characters) or a new one,
/// returned in the response metadata and written in the call's DEBUG line ("answered", with
/// the status and time), so a lab can match its DAQ log lines to the server's.
#[derive(Debug, Clone, Default)]
pub struct RequestIdLayer {
    next: Arc<std::sync::atomic::AtomicU64>,
}

/// The metadata key of request ids.
pub const REQUEST_ID: &str = "x-request-id";
/// [`REQUEST_ID`] as a header name (a constant: no allocation per call).
static REQUEST_ID_HEADER: http::HeaderName = http::HeaderName::from_static(REQUEST_ID);

impl RequestIdLayer {
    /// Ids generated from a per-process random start and a counter: unique within the process
    /// and unlikely to repeat across restarts.
    pub fn new() -> Self {
        let seed = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.as_nanos() as u64)
            .wrapping_mul(0x9E37_79B9_7F4A_7C15)
            ^ u64::from(std::process::id());
        Self { next: Arc::new(std::sync::atomic::AtomicU64::new(seed)) }
    }

    /// The caller's id (`given`) when it is usable (1 to 64 visible ASCII characters), else a
    /// new one; either way marked sensitive, so HPACK never indexes it.
    fn id_for(&self, given: Option<&http::HeaderValue>) -> http::HeaderValue {
        let ok = |v: &&http::HeaderValue| {
            let b = v.as_bytes();
            !b.is_empty() && b.len() <= 64 && b.iter().all(|c| c.is_ascii_graphic())
        };
        let mut id = match given.filter(ok) {
            Some(v) => v.clone(),
            None => {
                let n = self.next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                // Mixed so consecutive ids do not look alike (splitmix64 finalizer).
                let mut z = n.wrapping_add(0x9E37_79B9_7F4A_7C15);
                z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
                z ^= z >> 31;
                let mut hex = [0u8; 16];
                for (i, h) in hex.iter_mut().enumerate() {
                    *h = b"0123456789abcdef"[((z >> (60 - 4 * i)) & 0xf) as usize];
                }
                // Owned by a shared buffer, so the copy kept for the log lines costs no
                // allocation.
                http::HeaderValue::from_maybe_shared(bytes::Bytes::from_owner(hex))
                    .unwrap_or(http::HeaderValue::from_static("0"))
            }
        };
        // Every id is new, so HPACK must not put it in the connection's header table (where
        // it would only push out entries that do repeat, and cost a table search per answer).
        id.set_sensitive(true);
        id
    }
}

impl<S> tower::Layer<S> for RequestIdLayer {
    type Service = RequestId<S>;

    fn layer(&self, inner: S) -> RequestId<S> {
        RequestId { inner, layer: self.clone() }
    }
}

/// The service [`RequestIdLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct RequestId<S> {
    inner: S,
    layer: RequestIdLayer,
}

route_service!(RequestId, |self, req| {
    let id = self.layer.id_for(req.headers().get(&REQUEST_ID_HEADER));
    let mut req = req;
    // For the lines of the layers inside (a failed or expired call names its id).
    req.extensions_mut().insert(CallId(id.clone()));
    let fut = self.inner.call(req);
    // The time only when the line that shows it is written.
    let started = tracing::enabled!(tracing::Level::DEBUG).then(std::time::Instant::now);
    Box::pin(async move {
        let mut resp = fut.await?;
        // One line per call at DEBUG (RUST_LOG=jetloop_server=debug), in the call's span.
        if let Some(started) = started {
            let status =
                resp.headers().get("grpc-status").and_then(|v| v.to_str().ok()).unwrap_or("0 or in trailers");
            tracing::debug!(
                request_id = id.to_str().unwrap_or(""),
                grpc_status = status,
                elapsed_ms = started.elapsed().as_secs_f64() * 1e3,
                "answered"
            );
        }
        resp.headers_mut().insert(REQUEST_ID_HEADER.clone(), id);
        Ok(resp)
    })
});

/// Auth answers with the inner call's own future (no box of its own: this layer runs on every
/// call) or, for a refused call, a ready answer.
impl<S, B> tower::Service<http::Request<B>> for Auth<S>
where
    S: tower::Service<http::Request<B>, Response = http::Response<Body>>,
{
    type Response = http::Response<Body>;
    type Error = S::Error;
    type Future =
        futures_util::future::Either<std::future::Ready<Result<http::Response<Body>, S::Error>>, S::Future>;

    fn poll_ready(&mut self, cx: &mut Context<'_>) -> Poll<Result<(), Self::Error>> {
        self.inner.poll_ready(cx)
    }

    fn call(&mut self, req: http::Request<B>) -> Self::Future {
        use futures_util::future::Either;
        let open = self.layer.tokens.is_empty() || req.uri().path().starts_with(HEALTH);
        if !open && !self.layer.accepts(req.headers().get(http::header::AUTHORIZATION)) {
            let refused = tonic::Status::unauthenticated(
                "this server requires a bearer token: send `authorization: Bearer <token>` with a token it was given",
            );
            return Either::Left(std::future::ready(Ok(refused.into_http())));
        }
        Either::Right(self.inner.call(req))
    }
}

route_service!(Shed, |self, req| {
    let mut req = req;
    let permit = if req.uri().path().starts_with(HEALTH) {
        None
    } else {
        match try_admit(&self.layer.in_flight, self.layer.limit) {
            Some(p) => {
                // Shared with the deadline layer, which keeps it while stopped work winds down.
                let p = Admitted { _permit: Arc::new(p) };
                req.extensions_mut().insert(p.clone());
                Some(p)
            }
            None => {
                self.layer.refusals.note(self.layer.limit);
                if let Some(m) = &self.layer.metrics {
                    m.note_shed();
                }
                return Box::pin(std::future::ready(Ok(refused(self.layer.limit).into_http())));
            }
        }
    };
    let fut = self.inner.call(req);
    Box::pin(async move {
        let out = fut.await;
        drop(permit);
        out
    })
});

route_service!(Deadline, |self, req| {
    let mut req = req;
    let live = LIVE_STREAMS.contains(&req.uri().path());
    let (limit, why) = time_limit(req.headers(), if live { self.stream_timeout } else { self.timeout });
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
    req.extensions_mut()
        .insert(crate::service::Work { cancel: cancel.clone(), computing: self.computing.clone() });
    let admitted = req.extensions().get::<Admitted>().cloned();
    let conn = crate::connections::ConnInfo::of(&req);
    let (method, peer, id) = call_names(&req);
    let started = tokio::time::Instant::now();
    let fut = self.inner.call(req);
    Box::pin(async move {
        // Dropped with this future (the caller went away): the work stops too.
        let guard = CancelOnDrop(cancel.clone());
        let mut fut = Box::pin(fut);
        // Most calls (physics answered on the reactor) are done at their first poll: they
        // need no timer at all.
        let first = std::future::poll_fn(|cx| Poll::Ready(fut.as_mut().poll(cx))).await;
        let (outcome, ready_at) = match first {
            // Ready at once: no need to read the clock again.
            Poll::Ready(r) => (Ok(r), started),
            Poll::Pending => {
                let r = tokio::time::timeout(limit, &mut fut).await;
                (r, tokio::time::Instant::now())
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
                tokio::spawn(async move {
                    let _ = tokio::time::timeout(STOP_GRACE, fut).await;
                    drop(admitted);
                    drop(guard);
                });
                Ok(Status::deadline_exceeded(format!("stopped: {why}")).into_http())
            }
        }
    })
});

route_service!(InboundErrors, |self, req| {
    let (method, peer, id) = call_names(&req);
    let fut = self.inner.call(req);
    Box::pin(async move {
        let resp = fut.await?;
        // Only trailers-only answers (the status in the headers) carry these errors, and
        // every error answer of this server is one (no RPC streams its answer).
        let Some(status) = Status::from_header_map(resp.headers()) else {
            return Ok(resp);
        };
        let (status, resp) = match inbound_status(&status) {
            Some(fixed) => (fixed.clone(), fixed.into_http()),
            None => (status, resp),
        };
        // CANCELLED is work stopped after its deadline answered (logged there as expired).
        if !matches!(status.code(), tonic::Code::Ok | tonic::Code::Cancelled) {
            // Once per failed call, at info: the caller's errors are routine, the log is
            // for tracing who sent what.
            tracing::info!(
                %method,
                peer = %peer,
                request_id = %id,
                code = ?status.code(),
                "call failed: {}",
                status.message()
            );
        }
        Ok(resp)
    })
});

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn admission_takes_at_most_the_limit_and_a_place_returns_with_its_last_holder() {
        let in_flight = Arc::new(AtomicUsize::new(0));
        let a = try_admit(&in_flight, 2).expect("first place");
        let b = try_admit(&in_flight, 2).expect("second place");
        assert!(try_admit(&in_flight, 2).is_none(), "a third call is refused at a limit of 2");
        drop(a);
        let c = Admitted { _permit: Arc::new(try_admit(&in_flight, 2).expect("a place came back")) };
        let c2 = c.clone(); // the deadline layer's share
        drop(c);
        assert!(try_admit(&in_flight, 2).is_none(), "held by the remaining share");
        drop(c2);
        drop(b);
        assert_eq!(in_flight.load(Ordering::SeqCst), 0);
    }

    #[test]
    fn request_ids_are_kept_or_made_and_never_enter_the_hpack_table() {
        let layer = RequestIdLayer::new();
        let given = http::HeaderValue::from_static("rig-3-run-17-point-2");
        let kept = layer.id_for(Some(&given));
        assert_eq!(kept.as_bytes(), given.as_bytes());
        // RFC 7541 section 6.2.3: a never-indexed literal; h2 sends sensitive values so.
        assert!(kept.is_sensitive());
        let made = layer.id_for(None);
        assert_eq!(made.len(), 16);
        assert!(made.as_bytes().iter().all(u8::is_ascii_hexdigit));
        assert!(made.is_sensitive());
        assert_ne!(made, layer.id_for(None));
        // Over 64 characters, or not visible ASCII: replaced by a new one.
        let long = http::HeaderValue::from_str(&"x".repeat(65)).expect("ascii");
        assert_eq!(layer.id_for(Some(&long)).len(), 16);
        assert_eq!(layer.id_for(Some(&http::HeaderValue::from_static("a b"))).len(), 16);
    }

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
