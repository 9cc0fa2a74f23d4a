//! Screech and shock-associated-noise frequency models.
//!
//! - Powell's feedback criterion (Powell 1953): the loop time holds a whole number of periods,
//!   `tau = n / f`. The loop is a list of paths, each a length over a speed (convected with the
//!   instability waves at `Uc`, or acoustic at the ambient sound speed), plus fixed delays. The
//!   default loop is the source distance `h` downstream at `Uc` and back upstream at `a`; a
//!   reflector `d` upstream of the nozzle lip adds an acoustic path `2 d`.
//! - Powell's fundamental for a source spacing `Ls`: `f = Uc / (Ls (1 + Mc))`, `Mc = Uc / a`.
//! - Tam, Seiner & Yu (1986, J. Sound Vib. 110) for round jets:
//!   `f Dj / Uj = 0.67 (Mj^2-1)^(-1/2) [1 + 0.7 Mj (1 + (g-1)/2 Mj^2)^(-1/2) (T0/Ta)^(1/2)]^(-1)`.
//!   The bracket is `1 + Mc` with `Uc = 0.7 Uj`, and `0.67` is `0.7 j0,1 / (0.8 pi)` rounded:
//!   convection at 0.7 Uj and 0.8 of the vortex-sheet spacing.
//! - Shock-associated noise peak (Harper-Bourne & Fisher 1973; Tam & Tanna 1982):
//!   `f_p(psi) = Uc / (Ls (1 - Mc cos psi))`, `psi` from the downstream jet axis.

use super::bessel;
use super::bounds::{Bounds, RangeError, Setting};
use super::jet::{ExpandedJet, JetSize};
use std::f64::consts::PI;

/// Allowed convection ratio Uc/Uj.
pub const CONVECTION_RATIO: Bounds = Bounds::open_closed(0.0, 1.5, "");
/// Allowed speeds (convection or path speed), m/s.
pub const SPEED: Bounds = Bounds::open_closed(0.0, 10_000.0, "m/s");
/// Allowed source distance in shock cells.
pub const SOURCE_CELLS: Bounds = Bounds::open_closed(0.0, 100.0, "cells");
/// Allowed lengths of loop paths and source distances, m.
pub const PATH_LENGTH: Bounds = Bounds::closed(0.0, 1000.0, "m");
/// Allowed path length as a multiple of the source distance.
pub const SOURCE_MULTIPLE: Bounds = Bounds::closed(0.0, 100.0, "source distances");
/// Allowed reflector distance from the nozzle lip, m.
pub const REFLECTOR_DISTANCE: Bounds = Bounds::closed(0.0, 1000.0, "m");
/// Allowed fixed delay, s.
pub const DELAY: Bounds = Bounds::closed(0.0, 10.0, "s");
/// Allowed highest loop order n_max.
pub const LOOP_ORDER: Bounds = Bounds::closed(1.0, 50.0, "");
/// Allowed number of harmonics.
pub const HARMONICS: Bounds = Bounds::closed(1.0, 20.0, "");
/// Allowed observer angle from the downstream jet axis, degrees.
pub const OBSERVER_ANGLE: Bounds = Bounds::closed(0.0, 180.0, "deg");
/// Most segments or delays in one loop.
pub const MAX_LOOP_PARTS: usize = 64;

/// Published constant of the Tam, Seiner & Yu (1986) screech formula.
pub const TAM_1986_CONSTANT: f64 = 0.67;
/// Convection ratio Uc/Uj assumed by Tam, Seiner & Yu (1986).
pub const TAM_1986_CONVECTION: f64 = 0.7;
/// Fraction of the vortex-sheet spacing assumed by Tam, Seiner & Yu (1986).
pub const TAM_1986_SPACING_FACTOR: f64 = 0.8;

/// The constant 0.7 j0,1 / (0.8 pi) = 0.669795 that the published 0.67 rounds.
pub fn tam_1986_exact_constant() -> f64 {
    TAM_1986_CONVECTION * bessel::j01() / (TAM_1986_SPACING_FACTOR * PI)
}

/// How fast the instability waves are convected.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Convection {
    /// Uc = ratio * Uj.
    Ratio(f64),
    /// Uc given in m/s.
    Speed(f64),
}

impl Convection {
    /// Checked convection ratio.
    ///
    /// # Errors
    /// [`RangeError`] naming `convection_ratio`.
    pub fn ratio(r: f64) -> Result<Self, RangeError> {
        Ok(Self::Ratio(CONVECTION_RATIO.check("convection_ratio", r)?))
    }

