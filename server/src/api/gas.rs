//! GasDynamicsService: request conversion and response building.

use super::conditions::{jet_spec, JetSpec};
use super::error::{ApiError, Check};
use super::field::Fields;
use super::provenance::{provenance, provenance_owned, Defaults};
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::gas::{self, Branch, Gas, Isentropic, IsentropicInput, NormalShock};
use crate::physics::jet::{self, JetSize, JetState, Regime};
use crate::physics::models;
use jetloop_proto::pb;

/// The reason recorded with standard-atmosphere defaults (the answer notes when they were used).
const ISA_REASON: &str = jet::AMBIENT_TEMPERATURE.reason;

/// A validated isentropic question.
#[derive(Debug, Clone, PartialEq)]
pub struct IsentropicQuery {
    /// Gas.
    pub gas: Gas,
    /// The quantity given.
    pub input: IsentropicInput,
    /// Defaults applied.
    pub defaults: Defaults,
    /// Notes on the request (a branch given where it has no effect).
    pub notes: Vec<String>,
}

/// A validated normal-shock question.
#[derive(Debug, Clone, PartialEq)]
pub struct NormalShockQuery {
    /// Gas.
    pub gas: Gas,
    /// Upstream Mach number.
    pub m1: f64,
    /// Defaults applied.
    pub defaults: Defaults,
}

fn gamma_only(check: &mut Check, defaults: &mut Defaults, gamma: Option<f64>) -> Option<Gas> {
    let g = Fields::new(check, defaults, "").read(gamma, &gas::JET_GAMMA).unwrap_or(gas::AIR_GAMMA);
    check.range("", Gas::new(g, gas::AIR_GAS_CONSTANT))
}

impl TryFrom<pb::IsentropicRatiosRequest> for IsentropicQuery {
    type Error = ApiError;

    fn try_from(req: pb::IsentropicRatiosRequest) -> Result<Self, ApiError> {
        use pb::isentropic_ratios_request::Given;
        let pb::IsentropicRatiosRequest { gamma, given, branch } = req;
        let mut check = Check::new();
        let mut defaults = Defaults::default();
        let gas = gamma_only(&mut check, &mut defaults, gamma);
        let branch = match pb::MachBranch::try_from(branch) {
            Ok(pb::MachBranch::Subsonic) => Some(Some(Branch::Subsonic)),
            Ok(pb::MachBranch::Supersonic) => Some(Some(Branch::Supersonic)),
            Ok(pb::MachBranch::Unspecified) => Some(None),
            Err(_) => {
                check.other("branch", format!("branch = {branch} is not a MachBranch value (0, 1 or 2)"));
                None
            }
        };
        let supersonic_only = |check: &mut Check, field: &str| {
            if branch == Some(Some(Branch::Subsonic)) {
                check.other(
                    field,
                    format!(
                        "{field} exists only on the supersonic branch (Mach >= 1); \
                         branch must be MACH_BRANCH_SUPERSONIC or unset"
                    ),
                );
            }
        };
        let input = match given {
            None => {
                check.missing(
                    "given",
                    "set exactly one of mach_number, temperature_ratio, pressure_ratio, \
                     density_ratio, area_ratio, mach_angle_deg, prandtl_meyer_angle_deg",
                );
                None
            }
            Some(Given::MachNumber(m)) => {
                check.range("", gas::MACH.check("mach_number", m)).map(IsentropicInput::Mach)
            }
            Some(Given::TemperatureRatio(r)) => Some(IsentropicInput::TemperatureRatio(r)),
            Some(Given::PressureRatio(r)) => Some(IsentropicInput::PressureRatio(r)),
            Some(Given::DensityRatio(r)) => Some(IsentropicInput::DensityRatio(r)),
            Some(Given::AreaRatio(a)) => {
                let b = match branch.flatten() {
                    Some(b) => b,
                    None => {
                        defaults.note("branch", "supersonic", "jets of interest are supersonic");
                        Branch::Supersonic
                    }
                };
                Some(IsentropicInput::AreaRatio(a, b))
            }
            Some(Given::MachAngleDeg(mu)) => {
                supersonic_only(&mut check, "mach_angle_deg");
                Some(IsentropicInput::MachAngleDeg(mu))
            }
            Some(Given::PrandtlMeyerAngleDeg(nu)) => {
                supersonic_only(&mut check, "prandtl_meyer_angle_deg");
                Some(IsentropicInput::PrandtlMeyerDeg(nu))
            }
        };
        // A branch chooses between the two roots of A/A* only; for any other input the Mach
        // number is unique, and a branch that contradicts it is refused.
        let mut notes = Vec::new();
        if let (Some(gas), Some(input), Some(Some(b))) = (gas, input, branch) {
            let side = |v: f64, sonic: f64, rising: bool| {
                if v == sonic {
                    None
                } else {
                    Some(if (v > sonic) == rising { Branch::Supersonic } else { Branch::Subsonic })
                }
            };
            let unique = match input {
                IsentropicInput::Mach(m) => Some(("mach_number", side(m, 1.0, true))),
                IsentropicInput::TemperatureRatio(r) => {
                    Some(("temperature_ratio", side(r, gas.temperature_ratio(1.0), false)))
                }
                IsentropicInput::PressureRatio(r) => {
                    Some(("pressure_ratio", side(r, gas.pressure_ratio(1.0), false)))
                }
                IsentropicInput::DensityRatio(r) => {
                    Some(("density_ratio", side(r, gas.density_ratio(1.0), false)))
                }
                IsentropicInput::AreaRatio(..)
                | IsentropicInput::MachAngleDeg(_)
                | IsentropicInput::PrandtlMeyerDeg(_) => None,
            };
            match unique {
                Some((field, Some(actual))) if actual != b => check.other(
                    "branch",
                    format!(
                        "branch = {} contradicts {field}, whose Mach number is {}: the branch \
                         chooses between the two roots of area_ratio only; unset it",
                        branch_name(b),
                        if actual == Branch::Subsonic { "below 1" } else { "above 1" }
                    ),
                ),
                Some((field, _)) => notes.push(format!(
                    "branch = {} has no effect: {field} gives one Mach number (the branch \
                     chooses between the two roots of area_ratio only).",
                    branch_name(b)
                )),
                None => {}
            }
        }
        let q = gas.zip(input).map(|(gas, input)| IsentropicQuery { gas, input, defaults, notes });
        check.finish(q)
    }
}

