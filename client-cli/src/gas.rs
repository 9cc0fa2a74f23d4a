//! Gas-dynamics subcommands: isentropic, shock, jet; and info.

use crate::output::Report;
use crate::{Ctx, Failure, Run};
use clap::{Args, ValueEnum};
use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient, info_service_client::InfoServiceClient,
    isentropic_ratios_request::Given, nozzle::Kind, operating_point::Pressure,
};

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

/// Nozzle kinds on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum NozzleArg {
    /// Round convergent (sonic exit): needs --diameter-m.
    Convergent,
    /// Round convergent-divergent: needs --diameter-m and --design-mach or --area-ratio.
    Cd,
    /// Rectangular: needs --height-m and --width-m (optional --design-mach).
    Rectangular,
    /// Planar (two-dimensional): needs --height-m (optional --design-mach).
    Planar,
}

/// `jetloop jet`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
#[command(group(clap::ArgGroup::new("pressure").args(["npr", "total_pressure_pa", "gauge_pressure_pa"])))]
pub struct JetArgs {
    /// Nozzle kind.
    #[arg(long, value_enum, default_value = "convergent")]
    nozzle: NozzleArg,
    /// Exit diameter in m (round nozzles).
    #[arg(long)]
    diameter_m: Option<f64>,
    /// Exit height in m (rectangular, planar).
    #[arg(long)]
    height_m: Option<f64>,
    /// Exit width in m (rectangular).
    #[arg(long)]
    width_m: Option<f64>,
    /// Design Mach number (cd, rectangular, planar).
    #[arg(long)]
    design_mach: Option<f64>,
    /// Exit-to-throat area ratio (cd, instead of --design-mach).
    #[arg(long, conflicts_with = "design_mach")]
    area_ratio: Option<f64>,
    /// Nozzle pressure ratio p0/p_ambient.
    #[arg(long)]
    npr: Option<f64>,
    /// Reservoir total pressure in Pa (absolute); needs --ambient-pressure-pa.
    #[arg(long, requires = "ambient_pressure_pa")]
    total_pressure_pa: Option<f64>,
    /// Reservoir gauge pressure in Pa (above ambient, as rig transducers read it); needs
    /// --ambient-pressure-pa (absolute, e.g. the lab barometer). Example: --gauge-pressure-pa
    /// 253312 --ambient-pressure-pa 101325 is NPR 3.5.
    #[arg(long, requires = "ambient_pressure_pa")]
    gauge_pressure_pa: Option<f64>,
    /// Ambient pressure in Pa (server default 101325).
    #[arg(long)]
    ambient_pressure_pa: Option<f64>,
    /// Reservoir total temperature in K (server default: the ambient temperature).
    #[arg(long)]
    total_temperature_k: Option<f64>,
    /// Ambient temperature in K (server default 288.15).
    #[arg(long)]
    ambient_temperature_k: Option<f64>,
    /// Ratio of specific heats (server default 1.4).
    #[arg(long)]
    gamma: Option<f64>,
    /// Specific gas constant in J/(kg K) (server default 287.05).
    #[arg(long)]
    gas_constant: Option<f64>,
    /// Ratio of specific heats of the surroundings (server default 1.4, dry air).
    #[arg(long)]
    ambient_gamma: Option<f64>,
    /// Specific gas constant of the surroundings in J/(kg K) (server default 287.05, dry air).
    #[arg(long)]
    ambient_gas_constant: Option<f64>,
    /// Tolerance on |pe/pa - 1| for the ideally expanded class (server default 0.005).
    #[arg(long)]
    ideal_tolerance: Option<f64>,
}

fn need(v: Option<f64>, flag: &str, nozzle: &str) -> Result<f64, Failure> {
    v.ok_or_else(|| Failure::Usage(format!("--nozzle {nozzle} needs {flag}")))
}

impl JetArgs {
    /// The jet conditions message these arguments describe.
    pub fn conditions(&self) -> Result<pb::JetConditions, Failure> {
        self.conditions_inner(false)
    }

    /// The nozzle, temperatures and gas, with the pressure left for the server to fill (sweeps
    /// and fits set it per point).
    pub fn context(&self) -> Result<pb::JetConditions, Failure> {
        self.conditions_inner(true)
    }

