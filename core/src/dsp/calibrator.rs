//! Microphone sensitivity from a recording of a sound calibrator (IEC 60942): the tone's rms in
//! the recording's units against the rms pressure the calibrator states.
//!
//! Method, per channel (the samples in their recorded units: volts or DAQ counts):
//! - PSD: Welch (1967) with a periodic 4-term Blackman-Harris window, 50 % overlap, segment
//!   mean removed; segments of [`Plan::nperseg`] samples, the power of two giving a bin width
//!   of at most 10 Hz and at most a 25th of the stated frequency.
//! - Level: the power of the bins within [`LOBE_BINS`] of the peak, minus the median power per
//!   bin around them (the broadband floor). By Parseval's theorem the sum of a windowed
//!   sinusoid's power over all bins is its mean square A^2/2 wherever it falls between bins,
//!   and the Blackman-Harris window holds all but about 1e-9 of that power within 4 bins
//!   (side lobes -92 dB, Harris 1978), so there is no scalloping loss to correct: a flat-top
//!   amplitude reading has about 0.01 dB of scalloping and cannot remove the noise under its
//!   peak, which is why the integrated PSD is used here.
//! - Frequency: the power-weighted centroid of the same bins. The sampled power response of a
//!   window has no aliasing at integer bins (its inverse transform, the window's
//!   autocorrelation, vanishes beyond N samples), so the centroid of all bins is exactly the
//!   tone's frequency; 4-term Blackman-Harris makes the truncation to the main lobe negligible.
//! - Stability: the recording cut into non-overlapping blocks of one segment each, every block
//!   read the same way; the spans (largest minus smallest) of block level and block frequency.
//! - Distortion: THD = sqrt(sum of harmonic mean squares, orders 2..=max) / fundamental rms
//!   (the "THD_F" form, relative to the fundamental); THD+N = rms of everything in 20 Hz to
//!   20 kHz (AES17 measurement bandwidth, recalled from memory) apart from the fundamental's
//!   bins, over the fundamental's rms.
//! - Clipping: samples at an integer format's full scale ([`Recording::clipped`]), and a
//!   flat-topped run: consecutive equal samples at the channel's largest or smallest value,
//!   longer than an unclipped sinusoid of the measured amplitude can show at the data's
//!   resolution (the smallest step between successive samples).

use super::limits::HARM_ORDER;
use super::samples::{ChannelView, Recording};
use super::welch::{segment_for_resolution, welch_channel, Detrend, WelchConfig, WelchError};
use super::window::{Window, WindowSums};
use super::P_REF_PA;
use crate::cancel::Cancel;
use crate::physics::{Bounds, Setting};

/// Allowed stated calibrator level, dB re 20 uPa.
pub const STATED_LEVEL: Bounds = Bounds::closed(40.0, 200.0, "dB re 20 uPa");
/// Allowed stated calibrator frequency, Hz (it must also lie below [`MAX_FREQUENCY_RATIO`] times
/// the sample rate).
pub const STATED_FREQUENCY: Bounds = Bounds::closed(10.0, 100_000.0, "Hz");
/// Allowed frequency tolerance, a fraction of the stated frequency.
pub const FREQUENCY_TOLERANCE: Bounds = Bounds::open_closed(0.0, 0.5, "");

/// Highest stated frequency as a fraction of the sample rate: the tone's band of
/// [`LOBE_BINS`] bins (each at most a 25th of the frequency) then lies clear of Nyquist.
pub const MAX_FREQUENCY_RATIO: f64 = 0.4;
/// The window of every calibrator reading.
pub const WINDOW: Window = Window::BlackmanHarris;
/// Half-width in bins of the band summed for a tone: the 4-term Blackman-Harris main lobe
/// (4 bins) plus one.
pub const LOBE_BINS: usize = 5;
/// Fewest non-overlapping blocks (segments) a recording must hold: the level is then an average
/// of at least 15 half-overlapping segments and the stability spans are taken over 8 blocks.
pub const MIN_BLOCKS: usize = 8;
/// Bins either side of a tone's band whose median power is its floor.
const FLOOR_BINS: usize = 40;
/// A block-level span above this many dB is reported as an unsteady tone: a calibrator seated
/// on its microphone holds its level within a few hundredths of a dB, so tenths point at a leak
/// or a hand on the calibrator (our threshold).
pub const UNSTEADY_DB: f64 = 0.2;
/// Lower and upper edges of the THD+N band, Hz.
pub const THD_N_BAND_HZ: (f64, f64) = (20.0, 20_000.0);

