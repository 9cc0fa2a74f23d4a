//! `jetloop health`: the server's gRPC health service, for container and service-manager
//! health checks (exit code 0 when it answers SERVING, 5 otherwise).

use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;

/// Asks the server's health service about the whole server.
pub(crate) async fn run(ctx: &Ctx) -> Result<Report, Failure> {
    use tonic_health::pb::{health_check_response::ServingStatus, health_client::HealthClient};
    let r = HealthClient::new(ctx.channel().await?)
        .check(tonic_health::pb::HealthCheckRequest { service: String::new() })
        .await?
        .into_inner();
    match ServingStatus::try_from(r.status) {
        Ok(ServingStatus::Serving) => Ok(Report::new("SERVING")),
        other => Err(Failure::Server(tonic::Status::unavailable(format!(
            "health: {}",
            other.map_or("unknown status", |s| s.as_str_name())
        )))),
    }
}