    fn conditions_inner(&self, pressure_optional: bool) -> Result<pb::JetConditions, Failure> {
        use pb::round_convergent_divergent_nozzle::Design;
        let kind = match self.nozzle {
            NozzleArg::Convergent => Kind::RoundConvergent(pb::RoundConvergentNozzle {
                exit_diameter_m: need(self.diameter_m, "--diameter-m", "convergent")?,
            }),
            NozzleArg::Cd => Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle {
                exit_diameter_m: need(self.diameter_m, "--diameter-m", "cd")?,
                design: Some(match (self.design_mach, self.area_ratio) {
                    (Some(md), _) => Design::DesignMachNumber(md),
                    (None, Some(ar)) => Design::ExitToThroatAreaRatio(ar),
                    (None, None) => {
                        return Err(Failure::Usage("--nozzle cd needs --design-mach or --area-ratio".into()))
                    }
                }),
            }),
            NozzleArg::Rectangular => Kind::Rectangular(pb::RectangularNozzle {
                exit_height_m: need(self.height_m, "--height-m", "rectangular")?,
                exit_width_m: need(self.width_m, "--width-m", "rectangular")?,
                design_mach_number: self.design_mach,
            }),
            NozzleArg::Planar => Kind::Planar(pb::PlanarNozzle {
                exit_height_m: need(self.height_m, "--height-m", "planar")?,
                design_mach_number: self.design_mach,
            }),
        };
        let (pressure, ambient_pressure_pa) = match (self.npr, self.total_pressure_pa) {
            (Some(npr), _) => (Some(Pressure::NozzlePressureRatio(npr)), self.ambient_pressure_pa),
            (None, None) if self.gauge_pressure_pa.is_some() => (
                Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
                    reservoir_gauge_pressure_pa: self.gauge_pressure_pa.unwrap_or_default(),
                    ambient_pressure_pa: self.ambient_pressure_pa.unwrap_or_default(),
                })),
                None,
            ),
            (None, Some(p0)) => (
                Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
                    total_pressure_pa: p0,
                    ambient_pressure_pa: self.ambient_pressure_pa.unwrap_or_default(),
                })),
                None,
            ),
            (None, None) if pressure_optional => (None, self.ambient_pressure_pa),
            (None, None) => {
                return Err(Failure::Usage("give --npr, --total-pressure-pa or --gauge-pressure-pa".into()))
            }
        };
        Ok(pb::JetConditions {
            nozzle: Some(pb::Nozzle { kind: Some(kind) }),
            operating_point: Some(pb::OperatingPoint {
                pressure,
                total_temperature_k: self.total_temperature_k,
                ambient_temperature_k: self.ambient_temperature_k,
                ambient_pressure_pa,
            }),
            gas: Some(pb::Gas { gamma: self.gamma, gas_constant_j_per_kg_k: self.gas_constant }),
            ambient_gas: Some(self.ambient_gas()),
            ideal_expansion_tolerance: self.ideal_tolerance,
        })
    }

    /// The gas of the surroundings.
    pub fn ambient_gas(&self) -> pb::Gas {
        pb::Gas { gamma: self.ambient_gamma, gas_constant_j_per_kg_k: self.ambient_gas_constant }
    }
}

impl JetArgs {
    /// True when an operating pressure (NPR or total pressure) was given.
    pub fn pressure_given(&self) -> bool {
        self.npr.is_some() || self.total_pressure_pa.is_some() || self.gauge_pressure_pa.is_some()
    }

