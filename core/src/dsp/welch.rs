//! Welch (1967) power spectral density: averaged periodograms of windowed, overlapping
//! segments, one-sided, in Pa^2/Hz (density) or Pa^2 (power spectrum).
//!
//! Matches `scipy.signal.welch` with the same window, `nperseg`, `noverlap`, `detrend`
//! (`'constant'` or `False`), `scaling`, `average='mean'`, no padding and no boundary extension.
//! Segments are processed in parallel on the rayon pool; each worker reuses its buffers, and
//! FFT plans come from one process-wide planner (realfft) so they are built once per length.

use super::samples::{first_non_finite, sum, ChannelView, SampleMoments};
use super::window::{Window, WindowSums};
use crate::cancel::Cancel;
use rayon::prelude::*;
use realfft::{num_complex::Complex, RealFftPlanner, RealToComplex};
use std::sync::{Arc, Mutex, OnceLock};

/// Segment-mean removal.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Detrend {
    /// Subtract each segment's mean (SciPy `'constant'`).
    Mean,
    /// Leave segments as they are.
    None,
}

impl Detrend {
    /// The choice as the API names it (`mean`, `none`).
    pub fn name(self) -> &'static str {
        match self {
            Detrend::Mean => "mean",
            Detrend::None => "none",
        }
    }
}

/// Smallest segment length.
pub const MIN_SEGMENT: usize = 16;
/// Largest segment length (2^20).
pub const MAX_SEGMENT: usize = 1 << 20;

/// Welch settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WelchConfig {
    /// Window shape.
    pub window: Window,
    /// Segment length in samples.
    pub nperseg: usize,
    /// Overlap in samples (< nperseg).
    pub noverlap: usize,
    /// Detrending.
    pub detrend: Detrend,
}

impl WelchConfig {
    /// Overlap as a fraction of a segment: 50 %, the usual choice with a Hann window (common
    /// practice; Welch 1967 shows little is gained beyond it for that window).
    pub const OVERLAP_FRACTION: crate::physics::Setting = crate::physics::Setting::new(
        "overlap_fraction",
        super::limits::OVERLAP,
        0.5,
        "50 % overlap (common practice with Hann)",
    );
    /// Detrending when unset: the segment mean is removed, so a DC offset of the DAQ (or a
    /// static pressure in a pressure transducer's signal) does not leak into the lowest bins.
    pub const DETREND: (Detrend, &'static str) =
        (Detrend::Mean, "each segment's mean removed, so a DC offset does not leak into the lowest bins");

    /// Checks the segment length and overlap.
    ///
    /// # Errors
    /// [`WelchError::SegmentLength`] outside [`MIN_SEGMENT`, `MAX_SEGMENT`];
    /// [`WelchError::Overlap`] when the overlap is not shorter than a segment.
    pub fn check(&self) -> Result<(), WelchError> {
        let n = self.nperseg;
        if !(MIN_SEGMENT..=MAX_SEGMENT).contains(&n) {
            return Err(WelchError::SegmentLength(n));
        }
        if self.noverlap >= n {
            return Err(WelchError::Overlap { noverlap: self.noverlap, nperseg: n });
        }
        Ok(())
    }
}

/// A one-sided PSD with the figures that describe how it was made.
#[derive(Debug, Clone, PartialEq)]
pub struct Psd {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Settings.
    pub config: WelchConfig,
    /// Density in Pa^2/Hz at frequencies k fs / nperseg, k = 0..=nperseg/2.
    pub density: Vec<f64>,
    /// Number of segments averaged.
    pub segments: usize,
    /// Samples at the end not covered by any segment.
    pub unused_samples: usize,
    /// Window sums.
    pub sums: WindowSums,
    /// Count, mean and spread of all the channel's samples (segments and tail), Pa.
    pub moments: SampleMoments,
}

impl Psd {
    /// Mean square from the density, Pa^2: the sum of density times bin spacing (Parseval's
    /// theorem for the one-sided Welch density).
    pub fn mean_square_pa2(&self) -> f64 {
        self.density.iter().sum::<f64>() * self.resolution_hz()
    }

    /// Bin spacing fs / nperseg, Hz.
    pub fn resolution_hz(&self) -> f64 {
        self.fs / self.config.nperseg as f64
    }

    /// Frequency of bin k, Hz.
    pub fn frequency(&self, k: usize) -> f64 {
        k as f64 * self.resolution_hz()
    }

    /// Equivalent noise bandwidth, Hz.
    pub fn enbw_hz(&self) -> f64 {
        self.sums.enbw_bins() * self.resolution_hz()
    }

