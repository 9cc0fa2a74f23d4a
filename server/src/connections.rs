//! Accepting connections without letting careless or hostile clients take the server down:
//! - **a cap on open connections**: at the cap a new connection takes the slot of the oldest
//!   connection that has not sent a byte yet (that one is closed), so a flood of silent
//!   connections cannot keep health checks and real calls out; when every connection has
//!   spoken, the new one is closed at once (a summary is logged once per interval);
//! - **a handshake timeout**: a connection that has sent no byte after it is closed, so bare
//!   TCP connections cannot hold slots;
//! - **back-off on accept errors** (e.g. the process is out of file descriptors): the accept
//!   loop waits and logs instead of spinning a core.
//!
//! HTTP/2 keepalive pings (set on the server builder) close connections whose peer is gone.

use std::collections::VecDeque;
use std::future::Future;
use std::io;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, Weak};
use std::task::{Context, Poll};
use std::time::{Duration, Instant};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::{OwnedSemaphorePermit, Semaphore};
use tonic::transport::server::Connected;

/// How connections are accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ConnectionLimits {
    /// Most connections open at once.
    pub max_connections: usize,
    /// Time a new connection has to send its first byte.
    pub handshake_timeout: Duration,
}

/// Wait after an accept error before trying again.
pub const ACCEPT_BACKOFF: Duration = Duration::from_millis(50);
/// Shortest time between two log summaries of refused connections or accept errors.
pub const LOG_INTERVAL: Duration = Duration::from_secs(10);

/// File descriptors kept free beside the connections (listener, logs, blocking work).
const FD_RESERVE: usize = 64;

/// The default cap: 1024, or the process's open-file soft limit less a reserve where that is
/// lower (Linux `/proc/self/limits`).
pub fn default_max_connections() -> usize {
    let soft = std::fs::read_to_string("/proc/self/limits").ok().and_then(|l| {
        l.lines().find(|x| x.starts_with("Max open files"))?.split_whitespace().nth(3)?.parse::<usize>().ok()
    });
    match soft {
        Some(n) => n.saturating_sub(FD_RESERVE).clamp(16, 1024),
        None => 1024,
    }
}

/// The stream of accepted connections the server reads, applying `limits`. It ends, and the
/// listening socket closes (new connections are refused), when `stop` resolves or the stream
/// is dropped.
pub fn incoming(
    listener: TcpListener,
    limits: ConnectionLimits,
    stop: impl std::future::Future<Output = ()> + Send + 'static,
) -> Incoming {
    Incoming {
        listener: Some(listener),
        slots: Arc::new(Semaphore::new(limits.max_connections.clamp(1, Semaphore::MAX_PERMITS))),
        limits,
        refused: Summary::default(),
        evicted: Summary::default(),
        silent: VecDeque::new(),
        errors: Summary::default(),
        backoff: None,
        stop: Box::pin(stop),
    }
}

/// Accepted connections under the cap (see [`incoming`]).
pub struct Incoming {
    listener: Option<TcpListener>,
    slots: Arc<Semaphore>,
    limits: ConnectionLimits,
    refused: Summary,
    evicted: Summary,
    silent: VecDeque<Silent>,
    errors: Summary,
    backoff: Option<Pin<Box<tokio::time::Sleep>>>,
    stop: Pin<Box<dyn std::future::Future<Output = ()> + Send>>,
}

impl std::fmt::Debug for Incoming {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Incoming").field("limits", &self.limits).finish_non_exhaustive()
    }
}

