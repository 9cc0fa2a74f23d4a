//! `jetloop shock`: normal-shock jump conditions.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::gas::shock_report;
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

impl ShockArgs {
    /// The NormalShock request: upstream Mach number and gamma.
    pub(crate) fn request(&self) -> pb::NormalShockRequest {
        pb::NormalShockRequest { gamma: self.gamma, upstream_mach_number: self.mach }
    }
}

/// Runs `shock`.
impl Run for ShockArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = GasDynamicsServiceClient::new(ch).normal_shock(a.request()).await?.into_inner();
        Ok(shock_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> NormalShock request, without a server.

    use super::*;

    #[test]
    fn the_upstream_mach_number_and_gamma_reach_the_request() {
        let crate::Command::Shock(a) = crate::tests::command("shock --mach 2.5 --gamma 1.3") else {
            panic!("not shock")
        };
        assert_eq!(a.request(), pb::NormalShockRequest { gamma: Some(1.3), upstream_mach_number: 2.5 });
        let crate::Command::Shock(a) = crate::tests::command("shock --mach 3") else { panic!("not shock") };
        assert_eq!(a.request().gamma, None, "left to the server (1.4)");
    }
}
