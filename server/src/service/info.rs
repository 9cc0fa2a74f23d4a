//! `jetloop.v1.InfoService`.

use super::{JETLOOP_SERVICES, STANDARD_SERVICES};
use crate::api::gas::PRESSURE_CAUTION;
use crate::api::provenance::{model, provenance, Defaults, SERVER_VERSION};
use crate::config::Limits;
use crate::physics::models;
use crate::runtime::budget::SampleBudget;
use jetloop_proto::pb::{self, info_service_server::InfoService};
use tonic::{Request, Response, Status};

/// Answers ServerInfo from the limits the server was started with.
#[derive(Debug, Clone)]
pub struct Info {
    limits: Limits,
    budget: SampleBudget,
    computing: crate::runtime::Computing,
}

impl Info {
    /// Info for a server running with `limits`.
    pub fn new(limits: Limits, budget: SampleBudget, computing: crate::runtime::Computing) -> Self {
        Self { limits, budget, computing }
    }
}

#[tonic::async_trait]
impl InfoService for Info {
    async fn server_info(
        &self,
        _request: Request<pb::ServerInfoRequest>,
    ) -> Result<Response<pb::ServerInfoResponse>, Status> {
        Ok(Response::new(pb::ServerInfoResponse {
            server_version: SERVER_VERSION.to_string(),
            services: JETLOOP_SERVICES.iter().chain(STANDARD_SERVICES).map(|s| s.to_string()).collect(),
            models: models::ALL.iter().map(model).collect(),
            limits: Some(pb::ServerLimits {
                max_request_bytes: self.limits.max_request_bytes as u64,
                request_timeout_s: self.limits.request_timeout.as_secs_f64(),
                max_concurrent_requests: self.limits.max_concurrent_requests as u64,
                sample_budget_bytes: self.limits.sample_budget_bytes as u64,
                stream_timeout_s: self.limits.stream_timeout.as_secs_f64(),
                max_request_samples: crate::api::spectrum::MAX_TOTAL_SAMPLES as u64,
                limit_sources: self.limits.sizing_notes(),
            }),
            safety_notice: PRESSURE_CAUTION.to_string(),
            computations_in_flight: self.computing.count() as u64,
            sample_bytes_held: self.budget.in_use() as u64,
            provenance: Some(provenance(&[], &Defaults::default(), Vec::new())),
        }))
    }
}