fn branch_name(b: Branch) -> &'static str {
    match b {
        Branch::Subsonic => "MACH_BRANCH_SUBSONIC",
        Branch::Supersonic => "MACH_BRANCH_SUPERSONIC",
    }
}

impl TryFrom<pb::NormalShockRequest> for NormalShockQuery {
    type Error = ApiError;

    fn try_from(req: pb::NormalShockRequest) -> Result<Self, ApiError> {
        let pb::NormalShockRequest { gamma, upstream_mach_number } = req;
        let mut check = Check::new();
        let mut defaults = Defaults::default();
        let gas = gamma_only(&mut check, &mut defaults, gamma);
        // proto3 sends an unset double as 0, which is never a valid upstream Mach number.
        let m1 = if upstream_mach_number == 0.0 {
            check.missing(
                "upstream_mach_number",
                &format!("give the upstream Mach number, in {}", gas::SHOCK_MACH),
            );
            None
        } else {
            check.range("", gas::SHOCK_MACH.check("upstream_mach_number", upstream_mach_number))
        };
        check.finish(gas.zip(m1).map(|(gas, m1)| NormalShockQuery { gas, m1, defaults }))
    }
}

impl Compute for IsentropicQuery {
    type Response = pb::IsentropicRatiosResponse;

    /// Solves the isentropic question ([`Gas::isentropic`]) and builds the response.
    ///
    /// # Errors
    /// [`ApiError::Invalid`] naming the input whose result lies outside the Mach range.
    fn compute(self, cancel: &Cancel) -> Result<pb::IsentropicRatiosResponse, ApiError> {
        let (q, _) = (self, cancel);
        let mut check = Check::new();
        let r = check.range("", q.gas.isentropic(q.input));
        Ok(isentropic_message(q, &check.finish(r)?))
    }
}

impl Compute for NormalShockQuery {
    type Response = pb::NormalShockResponse;

    /// Computes the normal shock ([`Gas::normal_shock`]) and builds the response.
    ///
    /// # Errors
    /// [`ApiError::Invalid`] naming `upstream_mach_number` (already checked in the conversion).
    fn compute(self, cancel: &Cancel) -> Result<pb::NormalShockResponse, ApiError> {
        let (q, _) = (&self, cancel);
        let mut check = Check::new();
        let s = check.range("", q.gas.normal_shock(q.m1));
        Ok(normal_shock_message(q, &check.finish(s)?))
    }
}

