//! `jetloop.v1.ShockCellService`.

use crate::api::cells::CellQuery;
use crate::api::Compute;
use crate::cancel::Cancel;
use jetloop_proto::pb::{self, shock_cell_service_server::ShockCellService};
use tonic::{Request, Response, Status};

/// Handlers for shock-cell spacing. Stateless; microseconds of arithmetic per call.
#[derive(Debug, Default, Clone, Copy)]
pub struct ShockCells;

#[tonic::async_trait]
impl ShockCellService for ShockCells {
    async fn cell_spacing(
        &self,
        request: Request<pb::CellSpacingRequest>,
    ) -> Result<Response<pb::CellSpacingResponse>, Status> {
        let q = CellQuery::try_from(request.into_inner())?;
        Ok(Response::new(q.compute(&Cancel::default())?))
    }
}
