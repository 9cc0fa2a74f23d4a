//! Screech predictions for one jet and over a sweep: the operations the tone service answers
//! with, returning structs that mirror its responses so the API layer only copies fields.
//!
//! - [`predict`]: shock cells, Powell's fundamental, Tam, Seiner & Yu (1986) for round jets,
//!   and Powell's loop criterion for the user's loop (formulas in [`super::tones`]).
//! - [`sweep`]: [`predict`] at each value of an NPR, Mj or reflector-distance sweep.
//!
//! ```
//! use jetloop_core::physics::{gas::Gas, jet::{ExpandedJet, JetSize}, screech};
//! let jet = ExpandedJet::direct(Gas::AIR, Gas::AIR, 1.5, JetSize::Round { diameter_m: 0.02 }, 288.15, 288.15)
//!     .unwrap();
//! let p = screech::predict(&jet, &screech::ScreechOptions::default()).unwrap();
//! assert!(p.tam_1986_hz.is_some() && p.powell_hz > 0.0);
//! ```

use super::cells::{self, CellOptions, Cells};
use super::gas::Gas;
use super::guided;
use super::jet::{jet_state, ExpandedJet, NotSupersonic, Nozzle, OperatingPoint, Regime};
use super::staging::SweepKind;
use super::tones::{self, Convection, LoopResult, LoopSpec, ZeroLoopTime};
use super::{Bounds, RangeError};
use crate::cancel::{Cancel, Stopped};

/// Options of a screech prediction.
#[derive(Debug, Clone, PartialEq)]
pub struct ScreechOptions {
    /// Convection of the instability waves.
    pub convection: Convection,
    /// Shock-cell options (spacing factor, modes).
    pub cells: CellOptions,
    /// The feedback loop.
    pub loop_spec: LoopSpec,
    /// Harmonics per model (fundamental included).
    pub harmonics: u32,
    /// Guided-jet-mode model (bands and closure tones), when asked for.
    pub guided: Option<guided::ClosureOptions>,
}

/// Convection ratio Uc/Uj used when none is given (Tam, Seiner & Yu 1986).
pub const DEFAULT_CONVECTION_RATIO: f64 = tones::TAM_1986_CONVECTION;
/// Harmonics per model when none are asked for.
pub const DEFAULT_HARMONICS: u32 = 3;
/// Harmonics per model (the fundamental included) when unset.
pub const HARMONICS: crate::physics::Setting = crate::physics::Setting::new(
    "harmonics",
    tones::HARMONICS,
    DEFAULT_HARMONICS as f64,
    "fundamental and two harmonics",
);

impl Default for ScreechOptions {
    fn default() -> Self {
        Self {
            convection: Convection::Ratio(DEFAULT_CONVECTION_RATIO),
            cells: CellOptions::default(),
            loop_spec: LoopSpec::default(),
            harmonics: DEFAULT_HARMONICS,
            guided: None,
        }
    }
}

/// Every screech model for one jet.
#[derive(Debug, Clone, PartialEq)]
pub struct ScreechPrediction {
    /// Shock cells (spacing with the factor applied).
    pub cells: Cells,
    /// Convection speed Uc, m/s.
    pub uc_m_s: f64,
    /// Convective Mach number Uc / a_ambient.
    pub convective_mach: f64,
    /// Powell's fundamental f = Uc / (Ls (1 + Mc)), Hz.
    pub powell_hz: f64,
    /// Tam, Seiner & Yu (1986) with the published 0.67, Hz (round jets only).
    pub tam_1986_hz: Option<f64>,
    /// Powell's loop criterion for the given loop.
    pub feedback: LoopResult,
    /// Guided-mode bands and closures (asked for, round or planar jet, Mj within the
    /// solver's range), with the sheet they were computed on.
    pub guided: Option<GuidedPrediction>,
}

/// The guided-mode part of a prediction.
#[derive(Debug, Clone, PartialEq)]
pub struct GuidedPrediction {
    /// The dimensionless vortex sheet.
    pub sheet: guided::VortexSheet,
    /// Its scale (lengths, sound speed) for hertz.
    pub scale: guided::Scale,
    /// True for round jets.
    pub round: bool,
    /// One per mode.
    pub modes: Vec<guided::ModePrediction>,
}