    /// Power spectrum (Pa^2 per bin, a sinusoid's peak bin reads its mean square when on a bin):
    /// density x ENBW in Hz.
    pub fn power_spectrum(&self) -> Vec<f64> {
        let e = self.enbw_hz();
        self.density.iter().map(|d| d * e).collect()
    }

    /// Normalized random error (standard deviation over mean) of each PSD value for Gaussian
    /// noise, from Welch's (1967) variance formula with the window's overlap correlation.
    pub fn normalized_random_error(&self) -> f64 {
        let w = self.config.window.values(self.config.nperseg);
        let step = self.config.nperseg - self.config.noverlap;
        let k = self.segments as f64;
        let mut sum = 0.0;
        for j in 1..self.segments {
            let shift = j * step;
            if shift >= w.len() {
                break;
            }
            let rho: f64 = w.iter().zip(&w[shift..]).map(|(a, b)| a * b).sum::<f64>() / self.sums.sum_sq;
            sum += (1.0 - j as f64 / k) * rho * rho;
        }
        ((1.0 + 2.0 * sum) / k).sqrt()
    }
}

/// Why a PSD cannot be computed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum WelchError {
    /// Segment length out of range.
    #[error("segment length {0} is outside [{MIN_SEGMENT}, {MAX_SEGMENT}] samples")]
    SegmentLength(usize),
    /// Segment longer than the data.
    #[error("segment length {nperseg} is longer than the {samples} samples per channel")]
    TooShort {
        /// Segment length.
        nperseg: usize,
        /// Samples available.
        samples: usize,
    },
    /// A sample is NaN or infinite (the first such sample).
    #[error("sample {index} is not a finite number ({value})")]
    NotFinite {
        /// Sample index within the channel.
        index: usize,
        /// The value.
        value: f64,
    },
    /// The estimate was stopped through its cancellation flag.
    #[error("the estimate was stopped before it finished")]
    Stopped,
    /// Overlap not below the segment length.
    #[error("overlap {noverlap} must be less than the segment length {nperseg}")]
    Overlap {
        /// Overlap.
        noverlap: usize,
        /// Segment length.
        nperseg: usize,
    },
}

/// Segment length for a bin width of at most `resolution_hz` at sample rate `fs` (Hz): the
/// smallest power of two of at least `fs / resolution_hz` samples, and at least
/// [`MIN_SEGMENT`]. `None` when that exceeds [`MAX_SEGMENT`] (also for a resolution so fine
/// that the length does not fit a machine word).
pub fn segment_for_resolution(fs: f64, resolution_hz: f64) -> Option<usize> {
    let want = (fs / resolution_hz).ceil();
    // Compared as a float first: a huge ratio must not saturate or overflow an integer.
    if want.is_nan() || want > MAX_SEGMENT as f64 {
        return None;
    }
    Some((want.max(1.0) as usize).next_power_of_two().max(MIN_SEGMENT))
}

/// Default segment length for `samples` per channel at sample rate `fs` (Hz): the power of
/// two giving at most 10 Hz resolution, but no longer than a quarter of the data (so at least
/// four segments' worth), within [`MIN_SEGMENT`, `MAX_SEGMENT`].
pub fn default_segment(fs: f64, samples: usize) -> usize {
    let want = segment_for_resolution(fs, 10.0).unwrap_or(MAX_SEGMENT);
    let quarter = (samples / 4).max(MIN_SEGMENT);
    let cap = if quarter.is_power_of_two() { quarter } else { quarter.next_power_of_two() / 2 };
    want.min(cap).clamp(MIN_SEGMENT, MAX_SEGMENT)
}

pub(crate) fn plan(n: usize) -> Arc<dyn RealToComplex<f64>> {
    static PLANNER: OnceLock<Mutex<RealFftPlanner<f64>>> = OnceLock::new();
    let planner = PLANNER.get_or_init(|| Mutex::new(RealFftPlanner::new()));
    // A poisoned lock only means another thread panicked while planning; the cache is still
    // usable.
    let mut p = planner.lock().unwrap_or_else(|e| e.into_inner());
    p.plan_fft_forward(n)
}

/// Per-worker buffers and partial results.
struct Worker {
    buf: Vec<f64>,
    out: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
    acc: Vec<f64>,
    moments: SampleMoments,
    bad: Option<(usize, f64)>,
}

/// Checks and describes samples `start..start + x.len()` (a run a worker owns).
fn take_stock(moments: &mut SampleMoments, bad: &mut Option<(usize, f64)>, start: usize, x: &[f64]) {
    if bad.is_none() {
        if let Some((i, v)) = first_non_finite(x) {
            *bad = Some((start + i, v));
        }
    }
    *moments = moments.merge(SampleMoments::of(x));
}