impl tokio_stream::Stream for Incoming {
    type Item = Result<Conn, io::Error>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        let this = &mut *self;
        if this.listener.is_some() && this.stop.as_mut().poll(cx).is_ready() {
            this.listener = None; // closes the listening socket now
                                  // Connections that never spoke have no HTTP/2 session to drain: close them now
                                  // rather than let them hold the shutdown until their handshake timeout.
            for s in this.silent.drain(..) {
                if s.spoke.upgrade().is_some_and(|b| !b.load(Ordering::SeqCst)) {
                    s.kill.kill();
                }
            }
        }
        let Some(listener) = this.listener.as_ref() else {
            return Poll::Ready(None);
        };
        if let Some(b) = this.backoff.as_mut() {
            if b.as_mut().poll(cx).is_pending() {
                return Poll::Pending;
            }
            this.backoff = None;
        }
        loop {
            match listener.poll_accept(cx) {
                Poll::Pending => return Poll::Pending,
                Poll::Ready(Ok((stream, _))) => {
                    let slot = match this.slots.clone().try_acquire_owned() {
                        Ok(p) => Some(p),
                        Err(_) => evict_silent(&mut this.silent, &mut this.evicted),
                    };
                    let Some(slot) = slot else {
                        drop(stream);
                        let max = this.limits.max_connections;
                        this.refused.note(|n, s| {
                            tracing::warn!(
                                refused = n,
                                window_s = s,
                                max,
                                "connections refused: the server has its limit of open connections"
                            );
                        });
                        continue;
                    };
                    // TCP_NODELAY: without it Nagle's algorithm and delayed ACKs stall
                    // multi-megabyte uploads for tens of milliseconds.
                    let _ = stream.set_nodelay(true);
                    let conn = Conn::new(stream, slot, this.limits.handshake_timeout);
                    remember(&mut this.silent, this.limits.max_connections, &conn);
                    return Poll::Ready(Some(Ok(conn)));
                }
                Poll::Ready(Err(e)) => {
                    // Out of file descriptors and the like: wait instead of spinning.
                    this.errors.note(|n, s| {
                        tracing::warn!(errors = n, window_s = s, "accept failed: {e}; backing off")
                    });
                    let mut b = Box::pin(tokio::time::sleep(ACCEPT_BACKOFF));
                    if b.as_mut().poll(cx).is_pending() {
                        this.backoff = Some(b);
                        return Poll::Pending;
                    }
                }
            }
        }
    }
}

/// What the accept loop keeps of a connection that may still be silent.
#[derive(Debug)]
struct Silent {
    spoke: Weak<AtomicBool>,
    slot: Weak<Mutex<Option<OwnedSemaphorePermit>>>,
    kill: ConnKill,
}

/// Closes every connection that has not spoken: it has no HTTP/2 session to drain, so at
/// shutdown it would otherwise hold the server until its handshake timeout.
fn close_silent(silent: &mut VecDeque<Silent>) {
    for s in silent.drain(..) {
        if s.spoke.upgrade().is_some_and(|b| !b.load(Ordering::SeqCst)) {
            s.kill.kill();
        }
    }
}

impl Drop for Incoming {
    /// The server stops accepting (shutdown): silent connections are closed at once.
    fn drop(&mut self) {
        close_silent(&mut self.silent);
    }
}

/// Notes a new connection as silent until it speaks; forgets connections that spoke or closed
/// (bounded: never more entries than twice the cap, plus one).
fn remember(silent: &mut VecDeque<Silent>, max: usize, c: &Conn) {
    if silent.len() >= 2 * max {
        silent.retain(|s| s.spoke.upgrade().is_some_and(|b| !b.load(Ordering::SeqCst)));
    }
    silent.push_back(Silent {
        spoke: Arc::downgrade(&c.spoke),
        slot: Arc::downgrade(&c.slot),
        kill: c.info.kill.clone(),
    });
}

/// At the cap: closes the oldest connection that has not spoken and hands its slot over.
fn evict_silent(silent: &mut VecDeque<Silent>, evicted: &mut Summary) -> Option<OwnedSemaphorePermit> {
    while let Some(s) = silent.pop_front() {
        let (Some(spoke), Some(slot)) = (s.spoke.upgrade(), s.slot.upgrade()) else { continue };
        if spoke.load(Ordering::SeqCst) {
            continue;
        }
        // A poisoned lock only means a connection task panicked; the permit is still valid.
        let permit = slot.lock().unwrap_or_else(|e| e.into_inner()).take();
        if let Some(p) = permit {
            s.kill.kill();
            evicted.note(|n, w| {
                tracing::info!(
                    evicted = n,
                    window_s = w,
                    "silent connections closed to make room at the connection limit"
                )
            });
            return Some(p);
        }
    }
    None
}

