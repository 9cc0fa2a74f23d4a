//! Inbound errors are the caller's: request bodies that do not decode and messages over the
//! size limit are answered INVALID_ARGUMENT and RESOURCE_EXHAUSTED (the mapping itself is
//! [`crate::api::error::inbound_status`], which the streaming handler uses too), and every
//! failed call is logged once at info.

use super::{call_names, route_service, BoxFuture};
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
    let fut = self.inner.call(req);
    Box::pin(async move {
        let resp = fut.await?;
        // Only trailers-only answers (the status in the headers) carry these errors, and
        // every error answer of this server is one (no RPC streams its answer).
        let Some(status) = Status::from_header_map(resp.headers()) else {
            return Ok(resp);
        };
        let (status, resp) = match inbound_status(&status) {
            Some(fixed) => (fixed.clone(), fixed.into_http()),
            None => (status, resp),
        };
        // CANCELLED is work stopped after its deadline answered (logged there as expired).
        if !matches!(status.code(), tonic::Code::Ok | tonic::Code::Cancelled) {
            // Once per failed call, at info: the caller's errors are routine, the log is
            // for tracing who sent what.
            tracing::info!(
                %method,
                peer = %peer,
                request_id = %id,
                code = ?status.code(),
                "call failed: {}",
                status.message()
            );
        }
        Ok(resp)
    })
});
