//! ToneService.SweepScreech: screech frequencies over a range of one variable (NPR, Mj,
//! reflector distance), with guided modes on request.

use super::error::{ApiError, Check};
use super::gas::{regime, PRESSURE_CAUTION};
use super::jet_input::{convert_jet, ResolvedJet};
use super::provenance::provenance;
use super::tones::{screech_settings, zero_loop};
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::models::{self};
use crate::physics::screech::{self, ScreechOptions, SweepBase, SweepError};
use crate::physics::staging::SweepKind;
use jetloop_proto::pb;

/// Most points in one sweep.
pub const MAX_SWEEP_POINTS: usize = 10_000;
/// Most points in one sweep that computes guided modes (each point solves every mode's band
/// and closure: about 0.15 ms per mode).
pub const MAX_GUIDED_SWEEP_POINTS: usize = 2_000;

/// A validated sweep.
#[derive(Debug, Clone)]
pub struct SweepQuery {
    jet: ResolvedJet,
    kind: SweepKind,
    values: Vec<f64>,
    settings: ScreechOptions,
}

impl TryFrom<pb::SweepScreechRequest> for SweepQuery {
    type Error = ApiError;

    fn try_from(req: pb::SweepScreechRequest) -> Result<Self, ApiError> {
        use pb::sweep_screech_request::Values;
        let pb::SweepScreechRequest { jet, variable, values, options } = req;
        // Sizes first: nothing large is expanded before the limit is known to hold.
        let (count, field) = match &values {
            Some(Values::Range(r)) => (r.count as usize, "range.count"),
            Some(Values::List(l)) => (l.values.len(), "list.values"),
            None => (0, "values"),
        };
        if count > MAX_SWEEP_POINTS {
            return Err(ApiError::TooLarge {
                field: field.into(),
                limit: format!("{MAX_SWEEP_POINTS} sweep points"),
                actual: format!("{count} points"),
            });
        }
        let mut check = Check::new();
        let kind = match pb::SweepVariable::try_from(variable) {
            Ok(pb::SweepVariable::NozzlePressureRatio) => Some(SweepKind::Npr),
            Ok(pb::SweepVariable::FullyExpandedMachNumber) => Some(SweepKind::Mach),
            Ok(pb::SweepVariable::ReflectorDistanceM) => Some(SweepKind::Reflector),
            Ok(pb::SweepVariable::Unspecified) | Err(_) => {
                check.other(
                    "variable",
                    format!(
                        "variable = {variable} must be SWEEP_VARIABLE_NOZZLE_PRESSURE_RATIO, \
                         SWEEP_VARIABLE_FULLY_EXPANDED_MACH_NUMBER or SWEEP_VARIABLE_REFLECTOR_DISTANCE_M"
                    ),
                );
                None
            }
        };
        let from_list = matches!(values, Some(Values::List(_)));
        let mut jet = convert_jet(jet, "jet")?;
        if matches!(kind, Some(SweepKind::Npr | SweepKind::Mach)) && jet.spec.is_none() {
            check.other(
                "jet.conditions",
                "NPR and Mj sweeps need jet.conditions (nozzle and operating point), not a fully expanded jet",
            );
        }
        let values: Vec<f64> = match values {
            None => {
                check.missing("values", "set range (start, stop, count) or list");
                Vec::new()
            }
            Some(Values::Range(pb::SweepRange { start, stop, count })) => {
                for (name, v) in [("range.start", start), ("range.stop", stop)] {
                    if !v.is_finite() {
                        check.other(name, format!("{name} = {v} is not a finite number"));
                    }
                }
                if count == 0 || (count == 1 && start != stop) {
                    check.other(
                        "range.count",
                        format!("range.count = {count}: give at least 1 point (2 or more when start != stop), at most {MAX_SWEEP_POINTS}"),
                    );
                    Vec::new()
                } else if count == 1 {
                    vec![start]
                } else {
                    let step = (stop - start) / f64::from(count - 1);
                    (0..count).map(|i| start + step * f64::from(i)).collect()
                }
            }
            Some(Values::List(l)) => {
                if l.values.is_empty() {
                    check.missing("list.values", "give at least one value");
                }
                l.values
            }
        };
        let size = jet.jet.size;
        let settings = screech_settings(&mut check, &mut jet.defaults, options, "options", &size);
        if settings.as_ref().is_some_and(|s| s.guided.is_some()) && values.len() > MAX_GUIDED_SWEEP_POINTS {
            return Err(ApiError::TooLarge {
                field: field.into(),
                limit: format!("{MAX_GUIDED_SWEEP_POINTS} sweep points with options.guided_modes"),
                actual: format!("{} points", values.len()),
            });
        }
        // Each value must be valid for its variable; report the first few bad ones by index,
        // at the request field that holds them.
        let last = values.len().saturating_sub(1);
        let value_path = |i: usize| match (from_list, i) {
            (true, i) => format!("list.values[{i}]"),
            (false, 0) => "range.start".to_string(),
            (false, i) if i == last => "range.stop".to_string(),
            (false, _) => "range".to_string(),
        };
        if let Some(kind) = kind {
            let (bounds, name) = screech::sweep_bounds(kind);
            let mut bad = 0;
            for (i, v) in values.iter().enumerate() {
                if !bounds.contains(*v) {
                    bad += 1;
                    if bad <= 5 {
                        check.other(
                            value_path(i),
                            format!(
                                "{}: sweep value {i} = {v} is outside the allowed {name} range {bounds}",
                                value_path(i)
                            ),
                        );
                    }
                }
            }
            if kind == SweepKind::Mach {
                if let Some(spec) = &jet.spec {
                    for (i, v) in values.iter().enumerate().filter(|(_, v)| bounds.contains(**v)) {
                        let npr = spec.gas.npr_for_mach(*v);
                        if !crate::physics::jet::NPR.contains(npr) {
                            check.other(
                                value_path(i),
                                format!(
                                    "sweep value {i}: Mj = {v} needs NPR {npr:.4e}, outside {}",
                                    crate::physics::jet::NPR
                                ),
                            );
                            break;
                        }
                    }
                }
            }
        }
        let q = match (kind, settings) {
            (Some(kind), Some(settings)) => Some(SweepQuery { jet, kind, values, settings }),
            _ => None,
        };
        check.finish(q)
    }
}

