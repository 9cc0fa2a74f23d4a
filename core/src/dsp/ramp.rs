//! Continuous ramps: a recording with a control channel (nozzle pressure ratio or reservoir
//! pressure) beside the microphones, cut into short-time frames; each frame gives the mean
//! NPR and, per microphone, the strongest tone (Welch PSD of the frame and the tone finder of
//! [`super::tones`]). The frames of one microphone are the points of a stage fit.

use super::samples::ChannelView;
use super::tones::{find_tones, ToneConfig};
use super::welch::{WelchAccumulator, WelchConfig, WelchError};
use crate::cancel::Cancel;
use crate::physics::{Bounds, Setting};

/// Length of each frame of a ramp (one point per frame).
pub const FRAME_DURATION: Setting = Setting::new(
    "frame_duration_s",
    Bounds::open_closed(0.0, 3600.0, "s"),
    0.25,
    "a quarter second per point",
);
/// Ambient pressure for pressure-valued control channels.
pub const AMBIENT_PRESSURE: Setting = Setting::new(
    "ambient_pressure_pa",
    Bounds::open_closed(0.0, 1e9, "Pa"),
    101_325.0,
    "ICAO standard atmosphere, sea level",
);

/// What the scaled control channel measures.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ControlQuantity {
    /// The nozzle pressure ratio itself.
    Npr,
    /// Reservoir gauge pressure, Pa, over the given absolute ambient pressure, Pa.
    GaugePa {
        /// Ambient pressure, Pa.
        ambient_pa: f64,
    },
    /// Reservoir absolute pressure, Pa, over the given ambient pressure, Pa.
    AbsolutePa {
        /// Ambient pressure, Pa.
        ambient_pa: f64,
    },
}

/// The control channel: which one, and how its sample units become an NPR.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Control {
    /// Channel index in the recording.
    pub channel: usize,
    /// Control units (NPR or Pa) per sample unit.
    pub units_per_sample: f64,
    /// Added after scaling, in the control unit.
    pub offset: f64,
    /// What the control measures.
    pub quantity: ControlQuantity,
}

impl Control {
    /// The NPR a raw control sample stands for.
    pub fn npr(&self, raw: f64) -> f64 {
        let v = raw * self.units_per_sample + self.offset;
        match self.quantity {
            ControlQuantity::Npr => v,
            ControlQuantity::GaugePa { ambient_pa } => (v + ambient_pa) / ambient_pa,
            ControlQuantity::AbsolutePa { ambient_pa } => v / ambient_pa,
        }
    }
}

/// The strongest tone of one microphone in one frame.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FrameTone {
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Level, dB re 20 uPa.
    pub level_db: f64,
    /// Height above the broadband floor, dB.
    pub tone_to_floor_db: f64,
}

/// One short-time frame.
#[derive(Debug, Clone, PartialEq)]
pub struct RampFrame {
    /// First sample of the frame.
    pub start: usize,
    /// One past the last sample.
    pub end: usize,
    /// Mean NPR over the frame.
    pub npr_mean: f64,
    /// NPR change across the frame (mean of its last tenth minus mean of its first tenth).
    pub npr_change: f64,
    /// Per microphone (in the order given), the strongest tone, if any.
    pub tones: Vec<Option<FrameTone>>,
}

/// How a ramp is cut and analysed.
#[derive(Debug, Clone, PartialEq)]
pub struct RampConfig {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Samples per frame.
    pub frame: usize,
    /// Welch settings inside a frame.
    pub welch: WelchConfig,
    /// Tone settings.
    pub tones: ToneConfig,
}

