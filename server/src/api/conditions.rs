//! Jet conditions as requests give them (gas, nozzle, operating point) converted into the
//! domain's, every unset field defaulted and recorded; shared by every service that takes a jet.

use super::error::{ApiError, Check};
use super::field::Fields;
use super::provenance::Defaults;
use crate::physics::gas::{self, Gas};
use crate::physics::jet::{self, plausible, Nozzle, OperatingPoint, Section};
use jetloop_proto::pb;

/// Validated jet conditions: gas, nozzle and operating point.
#[derive(Debug, Clone, PartialEq)]
pub struct JetSpec {
    /// Gas.
    pub gas: Gas,
    /// Nozzle.
    pub nozzle: Nozzle,
    /// Operating point.
    pub op: OperatingPoint,
    /// Defaults applied.
    pub defaults: Defaults,
}

/// Converts a `Gas` message at `path` (jet gas, or the ambient gas when `ambient`), recording
/// the dry-air defaults of unset fields.
pub fn gas_from(
    check: &mut Check,
    defaults: &mut Defaults,
    msg: Option<pb::Gas>,
    path: &str,
    ambient: bool,
) -> Option<Gas> {
    let (gamma_setting, r_setting) = if ambient {
        (gas::AMBIENT_GAMMA, gas::AMBIENT_GAS_CONSTANT)
    } else {
        (gas::JET_GAMMA, gas::JET_GAS_CONSTANT)
    };
    let pb::Gas { gamma, gas_constant_j_per_kg_k } = msg.unwrap_or_default();
    let mut f = Fields::new(check, defaults, path);
    let g = f.read(gamma, &gamma_setting);
    let r = f.read(gas_constant_j_per_kg_k, &r_setting);
    // A value outside its range is reported once, by the field reader.
    check.range(path, Gas::new(g?, r?))
}

/// Converts jet conditions found at `path` in a request (e.g. `conditions`).
///
/// # Errors
/// [`ApiError::Invalid`] naming every bad or missing field under `path`.
pub fn jet_spec(c: Option<pb::JetConditions>, path: &str) -> Result<JetSpec, ApiError> {
    let mut check = Check::new();
    let Some(pb::JetConditions {
        nozzle,
        operating_point,
        gas: gas_msg,
        ambient_gas,
        ideal_expansion_tolerance,
    }) = c
    else {
        check.missing(path, "give the nozzle and the operating point");
        return check.finish(None);
    };
    let mut defaults = Defaults::default();
    let gas = gas_from(&mut check, &mut defaults, gas_msg, &format!("{path}.gas"), false);
    let ambient = gas_from(&mut check, &mut defaults, ambient_gas, &format!("{path}.ambient_gas"), true);
    // The area-ratio design needs a valid gas; fall back to air only to keep checking fields.
    let nozzle =
        nozzle_from(&mut check, &mut defaults, nozzle, &format!("{path}.nozzle"), &gas.unwrap_or(Gas::AIR));
    let tol = Fields::new(&mut check, &mut defaults, path)
        .read(ideal_expansion_tolerance, &jet::IDEAL_EXPANSION_TOLERANCE)
        .unwrap_or(jet::DEFAULT_IDEAL_TOLERANCE);
    let op =
        operating_point_from(&mut check, &mut defaults, operating_point, &format!("{path}.operating_point"));
    let op = op.and_then(|op| check.range(path, op.with_ideal_tolerance(tol)));
    let op = op.zip(ambient).map(|(op, a)| op.with_ambient_gas(a));
    let spec = match (gas, nozzle, op) {
        (Some(gas), Some(nozzle), Some(op)) => Some(JetSpec { gas, nozzle, op, defaults }),
        _ => None,
    };
    check.finish(spec)
}

