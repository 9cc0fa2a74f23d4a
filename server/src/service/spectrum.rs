//! `jetloop.v1.SpectrumService`.

use crate::api::error::PreconditionViolation;
use crate::api::spectrum::{
    held_bytes, sample_width, values_in, BandQuery, BlockAnalysis, CrossQuery, CrossStream, RampQuery,
    RampStream, ToneQuery, ToneStream, TrackSession,
};
use crate::api::{ApiError, Compute};
use crate::metrics::Metrics;
use crate::runtime::budget::{Held, SampleBudget};
use jetloop_proto::pb::{self, spectrum_service_server::SpectrumService};
use std::sync::Arc;
use tonic::{Request, Response, Status, Streaming};

/// Handlers for spectral analysis. Decoding and the FFT work run on the blocking pool (the
/// Welch loop itself spreads segments over the rayon pool), so the reactor only moves bytes.
#[derive(Debug, Clone)]
pub struct Spectrum {
    budget: SampleBudget,
    metrics: Option<Arc<Metrics>>,
}

impl Spectrum {
    /// Handlers sharing one server-wide budget of sample bytes, counting the samples they
    /// receive in `metrics` when given.
    pub fn new(budget: SampleBudget, metrics: Option<Arc<Metrics>>) -> Self {
        Self { budget, metrics }
    }

    /// Counts `bytes` of sample data of `width` bytes per value.
    fn count(&self, bytes: usize, width: usize) {
        if let Some(m) = &self.metrics {
            m.note_samples(values_in(bytes, width), bytes as u64);
        }
    }
}

/// Blocks of a block stream waiting for the analysis at most (each one message, so at most
/// this many times the message size limit).
const STREAM_FEED_BLOCKS: usize = 4;

/// How often a block stream waiting for its client looks at its cancellation flag.
const STREAM_CANCEL_POLL: std::time::Duration = std::time::Duration::from_millis(20);

/// Updates a tracking stream may have waiting for its client.
const TRACK_QUEUE: usize = 8;

impl Spectrum {
    /// One request's samples held against the budget while `f` analyses them on the blocking
    /// pool (stopping once the call's cancellation flag is set).
    async fn held_analysis<Q: Send + 'static, R: Send + 'static>(
        &self,
        request: Request<Q>,
        samples: fn(&Q) -> Option<&pb::Samples>,
        what: &'static str,
        f: impl FnOnce(Q, &crate::cancel::Cancel) -> Result<R, ApiError> + Send + 'static,
    ) -> Result<Response<R>, Status> {
        let work = crate::runtime::work_of(&request);
        let req = request.into_inner();
        let mut held = Held::default();
        let bytes = held_bytes(samples(&req));
        self.budget.take(&mut held, bytes, "samples")?;
        self.count(bytes, sample_width(samples(&req)));
        let r = crate::runtime::blocking(what, work, move |c| f(req, c)).await?;
        drop(held);
        Ok(Response::new(r))
    }