/// What the calibrator states and how strictly it is checked.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CalibratorConfig {
    /// Stated sound pressure level, dB re 20 uPa.
    pub stated_level_db: f64,
    /// Stated frequency, Hz.
    pub stated_frequency_hz: f64,
    /// Largest accepted |measured - stated| / stated frequency.
    pub frequency_tolerance_fraction: f64,
    /// Highest harmonic order in the THD.
    pub max_harmonic_order: u32,
}

impl CalibratorConfig {
    /// Frequency tolerance: 1 %, the IEC 60942 class 1 frequency tolerance (recalled from
    /// memory).
    pub const FREQUENCY_TOLERANCE_FRACTION: Setting = Setting::new(
        "frequency_tolerance_fraction",
        FREQUENCY_TOLERANCE,
        0.01,
        "IEC 60942 class 1 frequency tolerance, +-1 % (recalled from memory)",
    );
    /// Highest harmonic order in the THD: 10, beyond which a calibrator's harmonics are below
    /// any floor.
    pub const MAX_HARMONIC_ORDER: Setting = Setting::new(
        "max_harmonic_order",
        HARM_ORDER,
        10.0,
        "calibrator harmonics above the 10th are below the floor",
    );

    /// The stated rms pressure, Pa: 20 uPa x 10^(L/20).
    pub fn stated_rms_pa(&self) -> f64 {
        P_REF_PA * 10f64.powf(self.stated_level_db / 20.0)
    }
}

/// Segment length and minimum length of a reading.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Plan {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Segment (and block) length, samples.
    pub nperseg: usize,
}

impl Plan {
    /// The plan for a tone stated at `frequency_hz` sampled at `fs` Hz; `None` when the
    /// segment would exceed the longest Welch segment.
    pub fn new(fs: f64, frequency_hz: f64) -> Option<Self> {
        let nperseg = segment_for_resolution(fs, (frequency_hz / 25.0).min(10.0))?;
        Some(Self { fs, nperseg })
    }

    /// Fewest samples per channel: [`MIN_BLOCKS`] segments.
    pub fn min_samples(&self) -> usize {
        MIN_BLOCKS * self.nperseg
    }

    /// Bin width, Hz.
    pub fn resolution_hz(&self) -> f64 {
        self.fs / self.nperseg as f64
    }

    /// Length of a stability block, s.
    pub fn block_duration_s(&self) -> f64 {
        self.nperseg as f64 / self.fs
    }

    /// The Welch settings of the level.
    pub fn welch(&self) -> WelchConfig {
        WelchConfig {
            window: WINDOW,
            nperseg: self.nperseg,
            noverlap: self.nperseg / 2,
            detrend: Detrend::Mean,
        }
    }
}

/// Why a channel cannot be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum CalibratorError {
    /// Fewer samples than [`Plan::min_samples`].
    #[error(
        "{samples} samples per channel ({seconds:.3} s) are fewer than the {minimum} ({MIN_BLOCKS} blocks of \
         {nperseg} samples, {minimum_s:.3} s) a calibrator reading needs"
    )]
    TooShort {
        /// Samples per channel.
        samples: usize,
        /// Their duration, s.
        seconds: f64,
        /// Fewest samples.
        minimum: usize,
        /// Their duration, s.
        minimum_s: f64,
        /// Block length, samples.
        nperseg: usize,
    },
    /// The stated frequency needs a segment longer than the longest allowed.
    #[error("a tone at {0} Hz needs Welch segments longer than the longest allowed at this sample rate")]
    Resolution(f64),
    /// The stated frequency is not below [`MAX_FREQUENCY_RATIO`] times the sample rate.
    #[error(
        "the stated frequency {stated_hz} Hz is not below {MAX_FREQUENCY_RATIO} times the sample rate \
         ({limit_hz} Hz), so the tone's band would reach the Nyquist frequency"
    )]
    AboveBand {
        /// Stated frequency, Hz.
        stated_hz: f64,
        /// The highest allowed, Hz.
        limit_hz: f64,
    },
    /// No tone stands above the floor (a silent or disconnected channel).
    #[error("no tone stands above the floor: the channel is silent or holds only noise")]
    NoTone,
    /// Nothing near the stated frequency, and a tone elsewhere is far stronger: the
    /// calibrator is not the tone this channel recorded (another source, a wrong frequency
    /// stated, or the wrong sample rate).
    #[error(
        "the strongest tone is at {found_hz:.1} Hz, {above_db:.1} dB above anything within {SEARCH_FRACTION} of \
         the stated {stated_hz} Hz: check the stated frequency and the sample rate, or what else the \
         microphone heard"
    )]
    NotNearStated {
        /// Stated frequency, Hz.
        stated_hz: f64,
        /// Frequency of the strongest bin, Hz.
        found_hz: f64,
        /// How much stronger than the strongest bin near the stated frequency, dB.
        above_db: f64,
    },
    /// The PSD could not be computed (a non-finite sample, or stopped).
    #[error(transparent)]
    Welch(#[from] WelchError),
}

