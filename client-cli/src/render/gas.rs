//! Reports of the gas-dynamics commands: isentropic ratios (`isentropic`), normal-shock
//! jumps (`shock`) and the fully expanded jet state (`jet`).

use crate::render::report::Report;
use crate::render::rows::regime_name;
use jetloop_proto::pb;

/// The isentropic ratios of an IsentropicRatios answer (angles in degrees).
pub(crate) fn isentropic_report(r: pb::IsentropicRatiosResponse) -> Report {
    Report::new("Isentropic flow")
        .num("gamma", "gamma", r.gamma, "")
        .num("mach_number", "Mach number", r.mach_number, "")
        .num("temperature_ratio", "T/T0", r.temperature_ratio, "")
        .num("pressure_ratio", "p/p0", r.pressure_ratio, "")
        .num("density_ratio", "rho/rho0", r.density_ratio, "")
        .num("area_ratio", "A/A*", r.area_ratio, "")
        .num("critical_velocity_ratio", "V/a*", r.critical_velocity_ratio, "")
        .opt("mach_angle_deg", "Mach angle", r.mach_angle_deg, "deg")
        .opt("prandtl_meyer_angle_deg", "Prandtl-Meyer angle", r.prandtl_meyer_angle_deg, "deg")
        .provenance(r.provenance)
}

/// The jump conditions of a NormalShock answer.
pub(crate) fn shock_report(r: pb::NormalShockResponse) -> Report {
    Report::new("Normal shock")
        .num("gamma", "gamma", r.gamma, "")
        .num("upstream_mach_number", "upstream Mach M1", r.upstream_mach_number, "")
        .num("downstream_mach_number", "downstream Mach M2", r.downstream_mach_number, "")
        .num("static_pressure_ratio", "p2/p1", r.static_pressure_ratio, "")
        .num("density_ratio", "rho2/rho1", r.density_ratio, "")
        .num("static_temperature_ratio", "T2/T1", r.static_temperature_ratio, "")
        .num("total_pressure_ratio", "p02/p01", r.total_pressure_ratio, "")
        .num("pitot_to_upstream_static_ratio", "p02/p1 (pitot)", r.pitot_to_upstream_static_ratio, "")
        .provenance(r.provenance)
}

/// Every field of a JetState answer, with units (the fully expanded quantities only when
/// the jet has them).
pub(crate) fn jet_state_report(r: pb::JetStateResponse) -> Report {
    let s = r.state.unwrap_or_default();
    Report::new("Fully expanded jet")
        .num("nozzle_pressure_ratio", "nozzle pressure ratio", s.nozzle_pressure_ratio, "")
        .num("total_pressure_pa", "reservoir pressure", s.total_pressure_pa, "Pa")
        .num("ambient_pressure_pa", "ambient pressure", s.ambient_pressure_pa, "Pa")
        .num("total_temperature_k", "reservoir temperature", s.total_temperature_k, "K")
        .num("ambient_temperature_k", "ambient temperature", s.ambient_temperature_k, "K")
        .num("total_to_ambient_temperature_ratio", "T0/T_ambient", s.total_to_ambient_temperature_ratio, "")
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
        .provenance(r.provenance)
}

#[cfg(test)]
mod tests {
    //! Answers built by hand -> report rows, without a server.

    use super::*;
    use serde_json::json;

    #[test]
    fn isentropic_rows_carry_the_ratios_and_the_angles_only_when_answered() {
        let r = pb::IsentropicRatiosResponse {
            gamma: 1.4,
            mach_number: 2.0,
            pressure_ratio: 0.1278,
            area_ratio: 1.6875,
            mach_angle_deg: Some(30.0),
            prandtl_meyer_angle_deg: None,
            ..Default::default()
        };
        let rep = isentropic_report(r);
        let v = rep.to_json();
        assert_eq!((v["mach_number"].clone(), v["pressure_ratio"].clone()), (json!(2.0), json!(0.1278)));
        assert_eq!(v["mach_angle_deg"], json!(30.0));
        assert!(v.get("prandtl_meyer_angle_deg").is_none(), "{v}");
        let t = rep.to_table();
        assert!(t.starts_with("Isentropic flow\n"), "{t}");
        assert!(t.lines().any(|l| l.contains("A/A*") && l.contains("1.6875")), "{t}");
        assert!(t.lines().any(|l| l.contains("Mach angle") && l.contains("30") && l.ends_with("deg")), "{t}");
    }

    #[test]
    fn shock_rows_name_both_sides() {
        let v = shock_report(pb::NormalShockResponse {
            upstream_mach_number: 2.5,
            downstream_mach_number: 0.513,
            static_pressure_ratio: 7.125,
            ..Default::default()
        })
        .to_json();
        assert_eq!(v["upstream_mach_number"], json!(2.5));
        assert_eq!(v["downstream_mach_number"], json!(0.513));
        assert_eq!(v["static_pressure_ratio"], json!(7.125));
    }

    #[test]
    fn jet_state_rows_carry_the_regime_name_and_units() {
        let r = pb::JetStateResponse {
            state: Some(pb::JetState {
                nozzle_pressure_ratio: 4.0,
                regime: pb::ExpansionRegime::UnderExpanded as i32,
                fully_expanded_mach_number: Some(1.5588),
                mass_flow_kg_per_s: Some(0.25),
                fully_expanded_height_m: None,
                ..Default::default()
            }),
            provenance: None,
        };
        let rep = jet_state_report(r);
        let v = rep.to_json();
        assert_eq!(v["regime"], json!("under-expanded"));
        assert_eq!(v["fully_expanded_mach_number"], json!(1.5588));
        assert!(v.get("fully_expanded_height_m").is_none(), "a round jet has no hj: {v}");
        let t = rep.to_table();
        assert!(
            t.lines().any(|l| l.contains("mass flow") && l.contains("0.25") && l.ends_with("kg/s")),
            "{t}"
        );
    }
}