/// Events counted and logged at most once per [`LOG_INTERVAL`].
#[derive(Debug, Default)]
struct Summary {
    count: u64,
    last: Option<Instant>,
}

impl Summary {
    fn note(&mut self, log: impl FnOnce(u64, f64)) {
        self.count += 1;
        if self.last.is_none_or(|t| t.elapsed() >= LOG_INTERVAL) {
            log(self.count, self.last.map_or(0.0, |t| t.elapsed().as_secs_f64()));
            self.count = 0;
            self.last = Some(Instant::now());
        }
    }
}

/// An accepted connection: its slot under the cap is held until it closes, and it is closed
/// if no byte arrives within the handshake timeout, or when a call on it sets its
/// [`ConnKill`] (an answer its client would not take within the call's time).
#[derive(Debug)]
pub struct Conn {
    inner: TcpStream,
    /// The slot under the cap (taken over by a newer connection if this one is evicted while
    /// silent).
    slot: Arc<Mutex<Option<OwnedSemaphorePermit>>>,
    /// Set at the first byte received.
    spoke: Arc<AtomicBool>,
    handshake: Option<Pin<Box<tokio::time::Sleep>>>,
    info: ConnInfo,
}

impl Conn {
    fn new(inner: TcpStream, slot: OwnedSemaphorePermit, timeout: Duration) -> Self {
        let info = ConnInfo(Arc::new(ConnShared {
            remote_addr: inner.peer_addr().ok(),
            kill: ConnKill::default(),
            written: std::sync::atomic::AtomicU64::default(),
            pending: PendingReleases::default(),
            sends: SendWatch::default(),
        }));
        Self {
            inner,
            slot: Arc::new(Mutex::new(Some(slot))),
            spoke: Arc::default(),
            handshake: Some(Box::pin(tokio::time::sleep(timeout))),
            info,
        }
    }

    fn killed(&self, cx: &Context<'_>) -> bool {
        self.info.kill.check(cx)
    }
}

/// What every call learns about its connection (in its request extensions): one shared
/// record per connection, so handing it to a call costs one reference count, not one per field.
#[derive(Debug, Clone)]
pub struct ConnInfo(Arc<ConnShared>);

impl std::ops::Deref for ConnInfo {
    type Target = ConnShared;

    fn deref(&self) -> &ConnShared {
        &self.0
    }
}

/// The fields of [`ConnInfo`].
#[derive(Debug)]
pub struct ConnShared {
    /// The peer's address.
    pub remote_addr: Option<std::net::SocketAddr>,
    /// Closes the connection.
    pub kill: ConnKill,
    /// Bytes written to the connection so far.
    pub written: std::sync::atomic::AtomicU64,
    /// What answers hold until the connection has written their last byte.
    pending: PendingReleases,
    /// Answers being sent, each with the time by which it must be out.
    sends: SendWatch,
}

/// One answer being sent: out (its permit let go) or not, and by when it must be.
#[derive(Debug)]
pub struct Sending {
    out: AtomicBool,
    by: tokio::time::Instant,
    /// The call's URI, for the log line when it is late (shared, not copied).
    uri: tonic::codegen::http::Uri,
}

/// Marks its answer out when dropped (held with the answer's permit, so both go together).
#[derive(Debug)]
pub struct OutOnDrop(Arc<Sending>);

impl Drop for OutOnDrop {
    fn drop(&mut self) {
        self.0.out.store(true, Ordering::SeqCst);
    }
}

