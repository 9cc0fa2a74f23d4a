//! `jetloop.v1.SpectrumService`.

use crate::api::error::PreconditionViolation;
use crate::api::spectrum::{bands_response, tones_response, BandQuery, ToneQuery, ToneStream};
use crate::api::ApiError;
use jetloop_proto::pb::{self, spectrum_service_server::SpectrumService};
use tonic::{Request, Response, Status, Streaming};

/// Handlers for spectral analysis. Decoding and the FFT work run on the blocking pool (the
/// Welch loop itself spreads segments over the rayon pool), so the reactor only moves bytes.
#[derive(Debug, Default, Clone, Copy)]
pub struct Spectrum;

#[tonic::async_trait]
impl SpectrumService for Spectrum {
    async fn extract_tones(
        &self,
        request: Request<pb::ExtractTonesRequest>,
    ) -> Result<Response<pb::ExtractTonesResponse>, Status> {
        let cancel = super::cancel_of(&request);
        let req = request.into_inner();
        let r = super::blocking("spectral analysis", cancel, move |c| {
            tones_response(&ToneQuery::try_from(req)?.with_cancel(c.clone()))
        })
        .await?;
        Ok(Response::new(r))
    }

    async fn extract_tones_stream(
        &self,
        request: Request<Streaming<pb::SampleBlock>>,
    ) -> Result<Response<pb::ExtractTonesResponse>, Status> {
        let mut incoming = request.into_inner();
        let first = incoming.message().await?.ok_or_else(|| Status::from(ToneStream::empty()))?;
        // The analysis runs on one blocking thread (fanning segments out to rayon) and takes
        // blocks from this loop as they arrive; the reactor only moves bytes. The feed ends with
        // `None`; if it closes without one (the caller went away, or the deadline dropped this
        // handler), the analysis stops without finishing.
        let (tx, rx) = std::sync::mpsc::channel::<Option<pb::SampleBlock>>();
        let worker = tokio::task::spawn_blocking(move || -> Result<_, ApiError> {
            let _running = super::Running::start();
            let mut stream = ToneStream::start(first)?;
            loop {
                match rx.recv() {
                    Ok(Some(block)) => stream.next(block)?,
                    Ok(None) => return stream.finish(),
                    Err(_) => {
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
            match incoming.message().await {
                Ok(Some(block)) => {
                    if tx.send(Some(block)).is_err() {
                        // The analysis stopped on an error; it is reported below.
                        break;
                    }
                }
                Ok(None) => {
                    // The analysis may have stopped on an error already; it is reported below.
                    let _ = tx.send(None);
                    break;
                }
                Err(e) => {
                    received = Err(e);
                    break;
                }
            }
        }
        drop(tx);
        let answer = super::join("spectral analysis", worker.await)?;
        received?;
        Ok(Response::new(answer.map_err(Status::from)?))
    }

    async fn band_levels(
        &self,
        request: Request<pb::BandLevelsRequest>,
    ) -> Result<Response<pb::BandLevelsResponse>, Status> {
        let cancel = super::cancel_of(&request);
        let req = request.into_inner();
        let r = super::blocking("spectral analysis", cancel, move |c| {
            bands_response(&BandQuery::try_from(req)?.with_cancel(c.clone()))
        })
        .await?;
        Ok(Response::new(r))
    }
}