/// A Welch estimate being built segment by segment, for data that arrives in blocks (or all
/// at once).
///
/// Segment `s` covers samples `s step .. s step + nperseg` and *owns* the first `step` of them:
/// the finiteness check and the channel's moments are taken over owned runs (and, at the end,
/// over the tail after the last segment), so every sample is checked and counted exactly once
/// while it is in cache for the FFT.
pub struct WelchAccumulator {
    fs: f64,
    config: WelchConfig,
    window: Vec<f64>,
    sums: WindowSums,
    fft: Arc<dyn RealToComplex<f64>>,
    step: usize,
    acc: Vec<f64>,
    moments: SampleMoments,
    bad: Option<(usize, f64)>,
    segments: usize,
    cancel: Cancel,
    stopped: bool,
}

impl std::fmt::Debug for WelchAccumulator {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("WelchAccumulator")
            .field("config", &self.config)
            .field("segments", &self.segments)
            .finish_non_exhaustive()
    }
}

impl WelchAccumulator {
    /// A new estimate at sample rate `fs` Hz.
    ///
    /// # Errors
    /// [`WelchError::SegmentLength`] or [`WelchError::Overlap`].
    pub fn new(fs: f64, config: WelchConfig) -> Result<Self, WelchError> {
        config.check()?;
        let n = config.nperseg;
        let window = config.window.values(n);
        let sums = WindowSums::of(&window);
        Ok(Self {
            fs,
            config,
            window,
            sums,
            fft: plan(n),
            step: n - config.noverlap,
            acc: vec![0.0; n / 2 + 1],
            moments: SampleMoments::default(),
            bad: None,
            segments: 0,
            cancel: Cancel::default(),
            stopped: false,
        })
    }

    /// The same estimate, stopping at the next segment once `cancel` is set
    /// ([`WelchAccumulator::finish`] then answers [`WelchError::Stopped`]).
    pub fn with_cancel(self, cancel: Cancel) -> Self {
        Self { cancel, ..self }
    }

    /// Whole segments that fit in the first `samples` samples.
    pub fn segments_within(&self, samples: usize) -> usize {
        if samples < self.config.nperseg {
            0
        } else {
            (samples - self.config.noverlap) / self.step
        }
    }

    /// Segments averaged so far.
    pub fn segments(&self) -> usize {
        self.segments
    }

    /// First sample the estimate still reads (the start of the next segment): samples before
    /// it are taken in and may be let go.
    pub fn next_start(&self) -> usize {
        self.segments * self.step
    }

    /// Adds every whole segment of `x` not yet added, spread over the rayon pool.
    pub fn advance(&mut self, x: &ChannelView<'_>) {
        let (s0, s1) = (self.segments, self.segments_within(x.len()));
        if s1 <= s0 {
            return;
        }
        let (n, step, bins) = (self.config.nperseg, self.step, self.acc.len());
        let threads = rayon::current_num_threads().max(1).min(s1 - s0);
        let per = (s1 - s0).div_ceil(threads);
        let chunks: Vec<(usize, usize)> = (0..threads)
            .map(|t| (s0 + t * per, (s0 + (t + 1) * per).min(s1)))
            .filter(|(a, b)| a < b)
            .collect();
        let (fft, w, detrend, cancel) = (&self.fft, &self.window, self.config.detrend, &self.cancel);
        let partial: Vec<Worker> = chunks
            .par_iter()
            .map(|&(a, b)| {
                let mut wk = Worker {
                    buf: vec![0.0; n],
                    out: fft.make_output_vec(),
                    scratch: fft.make_scratch_vec(),
                    acc: vec![0.0; bins],
                    moments: SampleMoments::default(),
                    bad: None,
                };
                for s in a..b {
                    if cancel.is_cancelled() {
                        break;
                    }
                    let start = s * step;
                    x.read(start, &mut wk.buf);
                    take_stock(&mut wk.moments, &mut wk.bad, start, &wk.buf[..step]);
                    let mean = match detrend {
                        Detrend::Mean => sum(&wk.buf) / n as f64,
                        Detrend::None => 0.0,
                    };
                    for (v, wv) in wk.buf.iter_mut().zip(w) {
                        *v = (*v - mean) * wv;
                    }
                    // Lengths match the plan by construction, so this cannot fail.
                    if fft.process_with_scratch(&mut wk.buf, &mut wk.out, &mut wk.scratch).is_ok() {
                        for (acc, c) in wk.acc.iter_mut().zip(&wk.out) {
                            *acc += c.norm_sqr();
                        }
                    }
                }
                wk
            })
            .collect();
        for p in partial {
            if self.bad.is_none() {
                self.bad = p.bad;
            }
            self.moments = self.moments.merge(p.moments);
            for (d, v) in self.acc.iter_mut().zip(&p.acc) {
                *d += v;
            }
        }
        self.segments = s1;
        self.stopped |= self.cancel.is_cancelled();
    }

