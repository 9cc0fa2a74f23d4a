//! What a call's computation runs with, shared by the layers that attach it and the services
//! that use it: work placement on the blocking pool (`blocking`), the call's [`Work`]
//! context (cancellation flag and the gauge of running computations), a live stream's
//! [`StreamDeadline`], and the server-wide [`budget::SampleBudget`].

pub mod budget;

use crate::api::ApiError;
use crate::cancel::{Cancel, CancelOnDrop};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use tonic::Status;

/// Runs CPU-heavy work `f` (a conversion and its computation) on the blocking pool, so the
/// reactor only moves bytes. `f` gets the call's cancellation flag ([`work_of`]) and checks
/// it between units of work; if this future is dropped (the caller went away) the flag is set
/// too, so no orphaned work runs on. A task that panicked or was cancelled is logged with
/// `what` and answered INTERNAL without internal detail; the work's own error maps through
/// `From<ApiError> for Status`.
///
/// # Errors
/// The work's [`ApiError`] as a [`Status`], or INTERNAL when the task did not finish.
pub(crate) async fn blocking<T: Send + 'static>(
    what: &'static str,
    work: Work,
    f: impl FnOnce(&Cancel) -> Result<T, ApiError> + Send + 'static,
) -> Result<T, Status> {
    let Work { cancel, computing } = work;
    let guard = CancelOnDrop(cancel.clone());
    let task = tokio::task::spawn_blocking(move || {
        let _running = Running::start(&computing);
        f(&cancel)
    });
    let out = join(what, task.await)?.map_err(Status::from);
    drop(guard);
    out
}

/// Maps a blocking task's join result: a task that panicked or was cancelled is logged with
/// `what` and answered INTERNAL without internal detail.
///
/// # Errors
/// INTERNAL when the task did not finish.
pub(crate) fn join<T>(what: &'static str, r: Result<T, tokio::task::JoinError>) -> Result<T, Status> {
    r.map_err(|e| {
        tracing::error!("{what} task failed: {e}");
        Status::internal(format!("the {what} failed; see the server log"))
    })
}

/// Computations running on one server's blocking pool now (ServerInfo
/// `computations_in_flight`). Shared by the deadline layer, which hands it to every call, and
/// the info service.
#[derive(Debug, Clone, Default)]
pub struct Computing(Arc<AtomicUsize>);

impl Computing {
    /// Computations running now.
    pub fn count(&self) -> usize {
        self.0.load(Ordering::Relaxed)
    }
}

/// Counts one computation while it lives (a panic included).
pub(crate) struct Running(Computing);

impl Running {
    /// Counts a computation that starts now.
    pub(crate) fn start(c: &Computing) -> Self {
        c.0.fetch_add(1, Ordering::Relaxed);
        Running(c.clone())
    }
}

impl Drop for Running {
    fn drop(&mut self) {
        self.0 .0.fetch_sub(1, Ordering::Relaxed);
    }
}

/// What a call's computation needs from the call: its cancellation flag and the server's
/// gauge of running computations (attached by the deadline layer as one request extension;
/// fresh ones for a call served outside it).
#[derive(Debug, Clone, Default)]
pub struct Work {
    /// The call's cancellation flag.
    pub cancel: Cancel,
    /// The server's gauge of running computations.
    pub computing: Computing,
}

/// The [`Work`] context of a call.
pub(crate) fn work_of<T>(request: &tonic::Request<T>) -> Work {
    request.extensions().get::<Work>().cloned().unwrap_or_default()
}

/// The longest wait for the next message of an upload stream (ExtractTonesStream,
/// CrossSpectraStream) before it is ended as stalled, for its handler (a request extension):
/// the per-call time limit, which such a stream meets between its blocks, while the stream as
/// a whole may last the stream time limit.
#[derive(Debug, Clone, Copy)]
pub struct BlockGap(pub std::time::Duration);

/// When a live stream must end and why, for its handler (a request extension).
#[derive(Debug, Clone)]
pub struct StreamDeadline {
    /// The instant the stream ends.
    pub at: tokio::time::Instant,
    /// Why, for the status message.
    pub why: String,
}
