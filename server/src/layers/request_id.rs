//! Request ids: every call gets one (the caller's or a new one), echoed in the answer and
//! written in the call's log lines.

use super::{route_service, BoxFuture, CallId};
use std::sync::Arc;
use std::task::{Context, Poll};
use tonic::body::Body;
use tonic::codegen::http;

/// Request ids: the caller's `x-request-id` (up to 64 visible ASCII characters) or a new one,
/// returned in the response metadata and written in the call's DEBUG line ("answered", with
/// the status and time), so a lab can match its DAQ log lines to the server's.
#[derive(Debug, Clone, Default)]
pub struct RequestIdLayer {
    next: Arc<std::sync::atomic::AtomicU64>,
}

/// The metadata key of request ids.
pub const REQUEST_ID: &str = "x-request-id";
/// [`REQUEST_ID`] as a header name (a constant: no allocation per call).
static REQUEST_ID_HEADER: http::HeaderName = http::HeaderName::from_static(REQUEST_ID);

impl RequestIdLayer {
    /// Ids generated from a per-process random start and a counter: unique within the process
    /// and unlikely to repeat across restarts.
    pub fn new() -> Self {
        let seed = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.as_nanos() as u64)
            .wrapping_mul(0x9E37_79B9_7F4A_7C15)
            ^ u64::from(std::process::id());
        Self { next: Arc::new(std::sync::atomic::AtomicU64::new(seed)) }
    }

    /// The caller's id (`given`) when it is usable (1 to 64 visible ASCII characters), else a
    /// new one; either way marked sensitive, so HPACK never indexes it.
    fn id_for(&self, given: Option<&http::HeaderValue>) -> http::HeaderValue {
        let ok = |v: &&http::HeaderValue| {
            let b = v.as_bytes();
            !b.is_empty() && b.len() <= 64 && b.iter().all(|c| c.is_ascii_graphic())
        };
        let mut id = match given.filter(ok) {
            Some(v) => v.clone(),
            None => {
                let n = self.next.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                // Mixed so consecutive ids do not look alike (splitmix64 finalizer).
                let mut z = n.wrapping_add(0x9E37_79B9_7F4A_7C15);
                z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
                z ^= z >> 31;
                let mut hex = [0u8; 16];
                for (i, h) in hex.iter_mut().enumerate() {
                    *h = b"0123456789abcdef"[((z >> (60 - 4 * i)) & 0xf) as usize];
                }
                // Owned by a shared buffer, so the copy kept for the log lines costs no
                // allocation.
                http::HeaderValue::from_maybe_shared(bytes::Bytes::from_owner(hex))
                    .unwrap_or(http::HeaderValue::from_static("0"))
            }
        };
        // Every id is new, so HPACK must not put it in the connection's header table (where
        // it would only push out entries that do repeat, and cost a table search per answer).
        id.set_sensitive(true);
        id
    }
}

impl<S> tower::Layer<S> for RequestIdLayer {
    type Service = RequestId<S>;

    fn layer(&self, inner: S) -> RequestId<S> {
        RequestId { inner, layer: self.clone() }
    }
}

/// The service [`RequestIdLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct RequestId<S> {
    inner: S,
    layer: RequestIdLayer,
}

route_service!(RequestId, |self, req| {
    let id = self.layer.id_for(req.headers().get(&REQUEST_ID_HEADER));
    let mut req = req;
    // For the lines of the layers inside (a failed or expired call names its id).
    req.extensions_mut().insert(CallId(id.clone()));
    let fut = self.inner.call(req);
    // The time only when the line that shows it is written.
    let started = tracing::enabled!(tracing::Level::DEBUG).then(std::time::Instant::now);
    Box::pin(async move {
        let mut resp = fut.await?;
        // One line per call at DEBUG (RUST_LOG=jetloop_server=debug), in the call's span.
        if let Some(started) = started {
            let status =
                resp.headers().get("grpc-status").and_then(|v| v.to_str().ok()).unwrap_or("0 or in trailers");
            tracing::debug!(
                request_id = id.to_str().unwrap_or(""),
                grpc_status = status,
                elapsed_ms = started.elapsed().as_secs_f64() * 1e3,
                "answered"
            );
        }
        resp.headers_mut().insert(REQUEST_ID_HEADER.clone(), id);
        Ok(resp)
    })
});

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn request_ids_are_kept_or_made_and_never_enter_the_hpack_table() {
        let layer = RequestIdLayer::new();
        let given = http::HeaderValue::from_static("rig-3-run-17-point-2");
        let kept = layer.id_for(Some(&given));
        assert_eq!(kept.as_bytes(), given.as_bytes());
        // RFC 7541 section 6.2.3: a never-indexed literal; h2 sends sensitive values so.
        assert!(kept.is_sensitive());
        let made = layer.id_for(None);
        assert_eq!(made.len(), 16);
        assert!(made.as_bytes().iter().all(u8::is_ascii_hexdigit));
        assert!(made.is_sensitive());
        assert_ne!(made, layer.id_for(None));
        // Over 64 characters, or not visible ASCII: replaced by a new one.
        let long = http::HeaderValue::from_str(&"x".repeat(65)).expect("ascii");
        assert_eq!(layer.id_for(Some(&long)).len(), 16);
        assert_eq!(layer.id_for(Some(&http::HeaderValue::from_static("a b"))).len(), 16);
    }
}