/// Builds the IsentropicRatios response.
pub fn isentropic_message(q: IsentropicQuery, r: &Isentropic) -> pb::IsentropicRatiosResponse {
    let both = [models::ISENTROPIC, models::PRANDTL_MEYER];
    let used = if r.prandtl_meyer_deg.is_some() { &both[..] } else { &both[..1] };
    pb::IsentropicRatiosResponse {
        gamma: q.gas.gamma(),
        mach_number: r.mach,
        temperature_ratio: r.temperature_ratio,
        pressure_ratio: r.pressure_ratio,
        density_ratio: r.density_ratio,
        area_ratio: r.area_ratio,
        mach_angle_deg: r.mach_angle_deg,
        prandtl_meyer_angle_deg: r.prandtl_meyer_deg,
        critical_velocity_ratio: r.critical_velocity_ratio,
        provenance: Some(provenance_owned(used, q.defaults, q.notes)),
    }
}

/// Builds the NormalShock response.
pub fn normal_shock_message(q: &NormalShockQuery, s: &NormalShock) -> pb::NormalShockResponse {
    pb::NormalShockResponse {
        gamma: q.gas.gamma(),
        upstream_mach_number: s.upstream_mach,
        downstream_mach_number: s.downstream_mach,
        static_pressure_ratio: s.static_pressure_ratio,
        density_ratio: s.density_ratio,
        static_temperature_ratio: s.static_temperature_ratio,
        total_pressure_ratio: s.total_pressure_ratio,
        pitot_to_upstream_static_ratio: s.pitot_to_upstream_static_ratio,
        provenance: Some(provenance(&[models::NORMAL_SHOCK], &q.defaults, Vec::new())),
    }
}

/// Proto enum for a regime.
pub fn regime(r: Regime) -> pb::ExpansionRegime {
    match r {
        Regime::Subsonic => pb::ExpansionRegime::Subsonic,
        Regime::ShockInNozzle => pb::ExpansionRegime::ShockInNozzle,
        Regime::OverExpanded => pb::ExpansionRegime::OverExpanded,
        Regime::IdeallyExpanded => pb::ExpansionRegime::IdeallyExpanded,
        Regime::UnderExpanded => pb::ExpansionRegime::UnderExpanded,
    }
}

/// Proto message for a jet state.
pub fn jet_state_message(s: &JetState) -> pb::JetState {
    let (dj, hj, bj) = match s.size {
        JetSize::Round { diameter_m } => (Some(diameter_m), None, None),
        JetSize::Rectangular { height_m, width_m } => (None, Some(height_m), Some(width_m)),
        JetSize::Planar { height_m } => (None, Some(height_m), None),
    };
    let planar = s.is_planar();
    // Fully expanded values only where an isentropic expansion describes the jet.
    let fe = |v: f64| s.isentropic_expansion.then_some(v);
    let (dj, hj, bj) = if s.isentropic_expansion { (dj, hj, bj) } else { (None, None, None) };
    pb::JetState {
        nozzle_pressure_ratio: s.npr,
        total_pressure_pa: s.total_pressure_pa,
        ambient_pressure_pa: s.ambient_pressure_pa,
        total_temperature_k: s.total_temperature_k,
        ambient_temperature_k: s.ambient_temperature_k,
        gamma: s.gas.gamma(),
        gas_constant_j_per_kg_k: s.gas.gas_constant(),
        ambient_gamma: s.ambient_gas.gamma(),
        ambient_gas_constant_j_per_kg_k: s.ambient_gas.gas_constant(),
        design_mach_number: s.md,
        design_nozzle_pressure_ratio: s.design_npr,
        regime: regime(s.regime) as i32,
        supersonic: s.supersonic,
        fully_expanded_mach_number: fe(s.mj),
        beta_from_design_mach: fe(s.beta_from_design_mach),
        fully_expanded_temperature_k: fe(s.tj_k),
        fully_expanded_velocity_m_per_s: fe(s.uj_m_s),
        fully_expanded_density_kg_per_m3: fe(s.rho_j_kg_m3),
        jet_sound_speed_m_per_s: fe(s.aj_m_s),
        ambient_sound_speed_m_per_s: s.a_amb_m_s,
        acoustic_mach_number: fe(s.acoustic_mach),
        exit_mach_number: s.exit_mach,
        exit_pressure_pa: s.exit_pressure_pa,
        fully_expanded_to_exit_area_ratio: fe(s.area_ratio),
        fully_expanded_diameter_m: dj,
        fully_expanded_height_m: hj,
        fully_expanded_width_m: bj,
        mass_flow_kg_per_s: (!planar).then_some(s.mass_flow),
        mass_flow_per_span_kg_per_s_m: planar.then_some(s.mass_flow),
        choked: s.choked,
        mach_disk_expected: s.mach_disk_expected(),
        total_to_ambient_temperature_ratio: s.total_to_ambient_temperature_ratio,
        exit_area_m2: s.exit_area_m2,
        isentropic_mach_number: s.mj,
        exit_supersonic: s.exit_supersonic,
        exit_to_ambient_pressure_ratio: s.exit_to_ambient_pressure_ratio(),
        ideal_expansion_tolerance: s.ideal_tolerance,
    }
}

