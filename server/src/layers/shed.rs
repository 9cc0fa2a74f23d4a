//! Admission: at most `max_in_flight` calls run at once across the whole server; one more is
//! refused at once with `UNAVAILABLE` and a `google.rpc.RetryInfo` hint, so a gRPC client with
//! a retry policy backs off and tries again instead of queueing without bound. Health checks
//! are exempt, so an orchestrator does not restart a server for being busy.

use super::{route_service, BoxFuture, HEALTH};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Duration;
use tonic::body::Body;
use tonic::codegen::http;
use tonic::Status;
use tonic_types::{ErrorDetails, StatusExt};

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
}