fn nozzle_from(
    check: &mut Check,
    defaults: &mut Defaults,
    n: Option<pb::Nozzle>,
    path: &str,
    gas: &Gas,
) -> Option<Nozzle> {
    let mut design = |check: &mut Check, d: Option<f64>, p: &str| {
        Fields::new(check, defaults, p)
            .read(d, &jet::DESIGN_MACH_NUMBER)
            .unwrap_or(jet::DESIGN_MACH_NUMBER.default)
    };
    use pb::nozzle::Kind;
    use pb::round_convergent_divergent_nozzle::Design;
    let kind = match n.and_then(|n| n.kind) {
        Some(k) => k,
        None => {
            check.missing(
                path,
                "set one of round_convergent, round_convergent_divergent, rectangular, planar",
            );
            return None;
        }
    };
    let kind_path = format!(
        "{path}.{}",
        match &kind {
            Kind::RoundConvergent(_) => "round_convergent",
            Kind::RoundConvergentDivergent(_) => "round_convergent_divergent",
            Kind::Rectangular(_) => "rectangular",
            Kind::Planar(_) => "planar",
        }
    );
    let nozzle = match kind {
        Kind::RoundConvergent(pb::RoundConvergentNozzle { exit_diameter_m }) => {
            check.range(&format!("{path}.round_convergent"), Nozzle::round_convergent(exit_diameter_m))
        }
        Kind::RoundConvergentDivergent(pb::RoundConvergentDivergentNozzle { exit_diameter_m, design }) => {
            let p = format!("{path}.round_convergent_divergent");
            match design {
                None => {
                    check.missing(
                        format!("{p}.design"),
                        "set design_mach_number or exit_to_throat_area_ratio",
                    );
                    None
                }
                Some(Design::DesignMachNumber(md)) => check.range(&p, Nozzle::round_cd(exit_diameter_m, md)),
                Some(Design::ExitToThroatAreaRatio(ar)) => {
                    check.range(&p, Nozzle::round_cd_from_area_ratio(exit_diameter_m, ar, gas))
                }
            }
        }
        Kind::Rectangular(pb::RectangularNozzle { exit_height_m, exit_width_m, design_mach_number }) => {
            let p = format!("{path}.rectangular");
            if exit_width_m == 0.0 {
                check.missing(format!("{p}.exit_width_m"), "a rectangular nozzle needs its exit width in m");
                return None;
            }
            let md = design(check, design_mach_number, &p);
            check.range(&p, Nozzle::rectangular(exit_height_m, exit_width_m, md))
        }
        Kind::Planar(pb::PlanarNozzle { exit_height_m, design_mach_number }) => {
            let p = format!("{path}.planar");
            let md = design(check, design_mach_number, &p);
            check.range(&p, Nozzle::planar(exit_height_m, md))
        }
    };
    if let Some(n) = &nozzle {
        size_cautions(defaults, &kind_path, "exit_", n.shape());
    }
    nozzle
}

/// Cautions for a nozzle exit or jet size given in metres that is far larger than any nozzle
/// (millimetres typed as metres); `prefix` is how the message's length fields begin (`exit_`
/// for a nozzle, empty for a jet's own size messages).
pub fn size_cautions(defaults: &mut Defaults, path: &str, prefix: &str, shape: Section) {
    let mut note = |name: &str, v: f64| {
        defaults.caution(plausible::length_caution(&format!("{path}.{prefix}{name}"), v))
    };
    match shape {
        Section::Round { diameter_m } => note("diameter_m", diameter_m),
        Section::Rectangular { height_m, width_m } => {
            note("height_m", height_m);
            note("width_m", width_m);
        }
        Section::Planar { height_m } => note("height_m", height_m),
    }
}

/// Cautions for temperatures given at `path` (an operating point or a directly given jet) that
/// a laboratory rarely means (degrees Celsius typed as kelvin).
pub fn temperature_cautions(
    defaults: &mut Defaults,
    path: &str,
    total_given: Option<f64>,
    ambient_given: Option<f64>,
) {
    if let Some(t) = total_given {
        defaults.caution(plausible::total_temperature_caution(&format!("{path}.total_temperature_k"), t));
    }
    if let Some(t) = ambient_given {
        defaults.caution(plausible::ambient_temperature_caution(&format!("{path}.ambient_temperature_k"), t));
    }
}