    /// A block stream (`A`: ExtractTonesStream, CrossSpectraStream) analysed as it arrives.
    ///
    /// The analysis runs on one blocking thread (fanning segments out to rayon) and takes
    /// blocks from this loop as they arrive; the reactor only moves bytes. The feed ends with
    /// `None`; if it closes without one (the caller went away, or the deadline dropped this
    /// handler), the analysis stops without finishing. The feed holds a few blocks at most: a
    /// client faster than the analysis waits (HTTP/2 flow control), it is not refused. Every
    /// block's bytes count against the server-wide budget until the analysis has taken it in;
    /// then they are given back (`released`), so a stream of any length holds about one Welch
    /// segment per channel.
    async fn block_stream<A: BlockAnalysis>(
        &self,
        request: Request<Streaming<A::Block>>,
    ) -> Result<Response<A::Answer>, Status> {
        let work = crate::runtime::work_of(&request);
        // The longest wait for a block (the per-call limit; none outside a server).
        let gap = request.extensions().get::<crate::runtime::BlockGap>().map(|g| g.0);
        let mut incoming = request.into_inner();
        let first = incoming.message().await?.ok_or_else(|| Status::from(A::empty()))?;
        let mut held = Held::default();
        let first_bytes = A::frame_bytes(&first) + held_bytes(A::opening_samples(&first));
        self.budget.take(&mut held, first_bytes, "request.samples")?;
        let width = sample_width(A::opening_samples(&first));
        self.count(first_bytes, width);
        let (tx, mut rx) = tokio::sync::mpsc::channel::<Option<A::Block>>(STREAM_FEED_BLOCKS);
        let released = Arc::new(std::sync::atomic::AtomicUsize::new(0));
        let released_by_worker = released.clone();
        let (cancel, computing) = (work.cancel, work.computing);
        let worker = tokio::task::spawn_blocking(move || -> Result<_, ApiError> {
            let _running = crate::runtime::Running::start(&computing);
            let mut stream = A::start(first)?;
            loop {
                released_by_worker.store(stream.released_bytes(), std::sync::atomic::Ordering::Release);
                match rx.blocking_recv() {
                    Some(Some(block)) => stream.next(block)?,
                    Some(None) => return stream.finish(),
                    None => {
                        return Err(ApiError::Precondition(PreconditionViolation::new(
                            "STREAM_CUT_OFF",
                            "frames",
                            format!("the block stream was cut off after {} messages", stream.messages()),
                        )))
                    }
                }
            }
        });
        let mut received = Ok(());
        loop {
            // Wait for the next block, looking at the cancellation flag meanwhile: a stalled
            // stream past its deadline, or waited for longer than the per-call limit, lets go
            // of its samples at once.
            let waiting = tokio::time::Instant::now();
            let next = loop {
                if cancel.is_cancelled() {
                    break Err(Status::from(ApiError::Stopped(crate::cancel::Stopped)));
                }
                if let Some(g) = gap.filter(|g| waiting.elapsed() >= *g) {
                    cancel.cancel();
                    break Err(Status::deadline_exceeded(format!(
                        "stopped: no block for {} s (the server's time limit per call applies to the \
                         wait for each block of a stream)",
                        g.as_secs_f64()
                    )));
                }
                if let Ok(m) = tokio::time::timeout(STREAM_CANCEL_POLL, incoming.message()).await {
                    break m;
                }
            };
            match next {
                Ok(Some(block)) => {
                    held.release_front(released.load(std::sync::atomic::Ordering::Acquire));
                    let bytes = A::frame_bytes(&block);
                    if let Err(e) = self.budget.take(&mut held, bytes, "frames") {
                        received = Err(Status::from(e));
                        break;
                    }
                    self.count(bytes, width);
                    if tx.send(Some(block)).await.is_err() {
                        // The analysis stopped on an error; it is reported below.
                        break;
                    }
                }
                Ok(None) => {
                    // The analysis may have stopped on an error already; it is reported below.
                    let _ = tx.send(None).await;
                    break;
                }
                Err(e) => {
                    received = Err(e);
                    break;
                }
            }
        }
        drop(tx);
        let answer = crate::runtime::join(A::WHAT, worker.await)?;
        drop(held);
        received?;
        Ok(Response::new(answer.map_err(Status::from)?))
    }
}

#[tonic::async_trait]
impl SpectrumService for Spectrum {
    async fn extract_tones(
        &self,
        request: Request<pb::ExtractTonesRequest>,
    ) -> Result<Response<pb::ExtractTonesResponse>, Status> {
        self.held_analysis(
            request,
            |r| r.samples.as_ref(),
            "spectral analysis",
            |req, c| ToneQuery::try_from(req)?.compute(c),
        )
        .await
    }

    async fn extract_tones_stream(
        &self,
        request: Request<Streaming<pb::SampleBlock>>,
    ) -> Result<Response<pb::ExtractTonesResponse>, Status> {
        self.block_stream::<ToneStream>(request).await
    }

    async fn cross_spectra_stream(
        &self,
        request: Request<Streaming<pb::CrossSpectraBlock>>,
    ) -> Result<Response<pb::CrossSpectraResponse>, Status> {
        self.block_stream::<CrossStream>(request).await
    }

    async fn analyse_ramp_stream(
        &self,
        request: Request<Streaming<pb::RampBlock>>,
    ) -> Result<Response<pb::AnalyseRampResponse>, Status> {
        self.block_stream::<RampStream>(request).await
    }

    type TrackTonesStream =
        std::pin::Pin<Box<dyn tokio_stream::Stream<Item = Result<pb::TrackUpdate, Status>> + Send + 'static>>;