    /// Adds what is left of `x` (its last whole segments and the tail) and scales the average.
    ///
    /// # Errors
    /// [`WelchError::TooShort`] when `x` holds no whole segment; [`WelchError::NotFinite`]
    /// naming the first non-finite sample.
    pub fn finish(mut self, x: &ChannelView<'_>) -> Result<Psd, WelchError> {
        let n = self.config.nperseg;
        if x.len() < n {
            return Err(WelchError::TooShort { nperseg: n, samples: x.len() });
        }
        self.advance(x);
        if self.stopped {
            return Err(WelchError::Stopped);
        }
        let mut buf = vec![0.0; n];
        let mut start = self.segments * self.step;
        while start < x.len() {
            let got = x.read(start, &mut buf);
            take_stock(&mut self.moments, &mut self.bad, start, &buf[..got]);
            start += got;
        }
        if let Some((index, value)) = self.bad {
            return Err(WelchError::NotFinite { index, value });
        }
        let segments = self.segments;
        let scale = 1.0 / (self.fs * self.sums.sum_sq) / segments as f64;
        let bins = self.acc.len();
        let last = if n % 2 == 0 { bins - 1 } else { bins };
        let mut density = self.acc;
        for (k, d) in density.iter_mut().enumerate() {
            *d *= if k == 0 || k == last { scale } else { 2.0 * scale };
        }
        Ok(Psd {
            fs: self.fs,
            config: self.config,
            density,
            segments,
            unused_samples: x.len() - ((segments - 1) * self.step + n),
            sums: self.sums,
            moments: self.moments,
        })
    }
}

/// Welch PSD of `x` (pascals) sampled at `fs` Hz.
///
/// # Errors
/// [`WelchError`] when the segment length, overlap or data length do not fit, or a sample is
/// not finite.
pub fn welch(x: &[f64], fs: f64, config: WelchConfig) -> Result<Psd, WelchError> {
    welch_channel(&ChannelView::of_pascals(x), fs, config)
}

