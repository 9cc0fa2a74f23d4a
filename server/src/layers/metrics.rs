//! The metrics layer: counts every call and its latency into the [`crate::metrics`] registry,
//! reading the status from a trailers-only answer's headers or from the trailers of a body
//! that streams.

use super::body::{FrameWatch, Watched};
use super::{route_service, BoxFuture};
use crate::metrics::Metrics;
use std::sync::Arc;
use std::task::{Context, Poll};
use std::time::Instant;
use tonic::body::Body;
use tonic::codegen::http;

/// The layer that counts every call (outside authentication and admission, so refusals count).
#[derive(Debug, Clone)]
pub struct MetricsLayer {
    metrics: Option<Arc<Metrics>>,
}

impl MetricsLayer {
    /// Counting into `metrics`; `None` passes calls through untouched.
    pub fn new(metrics: Option<Arc<Metrics>>) -> Self {
        Self { metrics }
    }
}

impl<S> tower::Layer<S> for MetricsLayer {
    type Service = Measured<S>;

    fn layer(&self, inner: S) -> Measured<S> {
        Measured { inner, metrics: self.metrics.clone() }
    }
}

/// The service [`MetricsLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct Measured<S> {
    inner: S,
    metrics: Option<Arc<Metrics>>,
}

route_service!(Measured, |self, req| {
    let Some(metrics) = self.metrics.clone() else {
        return Box::pin(self.inner.call(req));
    };
    let method = metrics.method(req.uri().path());
    metrics.start(method);
    let started = Instant::now();
    let mut watch = Finish { metrics, method, started, code: None, done: false };
    let fut = self.inner.call(req);
    Box::pin(async move {
        let resp = match fut.await {
            Ok(r) => r,
            Err(e) => {
                watch.code = Some(14);
                drop(watch);
                return Err(e);
            }
        };
        // A trailers-only answer (errors, refusals) has its status in the headers.
        watch.code = header_code(resp.headers());
        let (parts, body) = resp.into_parts();
        Ok(http::Response::from_parts(parts, Body::new(Watched { inner: body, watch })))
    })
});

fn header_code(h: &http::HeaderMap) -> Option<usize> {
    h.get("grpc-status").and_then(|v| v.to_str().ok()).and_then(|v| v.parse().ok())
}

/// Records a call once: when its answer ends, or when it is dropped unfinished (a caller that
/// went away: CANCELLED unless a status was seen).
#[derive(Debug)]
struct Finish {
    metrics: Arc<Metrics>,
    method: usize,
    started: Instant,
    code: Option<usize>,
    done: bool,
}

impl Finish {
    fn record(&mut self) {
        if !self.done {
            self.done = true;
            self.metrics.finish(self.method, self.code.unwrap_or(1), self.started.elapsed());
        }
    }
}

impl Drop for Finish {
    fn drop(&mut self) {
        self.record();
    }
}

impl FrameWatch for Finish {
    fn frame(&mut self, f: &http_body::Frame<bytes::Bytes>) {
        if let Some(t) = f.trailers_ref() {
            if let Some(c) = header_code(t) {
                self.code = Some(c);
            }
            self.record();
        }
    }

    fn end(&mut self) {
        self.record();
    }
}
