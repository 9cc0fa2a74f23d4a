//! The send guard: an answer that is ready keeps its call's admission permit until its last
//! byte has left the server, and closes its connection when it is not out in time.

use super::body::{FrameWatch, Watched};
use super::shed::Admitted;
use super::Method;
use std::time::Duration;
use tonic::body::Body;
use tonic::codegen::http;

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
/// (see [`crate::transport::ConnInfo::release_when_written`]), not by a task that has to be
/// scheduled first: under full load such tasks lag, and permits of answers already sent would
/// refuse new calls. A body dropped before its end (the call was reset) lets go at once.
pub(crate) fn send_guarded(
    resp: http::Response<Body>,
    admitted: Option<Admitted>,
    conn: Option<crate::transport::ConnInfo>,
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
    conn: Option<crate::transport::ConnInfo>,
    written_at_ready: u64,
    yielded: u64,
    out: Option<crate::transport::OutOnDrop>,
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