/// Welch PSD of one channel read where it lies (raw DAQ bytes or values), sampled at `fs` Hz:
/// one [`WelchAccumulator`] fed the whole channel.
///
/// # Errors
/// [`WelchError`] when the segment length, overlap or data length do not fit, or a sample is
/// not finite (the first one is named).
pub fn welch_channel(x: &ChannelView<'_>, fs: f64, config: WelchConfig) -> Result<Psd, WelchError> {
    WelchAccumulator::new(fs, config)?.finish(x)
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// Deterministic Gaussian noise for tests.
    pub(crate) fn noise(n: usize, seed: u64, sigma: f64) -> Vec<f64> {
        let mut r = crate::test_rng::Rng(seed.max(1));
        (0..n).map(|_| sigma * r.gauss()).collect()
    }

    fn cfg(n: usize) -> WelchConfig {
        WelchConfig { window: Window::Hann, nperseg: n, noverlap: n / 2, detrend: Detrend::Mean }
    }

    #[test]
    fn sinusoid_power_is_a_squared_over_two() {
        // A sinusoid of amplitude A has mean square A^2/2 whatever the window (closed form):
        // the density integrated over the peak equals it.
        let fs = 10_000.0;
        let a = 3.0;
        let x: Vec<f64> =
            (0..100_000).map(|i| a * (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / fs).sin()).collect();
        let p = welch(&x, fs, cfg(1000)).unwrap();
        let total: f64 = p.density.iter().sum::<f64>() * p.resolution_hz();
        assert!((total / (a * a / 2.0) - 1.0).abs() < 1e-9, "{total}");
        // On a bin, the power spectrum's peak reads A^2/2 (spectrum scaling).
        let ps = p.power_spectrum();
        assert!((ps[100] / (a * a / 2.0) - 1.0).abs() < 1e-9);
        assert!((p.enbw_hz() - 1.5 * fs / 1000.0).abs() < 1e-9);
    }

    #[test]
    fn white_noise_density_and_segment_count() {
        // Gaussian white noise of variance s^2 has one-sided density 2 s^2 / fs; the estimate's
        // normalized random error is about 1/sqrt(K) (Welch 1967), slightly more with overlap.
        let fs = 1000.0;
        let x = noise(1 << 16, 7, 2.0);
        let p = welch(&x, fs, cfg(256)).unwrap();
        assert_eq!(p.segments, (65_536 - 128) / 128);
        assert_eq!(p.unused_samples, 0);
        let inner = &p.density[1..128];
        let mean = inner.iter().sum::<f64>() / inner.len() as f64;
        assert!((mean / (2.0 * 4.0 / fs) - 1.0).abs() < 0.02, "{mean}");
        let eps = p.normalized_random_error();
        let k = p.segments as f64;
        // Hann, 50 % overlap: 1 + 2 rho^2 with rho = 0.167 (Harris 1978, Table 1).
        assert!((eps * eps * k - (1.0 + 2.0 * 0.1667f64.powi(2))).abs() < 0.01, "{}", eps * eps * k);
    }

    #[test]
    fn blocks_fed_as_they_arrive_give_the_whole_estimate() {
        use crate::dsp::samples::{Format, Recording};
        let x: Vec<f32> = noise(40_000, 3, 1.5).iter().map(|v| *v as f32).collect();
        let bytes: Vec<u8> = x.iter().flat_map(|v| v.to_le_bytes()).collect();
        let config = cfg(1024);
        let whole = welch(&x.iter().map(|v| f64::from(*v)).collect::<Vec<_>>(), 1000.0, config).unwrap();
        let mut rec = Recording::stream(Format::F32, 1, 1.0);
        let mut acc = WelchAccumulator::new(1000.0, config).unwrap();
        // Uneven blocks, some shorter than a segment.
        let mut at = 0;
        for len in [300usize, 5000, 7, 1200, 20_000, 13_493] {
            rec.push_block(bytes[at * 4..(at + len) * 4].to_vec().into()).unwrap();
            at += len;
            acc.advance(&rec.channel(0));
        }
        assert_eq!(at, x.len());
        let streamed = acc.finish(&rec.channel(0)).unwrap();
        assert_eq!(streamed.segments, whole.segments);
        assert_eq!(streamed.unused_samples, whole.unused_samples);
        for (a, b) in streamed.density.iter().zip(&whole.density) {
            assert!((a / b - 1.0).abs() < 1e-12);
        }
        assert_eq!(streamed.moments.count, 40_000);
        assert!((streamed.moments.m2 / whole.moments.m2 - 1.0).abs() < 1e-12);
    }

    #[test]
    fn the_first_non_finite_sample_is_named() {
        let mut x = noise(10_000, 5, 1.0);
        x[7777] = f64::NAN;
        x[9999] = f64::INFINITY;
        assert!(matches!(welch(&x, 1.0, cfg(256)), Err(WelchError::NotFinite { index: 7777, .. })));
        // In the tail after the last whole segment.
        let mut y = noise(1000, 5, 1.0);
        y[999] = f64::NEG_INFINITY;
        assert!(matches!(welch(&y, 1.0, cfg(256)), Err(WelchError::NotFinite { index: 999, .. })));
    }

    #[test]
    fn errors() {
        let x = vec![0.0; 100];
        assert_eq!(
            welch(&x, 1.0, cfg(128)).unwrap_err(),
            WelchError::TooShort { nperseg: 128, samples: 100 }
        );
        assert_eq!(welch(&x, 1.0, cfg(8)).unwrap_err(), WelchError::SegmentLength(8));
        let bad = WelchConfig { noverlap: 32, ..cfg(32) };
        assert!(matches!(welch(&x, 1.0, bad), Err(WelchError::Overlap { .. })));
    }

    #[test]
    fn segment_for_a_tiny_resolution_is_refused_not_wrapped() {
        // Regression: fs / resolution beyond usize overflowed next_power_of_two (a panic in
        // debug builds, 16-sample segments in release).
        assert_eq!(segment_for_resolution(204_800.0, 1e-300), None);
        assert_eq!(segment_for_resolution(204_800.0, f64::MIN_POSITIVE), None);
        assert_eq!(segment_for_resolution(204_800.0, 0.1), None); // 2^21 > 2^20
                                                                  // 204800 / 25 = 8192 exactly: a power of two already (bin width 25 Hz).
        assert_eq!(segment_for_resolution(204_800.0, 25.0), Some(8192));
        assert_eq!(segment_for_resolution(204_800.0, 24.9), Some(16384));
        assert_eq!(segment_for_resolution(1000.0, 1000.0), Some(MIN_SEGMENT));
        // Default: 10 Hz at 204.8 kHz wants 32768; 2^21 samples allow it; 40000 samples cap
        // it at the power of two below 10000.
        assert_eq!(default_segment(204_800.0, 1 << 21), 32768);
        assert_eq!(default_segment(204_800.0, 40_000), 8192);
    }
}
