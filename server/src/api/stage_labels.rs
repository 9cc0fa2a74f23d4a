//! Stage labels: the guided-mode bands and closure tones of the jet a recording was made at
//! (or of each point's jet in a stage fit), and which stage a measured tone fits.

use super::error::{ApiError, Check};
use super::field::Fields;
use super::guided::{closure_options, guided_notes, mode_id, mode_message, sheet_message};
use super::jet_input::resolve_jet;
use super::provenance::Defaults;
use crate::physics::guided::{self, ClosureOptions, ModePrediction, Scale, VortexSheet};
use crate::physics::jet::{JetSize, JetState};
use jetloop_proto::pb;

/// The guided modes of the jet a recording was made at, for stage labels on its tones.
#[derive(Debug, Clone)]
pub struct StageContext {
    sheet: VortexSheet,
    scale: Scale,
    round: bool,
    modes: Vec<ModePrediction>,
    tolerance: f64,
    state_notes: Vec<String>,
}

/// Converts the guided-mode options and band tolerance of stage labels at `path`.
pub fn label_settings(
    check: &mut Check,
    defaults: &mut Defaults,
    modes: Option<pb::GuidedModeOptions>,
    band_tolerance_fraction: Option<f64>,
    path: &str,
    round: bool,
) -> Option<(ClosureOptions, f64)> {
    let options = closure_options(check, defaults, modes, &format!("{path}.modes"), round);
    let tol = Fields::new(check, defaults, path)
        .read(band_tolerance_fraction, &ClosureOptions::BAND_TOLERANCE_FRACTION);
    Some((options?, tol?))
}

/// Converts `StageLabelOptions` at `path` and computes the bands and closures.
///
/// # Errors
/// [`ApiError::Invalid`] for bad fields or a rectangular jet; [`ApiError::Precondition`] for a
/// jet that is not supersonic.
pub fn stage_context(
    o: pb::StageLabelOptions,
    path: &str,
    defaults: &mut Defaults,
) -> Result<StageContext, ApiError> {
    let pb::StageLabelOptions { jet, modes, band_tolerance_fraction } = o;
    let jet = resolve_jet(jet, &format!("{path}.jet"))?;
    let mut check = Check::new();
    if Scale::of_jet(&jet.jet).is_none() {
        check.other(
            format!("{path}.jet"),
            format!(
                "{path}.jet: stage labels need a round or planar jet (guided modes); this one is rectangular"
            ),
        );
        return check.finish(None);
    }
    defaults.absorb(&jet.defaults);
    let round = matches!(jet.jet.size, JetSize::Round { .. });
    let settings = label_settings(&mut check, defaults, modes, band_tolerance_fraction, path, round);
    let state_notes = jet.state.as_ref().map(JetState::notes).unwrap_or_default();
    let ctx = match settings {
        Some((o, tol)) => match StageContext::for_jet(&jet.jet, &o, tol, state_notes) {
            Some(c) => Some(c),
            None => {
                check.other(
                    format!("{path}.jet"),
                    format!(
                        "{path}.jet: Mj = {} or its temperature ratio lies outside the guided-mode solver's range \
                         (Mj in {}, Tj/Ta in {})",
                        jet.jet.mj,
                        guided::MACH,
                        guided::TEMPERATURE_RATIO
                    ),
                );
                None
            }
        },
        None => None,
    };
    check.finish(ctx)
}

impl StageContext {
    /// Bands and closures of a round or planar jet; `None` for rectangular jets and jets
    /// outside the solver's range.
    pub fn for_jet(
        jet: &crate::physics::jet::ExpandedJet,
        o: &ClosureOptions,
        tolerance: f64,
        state_notes: Vec<String>,
    ) -> Option<Self> {
        let scale = Scale::of_jet(jet)?;
        let sheet = VortexSheet::of_jet(jet).ok()?;
        let round = matches!(jet.size, JetSize::Round { .. });
        Some(Self { sheet, scale, round, modes: guided::predict(&sheet, round, o), tolerance, state_notes })
    }

    /// The stages a tone at `f_hz` is compatible with, best first.
    pub fn label(&self, f_hz: f64) -> Vec<pb::StageMatch> {
        let omega = self.scale.omega(f_hz);
        guided::label_tone(omega, &self.modes, self.tolerance)
            .iter()
            .map(|m| {
                let band = &self.modes[m.index].band;
                pb::StageMatch {
                    mode: Some(mode_id(&m.mode)),
                    family: m.mode.family().to_string(),
                    customary_stage: m.mode.customary_stage(self.sheet.mach()).to_string(),
                    cell_mode: m.closure.map(|c| c.0),
                    predicted_frequency_hz: m.closure.map(|c| self.scale.hz(c.1)),
                    relative_deviation: m.relative_deviation,
                    band_low_hz: self.scale.hz(band.branch.omega),
                    band_high_hz: band.saddle.map_or(f64::NAN, |s| self.scale.hz(s.omega)),
                    band_distance: m.band_distance,
                }
            })
            .collect()
    }

    /// The bands and closures as messages.
    pub fn bands(&self) -> Vec<pb::GuidedModeResult> {
        self.modes.iter().map(|m| mode_message(&self.sheet, Some(&self.scale), m, 0)).collect()
    }

    /// The sheet as a message.
    pub fn sheet(&self) -> pb::VortexSheetParameters {
        sheet_message(&self.sheet, Some(&self.scale), self.round)
    }

    /// Notes for the provenance: the jet state's and the model's.
    pub fn notes(&self) -> Vec<String> {
        let mut n = self.state_notes.clone();
        n.extend(guided_notes());
        n.push(format!(
            "Stage labels: a tone is compatible with a mode when its frequency lies in the mode's band or within {} % of a band edge; harmonics (order 2 and above) are not labelled.",
            100.0 * self.tolerance
        ));
        n
    }
}
