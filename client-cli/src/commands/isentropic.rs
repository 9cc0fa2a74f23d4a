//! `jetloop isentropic`: isentropic ratios from a Mach number, or the Mach number from one ratio.

use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
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

/// Runs `isentropic`.
impl Run for IsentropicArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let given = [
            a.mach.map(Given::MachNumber),
            a.temperature_ratio.map(Given::TemperatureRatio),
            a.pressure_ratio.map(Given::PressureRatio),
            a.density_ratio.map(Given::DensityRatio),
            a.area_ratio.map(Given::AreaRatio),
            a.mach_angle_deg.map(Given::MachAngleDeg),
            a.prandtl_meyer_deg.map(Given::PrandtlMeyerAngleDeg),
        ]
        .into_iter()
        .flatten()
        .next();
        let branch = match a.branch {
            None => pb::MachBranch::Unspecified,
            Some(BranchArg::Subsonic) => pb::MachBranch::Subsonic,
            Some(BranchArg::Supersonic) => pb::MachBranch::Supersonic,
        };
        let r = GasDynamicsServiceClient::new(ch)
            .isentropic_ratios(pb::IsentropicRatiosRequest { gamma: a.gamma, given, branch: branch as i32 })
            .await?
            .into_inner();
        Ok(Report::new("Isentropic flow")
            .num("gamma", "gamma", r.gamma, "")
            .num("mach_number", "Mach number", r.mach_number, "")
            .num("temperature_ratio", "T/T0", r.temperature_ratio, "")
            .num("pressure_ratio", "p/p0", r.pressure_ratio, "")
            .num("density_ratio", "rho/rho0", r.density_ratio, "")
            .num("area_ratio", "A/A*", r.area_ratio, "")
            .num("critical_velocity_ratio", "V/a*", r.critical_velocity_ratio, "")
            .opt("mach_angle_deg", "Mach angle", r.mach_angle_deg, "deg")
            .opt("prandtl_meyer_angle_deg", "Prandtl-Meyer angle", r.prandtl_meyer_angle_deg, "deg")
            .provenance(r.provenance))
    }
}