/// The answers of one connection being sent, watched by one task per connection (started at
/// the first answer) that closes the connection when one is not out in time: a task and a
/// timer per connection, not per call.
#[derive(Debug, Default)]
struct SendWatch {
    list: Mutex<Vec<Arc<Sending>>>,
    /// The watching task sleeps until this time (nanoseconds after `epoch`; 0: not sleeping
    /// on a time), so an answer due sooner wakes it.
    until: std::sync::atomic::AtomicU64,
    wake: tokio::sync::Notify,
    started: AtomicBool,
    closed: AtomicBool,
    /// List length at which answers already out are dropped (at least [`PRUNE_AT`]).
    prune_at: std::sync::atomic::AtomicUsize,
}

/// Least list length at which `watch_send` drops answers already out before adding one.
const PRUNE_AT: usize = 64;

fn nanos(t: tokio::time::Instant) -> u64 {
    let epoch = *SEND_EPOCH.get_or_init(tokio::time::Instant::now);
    u64::try_from(t.saturating_duration_since(epoch).as_nanos()).unwrap_or(u64::MAX).max(1)
}

static SEND_EPOCH: std::sync::OnceLock<tokio::time::Instant> = std::sync::OnceLock::new();

/// Things held until the connection's written byte count reaches a target: dropped, in
/// the write that reaches it.
struct PendingReleases {
    /// The lowest target in `list` (`u64::MAX` when it is empty), read without the lock on
    /// every write; changed only under the lock.
    next: std::sync::atomic::AtomicU64,
    list: Mutex<Vec<(u64, Box<dyn Send>)>>,
}

impl Default for PendingReleases {
    fn default() -> Self {
        Self { next: u64::MAX.into(), list: Mutex::default() }
    }
}

impl std::fmt::Debug for PendingReleases {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "PendingReleases(next {})", self.next.load(Ordering::Relaxed))
    }
}

impl PendingReleases {
    /// Drops every entry whose target `written` has reached (a write that reaches none takes
    /// no lock).
    fn release_up_to(&self, written: u64) {
        if written < self.next.load(Ordering::SeqCst) {
            return;
        }
        let done: Vec<Box<dyn Send>> = {
            let mut list = self.list.lock().unwrap_or_else(|e| e.into_inner());
            let mut out = Vec::new();
            let mut next = u64::MAX;
            let mut i = 0;
            while i < list.len() {
                if list[i].0 <= written {
                    out.push(list.swap_remove(i).1);
                } else {
                    next = next.min(list[i].0);
                    i += 1;
                }
            }
            self.next.store(next, Ordering::SeqCst);
            out
        };
        // Dropped outside the lock (a permit's release may wake other tasks).
        drop(done);
    }

    /// Holds `held` until `target` is reached.
    fn push(&self, target: u64, held: Box<dyn Send>) {
        let mut list = self.list.lock().unwrap_or_else(|e| e.into_inner());
        list.push((target, held));
        self.next.fetch_min(target, Ordering::SeqCst);
    }
}

impl ConnInfo {
    /// Keeps `held` until `target` bytes have been written to the connection in all, then
    /// drops it in the write that gets there (at once if already there).
    pub fn release_when_written(self, target: u64, held: Box<dyn Send>) {
        if self.written.load(Ordering::SeqCst) >= target {
            return drop(held);
        }
        self.pending.push(target, held);
        // A write between the check above and the push has not seen this entry.
        self.pending.release_up_to(self.written.load(Ordering::SeqCst));
    }

    /// Drops everything held for this connection (it is being closed).
    pub fn release_all(&self) {
        self.pending.release_up_to(u64::MAX);
    }