    /// Checked convection speed in m/s.
    ///
    /// # Errors
    /// [`RangeError`] naming `convection_speed_m_per_s`.
    pub fn speed(v: f64) -> Result<Self, RangeError> {
        Ok(Self::Speed(SPEED.check("convection_speed_m_per_s", v)?))
    }

    /// Uc in m/s for a jet.
    pub fn uc(&self, jet: &ExpandedJet) -> f64 {
        match *self {
            Self::Ratio(r) => r * jet.uj_m_s,
            Self::Speed(v) => v,
        }
    }
}

/// Where the sound source of the loop sits.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Source {
    /// At the end of the N-th shock cell (N may be fractional).
    Cells(f64),
    /// At a given distance downstream of the nozzle exit, m.
    Distance(f64),
}

/// Length of a loop path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PathLength {
    /// In metres.
    Metres(f64),
    /// As a multiple of the source distance.
    SourceDistances(f64),
}

/// Speed along a loop path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PathSpeed {
    /// With the instability waves, at Uc.
    Convected,
    /// Acoustic, at the ambient sound speed.
    Acoustic,
    /// A given speed, m/s.
    Given(f64),
}

/// One path of the loop.
#[derive(Debug, Clone, PartialEq)]
pub struct Segment {
    /// Description for the output.
    pub label: String,
    /// Length.
    pub length: PathLength,
    /// Speed.
    pub speed: PathSpeed,
}

/// A feedback loop to evaluate.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopSpec {
    /// Source location.
    pub source: Source,
    /// Reflector distance upstream of the nozzle lip, m.
    pub reflector_m: Option<f64>,
    /// Paths; empty means the default downstream-convected, upstream-acoustic pair.
    pub segments: Vec<Segment>,
    /// Fixed delays, s.
    pub delays_s: Vec<f64>,
    /// Highest loop order n_max.
    pub max_order: u32,
}

/// Source position when none is given: the end of the first shock cell.
pub const DEFAULT_SOURCE_CELLS: f64 = 1.0;
/// Highest loop order when none is given.
pub const DEFAULT_MAX_ORDER: u32 = 4;
/// Highest loop order n_max of a feedback loop when unset.
pub const MAX_LOOP_ORDER: Setting =
    Setting::new("max_loop_order", LOOP_ORDER, DEFAULT_MAX_ORDER as f64, "loop orders 1 to 4");

impl Default for LoopSpec {
    fn default() -> Self {
        Self {
            source: Source::Cells(DEFAULT_SOURCE_CELLS),
            reflector_m: None,
            segments: Vec::new(),
            delays_s: Vec::new(),
            max_order: DEFAULT_MAX_ORDER,
        }
    }
}

/// One evaluated path.
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentTime {
    /// Description.
    pub label: String,
    /// Length, m.
    pub length_m: f64,
    /// Speed, m/s.
    pub speed_m_s: f64,
    /// Time, s.
    pub time_s: f64,
}

/// The evaluated loop.
#[derive(Debug, Clone, PartialEq)]
pub struct LoopResult {
    /// Source distance from the nozzle exit, m.
    pub source_distance_m: f64,
    /// Convection speed, m/s.
    pub uc_m_s: f64,
    /// Paths with their times.
    pub segments: Vec<SegmentTime>,
    /// Sum of fixed delays, s.
    pub fixed_delay_s: f64,
    /// Loop time tau, s.
    pub loop_time_s: f64,
    /// Frequencies n / tau for n = 1..=n_max, Hz.
    pub frequencies_hz: Vec<f64>,
}

/// A loop that cannot close.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error(
    "the feedback loop takes no time (all paths have zero length and there are no delays): \
no frequency satisfies tau = n / f"
)]
pub struct ZeroLoopTime;

