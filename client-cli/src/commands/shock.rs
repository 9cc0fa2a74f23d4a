//! `jetloop shock`: normal-shock jump conditions.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::gas_dynamics_service_client::GasDynamicsServiceClient;

/// `jetloop shock`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ShockArgs {
    /// Upstream Mach number M1 (at least 1).
    #[arg(long)]
    mach: f64,
    /// Ratio of specific heats (server default 1.4).
    #[arg(long)]
    gamma: Option<f64>,
}

/// Runs `shock`.
impl Run for ShockArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = GasDynamicsServiceClient::new(ch)
            .normal_shock(pb::NormalShockRequest { gamma: a.gamma, upstream_mach_number: a.mach })
            .await?
            .into_inner();
        Ok(Report::new("Normal shock")
            .num("gamma", "gamma", r.gamma, "")
            .num("upstream_mach_number", "upstream Mach M1", r.upstream_mach_number, "")
            .num("downstream_mach_number", "downstream Mach M2", r.downstream_mach_number, "")
            .num("static_pressure_ratio", "p2/p1", r.static_pressure_ratio, "")
            .num("density_ratio", "rho2/rho1", r.density_ratio, "")
            .num("static_temperature_ratio", "T2/T1", r.static_temperature_ratio, "")
            .num("total_pressure_ratio", "p02/p01", r.total_pressure_ratio, "")
            .num("pitot_to_upstream_static_ratio", "p02/p1 (pitot)", r.pitot_to_upstream_static_ratio, "")
            .provenance(r.provenance))
    }
}
