//! Thin gRPC handlers: convert, compute, convert back. One file per service.

pub mod gas_dynamics;
pub mod info;
pub mod shock_cells;
pub mod spectrum;
pub mod staging;
pub mod tones;

use crate::api::ApiError;
use crate::cancel::{Cancel, CancelOnDrop};
use std::sync::atomic::{AtomicUsize, Ordering};
use tonic::Status;

/// Runs CPU-heavy work `f` (a conversion and its computation) on the blocking pool, so the
/// reactor only moves bytes. `f` gets the call's cancellation flag ([`cancel_of`]) and checks
/// it between units of work; if this future is dropped (the caller went away) the flag is set
/// too, so no orphaned work runs on. A task that panicked or was cancelled is logged with
/// `what` and answered INTERNAL without internal detail; the work's own error maps through
/// `From<ApiError> for Status`.
///
/// # Errors
/// The work's [`ApiError`] as a [`Status`], or INTERNAL when the task did not finish.
pub(crate) async fn blocking<T: Send + 'static>(
    what: &'static str,
    cancel: Cancel,
    f: impl FnOnce(&Cancel) -> Result<T, ApiError> + Send + 'static,
) -> Result<T, Status> {
    let guard = CancelOnDrop(cancel.clone());
    let task = tokio::task::spawn_blocking(move || {
        let _running = Running::start();
        f(&cancel)
    });
    let out = join(what, task.await)?.map_err(Status::from);
    drop(guard);
    out
}

/// The cancellation flag the deadline layer attached to a call (a fresh one if none: a call
/// served outside that layer).
pub(crate) fn cancel_of<T>(request: &tonic::Request<T>) -> Cancel {
    request.extensions().get::<Cancel>().cloned().unwrap_or_default()
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

/// Computations running on the blocking pool now (ServerInfo `computations_in_flight`).
pub(crate) static COMPUTING: AtomicUsize = AtomicUsize::new(0);

/// Counts one computation in [`COMPUTING`] while it lives (a panic included).
pub(crate) struct Running;

impl Running {
    /// Counts a computation that starts now.
    pub(crate) fn start() -> Self {
        COMPUTING.fetch_add(1, Ordering::Relaxed);
        Running
    }
}

impl Drop for Running {
    fn drop(&mut self) {
        COMPUTING.fetch_sub(1, Ordering::Relaxed);
    }
}
