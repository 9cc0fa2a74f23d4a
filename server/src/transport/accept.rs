//! The accept loop: a cap on open connections (at the cap a new connection takes the slot of
//! the oldest one that has not spoken), a handshake timeout for connections that never send a
//! byte, and back-off on accept errors.

use std::collections::VecDeque;
use std::future::Future;
use std::io;
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex, Weak};
use std::task::{Context, Poll};
use std::time::{Duration, Instant};
use tokio::net::TcpListener;
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

use super::conn::Conn;
use super::send_watch::ConnKill;

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
