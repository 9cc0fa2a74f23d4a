//! Watching answers leave a connection: what an answer holds (its admission permit) is let go
//! in the write that takes its last byte out, and one task per connection closes the
//! connection when an answer is not out by its time.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};

/// What every call learns about its connection (in its request extensions): one shared
/// record per connection, so handing it to a call costs one reference count, not one per field.
#[derive(Debug, Clone)]
pub struct ConnInfo(pub(crate) Arc<ConnShared>);

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
    pub(crate) pending: PendingReleases,
    /// Answers being sent, each with the time by which it must be out.
    pub(crate) sends: SendWatch,
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
pub(crate) struct SendWatch {
    list: Mutex<Vec<Arc<Sending>>>,
    /// The watching task sleeps until this time (nanoseconds after `epoch`; 0: not sleeping
    /// on a time), so an answer due sooner wakes it.
    until: std::sync::atomic::AtomicU64,
    pub(crate) wake: tokio::sync::Notify,
    started: AtomicBool,
    pub(crate) closed: AtomicBool,
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
pub(crate) struct PendingReleases {
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
    pub(crate) fn release_up_to(&self, written: u64) {
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
    pub(crate) fn check(&self, cx: &std::task::Context<'_>) -> bool {
        if self.0.set.load(Ordering::SeqCst) {
            return true;
        }
        self.0.waker.register(cx.waker());
        self.0.set.load(Ordering::SeqCst)
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
