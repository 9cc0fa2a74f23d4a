//! An answer's body passed through unchanged while a watcher sees each frame: the send guard
//! (bytes out, permit let go) and the metrics layer (status in the trailers) watch this way.

use std::pin::Pin;
use std::task::{Context, Poll};
use tonic::body::Body;
use tonic::Status;

/// Sees an answer's frames as they pass ([`Watched`]); dropped with the body.
pub(crate) trait FrameWatch: Send + Unpin + 'static {
    /// A frame the body yielded (data or trailers).
    fn frame(&mut self, frame: &http_body::Frame<bytes::Bytes>);
    /// The body ended without trailers.
    fn end(&mut self);
}

/// An answer's body passed through unchanged while its watch sees every frame.
pub(crate) struct Watched<W> {
    pub(crate) inner: Body,
    pub(crate) watch: W,
}

impl<W: FrameWatch> http_body::Body for Watched<W> {
    type Data = bytes::Bytes;
    type Error = Status;

    fn poll_frame(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
    ) -> Poll<Option<Result<http_body::Frame<Self::Data>, Self::Error>>> {
        let r = Pin::new(&mut self.inner).poll_frame(cx);
        match &r {
            Poll::Ready(Some(Ok(f))) => self.watch.frame(f),
            Poll::Ready(None) => self.watch.end(),
            Poll::Ready(Some(Err(_))) | Poll::Pending => {}
        }
        r
    }

    fn is_end_stream(&self) -> bool {
        self.inner.is_end_stream()
    }

    fn size_hint(&self) -> http_body::SizeHint {
        self.inner.size_hint()
    }
}
