//! `jetloop.v1.StagingService`.

use crate::api::staging::StagingQuery;
use crate::api::Compute;
use jetloop_proto::pb::{self, staging_service_server::StagingService};
use tonic::{Request, Response, Status};

/// Handlers for stage fits; the work (up to 100,000 points) runs on the blocking pool.
#[derive(Debug, Default, Clone, Copy)]
pub struct Staging;

#[tonic::async_trait]
impl StagingService for Staging {
    async fn fit_stages(
        &self,
        request: Request<pb::FitStagesRequest>,
    ) -> Result<Response<pb::FitStagesResponse>, Status> {
        let work = crate::runtime::work_of(&request);
        let req = request.into_inner();
        let r = crate::runtime::blocking("stage fit", work, move |c| StagingQuery::try_from(req)?.compute(c))
            .await?;
        Ok(Response::new(r))
    }
}
