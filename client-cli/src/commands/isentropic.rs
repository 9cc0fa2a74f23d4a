//! `jetloop isentropic`: isentropic ratios from a Mach number, or the Mach number from one ratio.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::gas::isentropic_report;
use crate::render::report::Report;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use jetloop_proto::pb::gas_dynamics_service_client::GasDynamicsServiceClient;
use jetloop_proto::pb::isentropic_ratios_request::Given;

/// Root of a two-valued relation.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum BranchArg {
    /// Mach number at most 1.
    Subsonic,
    /// Mach number at least 1.
    Supersonic,
}

/// `jetloop isentropic`: give exactly one quantity.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
#[command(group(clap::ArgGroup::new("given").required(true).args([
    "mach", "temperature_ratio", "pressure_ratio", "density_ratio", "area_ratio", "mach_angle_deg", "prandtl_meyer_deg"])))]
pub struct IsentropicArgs {
    /// Mach number.
    #[arg(long)]
    mach: Option<f64>,
    /// Static-to-total temperature ratio T/T0.
    #[arg(long)]
    temperature_ratio: Option<f64>,
    /// Static-to-total pressure ratio p/p0.
    #[arg(long)]
    pressure_ratio: Option<f64>,
    /// Static-to-total density ratio rho/rho0.
    #[arg(long)]
    density_ratio: Option<f64>,
    /// Area ratio A/A* (use --branch for the root).
    #[arg(long)]
    area_ratio: Option<f64>,
    /// Mach angle in degrees.
    #[arg(long)]
    mach_angle_deg: Option<f64>,
    /// Prandtl-Meyer angle in degrees.
    #[arg(long)]
    prandtl_meyer_deg: Option<f64>,
    /// Root to return for --area-ratio (server default: supersonic).
    #[arg(long, value_enum)]
    branch: Option<BranchArg>,
    /// Ratio of specific heats (server default 1.4).
    #[arg(long)]
    gamma: Option<f64>,
}

impl IsentropicArgs {
    /// The IsentropicRatios request: the one quantity given, the root for an area ratio and
    /// gamma (unset ones left to the server).
    pub(crate) fn request(&self) -> pb::IsentropicRatiosRequest {
        let given = [
            self.mach.map(Given::MachNumber),
            self.temperature_ratio.map(Given::TemperatureRatio),
            self.pressure_ratio.map(Given::PressureRatio),
            self.density_ratio.map(Given::DensityRatio),
            self.area_ratio.map(Given::AreaRatio),
            self.mach_angle_deg.map(Given::MachAngleDeg),
            self.prandtl_meyer_deg.map(Given::PrandtlMeyerAngleDeg),
        ]
        .into_iter()
        .flatten()
        .next();
        let branch = match self.branch {
            None => pb::MachBranch::Unspecified,
            Some(BranchArg::Subsonic) => pb::MachBranch::Subsonic,
            Some(BranchArg::Supersonic) => pb::MachBranch::Supersonic,
        };
        pb::IsentropicRatiosRequest { gamma: self.gamma, given, branch: branch as i32 }
    }
}

/// Runs `isentropic`.
impl Run for IsentropicArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = GasDynamicsServiceClient::new(ch).isentropic_ratios(a.request()).await?.into_inner();
        Ok(isentropic_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> IsentropicRatios request, without a server.

    use super::*;

    fn request(line: &str) -> pb::IsentropicRatiosRequest {
        let crate::Command::Isentropic(a) = crate::tests::command(line) else { panic!("{line}") };
        a.request()
    }

    #[test]
    fn the_quantity_given_its_branch_and_gamma_reach_the_request() {
        let r = request("isentropic --mach 2");
        assert_eq!((r.given, r.gamma), (Some(Given::MachNumber(2.0)), None));
        assert_eq!(r.branch, pb::MachBranch::Unspecified as i32, "the server picks the root");
        let r = request("isentropic --area-ratio 1.6875 --branch subsonic");
        assert_eq!(r.given, Some(Given::AreaRatio(1.6875)));
        assert_eq!(r.branch, pb::MachBranch::Subsonic as i32);
        let r = request("isentropic --prandtl-meyer-deg 26.38 --gamma 1.3");
        assert_eq!((r.given, r.gamma), (Some(Given::PrandtlMeyerAngleDeg(26.38)), Some(1.3)));
        assert_eq!(request("isentropic --pressure-ratio 0.5").given, Some(Given::PressureRatio(0.5)));
    }
}