/// Cuts the recording into frames of `frame` samples (a shorter tail is left out) and analyses
/// each: the control view (in sample units) gives the NPR, each microphone view its strongest
/// tone.
///
/// # Errors
/// [`WelchError`] when a frame does not fit the Welch settings or holds a non-finite sample,
/// or the analysis was cancelled.
pub fn analyse_ramp(
    mics: &[ChannelView<'_>],
    control_units: &ChannelView<'_>,
    control: &Control,
    cfg: &RampConfig,
    cancel: &Cancel,
) -> Result<Vec<RampFrame>, WelchError> {
    let (frame, n) = (cfg.frame, control_units.len());
    let mut out = Vec::with_capacity(n / frame.max(1));
    let mut start = 0;
    while frame > 0 && start + frame <= n {
        out.push(analyse_frame(mics, control_units, control, cfg, start, cancel)?);
        start += frame;
    }
    Ok(out)
}

/// The frame of `cfg.frame` samples from `start` (the views must hold them): its mean NPR and
/// NPR change from the control, each microphone's strongest tone. A stream analyses frames
/// one by one this way as their samples arrive.
///
/// # Errors
/// As [`analyse_ramp`].
pub fn analyse_frame(
    mics: &[ChannelView<'_>],
    control_units: &ChannelView<'_>,
    control: &Control,
    cfg: &RampConfig,
    start: usize,
    cancel: &Cancel,
) -> Result<RampFrame, WelchError> {
    let (fs, frame, welch, tones) = (cfg.fs, cfg.frame, cfg.welch, &cfg.tones);
    let mut buf = vec![0.0; frame];
    control_units.read(start, &mut buf);
    let npr: Vec<f64> = buf.iter().map(|&r| control.npr(r)).collect();
    let tenth = (frame / 10).max(1);
    let mean = |x: &[f64]| x.iter().sum::<f64>() / x.len() as f64;
    let npr_mean = mean(&npr);
    let npr_change = mean(&npr[frame - tenth..]) - mean(&npr[..tenth]);
    let mut frame_tones = Vec::with_capacity(mics.len());
    for m in mics {
        let psd =
            WelchAccumulator::new(fs, welch)?.with_cancel(cancel.clone()).finish(&m.range(start, frame))?;
        let set = find_tones(&psd, tones);
        frame_tones.push(set.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)).map(|t| {
            FrameTone {
                frequency_hz: t.frequency_hz,
                level_db: t.level_db,
                tone_to_floor_db: t.tone_to_floor_db,
            }
        }));
    }
    Ok(RampFrame { start, end: start + frame, npr_mean, npr_change, tones: frame_tones })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn control_quantities_become_the_npr() {
        // NPR = p0 / pa with p0 = gauge + ambient (definitions; common practice).
        let c = |quantity| Control { channel: 0, units_per_sample: 1000.0, offset: 0.0, quantity };
        assert_eq!(c(ControlQuantity::Npr).npr(0.003), 3.0);
        assert!((c(ControlQuantity::GaugePa { ambient_pa: 100_000.0 }).npr(250.0) - 3.5).abs() < 1e-12);
        assert!((c(ControlQuantity::AbsolutePa { ambient_pa: 100_000.0 }).npr(350.0) - 3.5).abs() < 1e-12);
    }

    #[test]
    fn a_chirp_gives_its_instantaneous_frequency_at_each_frame_centre() {
        // x(t) = sin(2 pi (f0 t + k t^2 / 2)): instantaneous frequency f0 + k t (closed form of a
        // linear chirp); the frame's tone lies within one bin of it at the frame centre. The
        // control is an NPR ramp from 2 to 4 over the recording.
        let (fs, secs) = (25_600.0, 4.0);
        let n = (fs * secs) as usize;
        let (f0, k) = (3000.0, 250.0);
        let x: Vec<f64> = (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                (2.0 * std::f64::consts::PI * (f0 * t + 0.5 * k * t * t)).sin()
            })
            .collect();
        let ctl: Vec<f64> = (0..n).map(|i| 2.0 + 2.0 * i as f64 / n as f64).collect();
        let control =
            Control { channel: 1, units_per_sample: 1.0, offset: 0.0, quantity: ControlQuantity::Npr };
        let welch = WelchConfig {
            window: crate::dsp::window::Window::Hann,
            nperseg: 2048,
            noverlap: 1024,
            detrend: crate::dsp::welch::Detrend::Mean,
        };
        let frames = analyse_ramp(
            &[ChannelView::of_pascals(&x)],
            &ChannelView::of_pascals(&ctl),
            &control,
            &RampConfig { fs, frame: 6400, welch, tones: ToneConfig::default() },
            &Cancel::default(),
        )
        .expect("analysis");
        assert_eq!(frames.len(), 16);
        for fr in &frames {
            let tc = (fr.start + fr.end) as f64 / 2.0 / fs;
            let t = fr.tones[0].expect("a tone");
            assert!((t.frequency_hz - (f0 + k * tc)).abs() < fs / 2048.0, "{tc} s: {}", t.frequency_hz);
            assert!((fr.npr_mean - (2.0 + 2.0 * tc / secs)).abs() < 1e-3, "{}", fr.npr_mean);
            assert!(fr.npr_change > 0.0);
        }
    }
}
