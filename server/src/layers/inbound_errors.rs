//! Inbound errors are the caller's: request bodies that do not decode and messages over the
//! size limit are answered INVALID_ARGUMENT and RESOURCE_EXHAUSTED (the mapping itself is
//! [`crate::api::error::inbound_status`], which the streaming handler uses too), and every
//! failed call is logged once at info: unary calls from their trailers-only answer, live
//! streams from the trailers that end them.

use super::body::{FrameWatch, Watched};
use super::deadline::LIVE_STREAMS;
use super::{call_names, route_service, BoxFuture, CallId, Method, Peer};
use crate::api::error::inbound_status;
use std::task::{Context, Poll};
use tonic::body::Body;
use tonic::codegen::http;
use tonic::Status;

/// Inbound errors are the caller's: tonic answers a request body that does not decode
/// (malformed protobuf, a truncated frame, a compressed flag without an encoding) with INTERNAL
/// and an over-limit message with OUT_OF_RANGE. This layer answers them INVALID_ARGUMENT (with a
/// `BadRequest` naming the request body) and RESOURCE_EXHAUSTED, the gRPC conventions for a
/// bad request and a size limit, so clients sort them correctly (retry nothing, fix the call).
#[derive(Debug, Clone, Copy, Default)]
pub struct InboundErrorsLayer;

impl<S> tower::Layer<S> for InboundErrorsLayer {
    type Service = InboundErrors<S>;

    fn layer(&self, inner: S) -> InboundErrors<S> {
        InboundErrors { inner }
    }
}

/// The service [`InboundErrorsLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct InboundErrors<S> {
    inner: S,
}

route_service!(InboundErrors, |self, req| {
    let (method, peer, id) = call_names(&req);
    // A live stream's answer is out before it can fail: its status comes in the trailers.
    let streams = LIVE_STREAMS.contains(&req.uri().path());
    let fut = self.inner.call(req);
    Box::pin(async move {
        let resp = fut.await?;
        // Errors before the answer started are trailers-only (the status in the headers):
        // the inbound errors are corrected here.
        let Some(status) = Status::from_header_map(resp.headers()) else {
            if !streams {
                return Ok(resp);
            }
            let watch = FailureLog { names: Some((method, peer, id)) };
            let (parts, body) = resp.into_parts();
            return Ok(http::Response::from_parts(parts, Body::new(Watched { inner: body, watch })));
        };
        let (status, resp) = match inbound_status(&status) {
            Some(fixed) => (fixed.clone(), fixed.into_http()),
            None => (status, resp),
        };
        log_failed(&method, &peer, &id, status.code(), status.message());
        Ok(resp)
    })
});

/// One line per failed call, unary or streamed (the only place a failure is logged), at info:
/// the caller's errors are routine, the log is for tracing who sent what. CANCELLED is work
/// stopped after its deadline answered (logged there as expired), and not logged here.
fn log_failed(method: &Method, peer: &Peer, id: &CallId, code: tonic::Code, message: &str) {
    if !matches!(code, tonic::Code::Ok | tonic::Code::Cancelled) {
        tracing::info!(%method, peer = %peer, request_id = %id, code = ?code, "call failed: {message}");
    }
}

/// Watches a streamed answer's trailers and logs its status if it failed.
struct FailureLog {
    names: Option<(Method, Peer, CallId)>,
}

impl FrameWatch for FailureLog {
    fn frame(&mut self, f: &http_body::Frame<bytes::Bytes>) {
        let Some(trailers) = f.trailers_ref() else { return };
        if let (Some(status), Some((method, peer, id))) =
            (Status::from_header_map(trailers), self.names.take())
        {
            log_failed(&method, &peer, &id, status.code(), status.message());
        }
    }

    fn end(&mut self) {}
}