/// An operating point from a pressure message that carries its own ambient pressure (`field`:
/// `pressures` or `gauge`): the top-level ambient pressure must then be unset, and range errors
/// name the message's fields (temperatures stay on the operating point).
fn with_own_ambient(
    check: &mut Check,
    path: &str,
    field: &str,
    top_level_ambient: bool,
    make: impl FnOnce() -> Result<OperatingPoint, crate::physics::bounds::RangeError>,
) -> Option<OperatingPoint> {
    if top_level_ambient {
        check.other(
            format!("{path}.ambient_pressure_pa"),
            format!(
                "{path}.ambient_pressure_pa must be unset when {field} is given: the ambient pressure is \
                 {path}.{field}.ambient_pressure_pa"
            ),
        );
    }
    match make() {
        Err(e) if e.quantity.ends_with("temperature_k") => check.range(path, Err(e)),
        r => check.range(&format!("{path}.{field}"), r),
    }
}

fn operating_point_from(
    check: &mut Check,
    defaults: &mut Defaults,
    op: Option<pb::OperatingPoint>,
    path: &str,
) -> Option<OperatingPoint> {
    use pb::operating_point::Pressure;
    let Some(pb::OperatingPoint {
        pressure,
        total_temperature_k,
        ambient_temperature_k,
        ambient_pressure_pa,
    }) = op
    else {
        check.missing(path, "give the nozzle pressure ratio or the reservoir and ambient pressures");
        return None;
    };
    let mut f = Fields::new(check, defaults, path);
    let t_amb =
        f.read(ambient_temperature_k, &jet::AMBIENT_TEMPERATURE).unwrap_or(jet::ISA_SEA_LEVEL_TEMPERATURE_K);
    let t0 = f.read_or(total_temperature_k, &jet::TOTAL_TEMPERATURE, t_amb).unwrap_or(t_amb);
    temperature_cautions(defaults, path, total_temperature_k, ambient_temperature_k);
    let ambient_field = match &pressure {
        Some(Pressure::Pressures(_)) => format!("{path}.pressures.ambient_pressure_pa"),
        Some(Pressure::Gauge(_)) => format!("{path}.gauge.ambient_pressure_pa"),
        _ => format!("{path}.ambient_pressure_pa"),
    };
    let given_ambient = match &pressure {
        Some(Pressure::Pressures(p)) => Some(p.ambient_pressure_pa),
        Some(Pressure::Gauge(g)) => Some(g.ambient_pressure_pa),
        _ => ambient_pressure_pa,
    };
    if let Some(pa) = given_ambient {
        defaults.caution(plausible::ambient_pressure_caution(&ambient_field, pa));
    }
    match pressure {
        None => {
            check.missing(
                format!("{path}.pressure"),
                "set nozzle_pressure_ratio or pressures (total_pressure_pa, ambient_pressure_pa)",
            );
            None
        }
        Some(Pressure::NozzlePressureRatio(npr)) => {
            let p_amb = Fields::new(check, defaults, path)
                .read(ambient_pressure_pa, &jet::AMBIENT_PRESSURE)
                .unwrap_or(jet::ISA_SEA_LEVEL_PRESSURE_PA);
            check.range(path, OperatingPoint::new(npr, p_amb, t0, t_amb))
        }
        Some(Pressure::Pressures(pb::ReservoirAndAmbientPressure {
            total_pressure_pa,
            ambient_pressure_pa: pa,
        })) => with_own_ambient(check, path, "pressures", ambient_pressure_pa.is_some(), || {
            OperatingPoint::from_pressures(total_pressure_pa, pa, t0, t_amb)
        }),
        Some(Pressure::Gauge(pb::GaugeAndAmbientPressure {
            reservoir_gauge_pressure_pa,
            ambient_pressure_pa: pa,
        })) => with_own_ambient(check, path, "gauge", ambient_pressure_pa.is_some(), || {
            OperatingPoint::from_gauge(reservoir_gauge_pressure_pa, pa, t0, t_amb)
        }),
    }
}