impl Compute for SweepQuery {
    type Response = pb::SweepScreechResponse;

    /// Runs the sweep ([`screech::sweep`]) and builds the response.
    ///
    /// # Errors
    /// [`ApiError::Invalid`] naming `options.loop` when the loop takes no time, or
    /// [`ApiError::Precondition`] for a reflector sweep of a jet that is not supersonic.
    fn compute(self, cancel: &Cancel) -> Result<pb::SweepScreechResponse, ApiError> {
        let q = &self;
        let t = std::time::Instant::now();
        let base = match &q.jet.spec {
            Some(spec) => SweepBase::Conditions { gas: spec.gas, nozzle: spec.nozzle, op: spec.op },
            None => SweepBase::Jet(q.jet.jet),
        };
        let sweep =
            screech::sweep_until(&base, q.kind, &q.values, &q.settings, cancel).map_err(|e| match e {
                SweepError::Stopped(s) => ApiError::Stopped(s),
                SweepError::ZeroLoop(_) => zero_loop("options.loop"),
                SweepError::NotSupersonic(e) => ApiError::not_supersonic("jet.conditions", &e),
                // Values are checked against their bounds, and the kind against the jet, in the
                // conversion: these name the field all the same.
                SweepError::Value { index, source } => {
                    ApiError::Invalid(vec![super::error::FieldViolation {
                        field: "values".into(),
                        description: format!("values: sweep value {index}: {source}"),
                    }])
                }
                SweepError::NeedsConditions(_) => ApiError::Invalid(vec![super::error::FieldViolation {
                    field: "jet.conditions".into(),
                    description: e.to_string(),
                }]),
            })?;
        let points = sweep
            .points
            .into_iter()
            .map(|p| {
                let mut m = pb::SweepPoint {
                    value: p.value,
                    nozzle_pressure_ratio: p.npr,
                    fully_expanded_mach_number: p.mj,
                    regime: p.regime.map_or(pb::ExpansionRegime::Unspecified, regime) as i32,
                    supersonic: p.prediction.is_some(),
                    fully_expanded_velocity_m_per_s: p.uj_m_s,
                    reference_length_m: p.reference_length_m,
                    ..Default::default()
                };
                if let Some(r) = p.prediction {
                    m.spacing_m = Some(r.spacing_m);
                    m.powell_fundamental_hz = Some(r.powell_hz);
                    m.tam_1986_hz = r.tam_1986_hz;
                    m.loop_frequencies_hz = r.loop_frequencies_hz;
                    if let Some(g) = &r.guided {
                        m.guided_modes = g
                            .modes
                            .iter()
                            .map(|md| super::guided::mode_message(&g.sheet, Some(&g.scale), md, 0))
                            .collect();
                    }
                }
                m
            })
            .collect();
        // The pressure-equipment caution once per sweep, when the points are reservoir conditions.
        let mut notes = if q.jet.spec.is_some() { vec![PRESSURE_CAUTION.to_string()] } else { Vec::new() };
        if sweep.not_supersonic > 0 {
            notes.push(format!(
                "{} of {} points are not supersonic jets (no shock cells): they are kept with supersonic = false and no frequencies.",
                sweep.not_supersonic,
                q.values.len()
            ));
        }
        let mut used = vec![
            models::POWELL_FUNDAMENTAL,
            models::POWELL_LOOP,
            models::TAM_1986,
            models::VORTEX_SHEET_CELLS,
        ];
        if q.jet.spec.is_some() {
            used.push(models::FULLY_EXPANDED_JET);
        }
        if q.settings.guided.is_some() {
            used.push(models::GUIDED_JET_MODES);
            notes.extend(super::guided::guided_notes());
        }
        Ok(pb::SweepScreechResponse {
            variable: match q.kind {
                SweepKind::Npr => pb::SweepVariable::NozzlePressureRatio,
                SweepKind::Mach => pb::SweepVariable::FullyExpandedMachNumber,
                SweepKind::Reflector => pb::SweepVariable::ReflectorDistanceM,
                SweepKind::Plain => pb::SweepVariable::Unspecified,
            } as i32,
            points,
            compute_time_s: t.elapsed().as_secs_f64(),
            provenance: Some(provenance(&used, &q.jet.defaults, notes)),
        })
    }
}