    /// Watches the answer of the call to `uri`, which must be out by `by`: past it, the
    /// connection's watching task logs it and closes the connection. The returned guard marks
    /// the answer out when dropped.
    pub fn watch_send(&self, by: tokio::time::Instant, uri: tonic::codegen::http::Uri) -> OutOnDrop {
        let sending = Arc::new(Sending { out: AtomicBool::new(false), by, uri });
        let w = &self.sends;
        {
            let mut list = w.list.lock().unwrap_or_else(|e| e.into_inner());
            let prune_at = w.prune_at.load(Ordering::Relaxed).max(PRUNE_AT);
            if list.len() >= prune_at {
                list.retain(|s| !s.out.load(Ordering::SeqCst));
                // Many answers genuinely in flight: prune again only when the list doubles,
                // so the cost per call stays constant.
                w.prune_at.store(2 * list.len(), Ordering::Relaxed);
            }
            list.push(sending.clone());
        }
        if !w.started.swap(true, Ordering::SeqCst) {
            let info = self.clone();
            tokio::spawn(async move { info.watch_sends().await });
        } else {
            let until = w.until.load(Ordering::SeqCst);
            if until == 0 || nanos(by) < until {
                w.wake.notify_one();
            }
        }
        OutOnDrop(sending)
    }

    /// The connection's watching task: sleeps until the earliest answer is due, closes the
    /// connection if it is not out by then, ends when the connection closes.
    async fn watch_sends(self) {
        let w = &self.sends;
        loop {
            if w.closed.load(Ordering::SeqCst) {
                return;
            }
            let next = {
                let mut list = w.list.lock().unwrap_or_else(|e| e.into_inner());
                list.retain(|s| !s.out.load(Ordering::SeqCst));
                let now = tokio::time::Instant::now();
                if let Some(late) = list.iter().find(|s| s.by <= now) {
                    let peer = self.remote_addr.map_or_else(|| "unknown".to_string(), |a| a.to_string());
                    tracing::warn!(
                        method = late.uri.path(),
                        peer = %peer,
                        "answer not taken in time: closing the connection"
                    );
                    drop(list);
                    self.kill.kill();
                    self.release_all();
                    return;
                }
                list.iter().map(|s| s.by).min()
            };
            match next {
                Some(at) => {
                    w.until.store(nanos(at), Ordering::SeqCst);
                    tokio::select! {
                        () = tokio::time::sleep_until(at) => {}
                        () = w.wake.notified() => {}
                    }
                }
                None => {
                    w.until.store(0, Ordering::SeqCst);
                    w.wake.notified().await;
                }
            }
        }
    }

    /// The connection of a call (over TLS too: tonic puts the inner connection's information
    /// in the request beside its own TLS wrapper, as the TLS logging test checks).
    pub fn of<B>(req: &tonic::codegen::http::Request<B>) -> Option<ConnInfo> {
        let ext = req.extensions();
        ext.get::<ConnInfo>().cloned()
    }
}

/// A switch that closes a connection: set from any task, the connection fails its next read
/// or write (its task is woken for that), and the server drops it with every stream on it.
#[derive(Debug, Clone, Default)]
pub struct ConnKill(Arc<KillState>);

#[derive(Debug, Default)]
struct KillState {
    set: AtomicBool,
    /// The connection task's waker (lock-free, and not cloned again while it is the same:
    /// this is checked on every read and write).
    waker: atomic_waker::AtomicWaker,
}

impl ConnKill {
    /// Closes the connection.
    pub fn kill(&self) {
        self.0.set.store(true, Ordering::SeqCst);
        self.0.waker.wake();
    }

    /// True once killed; otherwise remembers the connection task's waker.
    fn check(&self, cx: &Context<'_>) -> bool {
        if self.0.set.load(Ordering::SeqCst) {
            return true;
        }
        self.0.waker.register(cx.waker());
        self.0.set.load(Ordering::SeqCst)
    }
}

fn killed_error() -> io::Error {
    io::Error::new(io::ErrorKind::ConnectionAborted, "connection closed: an answer was not taken in time")
}

impl Drop for Conn {
    /// Answers still queued on a closed connection will never leave: their permits go now,
    /// and the connection's watching task ends.
    fn drop(&mut self) {
        self.info.release_all();
        self.info.sends.closed.store(true, Ordering::SeqCst);
        self.info.sends.wake.notify_one();
    }
}

