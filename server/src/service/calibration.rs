//! `jetloop.v1.CalibrationService`.

use crate::api::calibration::CalibratorQuery;
use crate::api::spectrum::{held_bytes, sample_width, values_in};
use crate::api::Compute;
use crate::metrics::Metrics;
use crate::runtime::budget::{Held, SampleBudget};
use jetloop_proto::pb::{self, calibration_service_server::CalibrationService};
use std::sync::Arc;
use tonic::{Request, Response, Status};

/// Handlers for calibrator readings. The samples are held against the server-wide sample
/// budget, like every recording, while the reading runs on the blocking pool.
#[derive(Debug, Clone)]
pub struct Calibration {
    budget: SampleBudget,
    metrics: Option<Arc<Metrics>>,
}

impl Calibration {
    /// Handlers sharing the server-wide budget of sample bytes, counting the samples they
    /// receive in `metrics` when given.
    pub fn new(budget: SampleBudget, metrics: Option<Arc<Metrics>>) -> Self {
        Self { budget, metrics }
    }
}

#[tonic::async_trait]
impl CalibrationService for Calibration {
    async fn calibrator_sensitivity(
        &self,
        request: Request<pb::CalibratorSensitivityRequest>,
    ) -> Result<Response<pb::CalibratorSensitivityResponse>, Status> {
        let work = crate::runtime::work_of(&request);
        let req = request.into_inner();
        let mut held = Held::default();
        let bytes = held_bytes(req.samples.as_ref());
        self.budget.take(&mut held, bytes, "samples")?;
        if let Some(m) = &self.metrics {
            m.note_samples(values_in(bytes, sample_width(req.samples.as_ref())), bytes as u64);
        }
        let r = crate::runtime::blocking("calibrator reading", work, move |c| {
            CalibratorQuery::try_from(req)?.compute(c)
        })
        .await?;
        drop(held);
        Ok(Response::new(r))
    }
}