/// Something that makes a reading doubtful; the reading is still given.
#[derive(Debug, Clone, PartialEq)]
pub enum Warning {
    /// Samples at the integer format's full scale.
    FullScale {
        /// Samples at or within one count of full scale.
        samples: usize,
        /// Full scale, units.
        full_scale: f64,
    },
    /// Consecutive equal samples at the channel's extreme value.
    FlatTopped {
        /// Longest run, samples.
        run: usize,
        /// Longest run an unclipped sinusoid would show, samples.
        expected: usize,
        /// The value of the run, units.
        value: f64,
    },
    /// The tone is not where the calibrator says.
    FrequencyOff {
        /// Measured, Hz.
        measured_hz: f64,
        /// Stated, Hz.
        stated_hz: f64,
        /// Tolerance, fraction.
        tolerance: f64,
    },
    /// The block level wanders more than [`UNSTEADY_DB`].
    Unsteady {
        /// Span of the block levels, dB.
        span_db: f64,
    },
}

impl std::fmt::Display for Warning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Warning::FullScale { samples, full_scale } => write!(
                f,
                "clipped: {samples} samples at the format's full scale (+-{full_scale} units); the level \
                 reads low"
            ),
            // The value to 7 significant digits (as single precision), enough to recognise a
            // converter's full scale or an amplifier's rail.
            Warning::FlatTopped { run, expected, value } => write!(
                f,
                "flat-topped: {run} consecutive samples at {} units (an unclipped tone of this \
                 amplitude shows at most {expected}); the input or the converter is clipping",
                *value as f32
            ),
            Warning::FrequencyOff { measured_hz, stated_hz, tolerance } => write!(
                f,
                "the tone is at {measured_hz:.2} Hz, {:+.2} % from the stated {stated_hz} Hz, beyond the \
                 tolerance of {:.2} %: is the stated frequency the calibrator's?",
                100.0 * (measured_hz / stated_hz - 1.0),
                100.0 * tolerance
            ),
            Warning::Unsteady { span_db } => write!(
                f,
                "unsteady: the level moved by {span_db:.3} dB between blocks (more than {UNSTEADY_DB} dB): \
                 is the calibrator seated on the microphone?"
            ),
        }
    }
}

/// A harmonic of the tone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Harmonic {
    /// Order (2 = second harmonic).
    pub order: u32,
    /// Nominal frequency, order x fundamental, Hz.
    pub frequency_hz: f64,
    /// Rms above the floor, units.
    pub rms: f64,
}

/// One channel's reading.
#[derive(Debug, Clone, PartialEq)]
pub struct Reading {
    /// Rms of the tone in the recording's units.
    pub tone_rms: f64,
    /// Stated rms pressure over the tone's rms, Pa per unit.
    pub pascals_per_unit: f64,
    /// Measured frequency, Hz.
    pub frequency_hz: f64,
    /// Span of the block frequencies, Hz.
    pub frequency_span_hz: f64,
    /// Span of the block levels, dB.
    pub level_span_db: f64,
    /// Blocks in the spans.
    pub blocks: usize,
    /// Total harmonic distortion, fraction of the fundamental's rms.
    pub thd: f64,
    /// THD plus noise in [`THD_N_BAND_HZ`], fraction of the fundamental's rms.
    pub thd_n: f64,
    /// Harmonics found (orders 2..=max below Nyquist).
    pub harmonics: Vec<Harmonic>,
    /// Samples at the format's full scale (`None` for float data, which has none).
    pub full_scale_samples: Option<usize>,
    /// Longest run of equal samples at the channel's extreme value.
    pub longest_flat_run: usize,
    /// What makes the reading doubtful.
    pub warnings: Vec<Warning>,
}