/// Guided-mode bands and closures of a jet: `None` for rectangular jets and jets outside the
/// solver's range (Mj above 5, extreme temperature ratios).
pub fn guided_prediction(jet: &ExpandedJet, o: &guided::ClosureOptions) -> Option<GuidedPrediction> {
    let scale = guided::Scale::of_jet(jet)?;
    let sheet = guided::VortexSheet::of_jet(jet).ok()?;
    let round = matches!(jet.size, super::jet::JetSize::Round { .. });
    let modes = guided::predict(&sheet, round, o);
    Some(GuidedPrediction { sheet, scale, round, modes })
}

/// One tone of a harmonic series.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Harmonic {
    /// Harmonic (or loop) order k >= 1.
    pub order: u32,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Strouhal number f L / Uj.
    pub strouhal: f64,
}

/// The tones k f for k = 1..=count, with their Strouhal numbers for `jet`.
pub fn harmonics(f_hz: f64, count: u32, jet: &ExpandedJet) -> Vec<Harmonic> {
    (1..=count)
        .map(|k| {
            let fk = f_hz * f64::from(k);
            Harmonic { order: k, frequency_hz: fk, strouhal: tones::strouhal(fk, jet) }
        })
        .collect()
}

/// The loop frequencies n / tau as a harmonic series (order n).
pub fn loop_orders(r: &LoopResult, jet: &ExpandedJet) -> Vec<Harmonic> {
    r.frequencies_hz
        .iter()
        .zip(1u32..)
        .map(|(f, n)| Harmonic { order: n, frequency_hz: *f, strouhal: tones::strouhal(*f, jet) })
        .collect()
}

/// Every screech model for a supersonic jet.
///
/// # Errors
/// [`ZeroLoopTime`] when the loop takes no time.
pub fn predict(jet: &ExpandedJet, o: &ScreechOptions) -> Result<ScreechPrediction, ZeroLoopTime> {
    predict_with_loop(jet, o, &o.loop_spec)
}

fn predict_with_loop(
    jet: &ExpandedJet,
    o: &ScreechOptions,
    loop_spec: &LoopSpec,
) -> Result<ScreechPrediction, ZeroLoopTime> {
    let cells = cells::cells(jet, &o.cells);
    let ls = cells.spacing_m();
    let uc = o.convection.uc(jet);
    Ok(ScreechPrediction {
        powell_hz: tones::powell_fundamental(uc, jet.a_amb_m_s, ls),
        tam_1986_hz: tones::tam_1986_frequency(jet, tones::TAM_1986_CONSTANT),
        feedback: tones::feedback_loop(jet, ls, o.convection, loop_spec)?,
        uc_m_s: uc,
        convective_mach: uc / jet.a_amb_m_s,
        cells,
        guided: o.guided.as_ref().and_then(|g| guided_prediction(jet, g)),
    })
}

/// What a sweep starts from: conditions (nozzle, operating point, gas), whose pressure the
/// sweep replaces, or a fully expanded jet given directly (reflector sweeps only).
#[derive(Debug, Clone, PartialEq)]
pub enum SweepBase {
    /// Nozzle, operating point and gas.
    Conditions {
        /// Jet gas.
        gas: Gas,
        /// Nozzle.
        nozzle: Nozzle,
        /// Operating point (its NPR is replaced for NPR and Mj sweeps).
        op: OperatingPoint,
    },
    /// A jet given directly.
    Jet(ExpandedJet),
}

/// One point of a sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct SweepPoint {
    /// The swept value.
    pub value: f64,
    /// Nozzle pressure ratio of the point.
    pub npr: f64,
    /// Isentropic (fully expanded) Mach number of the point.
    pub mj: f64,
    /// Expansion regime (conditions only).
    pub regime: Option<Regime>,
    /// Fully expanded velocity, m/s.
    pub uj_m_s: f64,
    /// Reference length (Dj or hj), m.
    pub reference_length_m: f64,
    /// The predictions; `None` where the jet is not supersonic.
    pub prediction: Option<SweepPrediction>,
}

/// What a sweep keeps of each point's [`ScreechPrediction`] (compact: a sweep holds
/// thousands of points at once).
#[derive(Debug, Clone, PartialEq)]
pub struct SweepPrediction {
    /// Shock-cell spacing with the factor applied, m.
    pub spacing_m: f64,
    /// Powell's fundamental, Hz.
    pub powell_hz: f64,
    /// Tam, Seiner & Yu (1986), Hz (round jets only).
    pub tam_1986_hz: Option<f64>,
    /// Loop time tau, s.
    pub loop_time_s: f64,
    /// Loop frequencies n / tau, Hz.
    pub loop_frequencies_hz: Vec<f64>,
    /// Guided-mode bands and closures.
    pub guided: Option<GuidedPrediction>,
}

