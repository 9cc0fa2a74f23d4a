//! `jetloop jet`: the fully expanded jet state of a nozzle at an operating point.

use crate::args::jet::JetArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::rows::regime_name;
use jetloop_proto::pb;
use jetloop_proto::pb::gas_dynamics_service_client::GasDynamicsServiceClient;

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
