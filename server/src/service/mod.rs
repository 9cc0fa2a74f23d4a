//! Thin gRPC handlers: convert, compute, convert back. One file per service.

pub mod gas_dynamics;
pub mod info;
pub mod shock_cells;
pub mod spectrum;
pub mod staging;
pub mod tones;

use crate::api::ApiError;
use tonic::Status;

/// Runs CPU-heavy work `f` (a conversion and its computation) on the blocking pool, so the
/// reactor only moves bytes. A task that panicked or was cancelled is logged with `what` and
/// answered INTERNAL without internal detail; the work's own error maps through
/// `From<ApiError> for Status`.
///
/// # Errors
/// The work's [`ApiError`] as a [`Status`], or INTERNAL when the task did not finish.
pub(crate) async fn blocking<T: Send + 'static>(
    what: &'static str,
    f: impl FnOnce() -> Result<T, ApiError> + Send + 'static,
) -> Result<T, Status> {
    join(what, tokio::task::spawn_blocking(f).await)?.map_err(Status::from)
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
