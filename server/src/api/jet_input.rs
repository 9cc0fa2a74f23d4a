//! Conversion of the inputs shared by the shock-cell and tone services: the jet (conditions or
//! a fully expanded state), cell options, convection, the feedback loop.

use super::conditions::{gas_from, jet_spec, JetSpec};
use super::error::{ApiError, Check};
use super::gas::PRESSURE_CAUTION;
use super::provenance::Defaults;
use crate::physics::cells::{self, CellOptions};
use crate::physics::jet::{self, jet_state, ExpandedJet, JetSize, JetState};
use crate::physics::models::{self, Model};
use crate::physics::screech;
use crate::physics::tones::{self, Convection, LoopSpec, PathLength, PathSpeed, Segment, Source};
use jetloop_proto::pb;

/// A resolved jet: the expanded jet the models use, and the full state when conditions were
/// given.
#[derive(Debug, Clone)]
pub struct ResolvedJet {
    /// Expanded jet.
    pub jet: ExpandedJet,
    /// Full state (conditions only).
    pub state: Option<JetState>,
    /// Validated conditions (conditions only), for sweeps.
    pub spec: Option<JetSpec>,
    /// Defaults applied.
    pub defaults: Defaults,
}

/// Converts a `JetInput` at `path` and resolves it to a supersonic expanded jet.
///
/// # Errors
/// [`ApiError::Invalid`] for bad fields; [`ApiError::Precondition`] for a jet that is not
/// supersonic.
pub fn resolve_jet(input: Option<pb::JetInput>, path: &str) -> Result<ResolvedJet, ApiError> {
    let r = convert_jet(input, path)?;
    if let Some(Err(e)) = r.state.as_ref().map(ExpandedJet::from_state) {
        return Err(ApiError::not_supersonic(&format!("{path}.conditions"), &e));
    }
    Ok(r)
}

/// Converts a `JetInput` without requiring a supersonic jet (sweeps keep subsonic points).
/// For conditions, the expanded jet of a subsonic state is a placeholder and must not be used.
///
/// # Errors
/// [`ApiError::Invalid`] for bad fields.
pub fn convert_jet(input: Option<pb::JetInput>, path: &str) -> Result<ResolvedJet, ApiError> {
    use pb::fully_expanded_jet::Size;
    use pb::jet_input::Source as S;
    let mut check = Check::new();
    match input.and_then(|j| j.source) {
        None => {
            check.missing(path, "set conditions (nozzle and operating point) or fully_expanded");
            check.finish(None)
        }
        Some(S::Conditions(c)) => {
            let spec = jet_spec(Some(c), &format!("{path}.conditions"))?;
            let state = jet_state(&spec.gas, &spec.nozzle, &spec.op);
            let jet = ExpandedJet::from_state(&state).unwrap_or(ExpandedJet {
                gas: state.gas,
                ambient_gas: state.ambient_gas,
                mj: state.mj,
                size: state.size,
                total_temperature_k: state.total_temperature_k,
                ambient_temperature_k: state.ambient_temperature_k,
                uj_m_s: state.uj_m_s,
                a_amb_m_s: state.a_amb_m_s,
            });
            let defaults = spec.defaults.clone();
            Ok(ResolvedJet { jet, state: Some(state), spec: Some(spec), defaults })
        }
        Some(S::FullyExpanded(f)) => {
            let p = format!("{path}.fully_expanded");
            let pb::FullyExpandedJet {
                fully_expanded_mach_number,
                size,
                total_temperature_k,
                ambient_temperature_k,
                gas: gas_msg,
                ambient_gas,
            } = f;
            let mut defaults = Defaults::default();
            let gas = gas_from(&mut check, &mut defaults, gas_msg, &format!("{p}.gas"), false);
            let ambient = gas_from(&mut check, &mut defaults, ambient_gas, &format!("{p}.ambient_gas"), true);
            let mut f = super::field::Fields::new(&mut check, &mut defaults, &p);
            let t_amb = f
                .read(ambient_temperature_k, &jet::AMBIENT_TEMPERATURE)
                .unwrap_or(jet::ISA_SEA_LEVEL_TEMPERATURE_K);
            let t0 = f.read_or(total_temperature_k, &jet::TOTAL_TEMPERATURE, t_amb).unwrap_or(t_amb);
            let size = match size {
                None => {
                    check.missing(
                        format!("{p}.size"),
                        "set fully_expanded_diameter_m, planar_height_m or rectangular",
                    );
                    None
                }
                Some(Size::FullyExpandedDiameterM(d)) => Some(JetSize::Round { diameter_m: d }),
                Some(Size::PlanarHeightM(h)) => Some(JetSize::Planar { height_m: h }),
                Some(Size::Rectangular(pb::RectangularJetSize { height_m, width_m })) => {
                    Some(JetSize::Rectangular { height_m, width_m })
                }
            };
            let jet = match (gas, ambient, size) {
                (Some(gas), Some(ambient), Some(size)) => {
                    let r = ExpandedJet::direct(gas, ambient, fully_expanded_mach_number, size, t0, t_amb);
                    // Size errors name the oneof member the caller set.
                    let r = r.map_err(|mut e| {
                        e.quantity = match (e.quantity, size) {
                            ("fully_expanded_height_m", JetSize::Planar { .. }) => "planar_height_m",
                            ("fully_expanded_height_m", JetSize::Rectangular { .. }) => {
                                "rectangular.height_m"
                            }
                            ("fully_expanded_width_m", _) => "rectangular.width_m",
                            (q, _) => q,
                        };
                        e
                    });
                    check.range(&p, r)
                }
                _ => None,
            };
            super::conditions::temperature_cautions(
                &mut defaults,
                &p,
                total_temperature_k,
                ambient_temperature_k,
            );
            if let Some(j) = &jet {
                let shape = match j.size {
                    JetSize::Round { diameter_m } => crate::physics::jet::Section::Round { diameter_m },
                    JetSize::Planar { height_m } => crate::physics::jet::Section::Planar { height_m },
                    JetSize::Rectangular { height_m, width_m } => {
                        crate::physics::jet::Section::Rectangular { height_m, width_m }
                    }
                };
                // Field names as the message spells them: fully_expanded_diameter_m,
                // planar_height_m, rectangular.height_m and rectangular.width_m.
                let (sizes, prefix) = match j.size {
                    JetSize::Round { .. } => (p.clone(), "fully_expanded_"),
                    JetSize::Planar { .. } => (p.clone(), "planar_"),
                    JetSize::Rectangular { .. } => (format!("{p}.rectangular"), ""),
                };
                super::conditions::size_cautions(&mut defaults, &sizes, prefix, shape);
            }
            let r = jet.map(|jet| ResolvedJet { jet, state: None, spec: None, defaults });
            check.finish(r)
        }
    }
}

