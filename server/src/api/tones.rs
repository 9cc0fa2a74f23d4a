//! ToneService: screech and shock-associated noise predictions (the sweep is in
//! [`super::sweep`]): request conversion, computation glue and responses.

use super::error::{ApiError, Check};
use super::gas::jet_state_message;
use super::jet_input::{cell_models, notes, with_state_models};
use super::jet_input::{cell_options, convection, jet_summary, loop_spec, resolve_jet, ResolvedJet};
use super::provenance::{provenance, Defaults};
use super::Compute;
use crate::cancel::Cancel;
use crate::physics::cells::{self, CellOptions};
use crate::physics::guided;
use crate::physics::jet::{ExpandedJet, JetSize};
use crate::physics::models::{self, Model};
use crate::physics::screech::{self, Harmonic, ScreechOptions};
use crate::physics::tones::{self, Convection, LoopResult};
use jetloop_proto::pb;

/// Most observer angles in one shock-noise request.
pub const MAX_ANGLES: usize = 3600;

pub(super) fn screech_settings(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::ScreechOptions>,
    path: &str,
    size: &JetSize,
) -> Option<ScreechOptions> {
    let pb::ScreechOptions { convection: c, cells: cl, r#loop, harmonics, guided_modes } =
        o.unwrap_or_default();
    let guided = match (guided_modes, size) {
        (None, _) => None,
        (Some(_), JetSize::Rectangular { .. }) => {
            check.other(
                format!("{path}.guided_modes"),
                format!(
                    "{path}.guided_modes: guided modes are computed for round and planar jets, not \
                     rectangular ones; leave it unset or give a planar jet of the same height"
                ),
            );
            None
        }
        (Some(g), size) => Some((g, matches!(size, JetSize::Round { .. }))),
    };
    let conv = convection(check, defaults, c, &format!("{path}.convection"));
    let cells = cell_options(check, defaults, cl, &format!("{path}.cells"), 1);
    // The guided closure takes the request's convection ratio and spacing factor unless its
    // own options set them.
    let guided = match guided {
        None => None,
        Some((g, round)) => {
            let fb = super::guided::Fallbacks {
                convection_ratio: match conv {
                    Some(Convection::Ratio(r)) => Some((r, "options.convection")),
                    _ => None,
                },
                spacing_factor: cells.as_ref().map(|c| (c.factor(), "options.cells.spacing_factor")),
            };
            let path = format!("{path}.guided_modes");
            Some(super::guided::closure_options_with(check, defaults, Some(g), &path, round, fb)?)
        }
    };
    let loop_spec = loop_spec(check, defaults, r#loop, &format!("{path}.loop"));
    let harmonics =
        match super::field::Fields::new(check, defaults, path).read_count(harmonics, &screech::HARMONICS) {
            Some(h) => h as u32,
            None => screech::DEFAULT_HARMONICS,
        };
    Some(ScreechOptions { convection: conv?, cells: cells?, loop_spec, harmonics, guided })
}

/// A validated screech question.
#[derive(Debug, Clone)]
pub struct ScreechQuery {
    /// The jet.
    pub jet: ResolvedJet,
    /// Settings.
    pub settings: ScreechOptions,
}

impl TryFrom<pb::PredictScreechRequest> for ScreechQuery {
    type Error = ApiError;

    fn try_from(req: pb::PredictScreechRequest) -> Result<Self, ApiError> {
        let pb::PredictScreechRequest { jet, options } = req;
        let mut jet = resolve_jet(jet, "jet")?;
        let mut check = Check::new();
        let size = jet.jet.size;
        let s = screech_settings(&mut check, &mut jet.defaults, options, "options", &size);
        check.finish(s.map(|settings| ScreechQuery { jet, settings }))
    }
}

fn tone_messages(h: Vec<Harmonic>) -> Vec<pb::Tone> {
    h.into_iter()
        .map(|Harmonic { order, frequency_hz, strouhal }| pb::Tone {
            order,
            frequency_hz,
            strouhal_number: strouhal,
        })
        .collect()
}

fn prediction(
    m: &Model,
    f: f64,
    n: u32,
    jet: &ExpandedJet,
    assumptions: Vec<String>,
) -> pb::ScreechModelPrediction {
    pb::ScreechModelPrediction {
        model: m.name.to_string(),
        reference: m.reference.to_string(),
        fundamental_hz: f,
        strouhal_number: tones::strouhal(f, jet),
        harmonics: tone_messages(screech::harmonics(f, n, jet)),
        assumptions,
    }
}

fn loop_message(r: &LoopResult, mc: f64, jet: &ExpandedJet) -> pb::FeedbackLoopResult {
    pb::FeedbackLoopResult {
        source_distance_m: r.source_distance_m,
        convection_speed_m_per_s: r.uc_m_s,
        convective_mach_number: mc,
        segments: r
            .segments
            .iter()
            .map(|s| pb::LoopSegmentTime {
                label: s.label.clone(),
                length_m: s.length_m,
                speed_m_per_s: s.speed_m_s,
                time_s: s.time_s,
            })
            .collect(),
        fixed_delay_s: r.fixed_delay_s,
        loop_time_s: r.loop_time_s,
        orders: tone_messages(screech::loop_orders(r, jet)),
    }
}

pub(super) fn zero_loop(path: &str) -> ApiError {
    ApiError::Invalid(vec![super::error::FieldViolation {
        field: path.to_string(),
        description: format!("{path}: {}", tones::ZeroLoopTime),
    }])
}

fn g_opts(s: &ScreechOptions) -> &guided::ClosureOptions {
    s.guided.as_ref().expect("guided options present when guided results are")
}

/// Model name of a guided-mode closure in the predictions list, e.g. "guided jet mode m=1,
/// radial order 1".
fn guided_model_name(m: &guided::GuidedMode) -> String {
    let shape = match m.shape {
        guided::ModeShape::Round { azimuthal } => format!("m={azimuthal}"),
        guided::ModeShape::PlanarSymmetric => "symmetric".to_string(),
        guided::ModeShape::PlanarAntisymmetric => "antisymmetric".to_string(),
    };
    format!("guided jet mode {shape}, radial order {}", m.radial)
}

impl Compute for ScreechQuery {
    type Response = pb::PredictScreechResponse;

    /// Computes and builds the PredictScreech response.
    ///
    /// # Errors
    /// [`ApiError::Invalid`] naming `options.loop` when the loop takes no time.
    fn compute(self, cancel: &Cancel) -> Result<pb::PredictScreechResponse, ApiError> {
        let (q, _) = (&self, cancel);
        let jet = &q.jet.jet;
        let s = &q.settings;
        let r = screech::predict(jet, s).map_err(|_| zero_loop("options.loop"))?;
        let (uc, mc) = (r.uc_m_s, r.convective_mach);
        let mut predictions = vec![prediction(
            &models::POWELL_FUNDAMENTAL,
            r.powell_hz,
            s.harmonics,
            jet,
            vec![
                format!("Convection speed Uc = {uc:.2} m/s (Mc = {mc:.4})."),
                format!(
                    "Source spacing: vortex-sheet shock-cell spacing times {} = {:.6} m.",
                    r.cells.factor,
                    r.cells.spacing_m()
                ),
            ],
        )];
        let mut used = vec![models::POWELL_FUNDAMENTAL, models::POWELL_LOOP];
        used.extend(cell_models(jet));
        let mut notes = notes(&q.jet);
        match r.tam_1986_hz {
            Some(f) => {
                used.push(models::TAM_1986);
                predictions.push(prediction(
                    &models::TAM_1986,
                    f,
                    s.harmonics,
                    jet,
                    vec![
                        "Uc = 0.7 Uj and 0.8 of the round-jet vortex-sheet spacing, built into the constant 0.67 (= 0.7 j0,1 / (0.8 pi) rounded).".into(),
                        "Temperature term uses the reservoir-to-ambient ratio T0/Ta.".into(),
                    ],
                ));
            }
            None => notes.push(
                "Tam, Seiner & Yu (1986) applies to round jets only; for this jet Powell's fundamental \
                 uses the rectangular or planar spacing (Tam 1988)."
                    .into(),
            ),
        }
        let guided_modes = match &r.guided {
            Some(g) => {
                used.push(models::GUIDED_JET_MODES);
                notes.extend(super::guided::guided_notes());
                for m in &g.modes {
                    let first = m.closures.first();
                    if let Some((_, _, guided::Closure::InBand(p))) = first {
                        let f = g.scale.hz(p.omega);
                        let mode = &m.band.mode;
                        let stage = mode.customary_stage(g.sheet.mach());
                        let mut p = prediction(
                            &models::GUIDED_JET_MODES,
                            f,
                            s.harmonics,
                            jet,
                            vec![
                                format!(
                                    "Closure omega/Uc - k_s,1 = k_guided(omega) in the mode's band, Uc/Uj = {}, spacing factor {}.",
                                    g_opts(s).convection_ratio,
                                    g_opts(s).spacing_factor
                                ),
                                format!(
                                    "Stage family: {}{}.",
                                    mode.family(),
                                    if stage.is_empty() { String::new() } else { format!(" (customary stage {stage})") }
                                ),
                            ],
                        );
                        p.model = guided_model_name(mode);
                        predictions.push(p);
                    }
                }
                g.modes.iter().map(|m| super::guided::mode_message(&g.sheet, Some(&g.scale), m, 0)).collect()
            }
            None => {
                if s.guided.is_some() {
                    notes.push(
                        "Guided modes were asked for but not computed: the jet lies outside the \
                         solver's range (Mj above 5 or an extreme temperature ratio)."
                            .into(),
                    );
                }
                Vec::new()
            }
        };
        let used = with_state_models(used, &q.jet);
        Ok(pb::PredictScreechResponse {
            guided_modes,
            state: q.jet.state.as_ref().map(jet_state_message),
            jet: Some(jet_summary(jet)),
            spacing_m: r.cells.spacing_m(),
            spacing_factor: r.cells.factor,
            predictions,
            feedback_loop: Some(loop_message(&r.feedback, mc, jet)),
            provenance: Some(provenance(&used, &q.jet.defaults, notes)),
        })
    }
}

/// A validated shock-noise question.
#[derive(Debug, Clone)]
pub struct ShockNoiseQuery {
    jet: ResolvedJet,
    convection: Convection,
    cells: CellOptions,
    angles: Vec<f64>,
}

impl TryFrom<pb::PredictShockNoiseRequest> for ShockNoiseQuery {
    type Error = ApiError;

    fn try_from(req: pb::PredictShockNoiseRequest) -> Result<Self, ApiError> {
        let pb::PredictShockNoiseRequest { jet, convection: c, cells: cl, observer_angles_deg } = req;
        if observer_angles_deg.len() > MAX_ANGLES {
            return Err(ApiError::TooLarge {
                field: "observer_angles_deg".into(),
                limit: format!("{MAX_ANGLES} angles"),
                actual: format!("{} angles", observer_angles_deg.len()),
            });
        }
        let mut jet = resolve_jet(jet, "jet")?;
        let mut check = Check::new();
        let conv = convection(&mut check, &mut jet.defaults, c, "convection");
        let cells = cell_options(&mut check, &mut jet.defaults, cl, "cells", 1);
        let angles = if observer_angles_deg.is_empty() {
            jet.defaults.note("observer_angles_deg", "30, 40, ..., 180 deg", "a polar arc in 10 deg steps");
            (3..=18).map(|k| f64::from(k) * 10.0).collect()
        } else {
            observer_angles_deg
                .iter()
                .enumerate()
                .filter_map(|(i, a)| {
                    check.range(&format!("observer_angles_deg[{i}]"), tones::OBSERVER_ANGLE.check("", *a))
                })
                .collect()
        };
        let q = match (conv, cells) {
            (Some(convection), Some(cells)) => Some(ShockNoiseQuery { jet, convection, cells, angles }),
            _ => None,
        };
        check.finish(q)
    }
}

/// Computes and builds the PredictShockNoise response.
pub fn shock_noise_message(q: &ShockNoiseQuery) -> pb::PredictShockNoiseResponse {
    let jet = &q.jet.jet;
    let c = cells::cells(jet, &q.cells);
    let r = tones::shock_noise_peaks(jet, &c, q.convection, &q.angles);
    let peaks = r
        .peaks
        .iter()
        .map(|p| {
            let (f, st) = match p.peak {
                tones::PeakFrequency::Peak { frequency_hz, strouhal } => (Some(frequency_hz), Some(strouhal)),
                tones::PeakFrequency::MachWave | tones::PeakFrequency::BeyondLimit(_) => (None, None),
            };
            pb::ShockNoisePeak {
                observer_angle_deg: p.angle_deg,
                mode: p.mode,
                peak_frequency_hz: f,
                strouhal_number: st,
                beyond_strouhal_limit: matches!(p.peak, tones::PeakFrequency::BeyondLimit(_)),
            }
        })
        .collect();
    let mut notes = notes(&q.jet);
    if r.mach_wave > 0 {
        notes.push(format!(
            "{} angle/mode pairs have no peak frequency: there 1 - Mc cos(angle) <= 0 \
             (Mc = {:.3}), the region of Mach-wave radiation.",
            r.mach_wave, r.mc
        ));
    }
    if r.beyond_limit > 0 {
        notes.push(format!(
            "{} angle/mode pairs are left unset (beyond_strouhal_limit): the formula's peak \
             lies above Strouhal number {} there, as 1 - Mc cos(angle) approaches 0 (Mc = \
             {:.3}); measured shock-noise peaks lie far below it.",
            r.beyond_limit,
            tones::SHOCK_NOISE_MAX_STROUHAL,
            r.mc
        ));
    }
    let uc = r.uc_m_s;
    let mut used = vec![models::SHOCK_NOISE_PEAK];
    used.extend(cell_models(jet));
    pb::PredictShockNoiseResponse {
        state: q.jet.state.as_ref().map(jet_state_message),
        jet: Some(jet_summary(jet)),
        convection_speed_m_per_s: uc,
        convective_mach_number: uc / jet.a_amb_m_s,
        peaks,
        provenance: Some(provenance(&with_state_models(used, &q.jet), &q.jet.defaults, notes)),
    }
}

impl Compute for ShockNoiseQuery {
    type Response = pb::PredictShockNoiseResponse;

    /// The shock-noise peaks and the response.
    fn compute(self, _cancel: &Cancel) -> Result<pb::PredictShockNoiseResponse, ApiError> {
        Ok(shock_noise_message(&self))
    }
}