    /// Total and ambient temperatures and the gas, for a jet given directly.
    pub fn conditions_gas_and_temperatures(&self) -> (Option<f64>, Option<f64>, pb::Gas) {
        (
            self.total_temperature_k,
            self.ambient_temperature_k,
            pb::Gas { gamma: self.gamma, gas_constant_j_per_kg_k: self.gas_constant },
        )
    }
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

/// Lower-case regime name for tables.
pub fn regime_name(r: i32) -> String {
    if r == pb::ExpansionRegime::Unspecified as i32 {
        return "n/a (jet given directly)".into();
    }
    pb::ExpansionRegime::try_from(r)
        .map(|e| e.as_str_name().trim_start_matches("EXPANSION_REGIME_").to_lowercase().replace('_', "-"))
        .unwrap_or_else(|_| format!("unknown ({r})"))
}

/// Runs `jet`.
impl Run for JetArgs {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let conditions = a.conditions()?;
        let r = GasDynamicsServiceClient::new(ch)
            .jet_state(pb::JetStateRequest { conditions: Some(conditions) })
            .await?
            .into_inner();
        let s = r.state.unwrap_or_default();
        Ok(Report::new("Fully expanded jet")
            .num("nozzle_pressure_ratio", "nozzle pressure ratio", s.nozzle_pressure_ratio, "")
            .num("total_pressure_pa", "reservoir pressure", s.total_pressure_pa, "Pa")
            .num("ambient_pressure_pa", "ambient pressure", s.ambient_pressure_pa, "Pa")
            .num("total_temperature_k", "reservoir temperature", s.total_temperature_k, "K")
            .num("ambient_temperature_k", "ambient temperature", s.ambient_temperature_k, "K")
            .num(
                "total_to_ambient_temperature_ratio",
                "T0/T_ambient",
                s.total_to_ambient_temperature_ratio,
                "",
            )
            .num("design_mach_number", "design Mach number", s.design_mach_number, "")
            .num("design_nozzle_pressure_ratio", "design NPR", s.design_nozzle_pressure_ratio, "")
            .text("regime", "regime", regime_name(s.regime))
            .flag("supersonic", "supersonic (shock cells)", s.supersonic)
            .flag("exit_supersonic", "supersonic at the exit", s.exit_supersonic)
            .flag("choked", "choked", s.choked)
            .flag("mach_disk_expected", "Mach disk expected", s.mach_disk_expected)
            .num("exit_to_ambient_pressure_ratio", "pe/pa", s.exit_to_ambient_pressure_ratio, "")
            .num("ideal_expansion_tolerance", "ideal if |pe/pa - 1| <=", s.ideal_expansion_tolerance, "")
            .num("isentropic_mach_number", "isentropic Mach number", s.isentropic_mach_number, "")
            .opt("fully_expanded_mach_number", "Mj", s.fully_expanded_mach_number, "")
            .opt("beta_from_design_mach", "sqrt|Mj^2-Md^2|", s.beta_from_design_mach, "")
            .opt("fully_expanded_diameter_m", "Dj", s.fully_expanded_diameter_m, "m")
            .opt("fully_expanded_height_m", "hj", s.fully_expanded_height_m, "m")
            .opt("fully_expanded_width_m", "bj", s.fully_expanded_width_m, "m")
            .opt("fully_expanded_to_exit_area_ratio", "Aj/Ae", s.fully_expanded_to_exit_area_ratio, "")
            .opt("fully_expanded_temperature_k", "Tj", s.fully_expanded_temperature_k, "K")
            .opt("fully_expanded_velocity_m_per_s", "Uj", s.fully_expanded_velocity_m_per_s, "m/s")
            .opt("fully_expanded_density_kg_per_m3", "rho_j", s.fully_expanded_density_kg_per_m3, "kg/m^3")
            .opt("jet_sound_speed_m_per_s", "a_j", s.jet_sound_speed_m_per_s, "m/s")
            .num("ambient_sound_speed_m_per_s", "a_ambient", s.ambient_sound_speed_m_per_s, "m/s")
            .opt("acoustic_mach_number", "Uj/a_ambient", s.acoustic_mach_number, "")
            .num("exit_mach_number", "exit Mach number", s.exit_mach_number, "")
            .num("exit_pressure_pa", "exit pressure", s.exit_pressure_pa, "Pa")
            .opt("exit_area_m2", "exit area", s.exit_area_m2, "m^2")
            .opt("mass_flow_kg_per_s", "mass flow", s.mass_flow_kg_per_s, "kg/s")
            .opt(
                "mass_flow_per_span_kg_per_s_m",
                "mass flow per span",
                s.mass_flow_per_span_kg_per_s_m,
                "kg/(s m)",
            )
            .num("gamma", "gamma", s.gamma, "")
            .num("gas_constant_j_per_kg_k", "gas constant", s.gas_constant_j_per_kg_k, "J/(kg K)")
            .provenance(r.provenance))
    }
}

/// Runs `info`.
/// `jetloop info`: no arguments.
#[derive(Debug, Args)]
pub struct InfoCmd {}

impl Run for InfoCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let ch = ctx.channel().await?;
        let r = InfoServiceClient::new(ch).server_info(pb::ServerInfoRequest {}).await?.into_inner();
        let l = r.limits.unwrap_or_default();
        let mut p = r.provenance.unwrap_or_default();
        p.models = r.models;
        Ok(Report::new(format!("jetloop server {}", r.server_version))
            .text("services", "services", r.services.join(", "))
            .int("max_request_bytes", "largest request", l.max_request_bytes, "bytes")
            .num("request_timeout_s", "time limit per call", l.request_timeout_s, "s")
            .num("stream_timeout_s", "time limit per live tracking stream", l.stream_timeout_s, "s")
            .int("max_concurrent_requests", "calls at once (server-wide)", l.max_concurrent_requests, "")
            .provenance(Some(p)))
    }
}
