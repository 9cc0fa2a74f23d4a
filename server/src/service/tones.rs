//! `jetloop.v1.ToneService`.

use crate::api::guided::GuidedQuery;
use crate::api::sweep::SweepQuery;
use crate::api::tones::{ScreechQuery, ShockNoiseQuery};
use crate::api::Compute;
use crate::cancel::Cancel;
use jetloop_proto::pb::{self, tone_service_server::ToneService};
use tonic::{Request, Response, Status};

/// Handlers for screech and shock-noise predictions. Single predictions run on the reactor
/// (microseconds); predictions with guided modes (about a millisecond), sweeps (up to 10,000
/// points) and guided-mode curves run on the blocking pool.
#[derive(Debug, Default, Clone, Copy)]
pub struct Tones;

#[tonic::async_trait]
impl ToneService for Tones {
    async fn predict_screech(
        &self,
        request: Request<pb::PredictScreechRequest>,
    ) -> Result<Response<pb::PredictScreechResponse>, Status> {
        let work = crate::runtime::work_of(&request);
        let q = ScreechQuery::try_from(request.into_inner())?;
        if q.settings.guided.is_none() {
            return Ok(Response::new(q.compute(&Cancel::default())?));
        }
        // Guided modes take about a millisecond: off the reactor.
        Ok(Response::new(crate::runtime::blocking("screech prediction", work, move |c| q.compute(c)).await?))
    }

    async fn predict_shock_noise(
        &self,
        request: Request<pb::PredictShockNoiseRequest>,
    ) -> Result<Response<pb::PredictShockNoiseResponse>, Status> {
        let q = ShockNoiseQuery::try_from(request.into_inner())?;
        Ok(Response::new(q.compute(&Cancel::default())?))
    }

    async fn sweep_screech(
        &self,
        request: Request<pb::SweepScreechRequest>,
    ) -> Result<Response<pb::SweepScreechResponse>, Status> {
        let work = crate::runtime::work_of(&request);
        let q = SweepQuery::try_from(request.into_inner())?;
        Ok(Response::new(crate::runtime::blocking("sweep computation", work, move |c| q.compute(c)).await?))
    }

    async fn guided_modes(
        &self,
        request: Request<pb::GuidedModesRequest>,
    ) -> Result<Response<pb::GuidedModesResponse>, Status> {
        let work = crate::runtime::work_of(&request);
        let q = GuidedQuery::try_from(request.into_inner())?;
        Ok(Response::new(
            crate::runtime::blocking("guided-mode computation", work, move |c| q.compute(c)).await?,
        ))
    }
}
