//! `jetloop.v1.SpectrumService`.

use crate::api::spectrum::{bands_response, tones_response, BandQuery, ToneQuery};
use crate::api::ApiError;
use jetloop_proto::pb::{self, spectrum_service_server::SpectrumService};
use tonic::{Request, Response, Status};

/// Handlers for spectral analysis. Decoding and the FFT work run on the blocking pool (the
/// Welch loop itself spreads segments over the rayon pool), so the reactor only moves bytes.
#[derive(Debug, Default, Clone, Copy)]
pub struct Spectrum;

async fn blocking<T: Send + 'static>(
    f: impl FnOnce() -> Result<T, ApiError> + Send + 'static,
) -> Result<T, Status> {
    tokio::task::spawn_blocking(f)
        .await
        .map_err(|e| {
            tracing::error!("spectrum task failed: {e}");
            Status::internal("the spectral analysis failed; see the server log")
        })?
        .map_err(Status::from)
}

#[tonic::async_trait]
impl SpectrumService for Spectrum {
    async fn extract_tones(
        &self,
        request: Request<pb::ExtractTonesRequest>,
    ) -> Result<Response<pb::ExtractTonesResponse>, Status> {
        let req = request.into_inner();
        let r = blocking(move || tones_response(&ToneQuery::try_from(req)?)).await?;
        Ok(Response::new(r))
    }

    async fn band_levels(
        &self,
        request: Request<pb::BandLevelsRequest>,
    ) -> Result<Response<pb::BandLevelsResponse>, Status> {
        let req = request.into_inner();
        let r = blocking(move || bands_response(&BandQuery::try_from(req)?)).await?;
        Ok(Response::new(r))
    }
}