/// Cell options at `path`, with `default_modes` when unset.
pub fn cell_options(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::CellOptions>,
    path: &str,
    default_modes: u32,
) -> Option<CellOptions> {
    let pb::CellOptions { spacing_factor, modes, shock_count } = o.unwrap_or_default();
    let factor = super::field::Fields::new(check, defaults, path)
        .read(spacing_factor, &CellOptions::SPACING_FACTOR)
        .unwrap_or(cells::DEFAULT_SPACING_FACTOR);
    let shocks = super::field::Fields::new(check, defaults, path)
        .read_count(shock_count, &CellOptions::SHOCK_COUNT)
        .map_or(cells::DEFAULT_SHOCKS, |n| n as u32);
    let modes = match modes {
        Some(m) => m,
        None => {
            defaults.note(&format!("{path}.modes"), &default_modes.to_string(), "waveguide modes listed");
            default_modes
        }
    };
    check.range(path, CellOptions::new(factor, modes, shocks))
}

/// Convection at `path`; unset: 0.7 Uj (Tam 1986).
pub fn convection(
    check: &mut Check,
    defaults: &mut Defaults,
    c: Option<pb::Convection>,
    path: &str,
) -> Option<Convection> {
    use pb::convection::Speed;
    match c.and_then(|c| c.speed) {
        None => {
            let r = screech::DEFAULT_CONVECTION_RATIO;
            defaults.note(
                &format!("{path}.convection_ratio"),
                &r.to_string(),
                "Uc = 0.7 Uj (Tam, Seiner & Yu 1986)",
            );
            Some(Convection::Ratio(r))
        }
        Some(Speed::ConvectionRatio(r)) => check.range(path, Convection::ratio(r)),
        Some(Speed::ConvectionSpeedMPerS(v)) => check.range(path, Convection::speed(v)),
    }
}