impl Reading {
    /// Sensitivity, V/Pa, for a recording of `volts_per_unit` volts per unit.
    pub fn sensitivity_v_per_pa(&self, volts_per_unit: f64) -> f64 {
        volts_per_unit / self.pascals_per_unit
    }
}

/// Mean square and centroid bin of the band `k - LOBE_BINS ..= k + LOBE_BINS` of a power
/// spectrum `p` (power per bin), above the median power per bin of the bins around it.
fn band(p: &[f64], k: usize) -> (f64, f64) {
    let (lo, hi) = (k.saturating_sub(LOBE_BINS), (k + LOBE_BINS).min(p.len() - 1));
    let mut around: Vec<f64> = p[lo.saturating_sub(FLOOR_BINS)..lo]
        .iter()
        .chain(&p[(hi + 1).min(p.len())..(hi + 1 + FLOOR_BINS).min(p.len())])
        .copied()
        .collect();
    let floor = if around.is_empty() {
        0.0
    } else {
        let m = around.len() / 2;
        *around.select_nth_unstable_by(m, f64::total_cmp).1
    };
    let (mut ms, mut moment) = (0.0, 0.0);
    for (i, v) in p.iter().enumerate().take(hi + 1).skip(lo) {
        ms += v - floor;
        moment += i as f64 * (v - floor);
    }
    (ms.max(0.0), if ms > 0.0 { moment / ms } else { k as f64 })
}

/// Index of the largest value of `p` in `lo..hi`.
/// How far from the stated frequency the calibrator's tone is looked for, as a fraction of
/// it: twenty times the class 1 frequency tolerance (1 %, IEC 60942, recalled from memory), so
/// a tone off by more than the tolerance is still found and warned about.
pub const SEARCH_FRACTION: f64 = 0.2;

/// Power ratio (20 dB): a bin near the stated frequency that does not stand this far above the
/// median there is no tone, and a reading with no tone near the stated frequency is refused
/// when a bin elsewhere stands this far above it.
const ELSEWHERE_RATIO: f64 = 100.0;

fn peak(p: &[f64], lo: usize, hi: usize) -> usize {
    (lo..hi.min(p.len())).max_by(|&a, &b| p[a].total_cmp(&p[b])).unwrap_or(lo)
}