/// Evaluates Powell's loop criterion for a jet with fundamental spacing `spacing_m` (factor
/// already applied).
///
/// # Errors
/// [`ZeroLoopTime`] when the loop time is zero.
pub fn feedback_loop(
    jet: &ExpandedJet,
    spacing_m: f64,
    convection: Convection,
    spec: &LoopSpec,
) -> Result<LoopResult, ZeroLoopTime> {
    let uc = convection.uc(jet);
    let a = jet.a_amb_m_s;
    let h = match spec.source {
        Source::Cells(n) => n * spacing_m,
        Source::Distance(d) => d,
    };
    let default_loop;
    let segments: &[Segment] = if spec.segments.is_empty() {
        default_loop = [
            Segment {
                label: "instability wave convected from the lip to the source".into(),
                length: PathLength::SourceDistances(1.0),
                speed: PathSpeed::Convected,
            },
            Segment {
                label: "sound returning upstream to the lip".into(),
                length: PathLength::SourceDistances(1.0),
                speed: PathSpeed::Acoustic,
            },
        ];
        &default_loop
    } else {
        &spec.segments
    };
    let mut times: Vec<SegmentTime> = segments
        .iter()
        .map(|s| {
            let length_m = match s.length {
                PathLength::Metres(l) => l,
                PathLength::SourceDistances(k) => k * h,
            };
            let speed_m_s = match s.speed {
                PathSpeed::Convected => uc,
                PathSpeed::Acoustic => a,
                PathSpeed::Given(v) => v,
            };
            SegmentTime { label: s.label.clone(), length_m, speed_m_s, time_s: length_m / speed_m_s }
        })
        .collect();
    if let Some(d) = spec.reflector_m {
        times.push(SegmentTime {
            label: "extra acoustic path to the reflector and back".into(),
            length_m: 2.0 * d,
            speed_m_s: a,
            time_s: 2.0 * d / a,
        });
    }
    let fixed_delay_s: f64 = spec.delays_s.iter().sum();
    let tau = times.iter().map(|t| t.time_s).sum::<f64>() + fixed_delay_s;
    if tau.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) || !tau.is_finite() {
        return Err(ZeroLoopTime);
    }
    Ok(LoopResult {
        source_distance_m: h,
        uc_m_s: uc,
        segments: times,
        fixed_delay_s,
        loop_time_s: tau,
        frequencies_hz: (1..=spec.max_order).map(|n| f64::from(n) / tau).collect(),
    })
}

/// Powell's fundamental f = Uc / (Ls (1 + Uc/a)) in Hz, for a spacing in m and speeds in m/s.
pub fn powell_fundamental(uc: f64, a_amb: f64, spacing_m: f64) -> f64 {
    uc / (spacing_m * (1.0 + uc / a_amb))
}

/// Strouhal number f Dj / Uj of the Tam, Seiner & Yu (1986) formula with the given constant
/// (the published 0.67, or [`tam_1986_exact_constant`]). `None` for non-round jets.
pub fn tam_1986_strouhal(jet: &ExpandedJet, constant: f64) -> Option<f64> {
    if !matches!(jet.size, JetSize::Round { .. }) {
        return None;
    }
    // The bracket is 1 + Mc with Mc = 0.7 Uj / a_amb. For a jet of the ambient gas this is
    // the published 0.7 Mj (1 + (g-1)/2 Mj^2)^(-1/2) (T0/Ta)^(1/2), since then
    // (aj/a_amb)^2 = Tj/Ta; for another jet gas the ambient sound speed is that of the
    // surroundings, as in the bracket's derivation.
    let mj = jet.mj;
    let mc = TAM_1986_CONVECTION * jet.uj_m_s / jet.a_amb_m_s;
    Some(constant / (mj * mj - 1.0).sqrt() / (1.0 + mc))
}

/// Tam, Seiner & Yu (1986) screech frequency in Hz (round jets only).
pub fn tam_1986_frequency(jet: &ExpandedJet, constant: f64) -> Option<f64> {
    tam_1986_strouhal(jet, constant).map(|st| st * jet.uj_m_s / jet.reference_length_m())
}

/// Strouhal number f L / Uj of a frequency `f_hz` for a jet (L its reference length).
pub fn strouhal(f_hz: f64, jet: &ExpandedJet) -> f64 {
    f_hz * jet.reference_length_m() / jet.uj_m_s
}

/// Largest Strouhal number f L / Uj reported for a shock-noise peak. Measured broadband
/// shock-associated noise peaks lie at Strouhal numbers of order 1 (below about 3 even in the
/// forward arc; common practice); beyond 10 the formula is only approaching its singularity
/// 1 - Mc cos(psi) -> 0 and the value is not a peak anyone will measure.
pub const SHOCK_NOISE_MAX_STROUHAL: f64 = 10.0;

