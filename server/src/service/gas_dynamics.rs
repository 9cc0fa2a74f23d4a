//! `jetloop.v1.GasDynamicsService`.

use crate::api::gas::{IsentropicQuery, JetStateQuery, NormalShockQuery};
use crate::api::Compute;
use crate::cancel::Cancel;
use jetloop_proto::pb::{self, gas_dynamics_service_server::GasDynamicsService};
use tonic::{Request, Response, Status};

/// Handlers for the gas-dynamics RPCs. Stateless; each call is microseconds of arithmetic, so
/// it runs on the reactor.
#[derive(Debug, Default, Clone, Copy)]
pub struct GasDynamics;

#[tonic::async_trait]
impl GasDynamicsService for GasDynamics {
    async fn isentropic_ratios(
        &self,
        request: Request<pb::IsentropicRatiosRequest>,
    ) -> Result<Response<pb::IsentropicRatiosResponse>, Status> {
        let q = IsentropicQuery::try_from(request.into_inner())?;
        Ok(Response::new(q.compute(&Cancel::default())?))
    }

    async fn normal_shock(
        &self,
        request: Request<pb::NormalShockRequest>,
    ) -> Result<Response<pb::NormalShockResponse>, Status> {
        let q = NormalShockQuery::try_from(request.into_inner())?;
        Ok(Response::new(q.compute(&Cancel::default())?))
    }

    async fn jet_state(
        &self,
        request: Request<pb::JetStateRequest>,
    ) -> Result<Response<pb::JetStateResponse>, Status> {
        let q = JetStateQuery::try_from(request.into_inner())?;
        Ok(Response::new(q.compute(&Cancel::default())?))
    }
}