/// Safety sentence added to every jet-state answer.
pub const PRESSURE_CAUTION: &str = "Caution: reservoirs and nozzle supply lines are pressure \
equipment, and jets at these conditions can produce tones above 140 dB near the nozzle. Follow \
local codes, the facility's procedures and licensed practice; these numbers are no basis for \
safety decisions.";

/// Builds the JetState response.
pub fn jet_state_response_message(spec: &JetSpec, s: &JetState) -> pb::JetStateResponse {
    let mut notes = s.notes();
    notes.push(PRESSURE_CAUTION.to_string());
    let mut used = vec![models::FULLY_EXPANDED_JET, models::ISENTROPIC, models::CHOKED_MASS_FLOW];
    if spec.defaults.0.iter().any(|d| d.reason == ISA_REASON) {
        used.push(models::STANDARD_ATMOSPHERE);
    }
    pb::JetStateResponse {
        state: Some(jet_state_message(s)),
        provenance: Some(provenance(&used, &spec.defaults, notes)),
    }
}

/// Computes the jet state for validated conditions.
/// A validated JetState question: the conditions.
#[derive(Debug, Clone)]
pub struct JetStateQuery(pub JetSpec);

impl TryFrom<pb::JetStateRequest> for JetStateQuery {
    type Error = ApiError;

    fn try_from(req: pb::JetStateRequest) -> Result<Self, ApiError> {
        jet_spec(req.conditions, "conditions").map(JetStateQuery)
    }
}

impl Compute for JetStateQuery {
    type Response = pb::JetStateResponse;

    /// The jet state ([`jet::jet_state`]) and its response.
    fn compute(self, _cancel: &Cancel) -> Result<pb::JetStateResponse, ApiError> {
        let spec = &self.0;
        Ok(jet_state_response_message(spec, &jet::jet_state(&spec.gas, &spec.nozzle, &spec.op)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn conditions(kind: pb::nozzle::Kind, npr: f64) -> Option<pb::JetConditions> {
        Some(pb::JetConditions {
            nozzle: Some(pb::Nozzle { kind: Some(kind) }),
            operating_point: Some(pb::OperatingPoint {
                pressure: Some(pb::operating_point::Pressure::NozzlePressureRatio(npr)),
                ..Default::default()
            }),
            gas: None,
            ambient_gas: None,
            ideal_expansion_tolerance: None,
        })
    }

    #[test]
    fn defaults_are_recorded() {
        let spec = jet_spec(
            conditions(
                pb::nozzle::Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m: 0.02 }),
                3.0,
            ),
            "conditions",
        )
        .unwrap();
        let fields: Vec<_> = spec.defaults.0.iter().map(|d| d.field.as_str()).collect();
        assert!(fields.contains(&"conditions.gas.gamma"));
        assert!(fields.contains(&"conditions.operating_point.ambient_pressure_pa"));
        assert!(fields.contains(&"conditions.operating_point.total_temperature_k"));
    }

    #[test]
    fn every_bad_field_is_reported_at_once() {
        let mut c = conditions(
            pb::nozzle::Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m: -1.0 }),
            0.5,
        );
        c.as_mut().unwrap().gas = Some(pb::Gas { gamma: Some(f64::NAN), gas_constant_j_per_kg_k: None });
        let ApiError::Invalid(v) = jet_spec(c, "conditions").unwrap_err() else { panic!() };
        let fields: Vec<_> = v.iter().map(|v| v.field.as_str()).collect();
        assert_eq!(
            fields,
            [
                "conditions.gas.gamma",
                "conditions.nozzle.round_convergent.exit_diameter_m",
                "conditions.operating_point.nozzle_pressure_ratio"
            ]
        );
    }
}
