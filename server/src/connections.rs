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
        let info = ConnInfo {
            remote_addr: inner.peer_addr().ok(),
            kill: ConnKill::default(),
            written: Arc::default(),
            wrote: Arc::default(),
        };
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

/// What every call learns about its connection (in its request extensions).
#[derive(Debug, Clone)]
pub struct ConnInfo {
    /// The peer's address.
    pub remote_addr: Option<std::net::SocketAddr>,
    /// Closes the connection.
    pub kill: ConnKill,
    /// Bytes written to the connection so far.
    pub written: Arc<std::sync::atomic::AtomicU64>,
    /// Woken after every write, for tasks waiting until an answer has left.
    pub wrote: Arc<tokio::sync::Notify>,
}

impl ConnInfo {
    /// The connection of a call, whether it came over plain TCP or TLS (the TLS layer wraps
    /// the connection's information in its own).
    pub fn of<B>(req: &tonic::codegen::http::Request<B>) -> Option<ConnInfo> {
        let ext = req.extensions();
        ext.get::<ConnInfo>().cloned().or_else(|| {
            ext.get::<tonic::transport::server::TlsConnectInfo<ConnInfo>>().map(|t| t.get_ref().clone())
        })
    }
}

/// A switch that closes a connection: set from any task, the connection fails its next read
/// or write (its task is woken for that), and the server drops it with every stream on it.
#[derive(Debug, Clone, Default)]
pub struct ConnKill(Arc<KillState>);

#[derive(Debug, Default)]
struct KillState {
    set: AtomicBool,
    waker: std::sync::Mutex<Option<std::task::Waker>>,
}

impl ConnKill {
    /// Closes the connection.
    pub fn kill(&self) {
        self.0.set.store(true, Ordering::SeqCst);
        // A poisoned lock only means a connection task panicked; the waker is still usable.
        if let Some(w) = self.0.waker.lock().unwrap_or_else(|e| e.into_inner()).take() {
            w.wake();
        }
    }

    /// True once killed; otherwise remembers the connection task's waker.
    fn check(&self, cx: &Context<'_>) -> bool {
        if self.0.set.load(Ordering::SeqCst) {
            return true;
        }
        *self.0.waker.lock().unwrap_or_else(|e| e.into_inner()) = Some(cx.waker().clone());
        self.0.set.load(Ordering::SeqCst)
    }
}

fn killed_error() -> io::Error {
    io::Error::new(io::ErrorKind::ConnectionAborted, "connection closed: an answer was not taken in time")
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
            self.info.written.fetch_add(n as u64, Ordering::SeqCst);
            self.info.wrote.notify_waiters();
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
            self.info.written.fetch_add(n as u64, Ordering::SeqCst);
            self.info.wrote.notify_waiters();
        }
        r
    }

    fn is_write_vectored(&self) -> bool {
        self.inner.is_write_vectored()
    }
}