/// The peak of one observer angle and shock-cell mode.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PeakFrequency {
    /// A peak: frequency in Hz and Strouhal number f L / Uj.
    Peak {
        /// Frequency, Hz.
        frequency_hz: f64,
        /// Strouhal number.
        strouhal: f64,
    },
    /// 1 - Mc cos(psi) <= 0: Mach-wave radiation, no peak of this kind.
    MachWave,
    /// The formula gives a Strouhal number above [`SHOCK_NOISE_MAX_STROUHAL`] (the value,
    /// which is not reported as a peak).
    BeyondLimit(f64),
}

/// One shock-noise peak.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ShockNoisePeak {
    /// Observer angle from the downstream jet axis, degrees.
    pub angle_deg: f64,
    /// Shock-cell mode number.
    pub mode: u32,
    /// The peak, or why there is none.
    pub peak: PeakFrequency,
}

/// Shock-noise peaks of every angle and cell mode.
#[derive(Debug, Clone, PartialEq)]
pub struct ShockNoisePeaks {
    /// Convection speed Uc, m/s.
    pub uc_m_s: f64,
    /// Convective Mach number Uc / a_ambient.
    pub mc: f64,
    /// Peaks, angle-major, modes in order.
    pub peaks: Vec<ShockNoisePeak>,
    /// How many angle/mode pairs fall in the Mach-wave region.
    pub mach_wave: usize,
    /// How many lie beyond the Strouhal limit.
    pub beyond_limit: usize,
}

/// Shock-associated noise peaks (Harper-Bourne & Fisher 1973; Tam & Tanna 1982) for a jet, its
/// cells and convection, at each observer angle in degrees from the downstream axis.
pub fn shock_noise_peaks(
    jet: &ExpandedJet,
    cells: &super::cells::Cells,
    convection: Convection,
    angles_deg: &[f64],
) -> ShockNoisePeaks {
    let uc = convection.uc(jet);
    let mut out = ShockNoisePeaks {
        uc_m_s: uc,
        mc: uc / jet.a_amb_m_s,
        peaks: Vec::with_capacity(angles_deg.len() * cells.modes.len()),
        mach_wave: 0,
        beyond_limit: 0,
    };
    for &psi in angles_deg {
        for m in &cells.modes {
            let peak = match shock_noise_peak(uc, jet.a_amb_m_s, m.spacing_m, psi) {
                None => {
                    out.mach_wave += 1;
                    PeakFrequency::MachWave
                }
                Some(f) => match strouhal(f, jet) {
                    st if st > SHOCK_NOISE_MAX_STROUHAL => {
                        out.beyond_limit += 1;
                        PeakFrequency::BeyondLimit(st)
                    }
                    st => PeakFrequency::Peak { frequency_hz: f, strouhal: st },
                },
            };
            out.peaks.push(ShockNoisePeak { angle_deg: psi, mode: m.n, peak });
        }
    }
    out
}