/// Reads channel `c` of `rec` (in its recorded units) as a calibrator recording sampled at
/// `fs` Hz, stopping once `cancel` is set.
///
/// # Errors
/// [`CalibratorError::TooShort`] below [`Plan::min_samples`]; [`CalibratorError::AboveBand`],
/// [`CalibratorError::Resolution`] for a stated frequency the sample rate cannot resolve;
/// [`CalibratorError::NoTone`] for a silent channel; [`CalibratorError::Welch`] for a
/// non-finite sample or a stop.
pub fn read_channel(
    rec: &Recording,
    c: usize,
    fs: f64,
    cfg: &CalibratorConfig,
    cancel: &Cancel,
) -> Result<Reading, CalibratorError> {
    let limit_hz = MAX_FREQUENCY_RATIO * fs;
    if cfg.stated_frequency_hz >= limit_hz {
        return Err(CalibratorError::AboveBand { stated_hz: cfg.stated_frequency_hz, limit_hz });
    }
    let plan =
        Plan::new(fs, cfg.stated_frequency_hz).ok_or(CalibratorError::Resolution(cfg.stated_frequency_hz))?;
    let x = rec.channel(c);
    if x.len() < plan.min_samples() {
        return Err(CalibratorError::TooShort {
            samples: x.len(),
            seconds: x.len() as f64 / fs,
            minimum: plan.min_samples(),
            minimum_s: plan.min_samples() as f64 / fs,
            nperseg: plan.nperseg,
        });
    }
    let psd = welch_channel(&x, fs, plan.welch())?;
    let df = plan.resolution_hz();
    let p: Vec<f64> = psd.density.iter().map(|d| d * df).collect();
    let last = p.len() - 1;
    // The fundamental: the strongest bin within SEARCH_FRACTION of the stated frequency (so
    // rumble, handling noise or another source cannot be taken for the calibrator), clear of
    // the DC lobe and of Nyquist. A far stronger tone elsewhere means the calibrator is not
    // what was recorded there.
    let (lo, hi) = (LOBE_BINS + 1, last.saturating_sub(LOBE_BINS));
    let stated_bin = cfg.stated_frequency_hz / df;
    let near_lo = ((stated_bin * (1.0 - SEARCH_FRACTION)).floor() as usize).max(lo);
    let near_hi = ((stated_bin * (1.0 + SEARCH_FRACTION)).ceil() as usize + 1).min(hi).max(near_lo + 1);
    let kp = peak(&p, near_lo, near_hi);
    let kg = peak(&p, lo, hi);
    let mut near: Vec<f64> = p[near_lo..near_hi].to_vec();
    near.sort_by(f64::total_cmp);
    let near_floor = near[near.len() / 2];
    let no_tone_near = p[kp] <= ELSEWHERE_RATIO * near_floor;
    if no_tone_near && p[kg] > ELSEWHERE_RATIO * p[kp] && kg.abs_diff(kp) > LOBE_BINS {
        return Err(CalibratorError::NotNearStated {
            stated_hz: cfg.stated_frequency_hz,
            found_hz: kg as f64 * df,
            above_db: 10.0 * (p[kg] / p[kp]).log10(),
        });
    }
    let (ms1, centroid) = band(&p, kp);
    if ms1 <= 0.0 || !ms1.is_finite() {
        return Err(CalibratorError::NoTone);
    }
    let f1 = centroid * df;
    // A centroid outside the tone's own bins (a floor above the peak's neighbours) is no tone.
    if !(f1.is_finite() && f1 > 0.0) {
        return Err(CalibratorError::NoTone);
    }
    let tone_rms = ms1.sqrt();
    let max_order = cfg.max_harmonic_order.max(2);
    let harmonics: Vec<Harmonic> = (2..=max_order)
        .map(|order| (order, f64::from(order) * f1))
        .take_while(|(_, f)| (f / df).round() as usize + LOBE_BINS < last)
        .map(|(order, f)| {
            let k = peak(&p, ((f / df).round() as usize).saturating_sub(1), (f / df).round() as usize + 2);
            Harmonic { order, frequency_hz: f, rms: band(&p, k).0.sqrt() }
        })
        .collect();
    let thd = harmonics.iter().map(|h| h.rms * h.rms).sum::<f64>().sqrt() / tone_rms;
    let (b_lo, b_hi) = (
        ((THD_N_BAND_HZ.0 / df).ceil() as usize).max(LOBE_BINS + 1),
        ((THD_N_BAND_HZ.1 / df) as usize).min(last),
    );
    let rest: f64 = (b_lo..=b_hi).filter(|k| k.abs_diff(kp) > LOBE_BINS).map(|k| p[k]).sum();
    let thd_n = rest.max(0.0).sqrt() / tone_rms;

    let blocks = block_spans(&x, &plan, kp, cancel)?;
    let (runs, run_value, resolution) = flat_runs(&x);
    let full_scale = rec.clipped(c);
    let pascals_per_unit = cfg.stated_rms_pa() / tone_rms;

    let mut warnings = Vec::new();
    if let Some((n, full)) = full_scale.filter(|(n, _)| *n > 0) {
        warnings.push(Warning::FullScale { samples: n, full_scale: full });
    }
    // Samples within half a resolution step of a sinusoid's crest: A (1 - cos theta) < q / 2,
    // theta < sqrt(q / A), i.e. sqrt(q / A) fs / (pi f) samples about each crest.
    let amplitude = (2.0 * ms1).sqrt();
    let expected = ((resolution / amplitude).sqrt() * fs / (std::f64::consts::PI * f1)).ceil() as usize + 1;
    let expected = expected.max(3);
    if runs > expected {
        warnings.push(Warning::FlatTopped { run: runs, expected, value: run_value });
    }
    if (f1 / cfg.stated_frequency_hz - 1.0).abs() > cfg.frequency_tolerance_fraction {
        warnings.push(Warning::FrequencyOff {
            measured_hz: f1,
            stated_hz: cfg.stated_frequency_hz,
            tolerance: cfg.frequency_tolerance_fraction,
        });
    }
    if blocks.level_span_db > UNSTEADY_DB {
        warnings.push(Warning::Unsteady { span_db: blocks.level_span_db });
    }
    Ok(Reading {
        tone_rms,
        pascals_per_unit,
        frequency_hz: f1,
        frequency_span_hz: blocks.frequency_span_hz,
        level_span_db: blocks.level_span_db,
        blocks: blocks.count,
        thd,
        thd_n,
        harmonics,
        full_scale_samples: full_scale.map(|(n, _)| n),
        longest_flat_run: runs,
        warnings,
    })
}

