//! `jetloop.v1.GasDynamicsService`.

use crate::api::gas::{
    compute_jet_state, isentropic_answer, jet_spec, jet_state_response, normal_shock_answer, IsentropicQuery,
    NormalShockQuery,
};
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
        Ok(Response::new(isentropic_answer(q)?))
    }

    async fn normal_shock(
        &self,
        request: Request<pb::NormalShockRequest>,
    ) -> Result<Response<pb::NormalShockResponse>, Status> {
        let q = NormalShockQuery::try_from(request.into_inner())?;
        Ok(Response::new(normal_shock_answer(&q)?))
    }

    async fn jet_state(
        &self,
        request: Request<pb::JetStateRequest>,
    ) -> Result<Response<pb::JetStateResponse>, Status> {
        let spec = jet_spec(request.into_inner().conditions, "conditions")?;
        let s = compute_jet_state(&spec);
        Ok(Response::new(jet_state_response(&spec, &s)))
    }
}