/// Peak frequency of shock-associated noise in Hz at observer angle `psi_deg` from the
/// downstream jet axis, for spacing `spacing_m`. `None` where 1 - Mc cos psi <= 0 (the source
/// moves supersonically towards the observer: Mach-wave radiation, no peak of this kind).
pub fn shock_noise_peak(uc: f64, a_amb: f64, spacing_m: f64, psi_deg: f64) -> Option<f64> {
    let d = 1.0 - uc / a_amb * psi_deg.to_radians().cos();
    (d > 1e-12).then(|| uc / (spacing_m * d))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::cells;
    use crate::physics::gas::Gas;
    use crate::physics::jet::{jet_state, Nozzle, OperatingPoint};

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    fn round_jet(npr: f64, t0: f64) -> ExpandedJet {
        let s = jet_state(
            &Gas::AIR,
            &Nozzle::round_convergent(0.0254).unwrap(),
            &OperatingPoint::new(npr, 101_325.0, t0, 288.15).unwrap(),
        );
        ExpandedJet::from_state(&s).unwrap()
    }

    #[test]
    fn tam_formula_is_powell_with_uc_07_and_spacing_08() {
        // Identity of two implementations: Tam, Seiner & Yu (1986) with its constant written
        // as 0.7 j0,1 / (0.8 pi) equals Powell's fundamental with Uc = 0.7 Uj and 0.8 of the
        // round-jet vortex-sheet spacing, for cold and heated jets (Tr = Ta and Tr != Ta).
        for (npr, t0) in [(2.5, 288.15), (3.5, 288.15), (5.0, 288.15), (3.0, 600.0), (4.0, 900.0)] {
            let jet = round_jet(npr, t0);
            let tam = tam_1986_frequency(&jet, tam_1986_exact_constant()).unwrap();
            let ls = cells::spacing(&jet, TAM_1986_SPACING_FACTOR);
            let powell = powell_fundamental(0.7 * jet.uj_m_s, jet.a_amb_m_s, ls);
            assert!(rel(tam, powell) < 1e-12, "NPR {npr} T0 {t0}: {tam} vs {powell}");
        }
        // The published 0.67 rounds 0.669795 (difference 3.1e-4 relative; closed form).
        assert!((tam_1986_exact_constant() - 0.669_794_780_866_761).abs() < 1e-14);
    }

    #[test]
    fn temperature_exponent_follows_from_uc_07_uj() {
        // Mc = 0.7 Uj / a_amb = 0.7 Mj (aj / a_amb), and (aj/a_amb)^2 = Tj/Ta =
        // (T0/Ta) / (1 + (g-1)/2 Mj^2): the reservoir-temperature exponent is +1/2, so a hotter
        // jet has a larger Mc and a lower Strouhal number.
        let cold = round_jet(4.0, 288.15);
        let hot = round_jet(4.0, 4.0 * 288.15);
        let mc_cold = 0.7 * cold.uj_m_s / cold.a_amb_m_s;
        let mc_hot = 0.7 * hot.uj_m_s / hot.a_amb_m_s;
        assert!(rel(mc_hot / mc_cold, 2.0) < 1e-12); // sqrt(4)
        let st_cold = tam_1986_strouhal(&cold, 0.67).unwrap();
        let st_hot = tam_1986_strouhal(&hot, 0.67).unwrap();
        assert!(rel(st_cold * (1.0 + mc_cold), st_hot * (1.0 + mc_hot)) < 1e-12);
        assert!(st_hot < st_cold);
    }

    #[test]
    fn tam_1986_strouhal_numbers_of_cold_jets() {
        // f Dj / Uj = 0.67 (Mj^2-1)^(-1/2) [1 + 0.7 Mj (1 + 0.2 Mj^2)^(-1/2)]^(-1) for T0 = Ta
        // (Tam, Seiner & Yu 1986, J. Sound Vib. 110), evaluated independently in Python
        // float64 at Mj 1.1, 1.3, 1.5, 1.7, 2.0. The values fall with Mj as the published
        // data do (Raman 1999 review).
        let air = Gas::AIR;
        for (mj, st) in [
            (1.1, 0.864_651_721_747_035),
            (1.3, 0.451_436_611_075_974_9),
            (1.5, 0.320_124_684_007_463_5),
            (1.7, 0.250_269_631_755_576_1),
            (2.0, 0.189_295_319_411_392_13),
        ] {
            let got = tam_1986_strouhal(&round_jet(air.npr_for_mach(mj), 288.15), 0.67).unwrap();
            assert!(rel(got, st) < 1e-12, "Mj {mj}: {got}");
        }
    }

    #[test]
    fn loop_with_one_cell_and_order_one_is_powell_fundamental() {
        let jet = round_jet(3.0, 288.15);
        let ls = cells::spacing(&jet, 1.0);
        let conv = Convection::ratio(0.7).unwrap();
        let r = feedback_loop(&jet, ls, conv, &LoopSpec::default()).unwrap();
        let p = powell_fundamental(0.7 * jet.uj_m_s, jet.a_amb_m_s, ls);
        assert!(rel(r.frequencies_hz[0], p) < 1e-14);
        // Source N cells downstream, order N: the same frequency.
        let spec = LoopSpec { source: Source::Cells(3.0), max_order: 3, ..LoopSpec::default() };
        let r3 = feedback_loop(&jet, ls, conv, &spec).unwrap();
        assert!(rel(r3.frequencies_hz[2], p) < 1e-14);
    }

    #[test]
    fn reflector_displacement_lines() {
        // A reflector moved upstream by d lengthens the loop by 2d/a: f_n(d) = n / (tau0 + 2d/a).
        // For n = 2, 3, 4 every line falls monotonically with d, and consecutive lines are
        // exactly 1/tau(d) apart (closed form).
        let jet = round_jet(3.5, 288.15);
        let ls = cells::spacing(&jet, 1.0);
        let conv = Convection::speed(2.0 / 3.0 * jet.a_amb_m_s).unwrap();
        let mut last = [f64::INFINITY; 3];
        for k in 0..=40 {
            let d = 0.0025 * f64::from(k);
            let spec = LoopSpec {
                source: Source::Cells(4.0),
                reflector_m: Some(d),
                max_order: 4,
                ..LoopSpec::default()
            };
            let r = feedback_loop(&jet, ls, conv, &spec).unwrap();
            let tau0 = 4.0 * ls * (1.0 / conv.uc(&jet) + 1.0 / jet.a_amb_m_s);
            let tau = tau0 + 2.0 * d / jet.a_amb_m_s;
            for (i, n) in [2usize, 3, 4].iter().enumerate() {
                let f = r.frequencies_hz[n - 1];
                assert!(f < last[i]);
                last[i] = f;
                assert!(rel(f, *n as f64 / tau) < 1e-13);
            }
            assert!(rel(r.frequencies_hz[3] - r.frequencies_hz[2], 1.0 / tau) < 1e-12);
            assert!(rel(r.frequencies_hz[2] - r.frequencies_hz[1], 1.0 / tau) < 1e-12);
        }
    }

    #[test]
    fn planar_rule_of_thumb_gives_a_few_millimetres() {
        // Common practice, no source: convection at two-thirds of the ambient sound speed; a
        // cold planar jet at NPR 3.4 screeching near 20 kHz has a fully expanded height of a
        // few millimetres. Powell's fundamental is inversely proportional to hj, so the
        // product f hj computed for a 1 mm nozzle gives hj at 20 kHz.
        let s = jet_state(
            &Gas::AIR,
            &Nozzle::planar(0.001, 1.0).unwrap(),
            &OperatingPoint::new(3.4, 101_325.0, 288.15, 288.15).unwrap(),
        );
        let jet = ExpandedJet::from_state(&s).unwrap();
        let uc = 2.0 / 3.0 * jet.a_amb_m_s;
        let f = powell_fundamental(uc, jet.a_amb_m_s, cells::spacing(&jet, 1.0));
        let hj_mm = f * jet.reference_length_m() / 20_000.0 * 1000.0;
        assert!((2.0..5.0).contains(&hj_mm), "hj = {hj_mm} mm");
        // The same figures computed independently in Python float64 from the closed forms
        // (Mj from NPR 3.4, hj/h = (A/A*)(Mj), Ls = 2 hj sqrt(Mj^2-1), a = 340.2923 m/s):
        // f = 57011.2699 Hz for the 1 mm nozzle, hj = 3.25515 mm at 20 kHz.
        assert!(rel(f, 57_011.269_925_266_69) < 1e-10, "{f}");
        assert!(rel(hj_mm, 3.255_147_689_127_427_6) < 1e-10);
    }

    #[test]
    fn shock_noise_at_180_deg_is_powell_and_undefined_ahead_of_a_supersonic_source() {
        let jet = round_jet(4.0, 288.15);
        let ls = cells::spacing(&jet, 1.0);
        let uc = 0.7 * jet.uj_m_s;
        let f180 = shock_noise_peak(uc, jet.a_amb_m_s, ls, 180.0).unwrap();
        assert!(rel(f180, powell_fundamental(uc, jet.a_amb_m_s, ls)) < 1e-14);
        // Peak frequency rises towards the downstream direction.
        let f90 = shock_noise_peak(uc, jet.a_amb_m_s, ls, 90.0).unwrap();
        let f45 = shock_noise_peak(uc, jet.a_amb_m_s, ls, 45.0).unwrap();
        assert!(f180 < f90 && f90 < f45);
        assert!(rel(f90, uc / ls) < 1e-14);
        assert!(shock_noise_peak(1.5 * jet.a_amb_m_s, jet.a_amb_m_s, ls, 10.0).is_none());
    }

    /// A round convergent nozzle of 25.4 mm at NPR 4 with jet gas `gas` and reservoir
    /// temperature `t0`, issuing into dry air at 288.15 K.
    fn foreign_gas_jet(gas: Gas, t0: f64) -> ExpandedJet {
        let s = jet_state(
            &gas,
            &Nozzle::round_convergent(0.0254).unwrap(),
            &OperatingPoint::new(4.0, 101_325.0, t0, 288.15).unwrap(),
        );
        ExpandedJet::from_state(&s).unwrap()
    }

    #[test]
    fn helium_and_hot_jets_use_the_sound_speed_of_the_surrounding_air() {
        // Hand computation with the closed forms of Tam & Tanna 1982 (Mj, Tj, Uj, Dj), Prandtl-
        // Pack spacing pi sqrt(Mj^2-1) Dj / j0,1 and Powell's f = Uc / (Ls (1 + Uc/a_air)),
        // Uc = 0.7 Uj, a_air = sqrt(1.4 x 287.05 x 288.15) = 340.2923 m/s, evaluated in Python
        // float64 with scipy.special.jn_zeros (an implementation independent of this crate).
        // Helium (gamma 5/3, R 2077.1 J/(kg K)), T0 288.15 K: Uj 1128.6252 m/s, Powell
        // 6060.2702 Hz (with helium's own sound speed outside it would be 11239.46 Hz), Tam,
        // Seiner & Yu with Mc = 0.7 Uj / a_air: 7577.6588 Hz.
        // Combustion-like gas (gamma 1.3, R 287.05), T0 700 K: Powell 4361.1894 Hz (4266.67
        // Hz with the jet gas outside), Tam 5453.1570 Hz.
        let cases = [
            (
                Gas::new(5.0 / 3.0, 2077.1).unwrap(),
                288.15,
                1_128.625_232_401_897_4,
                6_060.270_226_709_247,
                7_577.658_799_163_793,
            ),
            (
                Gas::new(1.3, 287.05).unwrap(),
                700.0,
                690.496_530_111_167,
                4_361.189_392_630_863,
                5_453.157_027_592_489,
            ),
        ];
        for (gas, t0, uj, powell, tam) in cases {
            let jet = foreign_gas_jet(gas, t0);
            assert!(rel(jet.a_amb_m_s, 340.292_286_865_277_05) < 1e-12);
            assert!(rel(jet.uj_m_s, uj) < 1e-12, "gamma {}", gas.gamma());
            let ls = cells::spacing(&jet, 1.0);
            let f = powell_fundamental(0.7 * jet.uj_m_s, jet.a_amb_m_s, ls);
            assert!(rel(f, powell) < 1e-10, "gamma {}: {f}", gas.gamma());
            let t = tam_1986_frequency(&jet, 0.67).unwrap();
            assert!(rel(t, tam) < 1e-10, "gamma {}: {t}", gas.gamma());
        }
    }

    #[test]
    fn shock_noise_peaks_beyond_strouhal_10_are_left_unset() {
        // f_p = Uc / (Ls (1 - Mc cos psi)) (Harper-Bourne & Fisher 1973): with Mc = 0.999 at
        // psi = 0 the denominator is 1e-3 and the Strouhal number is in the hundreds; at
        // 180 deg it is the screech value (about 0.3-0.6).
        let jet = round_jet(4.0, 288.15);
        let c = cells::cells(&jet, &cells::CellOptions::default());
        let conv = Convection::speed(0.999 * jet.a_amb_m_s).unwrap();
        let r = shock_noise_peaks(&jet, &c, conv, &[0.0, 60.0, 180.0]);
        assert_eq!(r.peaks.len(), 3);
        let PeakFrequency::BeyondLimit(st0) = r.peaks[0].peak else { panic!("{:?}", r.peaks[0]) };
        assert!(st0 > SHOCK_NOISE_MAX_STROUHAL);
        let PeakFrequency::Peak { strouhal, frequency_hz } = r.peaks[2].peak else { panic!() };
        assert!((0.2..0.7).contains(&strouhal), "{strouhal}");
        let ls = c.modes[0].spacing_m;
        assert!(rel(frequency_hz, conv.uc(&jet) / (ls * 1.999)) < 1e-12);
        assert!(matches!(r.peaks[1].peak, PeakFrequency::Peak { .. }));
        assert_eq!((r.beyond_limit, r.mach_wave), (1, 0));
        // Supersonic convection ahead of the source: Mach-wave radiation, counted apart.
        let fast = shock_noise_peaks(&jet, &c, Convection::speed(1.5 * jet.a_amb_m_s).unwrap(), &[10.0]);
        assert_eq!((fast.beyond_limit, fast.mach_wave), (0, 1));
    }

    #[test]
    fn zero_loop_is_rejected() {
        let jet = round_jet(3.0, 288.15);
        let spec = LoopSpec { source: Source::Distance(0.0), ..LoopSpec::default() };
        assert_eq!(feedback_loop(&jet, 0.01, Convection::Ratio(0.7), &spec).unwrap_err(), ZeroLoopTime);
    }
}
