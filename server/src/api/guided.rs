//! Guided jet modes: conversion of the mode options and the dimensionless jet, and the
//! messages shared by GuidedModes, PredictScreech, SweepScreech and the stage labels of
//! extracted tones.

use super::error::{ApiError, Check};
use super::field::Fields;
use super::gas::jet_state_message;
use super::jet_input::{jet_summary, resolve_jet, ResolvedJet};
use super::provenance::{provenance, Defaults};
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::gas::Gas;
use crate::physics::guided::{
    self, Closure, ClosureOptions, GuidedMode, ModeBand, ModePoint, ModePrediction, ModeShape, Scale,
    VortexSheet,
};
use crate::physics::jet::{JetSize, JetState};
use crate::physics::models;
use jetloop_proto::pb;

/// Most modes in one request.
pub const MAX_MODES: usize = 12;

/// Values a screech request already gives, used where its `guided_modes` leaves a field
/// unset: the convection ratio of `options.convection` and the factor of `options.cells`.
#[derive(Debug, Clone, Copy, Default)]
pub struct Fallbacks {
    /// Uc / Uj and the field it came from.
    pub convection_ratio: Option<(f64, &'static str)>,
    /// Spacing factor and the field it came from.
    pub spacing_factor: Option<(f64, &'static str)>,
}

/// Converts `GuidedModeOptions` at `path` for a round (`round`) or planar jet.
pub fn closure_options(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::GuidedModeOptions>,
    path: &str,
    round: bool,
) -> Option<ClosureOptions> {
    closure_options_with(check, defaults, o, path, round, Fallbacks::default())
}

/// As [`closure_options`], taking unset fields from `fb` before the model's defaults.
pub fn closure_options_with(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::GuidedModeOptions>,
    path: &str,
    round: bool,
    fb: Fallbacks,
) -> Option<ClosureOptions> {
    let pb::GuidedModeOptions { modes, convection_ratio, spacing_factor, cell_modes } = o.unwrap_or_default();
    if modes.len() > MAX_MODES {
        check.other(
            format!("{path}.modes"),
            format!("{path}.modes holds {} modes; at most {MAX_MODES} are allowed", modes.len()),
        );
        return None;
    }
    let modes = if modes.is_empty() {
        let list = if round {
            "round m = 0, 1, 2 (radial order 1) and m = 0 (radial order 2)"
        } else {
            "planar symmetric and antisymmetric, radial orders 1 and 2"
        };
        defaults.note(&format!("{path}.modes"), list, "the modes that carry screech stages");
        GuidedMode::defaults(round)
    } else {
        modes
            .iter()
            .enumerate()
            .filter_map(|(i, m)| mode_of(check, m, &format!("{path}.modes[{i}]"), round))
            .collect()
    };
    let from =
        |defaults: &mut Defaults, given: Option<f64>, fb: Option<(f64, &'static str)>, field: &str| match (
            given, fb,
        ) {
            (None, Some((v, source))) => {
                defaults.note(&format!("{path}.{field}"), &v.to_string(), &format!("the value of {source}"));
                Some(v)
            }
            _ => given,
        };
    let convection_ratio = from(defaults, convection_ratio, fb.convection_ratio, "convection_ratio");
    let spacing_factor = from(defaults, spacing_factor, fb.spacing_factor, "spacing_factor");
    let mut f = Fields::new(check, defaults, path);
    let conv = f.read(convection_ratio, &ClosureOptions::CONVECTION_RATIO);
    let factor = f.read(spacing_factor, &ClosureOptions::SPACING_FACTOR);
    let cells = Fields::new(check, defaults, path)
        .read_count(cell_modes, &ClosureOptions::CELL_MODES)
        .map(|v| v as u32);
    Some(ClosureOptions { modes, convection_ratio: conv?, spacing_factor: factor?, cell_modes: cells? })
}

fn mode_of(check: &mut Check, m: &pb::GuidedModeId, path: &str, round: bool) -> Option<GuidedMode> {
    let shape = match pb::ModeShape::try_from(m.shape) {
        Ok(pb::ModeShape::Round) => ModeShape::Round { azimuthal: m.azimuthal_order },
        Ok(pb::ModeShape::PlanarSymmetric) => ModeShape::PlanarSymmetric,
        Ok(pb::ModeShape::PlanarAntisymmetric) => ModeShape::PlanarAntisymmetric,
        Ok(pb::ModeShape::Unspecified) | Err(_) => {
            check.other(
                format!("{path}.shape"),
                format!(
                    "{path}.shape = {} must be MODE_SHAPE_ROUND, MODE_SHAPE_PLANAR_SYMMETRIC or \
                     MODE_SHAPE_PLANAR_ANTISYMMETRIC",
                    m.shape
                ),
            );
            return None;
        }
    };
    let is_round = matches!(shape, ModeShape::Round { .. });
    if is_round != round {
        let jet = if round { "round" } else { "planar" };
        check.other(
            format!("{path}.shape"),
            format!(
                "{path}.shape does not fit a {jet} jet: use {} modes",
                if round { "MODE_SHAPE_ROUND" } else { "planar" }
            ),
        );
        return None;
    }
    if !is_round && m.azimuthal_order != 0 {
        check.other(
            format!("{path}.azimuthal_order"),
            format!("{path}.azimuthal_order = {} applies to round modes only; leave it 0", m.azimuthal_order),
        );
        return None;
    }
    check.range(path, GuidedMode::new(shape, m.radial_order))
}

/// The mode as a message.
pub fn mode_id(m: &GuidedMode) -> pb::GuidedModeId {
    let (shape, azimuthal_order) = match m.shape {
        ModeShape::Round { azimuthal } => (pb::ModeShape::Round, azimuthal),
        ModeShape::PlanarSymmetric => (pb::ModeShape::PlanarSymmetric, 0),
        ModeShape::PlanarAntisymmetric => (pb::ModeShape::PlanarAntisymmetric, 0),
    };
    pb::GuidedModeId { shape: shape as i32, azimuthal_order, radial_order: m.radial }
}

/// A curve point as a message; `scale` adds hertz and rad/m.
pub fn point_message(
    sheet: &VortexSheet,
    scale: Option<&Scale>,
    p: &ModePoint,
    upstream: bool,
) -> pb::ModePoint {
    pb::ModePoint {
        strouhal_number: sheet.strouhal(p.omega),
        frequency_hz: scale.map(|s| s.hz(p.omega)),
        // Dimensionless wavenumbers are per R (or b); the reference length is 2R (or 2b).
        wavenumber_times_length: -2.0 * p.kappa,
        wavenumber_rad_per_m: scale.map(|s| s.wavenumber(p.kappa)),
        upstream,
    }
}

/// One mode's result; `curve` points of its dispersion curve (0: none).
pub fn mode_message(
    sheet: &VortexSheet,
    scale: Option<&Scale>,
    m: &ModePrediction,
    curve: usize,
) -> pb::GuidedModeResult {
    let ModePrediction { band, closures } = m;
    let ModeBand { mode, branch, saddle } = band;
    pb::GuidedModeResult {
        mode: Some(mode_id(mode)),
        family: mode.family().to_string(),
        customary_stage: mode.customary_stage(sheet.mach()).to_string(),
        branch_point: Some(point_message(sheet, scale, branch, band.has_band())),
        saddle_point: saddle.as_ref().map(|s| point_message(sheet, scale, s, true)),
        has_band: band.has_band(),
        tones: closures
            .iter()
            .map(|(n, ks, c)| {
                let (outcome, tone) = match c {
                    Closure::InBand(p) => {
                        (pb::ClosureOutcome::InBand, Some(point_message(sheet, scale, p, true)))
                    }
                    Closure::BelowBand => (pb::ClosureOutcome::BelowBand, None),
                    Closure::AboveBand => (pb::ClosureOutcome::AboveBand, None),
                    Closure::NoBand => (pb::ClosureOutcome::NoBand, None),
                };
                pb::ClosureTone {
                    cell_mode: *n,
                    shock_wavenumber_times_length: 2.0 * ks,
                    outcome: outcome as i32,
                    tone,
                }
            })
            .collect(),
        curve: sheet.curve(band, curve).iter().map(|(p, up)| point_message(sheet, scale, p, *up)).collect(),
    }
}

/// The sheet parameters as a message.
pub fn sheet_message(sheet: &VortexSheet, scale: Option<&Scale>, round: bool) -> pb::VortexSheetParameters {
    pb::VortexSheetParameters {
        fully_expanded_mach_number: sheet.mach(),
        sound_speed_ratio: sheet.sound_speed_ratio(),
        density_ratio: sheet.density_ratio(),
        reference_length_m: scale.map(|s| 2.0 * s.length_m),
        round,
    }
}

/// Where a GuidedModes question's jet comes from.
#[derive(Debug, Clone)]
enum Source {
    /// A jet with a size.
    Jet(Box<ResolvedJet>),
    /// Dimensionless parameters.
    Sheet,
}

/// A validated GuidedModes question.
#[derive(Debug, Clone)]
pub struct GuidedQuery {
    source: Source,
    sheet: VortexSheet,
    scale: Option<Scale>,
    round: bool,
    options: ClosureOptions,
    curve_points: usize,
    defaults: Defaults,
}

fn sheet_of_ratios(
    check: &mut Check,
    defaults: &mut Defaults,
    v: pb::VortexSheetJet,
) -> (Option<VortexSheet>, bool) {
    use pb::vortex_sheet_jet::Temperature;
    let pb::VortexSheetJet { fully_expanded_mach_number: mj, temperature, gamma, geometry } = v;
    let p = "vortex_sheet";
    let round = match pb::SheetGeometry::try_from(geometry) {
        Ok(pb::SheetGeometry::Round) => true,
        Ok(pb::SheetGeometry::Planar) => false,
        Ok(pb::SheetGeometry::Unspecified) => {
            defaults.note(&format!("{p}.geometry"), "round", "the usual laboratory nozzle");
            true
        }
        Err(_) => {
            check.other(
                format!("{p}.geometry"),
                format!("{p}.geometry = {geometry} must be SHEET_GEOMETRY_ROUND or SHEET_GEOMETRY_PLANAR"),
            );
            true
        }
    };
    let g = Fields::new(check, defaults, p).read(gamma, &crate::physics::gas::JET_GAMMA);
    let mach = check.range(p, guided::MACH.check("fully_expanded_mach_number", mj));
    let tj = match temperature {
        None => {
            check.missing(
                format!("{p}.temperature"),
                "set static_temperature_ratio or total_temperature_ratio",
            );
            None
        }
        Some(Temperature::StaticTemperatureRatio(t)) => {
            check.range(p, guided::TEMPERATURE_RATIO.check("static_temperature_ratio", t))
        }
        Some(Temperature::TotalTemperatureRatio(t)) => {
            let t = check.range(p, guided::TEMPERATURE_RATIO.check("total_temperature_ratio", t));
            match (t, g, mach) {
                (Some(t), Some(g), Some(m)) => {
                    let gas = Gas::new(g, crate::physics::gas::AIR_GAS_CONSTANT).ok();
                    gas.map(|gas| t / gas.total_to_static_temperature(m))
                }
                _ => None,
            }
        }
    };
    let sheet = match (mach, tj) {
        (Some(m), Some(t)) => check.range(p, VortexSheet::same_gas(m, t)),
        _ => None,
    };
    (sheet, round)
}

impl TryFrom<pb::GuidedModesRequest> for GuidedQuery {
    type Error = ApiError;

    fn try_from(req: pb::GuidedModesRequest) -> Result<Self, ApiError> {
        use pb::guided_modes_request::Source as S;
        let pb::GuidedModesRequest { source, options, curve_points } = req;
        let mut check = Check::new();
        let (source, sheet, scale, round, mut defaults) = match source {
            None => {
                check.missing("source", "set jet or vortex_sheet");
                return check.finish(None);
            }
            Some(S::Jet(j)) => {
                let sent = SentJet::of(&j);
                let jet = resolve_jet(Some(j), "jet")?;
                let Some(scale) = Scale::of_jet(&jet.jet) else {
                    check.other(
                        "jet",
                        "guided modes are computed for round and planar jets; a rectangular jet has \
                         no vortex-sheet modes here (give a planar jet of its height for the \
                         large-aspect-ratio limit)",
                    );
                    return check.finish(None);
                };
                let round = matches!(jet.jet.size, JetSize::Round { .. });
                let sheet = match VortexSheet::of_jet(&jet.jet) {
                    Ok(sheet) => Some(sheet),
                    Err(e) => {
                        sent.outside_solver(&mut check, &e);
                        None
                    }
                };
                let defaults = jet.defaults.clone();
                (Source::Jet(Box::new(jet)), sheet, Some(scale), round, defaults)
            }
            Some(S::VortexSheet(v)) => {
                let mut defaults = Defaults::default();
                let (sheet, round) = sheet_of_ratios(&mut check, &mut defaults, v);
                (Source::Sheet, sheet, None, round, defaults)
            }
        };
        let options = closure_options(&mut check, &mut defaults, options, "options", round);
        let n = Fields::new(&mut check, &mut defaults, "")
            .read_count(curve_points, &ClosureOptions::CURVE_POINTS);
        let q = match (sheet, options, n) {
            (Some(sheet), Some(options), Some(curve_points)) => {
                Some(GuidedQuery { source, sheet, scale, round, options, curve_points, defaults })
            }
            _ => None,
        };
        check.finish(q)
    }
}

/// The fields of a `JetInput` that set the vortex sheet's parameters, as the caller sent them:
/// a jet outside the solver's range is reported against these (the Mach number against the
/// field that gave it, the density and sound-speed ratios against the temperatures), never
/// against the solver's own parameter names, which are no request fields.
struct SentJet {
    /// Path and value of the field that sets the fully expanded Mach number.
    mach: (String, Option<f64>),
    /// Paths and values of the temperatures the caller set.
    temperatures: Vec<(String, f64)>,
}

impl SentJet {
    fn of(j: &pb::JetInput) -> Self {
        use pb::jet_input::Source as S;
        use pb::operating_point::Pressure as P;
        match &j.source {
            Some(S::FullyExpanded(f)) => {
                let p = "jet.fully_expanded";
                let temperatures = [
                    ("total_temperature_k", f.total_temperature_k),
                    ("ambient_temperature_k", f.ambient_temperature_k),
                ]
                .into_iter()
                .filter_map(|(name, v)| v.map(|v| (format!("{p}.{name}"), v)))
                .collect();
                Self {
                    mach: (format!("{p}.fully_expanded_mach_number"), Some(f.fully_expanded_mach_number)),
                    temperatures,
                }
            }
            Some(S::Conditions(c)) => {
                let p = "jet.conditions.operating_point";
                let op = c.operating_point.unwrap_or_default();
                let mach = match op.pressure {
                    Some(P::NozzlePressureRatio(npr)) => (format!("{p}.nozzle_pressure_ratio"), Some(npr)),
                    Some(P::Pressures(_)) => (format!("{p}.pressures"), None),
                    Some(P::Gauge(_)) => (format!("{p}.gauge"), None),
                    None => (p.to_string(), None),
                };
                let temperatures = [
                    ("total_temperature_k", op.total_temperature_k),
                    ("ambient_temperature_k", op.ambient_temperature_k),
                ]
                .into_iter()
                .filter_map(|(name, v)| v.map(|v| (format!("{p}.{name}"), v)))
                .collect();
                Self { mach, temperatures }
            }
            None => Self { mach: ("jet".into(), None), temperatures: Vec::new() },
        }
    }

    /// Records `e` (from [`VortexSheet::of_jet`]) against the fields the caller sent.
    fn outside_solver(&self, check: &mut Check, e: &crate::physics::RangeError) {
        let what = match e.quantity {
            "fully_expanded_mach_number" => "fully expanded Mach number",
            "sound_speed_ratio" => "ambient-to-jet sound-speed ratio",
            _ => "jet-to-ambient density ratio",
        };
        let problem =
            format!("gives a {what} of {:.4} outside the guided-mode solver's range {}", e.value, e.allowed);
        let sent = |(field, value): &(String, Option<f64>)| match value {
            Some(v) => (field.clone(), format!("{field} = {v} {problem}")),
            None => (field.clone(), format!("{field} {problem}")),
        };
        let mut fields = Vec::new();
        if e.quantity != "fully_expanded_mach_number" {
            fields.extend(self.temperatures.iter().map(|(f, v)| sent(&(f.clone(), Some(*v)))));
        }
        if fields.is_empty() {
            // The Mach number, or ratios set by the Mach number alone (default temperatures).
            fields.push(sent(&self.mach));
        }
        for (field, description) in fields {
            check.other(field, description);
        }
    }
}

/// Notes shared by every answer that carries guided modes.
pub fn guided_notes() -> Vec<String> {
    vec![
        "Guided modes: inviscid vortex sheet (no shear-layer thickness); bands are where the \
         upstream-travelling neutral mode exists, between its branch point on the sonic line and \
         its saddle point. A closure outside the band means the stage cannot close through that mode."
            .into(),
        "Customary stage letters (A1/A2, B, C, D) are those of cold round convergent nozzles and \
         depend on the facility; they are a guide, not a measurement."
            .into(),
    ]
}

impl Compute for GuidedQuery {
    type Response = pb::GuidedModesResponse;

    /// The bands and closures of the modes asked for, and the response.
    fn compute(self, _cancel: &Cancel) -> Result<pb::GuidedModesResponse, ApiError> {
        Ok(guided_message(&self))
    }
}

/// Computes and builds the GuidedModes response.
pub fn guided_message(q: &GuidedQuery) -> pb::GuidedModesResponse {
    let preds = guided::predict(&q.sheet, q.round, &q.options);
    let (state, jet, mut notes) = match &q.source {
        Source::Jet(j) => (
            j.state.as_ref().map(jet_state_message),
            Some(jet_summary(&j.jet)),
            j.state.as_ref().map(JetState::notes).unwrap_or_default(),
        ),
        Source::Sheet => (None, None, Vec::new()),
    };
    notes.extend(guided_notes());
    let mut used = vec![models::GUIDED_JET_MODES, models::VORTEX_SHEET_CELLS];
    if q.scale.is_some() {
        used.push(models::FULLY_EXPANDED_JET);
    }
    pb::GuidedModesResponse {
        state,
        jet,
        sheet: Some(sheet_message(&q.sheet, q.scale.as_ref(), q.round)),
        convection_ratio: q.options.convection_ratio,
        spacing_factor: q.options.spacing_factor,
        modes: preds.iter().map(|m| mode_message(&q.sheet, q.scale.as_ref(), m, q.curve_points)).collect(),
        provenance: Some(provenance(&used, &q.defaults, notes)),
    }
}
