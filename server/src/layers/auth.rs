//! Bearer tokens: with tokens configured, every call but health checks must carry one.

use super::HEALTH;
use std::sync::Arc;
use std::task::{Context, Poll};
use tonic::body::Body;
use tonic::codegen::http;

/// Bearer-token check: with tokens configured, every call but health checks must carry
/// `authorization: Bearer <token>` (the scheme in any case) with one of them (compared in
/// constant time), else it is answered UNAUTHENTICATED at once. Without tokens it passes everything.
#[derive(Debug, Clone)]
pub struct AuthLayer {
    tokens: Arc<Vec<Vec<u8>>>,
}

impl AuthLayer {
    /// A check against `tokens` (empty: no check).
    pub fn new(tokens: &[String]) -> Self {
        Self { tokens: Arc::new(tokens.iter().map(|t| t.as_bytes().to_vec()).collect()) }
    }

    /// True when `header` (the authorization value) names one of the tokens. Every token is
    /// compared whole, whatever matched, so the time taken does not tell how much of a guess
    /// was right.
    fn accepts(&self, header: Option<&http::HeaderValue>) -> bool {
        let Some(given) = header.and_then(|h| bearer_credentials(h.as_bytes())) else {
            return false;
        };
        self.tokens.iter().fold(false, |ok, t| ok | constant_time_eq(t, given))
    }
}

/// The token of an `authorization` value whose scheme is `Bearer` in any case (RFC 7235
/// section 2.1: the auth-scheme is a case-insensitive token, followed by one or more spaces),
/// or `None` for another scheme or no token.
fn bearer_credentials(value: &[u8]) -> Option<&[u8]> {
    const SCHEME: &[u8] = b"bearer";
    let (scheme, rest) = value.split_at_checked(SCHEME.len())?;
    if !scheme.eq_ignore_ascii_case(SCHEME) || rest.first() != Some(&b' ') {
        return None;
    }
    let start = rest.iter().position(|&b| b != b' ')?;
    Some(&rest[start..])
}

/// Equality of two byte strings in time that depends only on their lengths.
fn constant_time_eq(a: &[u8], b: &[u8]) -> bool {
    a.len() == b.len() && a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

impl<S> tower::Layer<S> for AuthLayer {
    type Service = Auth<S>;

    fn layer(&self, inner: S) -> Auth<S> {
        Auth { inner, layer: self.clone() }
    }
}

/// The service [`AuthLayer`] wraps around the routes.
#[derive(Debug, Clone)]
pub struct Auth<S> {
    inner: S,
    layer: AuthLayer,
}

/// Auth answers with the inner call's own future (no box of its own: this layer runs on every
/// call) or, for a refused call, a ready answer.
impl<S, B> tower::Service<http::Request<B>> for Auth<S>
where
    S: tower::Service<http::Request<B>, Response = http::Response<Body>>,
{
    type Response = http::Response<Body>;
    type Error = S::Error;
    type Future =
        futures_util::future::Either<std::future::Ready<Result<http::Response<Body>, S::Error>>, S::Future>;

    fn poll_ready(&mut self, cx: &mut Context<'_>) -> Poll<Result<(), Self::Error>> {
        self.inner.poll_ready(cx)
    }

    fn call(&mut self, req: http::Request<B>) -> Self::Future {
        use futures_util::future::Either;
        let open = self.layer.tokens.is_empty() || req.uri().path().starts_with(HEALTH);
        if !open && !self.layer.accepts(req.headers().get(http::header::AUTHORIZATION)) {
            let refused = tonic::Status::unauthenticated(
                "this server requires a bearer token: send `authorization: Bearer <token>` with a token it was given",
            );
            return Either::Left(std::future::ready(Ok(refused.into_http())));
        }
        Either::Right(self.inner.call(req))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header(v: &str) -> http::HeaderValue {
        http::HeaderValue::from_str(v).expect("visible ASCII")
    }

    #[test]
    fn the_scheme_is_matched_without_regard_to_case() {
        let layer = AuthLayer::new(&["t0k3n".to_string()]);
        // RFC 7235 section 2.1: "It uses a case-insensitive token as a means to identify the
        // authentication scheme"; RFC 6750 section 2.1 names the scheme `Bearer`.
        for scheme in ["Bearer", "bearer", "BEARER", "bEaReR"] {
            assert!(layer.accepts(Some(&header(&format!("{scheme} t0k3n")))), "{scheme}");
        }
        // RFC 7235 section 2.1: credentials = auth-scheme [ 1*SP ( token68 / #auth-param ) ],
        // one or more spaces between the scheme and the token.
        assert!(layer.accepts(Some(&header("bearer   t0k3n"))));
        // The token itself is compared exactly (RFC 6750 section 2.1: b64token is case-sensitive
        // base64-like text): a case change or a near miss is still refused.
        for wrong in
            ["bearer T0K3N", "Bearer t0k3", "bearer t0k3n0", "bearert0k3n", "Basic t0k3n", "bearer", ""]
        {
            assert!(!layer.accepts(Some(&header(wrong))), "{wrong:?}");
        }
        assert!(!layer.accepts(None));
    }
}