impl Connected for Conn {
    type ConnectInfo = ConnInfo;

    fn connect_info(&self) -> ConnInfo {
        self.info.clone()
    }
}

impl AsyncRead for Conn {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        if self.killed(cx) {
            return Poll::Ready(Err(killed_error()));
        }
        let before = buf.filled().len();
        let r = Pin::new(&mut self.inner).poll_read(cx, buf);
        if matches!(r, Poll::Ready(Ok(()))) && buf.filled().len() > before {
            if self.handshake.take().is_some() {
                self.spoke.store(true, Ordering::SeqCst); // the client has spoken
            }
            return r;
        }
        if let (Poll::Pending, Some(timer)) = (&r, self.handshake.as_mut()) {
            if std::future::Future::poll(timer.as_mut(), cx).is_ready() {
                return Poll::Ready(Err(io::Error::new(
                    io::ErrorKind::TimedOut,
                    "no byte within the handshake timeout: connection closed",
                )));
            }
        }
        r
    }
}

impl AsyncWrite for Conn {
    fn poll_write(mut self: Pin<&mut Self>, cx: &mut Context<'_>, buf: &[u8]) -> Poll<io::Result<usize>> {
        if self.killed(cx) {
            return Poll::Ready(Err(killed_error()));
        }
        let r = Pin::new(&mut self.inner).poll_write(cx, buf);
        if let Poll::Ready(Ok(n)) = r {
            let now = self.info.written.fetch_add(n as u64, Ordering::SeqCst) + n as u64;
            self.info.pending.release_up_to(now);
        }
        r
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_flush(cx)
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_shutdown(cx)
    }

    fn poll_write_vectored(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        bufs: &[io::IoSlice<'_>],
    ) -> Poll<io::Result<usize>> {
        if self.killed(cx) {
            return Poll::Ready(Err(killed_error()));
        }
        let r = Pin::new(&mut self.inner).poll_write_vectored(cx, bufs);
        if let Poll::Ready(Ok(n)) = r {
            let now = self.info.written.fetch_add(n as u64, Ordering::SeqCst) + n as u64;
            self.info.pending.release_up_to(now);
        }
        r
    }

    /// Reported as not vectored, on purpose: h2 then copies DATA payloads under 1 KiB into
    /// its write buffer and sends many answers in one write, where with vectored writes it
    /// sends every payload over 256 bytes (a physics answer with its provenance is about
    /// 330) in a write of its own. Measured on loopback: about one write per answer against
    /// two, and a fifth more calls per second. Large payloads (spectra) are still passed
    /// through without copying.
    fn is_write_vectored(&self) -> bool {
        false
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Sets its flag when dropped.
    struct Mark(Arc<AtomicBool>);

    impl Drop for Mark {
        fn drop(&mut self) {
            self.0.store(true, Ordering::SeqCst);
        }
    }

    fn mark() -> (Arc<AtomicBool>, Box<dyn Send>) {
        let f = Arc::new(AtomicBool::new(false));
        (f.clone(), Box::new(Mark(f)))
    }

    #[test]
    fn held_things_go_in_the_write_that_reaches_their_target_and_not_before() {
        let p = PendingReleases::default();
        let (late, late_box) = mark();
        let (soon, soon_box) = mark();
        p.push(100, late_box);
        p.push(50, soon_box);
        assert_eq!(p.next.load(Ordering::SeqCst), 50);
        p.release_up_to(49);
        assert!(!soon.load(Ordering::SeqCst) && !late.load(Ordering::SeqCst));
        p.release_up_to(50);
        assert!(soon.load(Ordering::SeqCst) && !late.load(Ordering::SeqCst));
        assert_eq!(p.next.load(Ordering::SeqCst), 100);
        p.release_up_to(u64::MAX);
        assert!(late.load(Ordering::SeqCst));
        assert_eq!(p.next.load(Ordering::SeqCst), u64::MAX);
    }
}