    async fn track_tones(
        &self,
        request: Request<Streaming<pb::TrackRequest>>,
    ) -> Result<Response<Self::TrackTonesStream>, Status> {
        // The stream's own end (the deadline layer's live-stream limit); none outside a server.
        let deadline = request.extensions().get::<crate::runtime::StreamDeadline>().cloned();
        let mut incoming = request.into_inner();
        let first = incoming.message().await?.ok_or_else(|| {
            Status::from(ApiError::Invalid(vec![crate::api::FieldViolation {
                field: "config".into(),
                description: "config is required: the tracking stream ended before its first message".into(),
            }]))
        })?;
        let first_samples = match &first.item {
            Some(pb::track_request::Item::Config(c)) => c.analysis.as_ref().and_then(|a| a.samples.as_ref()),
            _ => None,
        };
        let width = sample_width(first_samples);
        self.count(held_bytes(first_samples), width);
        let metrics = self.metrics.clone();
        let (mut session, first_updates) = TrackSession::start(first)?;
        // The session's analysis windows count against the server-wide sample budget for as
        // long as the stream lives (freed when the task below ends, whatever ends it).
        let mut held = Held::default();
        self.budget.take(&mut held, session.held_bytes(), "config.window_s")?;
        // Updates go out through a small bounded queue: a client that stops reading stops this
        // task at its next update, which stops reading frames, so HTTP/2 flow control holds
        // the sender back and the server keeps one analysis window per channel, no more.
        let (tx, rx) = tokio::sync::mpsc::channel::<Result<pb::TrackUpdate, Status>>(TRACK_QUEUE);
        tokio::spawn(async move {
            let _held = held;
            for u in first_updates {
                if tx.send(Ok(u)).await.is_err() {
                    return;
                }
            }
            let end = async {
                match &deadline {
                    Some(d) => tokio::time::sleep_until(d.at).await,
                    None => std::future::pending().await,
                }
            };
            tokio::pin!(end);
            loop {
                // A caller that goes away makes this fail or the queue close; the stream's
                // time limit ends it with DEADLINE_EXCEEDED. Either way the task ends and the
                // session's windows are freed.
                let next = tokio::select! {
                    m = incoming.message() => m,
                    () = &mut end => {
                        let why = deadline.as_ref().map_or_else(String::new, |d| d.why.clone());
                        let _ = tx.send(Err(Status::deadline_exceeded(format!("stopped: {why}")))).await;
                        return;
                    }
                };
                let msg = match next {
                    Ok(Some(m)) => {
                        if let (Some(mt), Some(pb::track_request::Item::Frames(f))) = (&metrics, &m.item) {
                            mt.note_samples(values_in(f.len(), width), f.len() as u64);
                        }
                        m
                    }
                    Ok(None) => return,
                    Err(e) => {
                        // The answer's headers are out, so the inbound-errors layer cannot
                        // correct this one: a later message that does not decode is the
                        // caller's error (INVALID_ARGUMENT), one over the size limit
                        // RESOURCE_EXHAUSTED, as for the first.
                        let e = crate::api::error::inbound_status(&e).unwrap_or(e);
                        let _ = tx.send(Err(e)).await;
                        return;
                    }
                };
                // The analysis of an update takes milliseconds: off the reactor.
                let joined = tokio::task::spawn_blocking(move || {
                    let r = session.push(msg);
                    (session, r)
                })
                .await;
                let Ok((s, result)) = joined else { return };
                session = s;
                match result {
                    Ok(updates) => {
                        for u in updates {
                            if tx.send(Ok(u)).await.is_err() {
                                return;
                            }
                        }
                    }
                    Err(e) => {
                        let _ = tx.send(Err(Status::from(e))).await;
                        return;
                    }
                }
            }
        });
        Ok(Response::new(Box::pin(tokio_stream::wrappers::ReceiverStream::new(rx))))
    }

    async fn cross_spectra(
        &self,
        request: Request<pb::CrossSpectraRequest>,
    ) -> Result<Response<pb::CrossSpectraResponse>, Status> {
        self.held_analysis(
            request,
            |r| r.samples.as_ref(),
            "cross-channel analysis",
            |req, c| CrossQuery::try_from(req)?.compute(c),
        )
        .await
    }

    async fn analyse_ramp(
        &self,
        request: Request<pb::AnalyseRampRequest>,
    ) -> Result<Response<pb::AnalyseRampResponse>, Status> {
        self.held_analysis(
            request,
            |r| r.samples.as_ref(),
            "ramp analysis",
            |req, c| RampQuery::try_from(req)?.compute(c),
        )
        .await
    }

    async fn band_levels(
        &self,
        request: Request<pb::BandLevelsRequest>,
    ) -> Result<Response<pb::BandLevelsResponse>, Status> {
        self.held_analysis(
            request,
            |r| r.samples.as_ref(),
            "spectral analysis",
            |req, c| BandQuery::try_from(req)?.compute(c),
        )
        .await
    }
}