/// Feedback loop at `path`.
pub fn loop_spec(
    check: &mut Check,
    defaults: &mut Defaults,
    l: Option<pb::FeedbackLoop>,
    path: &str,
) -> LoopSpec {
    use pb::feedback_loop::Source as S;
    use pb::loop_segment::Length;
    let pb::FeedbackLoop { source, reflector_distance_m, segments, fixed_delays_s, max_loop_order } =
        l.unwrap_or_default();
    let source = match source {
        None => {
            let n = tones::DEFAULT_SOURCE_CELLS;
            defaults.note(
                &format!("{path}.source_cells"),
                &n.to_string(),
                "source at the end of the first shock cell",
            );
            Source::Cells(n)
        }
        Some(S::SourceCells(n)) => check
            .range(path, tones::SOURCE_CELLS.check("source_cells", n))
            .map_or(Source::Cells(tones::DEFAULT_SOURCE_CELLS), Source::Cells),
        Some(S::SourceDistanceM(d)) => check
            .range(path, tones::PATH_LENGTH.check("source_distance_m", d))
            .map_or(Source::Distance(0.0), Source::Distance),
    };
    let reflector_m = reflector_distance_m
        .and_then(|d| check.range(path, tones::REFLECTOR_DISTANCE.check("reflector_distance_m", d)));
    if segments.len() > tones::MAX_LOOP_PARTS {
        check.other(
            format!("{path}.segments"),
            format!(
                "{path}.segments has {} paths; at most {} are allowed",
                segments.len(),
                tones::MAX_LOOP_PARTS
            ),
        );
    }
    if fixed_delays_s.len() > tones::MAX_LOOP_PARTS {
        check.other(
            format!("{path}.fixed_delays_s"),
            format!(
                "{path}.fixed_delays_s has {} values; at most {} are allowed",
                fixed_delays_s.len(),
                tones::MAX_LOOP_PARTS
            ),
        );
    }
    let segs: Vec<Segment> = segments
        .into_iter()
        .take(tones::MAX_LOOP_PARTS)
        .enumerate()
        .filter_map(|(i, pb::LoopSegment { label, length, speed, speed_m_per_s })| {
            let sp = format!("{path}.segments[{i}]");
            if label.chars().count() > 200 {
                check.other(format!("{sp}.label"), format!("{sp}.label is longer than 200 characters"));
            }
            let length = match length {
                None => {
                    check.missing(format!("{sp}.length"), "set length_m or source_distances");
                    None
                }
                Some(Length::LengthM(l)) => {
                    check.range(&sp, tones::PATH_LENGTH.check("length_m", l)).map(PathLength::Metres)
                }
                Some(Length::SourceDistances(k)) => check
                    .range(&sp, tones::SOURCE_MULTIPLE.check("source_distances", k))
                    .map(PathLength::SourceDistances),
            };
            let speed = match pb::PathSpeed::try_from(speed) {
                Ok(pb::PathSpeed::Convected) => Some(PathSpeed::Convected),
                Ok(pb::PathSpeed::Acoustic) => Some(PathSpeed::Acoustic),
                Ok(pb::PathSpeed::Given) => match speed_m_per_s {
                    Some(v) => check.range(&sp, tones::SPEED.check("speed_m_per_s", v)).map(PathSpeed::Given),
                    None => {
                        check.missing(format!("{sp}.speed_m_per_s"), "PATH_SPEED_GIVEN needs the speed in m/s");
                        None
                    }
                },
                Ok(pb::PathSpeed::Unspecified) | Err(_) => {
                    check.other(
                        format!("{sp}.speed"),
                        format!(
                            "{sp}.speed = {} must be PATH_SPEED_CONVECTED, PATH_SPEED_ACOUSTIC or PATH_SPEED_GIVEN",
                            speed
                        ),
                    );
                    None
                }
            };
            Some(Segment { label, length: length?, speed: speed? })
        })
        .collect();
    let delays: Vec<f64> = fixed_delays_s
        .into_iter()
        .take(tones::MAX_LOOP_PARTS)
        .enumerate()
        .filter_map(|(i, d)| {
            check.range(
                &format!("{path}.fixed_delays_s[{i}]"),
                tones::DELAY.check("value", d).map_err(|mut e| {
                    e.quantity = "";
                    e
                }),
            )
        })
        .collect();
    let max_order = match super::field::Fields::new(check, defaults, path)
        .read_count(max_loop_order, &tones::MAX_LOOP_ORDER)
    {
        Some(n) => n as u32,
        None => tones::DEFAULT_MAX_ORDER,
    };
    LoopSpec { source, reflector_m, segments: segs, delays_s: delays, max_order }
}

/// Summary message of an expanded jet.
pub fn jet_summary(j: &ExpandedJet) -> pb::ExpandedJetSummary {
    let (name, width) = match j.size {
        JetSize::Round { .. } => ("fully expanded diameter", None),
        JetSize::Planar { .. } => ("fully expanded height", None),
        JetSize::Rectangular { width_m, .. } => ("fully expanded height", Some(width_m)),
    };
    pb::ExpandedJetSummary {
        fully_expanded_mach_number: j.mj,
        beta_from_sonic: j.beta(),
        fully_expanded_velocity_m_per_s: j.uj_m_s,
        ambient_sound_speed_m_per_s: j.a_amb_m_s,
        reference_length_m: j.reference_length_m(),
        reference_length_name: name.to_string(),
        fully_expanded_width_m: width,
        total_temperature_k: j.total_temperature_k,
        ambient_temperature_k: j.ambient_temperature_k,
    }
}

pub(super) fn cell_models(jet: &ExpandedJet) -> Vec<Model> {
    let mut m = vec![models::VORTEX_SHEET_CELLS];
    if matches!(jet.size, crate::physics::jet::JetSize::Rectangular { .. }) {
        m.push(models::TAM_1988_RECTANGULAR);
    }
    m
}

pub(super) fn with_state_models(mut m: Vec<Model>, r: &ResolvedJet) -> Vec<Model> {
    if r.state.is_some() {
        m.push(models::FULLY_EXPANDED_JET);
    }
    m
}

/// Notes of an answer about one jet: the jet state's notes and, when the jet came from
/// reservoir conditions (a pressurized rig), the pressure-equipment caution; a jet given
/// directly (Mj, Dj) has no reservoir to warn about.
pub(super) fn notes(r: &ResolvedJet) -> Vec<String> {
    let mut n = r.state.as_ref().map(JetState::notes).unwrap_or_default();
    if r.state.is_some() {
        n.push(PRESSURE_CAUTION.to_string());
    }
    n
}