impl From<ScreechPrediction> for SweepPrediction {
    fn from(p: ScreechPrediction) -> Self {
        Self {
            spacing_m: p.cells.spacing_m(),
            powell_hz: p.powell_hz,
            tam_1986_hz: p.tam_1986_hz,
            loop_time_s: p.feedback.loop_time_s,
            loop_frequencies_hz: p.feedback.frequencies_hz,
            guided: p.guided,
        }
    }
}

/// A whole sweep.
#[derive(Debug, Clone, PartialEq)]
pub struct Sweep {
    /// Points in request order.
    pub points: Vec<SweepPoint>,
    /// How many points are not supersonic jets.
    pub not_supersonic: usize,
}

/// Why a sweep cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SweepError {
    /// The loop takes no time.
    #[error(transparent)]
    ZeroLoop(#[from] ZeroLoopTime),
    /// A reflector sweep of a jet with no shock cells.
    #[error(transparent)]
    NotSupersonic(#[from] NotSupersonic),
    /// A swept value is outside the variable's range.
    #[error("sweep value {index}: {source}")]
    Value {
        /// Index of the value.
        index: usize,
        /// The range error.
        source: RangeError,
    },
    /// NPR and Mj sweeps need conditions, not a fully expanded jet; a plain variable is no
    /// screech variable.
    #[error("a {0:?} sweep needs jet conditions (nozzle and operating point)")]
    NeedsConditions(SweepKind),
    /// Stopped through its cancellation flag.
    #[error(transparent)]
    Stopped(#[from] Stopped),
}

/// Allowed fully expanded Mach numbers of an Mj sweep (subsonic points are kept, marked).
pub const SWEEP_MACH: Bounds = Bounds::closed(0.0, 20.0, "");
/// Values any finite number may take (a plain variable).
const ANY: Bounds = Bounds::closed(f64::MIN, f64::MAX, "");

/// The allowed range of each swept value of `kind`, with the variable's name in words.
pub fn sweep_bounds(kind: SweepKind) -> (Bounds, &'static str) {
    match kind {
        SweepKind::Npr => (super::jet::NPR, "nozzle pressure ratio"),
        SweepKind::Mach => (SWEEP_MACH, "fully expanded Mach number"),
        SweepKind::Reflector => (tones::REFLECTOR_DISTANCE, "reflector distance"),
        SweepKind::Plain => (ANY, "value"),
    }
}

/// [`predict`] at each value of a sweep of `kind`: NPR, Mj (each point's NPR is
/// [`Gas::npr_for_mach`]), or reflector distance in m (the loop's reflector).
///
/// # Errors
/// [`SweepError`] as documented on its variants.
pub fn sweep(
    base: &SweepBase,
    kind: SweepKind,
    values: &[f64],
    o: &ScreechOptions,
) -> Result<Sweep, SweepError> {
    sweep_until(base, kind, values, o, &Cancel::default())
}

/// As [`sweep`], checking `cancel` before each point.
///
/// # Errors
/// As [`sweep`], and [`SweepError::Stopped`] once `cancel` is set.
pub fn sweep_until(
    base: &SweepBase,
    kind: SweepKind,
    values: &[f64],
    o: &ScreechOptions,
    cancel: &Cancel,
) -> Result<Sweep, SweepError> {
    let mut points = Vec::with_capacity(values.len());
    let mut not_supersonic = 0usize;
    let mut loop_spec = o.loop_spec.clone();
    // A reflector sweep moves the reflector of one jet, which must be supersonic.
    let fixed_jet = match (kind, base) {
        (SweepKind::Reflector, SweepBase::Jet(j)) => Some((*j, None)),
        (SweepKind::Reflector, SweepBase::Conditions { gas, nozzle, op }) => {
            let st = jet_state(gas, nozzle, op);
            Some((ExpandedJet::from_state(&st)?, Some(st)))
        }
        (SweepKind::Npr | SweepKind::Mach, SweepBase::Conditions { .. }) => None,
        (SweepKind::Npr | SweepKind::Mach | SweepKind::Plain, SweepBase::Jet(_))
        | (SweepKind::Plain, SweepBase::Conditions { .. }) => return Err(SweepError::NeedsConditions(kind)),
    };
    for (index, &v) in values.iter().enumerate() {
        cancel.check()?;
        let (state, jet) = match (&fixed_jet, base) {
            (Some((jet, state)), _) => {
                loop_spec.reflector_m = Some(v);
                (state.clone(), Some(*jet))
            }
            (None, SweepBase::Conditions { gas, nozzle, op }) => {
                let npr = if kind == SweepKind::Npr { v } else { gas.npr_for_mach(v) };
                let op = op.with_npr(npr).map_err(|source| SweepError::Value { index, source })?;
                let st = jet_state(gas, nozzle, &op);
                let j = ExpandedJet::from_state(&st).ok();
                (Some(st), j)
            }
            (None, SweepBase::Jet(_)) => return Err(SweepError::NeedsConditions(kind)),
        };
        // The point's jet figures: from its state, or from the jet given directly.
        let regime = state.as_ref().map(|st| st.regime);
        let (npr, mj, uj_m_s, reference_length_m) = match (&state, &jet) {
            (Some(st), _) => (st.npr, st.mj, st.uj_m_s, st.size.reference_length_m()),
            (None, Some(j)) => (j.gas.npr_for_mach(j.mj), j.mj, j.uj_m_s, j.reference_length_m()),
            (None, None) => return Err(SweepError::NeedsConditions(kind)),
        };
        let prediction = match jet {
            Some(j) => Some(predict_with_loop(&j, o, &loop_spec)?.into()),
            None => {
                not_supersonic += 1;
                None
            }
        };
        points.push(SweepPoint { value: v, npr, mj, regime, uj_m_s, reference_length_m, prediction });
    }
    Ok(Sweep { points, not_supersonic })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::jet::JetSize;

    #[test]
    fn npr_sweep_keeps_subsonic_points_and_mach_sweep_hits_its_mach_numbers() {
        let base = SweepBase::Conditions {
            gas: Gas::AIR,
            nozzle: Nozzle::round_convergent(0.0254).unwrap(),
            op: OperatingPoint::new(3.0, 101_325.0, 288.15, 288.15).unwrap(),
        };
        let o = ScreechOptions::default();
        let s = sweep(&base, SweepKind::Npr, &[1.5, 3.0, 4.0], &o).unwrap();
        assert_eq!(s.not_supersonic, 1);
        assert!(s.points[0].prediction.is_none());
        assert_eq!(s.points[0].regime, Some(Regime::Subsonic));
        // Mj sweep: NPR = (1 + 0.2 Mj^2)^3.5 (closed form) and the state's Mj is the value.
        let m = sweep(&base, SweepKind::Mach, &[1.2, 1.5], &o).unwrap();
        for p in &m.points {
            assert!((p.mj - p.value).abs() < 1e-12);
            assert!((p.npr - (1.0 + 0.2 * p.value * p.value).powf(3.5)).abs() < 1e-12 * p.npr);
        }
        // One point of the sweep equals a single prediction at that NPR.
        let st = jet_state(
            &Gas::AIR,
            &Nozzle::round_convergent(0.0254).unwrap(),
            &OperatingPoint::new(4.0, 101_325.0, 288.15, 288.15).unwrap(),
        );
        let single = predict(&ExpandedJet::from_state(&st).unwrap(), &o).unwrap();
        assert_eq!(s.points[2].prediction.as_ref().unwrap(), &SweepPrediction::from(single));
    }

    #[test]
    fn reflector_sweep_needs_a_supersonic_jet_and_moves_the_reflector() {
        let jet =
            ExpandedJet::direct(Gas::AIR, Gas::AIR, 1.4, JetSize::Round { diameter_m: 0.02 }, 288.15, 288.15)
                .unwrap();
        let o = ScreechOptions::default();
        let s = sweep(&SweepBase::Jet(jet), SweepKind::Reflector, &[0.0, 0.01], &o).unwrap();
        let a = jet.a_amb_m_s;
        let tau0 = s.points[0].prediction.as_ref().unwrap().loop_time_s;
        let tau1 = s.points[1].prediction.as_ref().unwrap().loop_time_s;
        // Loop grows by 2 d / a (physics notes, sec. 4; closed form).
        assert!((tau1 - tau0 - 0.02 / a).abs() < 1e-15);
        assert!(matches!(
            sweep(&SweepBase::Jet(jet), SweepKind::Npr, &[3.0], &o),
            Err(SweepError::NeedsConditions(SweepKind::Npr))
        ));
        let subsonic = SweepBase::Conditions {
            gas: Gas::AIR,
            nozzle: Nozzle::round_convergent(0.0254).unwrap(),
            op: OperatingPoint::new(1.5, 101_325.0, 288.15, 288.15).unwrap(),
        };
        assert!(matches!(
            sweep(&subsonic, SweepKind::Reflector, &[0.0], &o),
            Err(SweepError::NotSupersonic(_))
        ));
    }
}