struct Spans {
    count: usize,
    level_span_db: f64,
    frequency_span_hz: f64,
}

/// Level and frequency of every non-overlapping block (one windowed periodogram each, the tone
/// read in the bins about `kp`), and their spans.
fn block_spans(
    x: &ChannelView<'_>,
    plan: &Plan,
    kp: usize,
    cancel: &Cancel,
) -> Result<Spans, CalibratorError> {
    let n = plan.nperseg;
    let w = WINDOW.values(n);
    let sums = WindowSums::of(&w);
    let fft = super::welch::plan(n);
    let (mut buf, mut out, mut scratch) = (vec![0.0; n], fft.make_output_vec(), fft.make_scratch_vec());
    let mut p = vec![0.0; n / 2 + 1];
    let count = x.len() / n;
    let (mut lmin, mut lmax, mut fmin, mut fmax) = (f64::MAX, f64::MIN, f64::MAX, f64::MIN);
    for b in 0..count {
        if cancel.is_cancelled() {
            return Err(CalibratorError::Welch(WelchError::Stopped));
        }
        x.read(b * n, &mut buf);
        let mean = buf.iter().sum::<f64>() / n as f64;
        for (v, wv) in buf.iter_mut().zip(&w) {
            *v = (*v - mean) * wv;
        }
        if fft.process_with_scratch(&mut buf, &mut out, &mut scratch).is_err() {
            continue;
        }
        let scale = 2.0 / (n as f64 * sums.sum_sq);
        for (pk, c) in p.iter_mut().zip(&out) {
            *pk = c.norm_sqr() * scale;
        }
        let (ms, centroid) = band(&p, kp);
        let level = 10.0 * ms.max(f64::MIN_POSITIVE).log10();
        let f = centroid * plan.resolution_hz();
        (lmin, lmax, fmin, fmax) = (lmin.min(level), lmax.max(level), fmin.min(f), fmax.max(f));
    }
    Ok(Spans { count, level_span_db: (lmax - lmin).max(0.0), frequency_span_hz: (fmax - fmin).max(0.0) })
}

/// The longest run of equal consecutive samples at the channel's largest or smallest value, that
/// value, and the data's resolution (the smallest nonzero step between successive samples).
fn flat_runs(x: &ChannelView<'_>) -> (usize, f64, f64) {
    let mut buf = vec![0.0; 1 << 16];
    let (mut hi, mut lo, mut step) = (f64::MIN, f64::MAX, f64::MAX);
    let mut prev: Option<f64> = None;
    let mut at = 0;
    while at < x.len() {
        let got = x.read(at, &mut buf);
        for &v in &buf[..got] {
            hi = hi.max(v);
            lo = lo.min(v);
            if let Some(q) = prev {
                let d = (v - q).abs();
                if d > 0.0 {
                    step = step.min(d);
                }
            }
            prev = Some(v);
        }
        at += got;
    }
    let (mut best, mut value, mut run, mut last) = (0usize, hi, 0usize, f64::NAN);
    at = 0;
    while at < x.len() {
        let got = x.read(at, &mut buf);
        for &v in &buf[..got] {
            if (v == hi || v == lo) && v == last {
                run += 1;
            } else {
                run = usize::from(v == hi || v == lo);
            }
            if run > best {
                (best, value) = (run, v);
            }
            last = v;
        }
        at += got;
    }
    (best, value, if step == f64::MAX { 0.0 } else { step })
}

#[cfg(test)]
#[path = "calibrator_tests.rs"]
mod tests;
