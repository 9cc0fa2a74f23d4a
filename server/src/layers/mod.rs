//! The tower layers around every call, one file each. The stack is assembled, in order and
//! with the reason for the order, in the `server` module; the layers are:
//!
//! - [`request_id`]: a request id per call, echoed and logged;
//! - [`auth`]: bearer tokens;
//! - [`shed`]: at most `max_in_flight` calls at once, the excess refused with a retry hint;
//! - [`metrics`]: counts and latencies into the [`crate::metrics`] registry;
//! - [`inbound_errors`]: undecodable or oversize requests answered as the caller's error, and
//!   one log line per failed call (unary or streamed);
//! - [`deadline`]: the caller's or the server's time limit, and the call's cancellation flag;
//! - [`send_guard`]: an answer keeps its permit until it has left, and must leave in time.
//!
//! [`body`] is the body wrapper the send guard and the metrics layer watch answers with.

pub mod auth;
pub mod body;
pub mod deadline;
pub mod inbound_errors;
pub mod metrics;
pub mod request_id;
pub mod send_guard;
pub mod shed;

pub use auth::AuthLayer;
pub use deadline::{DeadlineLayer, LIVE_STREAMS, STOP_GRACE, STREAM_END_GRACE};
pub use inbound_errors::InboundErrorsLayer;
pub use metrics::MetricsLayer;
pub use request_id::{RequestIdLayer, REQUEST_ID};
pub use send_guard::MIN_SEND_TIME;
pub use shed::{ShedLayer, REFUSAL_LOG_INTERVAL, RETRY_AFTER};

use std::future::Future;
use std::pin::Pin;
use tonic::codegen::http;

/// Path prefix of the health service, which is never refused.
pub(crate) const HEALTH: &str = "/grpc.health.v1.Health/";

/// The method path, the peer address and the request id of a call, for its log lines.
pub(crate) fn call_names<B>(req: &http::Request<B>) -> (Method, Peer, CallId) {
    let peer = req.extensions().get::<crate::transport::ConnInfo>().and_then(|c| c.remote_addr);
    let id = req.extensions().get::<CallId>().cloned().unwrap_or(CallId(http::HeaderValue::from_static("")));
    (Method(req.uri().clone()), Peer(peer), id)
}

/// A call's request id ([`RequestIdLayer`]), for log lines; empty outside that layer.
#[derive(Debug, Clone)]
pub(crate) struct CallId(pub(crate) http::HeaderValue);

impl std::fmt::Display for CallId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        // Ids are checked to be visible ASCII (or made here), so this is the whole id.
        f.write_str(self.0.to_str().unwrap_or(""))
    }
}

/// A call's method path, for log lines (the URI is shared, not copied, until printed).
#[derive(Debug, Clone)]
pub(crate) struct Method(pub(crate) http::Uri);

impl std::fmt::Display for Method {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.0.path())
    }
}

/// A call's peer address, for log lines.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Peer(pub(crate) Option<std::net::SocketAddr>);

impl std::fmt::Display for Peer {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.0 {
            Some(a) => write!(f, "{a}"),
            None => f.write_str("unknown"),
        }
    }
}

/// The `tower::Service` shape every layer here shares (ready when the routes are, boxed
/// future); only `call` differs.
macro_rules! route_service {
    ($name:ident, |$self:ident, $req:ident| $call:block) => {
        impl<S, B> tower::Service<http::Request<B>> for $name<S>
        where
            S: tower::Service<http::Request<B>, Response = http::Response<Body>> + Send + 'static,
            S::Future: Send + 'static,
            S::Error: Send + 'static,
        {
            type Response = http::Response<Body>;
            type Error = S::Error;
            type Future = BoxFuture<Self::Response, Self::Error>;

            fn poll_ready(&mut self, cx: &mut Context<'_>) -> Poll<Result<(), Self::Error>> {
                self.inner.poll_ready(cx)
            }

            fn call(&mut $self, $req: http::Request<B>) -> Self::Future $call
        }
    };
}
pub(crate) use route_service;

/// The boxed future every layer answers with.
pub(crate) type BoxFuture<R, E> = Pin<Box<dyn Future<Output = Result<R, E>> + Send>>;
