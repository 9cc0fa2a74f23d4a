//! [`CrossAccumulator`]: Welch cross-spectra built segment by segment as blocks arrive.

use super::CrossSpectra;
use crate::cancel::Cancel;
use crate::dsp::samples::{first_non_finite, sum, ChannelView};
use crate::dsp::welch::{plan, Detrend, WelchConfig, WelchError};
use crate::dsp::window::WindowSums;
use rayon::prelude::*;
use realfft::num_complex::Complex;
use realfft::RealToComplex;
use std::sync::Arc;

/// Per-worker partial sums of [`CrossAccumulator::advance`].
struct CrossPart {
    auto: Vec<Vec<f64>>,
    cross: Vec<Vec<Complex<f64>>>,
    bad: Vec<Option<(usize, f64)>>,
}

/// Welch cross-spectra being built segment by segment, for channels that arrive in blocks (or
/// all at once): the auto spectra of every channel and the cross spectra of the others with
/// the reference, summed over whole segments.
///
/// Segment `s` covers samples `s step .. s step + nperseg` of every channel and *owns* the
/// first `step` of them for the finiteness check (the tail after the last segment is checked
/// by [`CrossAccumulator::finish`]), so every sample is checked once and blocks before
/// [`CrossAccumulator::next_start`] may be let go.
pub struct CrossAccumulator {
    fs: f64,
    config: WelchConfig,
    reference: usize,
    others: Vec<usize>,
    window: Vec<f64>,
    sums: WindowSums,
    fft: Arc<dyn RealToComplex<f64>>,
    step: usize,
    auto: Vec<Vec<f64>>,
    cross: Vec<Vec<Complex<f64>>>,
    /// First non-finite sample of each channel: (index within the channel, value).
    bad: Vec<Option<(usize, f64)>>,
    segments: usize,
    cancel: Cancel,
    stopped: bool,
}

impl std::fmt::Debug for CrossAccumulator {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CrossAccumulator")
            .field("config", &self.config)
            .field("channels", &self.auto.len())
            .field("reference", &self.reference)
            .field("segments", &self.segments)
            .finish_non_exhaustive()
    }
}

impl CrossAccumulator {
    /// A new estimate for `m` channels sampled at `fs` Hz, against channel `reference`.
    ///
    /// # Errors
    /// [`WelchError::SegmentLength`] or [`WelchError::Overlap`].
    pub fn new(m: usize, reference: usize, fs: f64, config: WelchConfig) -> Result<Self, WelchError> {
        config.check()?;
        let n = config.nperseg;
        let window = config.window.values(n);
        let sums = WindowSums::of(&window);
        let bins = n / 2 + 1;
        let others: Vec<usize> = (0..m).filter(|&c| c != reference).collect();
        Ok(Self {
            fs,
            config,
            reference,
            window,
            sums,
            fft: plan(n),
            step: n - config.noverlap,
            auto: vec![vec![0.0; bins]; m],
            cross: vec![vec![Complex::new(0.0, 0.0); bins]; others.len()],
            others,
            bad: vec![None; m],
            segments: 0,
            cancel: Cancel::default(),
            stopped: false,
        })
    }

    /// The same estimate, stopping at the next segment once `cancel` is set
    /// ([`CrossAccumulator::finish`] then answers [`WelchError::Stopped`]).
    pub fn with_cancel(self, cancel: Cancel) -> Self {
        Self { cancel, ..self }
    }

    /// Whole segments that fit in the first `samples` samples of each channel.
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

    /// First sample (of each channel) the estimate still reads, the start of the next segment:
    /// samples before it are taken in and may be let go.
    pub fn next_start(&self) -> usize {
        self.segments * self.step
    }

    /// Adds every whole segment of `channels` (all of one length, the reference among them)
    /// not yet added, spread over the rayon pool.
    pub fn advance(&mut self, channels: &[ChannelView<'_>]) {
        let len = channels.first().map_or(0, ChannelView::len);
        let (s0, s1) = (self.segments, self.segments_within(len));
        // The reference is one of the channels by construction (checked by the caller).
        if s1 <= s0 || channels.len() != self.auto.len() || self.reference >= channels.len() {
            return;
        }
        let (n, step, bins, m) = (self.config.nperseg, self.step, self.auto[0].len(), channels.len());
        let threads = rayon::current_num_threads().max(1).min(s1 - s0);
        let per = (s1 - s0).div_ceil(threads);
        let chunks: Vec<(usize, usize)> = (0..threads)
            .map(|t| (s0 + t * per, (s0 + (t + 1) * per).min(s1)))
            .filter(|(a, b)| a < b)
            .collect();
        let (fft, window, detrend, cancel) = (&self.fft, &self.window, self.config.detrend, &self.cancel);
        let (reference, others) = (self.reference, &self.others);
        let parts: Vec<CrossPart> = chunks
            .par_iter()
            .map(|&(a, b)| {
                let mut part = CrossPart {
                    auto: vec![vec![0.0; bins]; m],
                    cross: vec![vec![Complex::new(0.0, 0.0); bins]; others.len()],
                    bad: vec![None; m],
                };
                let mut buf = vec![0.0; n];
                let mut spectra = vec![vec![Complex::new(0.0, 0.0); bins]; m];
                let mut scratch = fft.make_scratch_vec();
                for s in a..b {
                    if cancel.is_cancelled() {
                        break;
                    }
                    let start = s * step;
                    for (c, x) in channels.iter().enumerate() {
                        x.read(start, &mut buf);
                        if part.bad[c].is_none() {
                            part.bad[c] = first_non_finite(&buf[..step]).map(|(i, v)| (start + i, v));
                        }
                        let mean = match detrend {
                            Detrend::Mean => sum(&buf) / n as f64,
                            Detrend::None => 0.0,
                        };
                        for (v, w) in buf.iter_mut().zip(window) {
                            *v = (*v - mean) * w;
                        }
                        // Lengths match the plan by construction, so this cannot fail.
                        if fft.process_with_scratch(&mut buf, &mut spectra[c], &mut scratch).is_err() {
                            continue;
                        }
                        for (acc, z) in part.auto[c].iter_mut().zip(&spectra[c]) {
                            *acc += z.norm_sqr();
                        }
                    }
                    for (j, &c) in others.iter().enumerate() {
                        for ((acc, r), y) in
                            part.cross[j].iter_mut().zip(&spectra[reference]).zip(&spectra[c])
                        {
                            *acc += r.conj() * y;
                        }
                    }
                }
                part
            })
            .collect();
        // Chunks in order: the first non-finite sample a chunk finds in a channel is that
        // channel's first in the chunk, so the earliest chunk's is the channel's first.
        for p in parts {
            for (d, b) in self.bad.iter_mut().zip(p.bad) {
                if d.is_none() {
                    *d = b;
                }
            }
            for (d, s) in self.auto.iter_mut().zip(&p.auto) {
                for (a, b) in d.iter_mut().zip(s) {
                    *a += b;
                }
            }
            for (d, s) in self.cross.iter_mut().zip(&p.cross) {
                for (a, b) in d.iter_mut().zip(s) {
                    *a += b;
                }
            }
        }
        self.segments = s1;
        self.stopped |= self.cancel.is_cancelled();
    }

    /// Adds what is left of `channels` (their last whole segments), checks the tail after the
    /// last segment, and scales the averages.
    ///
    /// # Errors
    /// [`WelchError::TooShort`] when the channels hold no whole segment;
    /// [`WelchError::NotFinite`] naming the first non-finite sample (the earliest index, the
    /// lowest channel among equals); [`WelchError::Stopped`] once the cancellation flag is set.
    pub fn finish(mut self, channels: &[ChannelView<'_>]) -> Result<CrossSpectra, WelchError> {
        let n = self.config.nperseg;
        let len = channels.first().map_or(0, ChannelView::len);
        if len < n {
            return Err(WelchError::TooShort { nperseg: n, samples: len });
        }
        self.advance(channels);
        if self.stopped || self.cancel.is_cancelled() {
            return Err(WelchError::Stopped);
        }
        let mut buf = vec![0.0; n];
        for (c, x) in channels.iter().enumerate() {
            let mut start = self.segments * self.step;
            while start < x.len() && self.bad[c].is_none() {
                let got = x.read(start, &mut buf);
                self.bad[c] = first_non_finite(&buf[..got]).map(|(i, v)| (start + i, v));
                start += got;
            }
        }
        if let Some((index, value)) = self.bad.iter().flatten().min_by_key(|(i, _)| *i).copied() {
            return Err(WelchError::NotFinite { index, value });
        }
        if self.segments == 0 {
            // Only when the channels do not match the estimate (count or reference).
            return Err(WelchError::TooShort { nperseg: n, samples: 0 });
        }
        let (segments, bins) = (self.segments, self.auto[0].len());
        let scale = 1.0 / (self.fs * self.sums.sum_sq) / segments as f64;
        let last = if n % 2 == 0 { bins - 1 } else { bins };
        let factor = |k: usize| if k == 0 || k == last { scale } else { 2.0 * scale };
        let mut auto = self.auto;
        for d in &mut auto {
            for (k, v) in d.iter_mut().enumerate() {
                *v *= factor(k);
            }
        }
        let mut cross = self.cross;
        for d in &mut cross {
            for (k, v) in d.iter_mut().enumerate() {
                *v *= factor(k);
            }
        }
        let reference_psd = auto[self.reference].clone();
        let psd = self.others.iter().map(|&c| auto[c].clone()).collect();
        Ok(CrossSpectra { fs: self.fs, config: self.config, segments, reference_psd, psd, csd: cross })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::cross::cross_spectra;
    use crate::dsp::window::Window;
    use std::f64::consts::PI;

    fn cfg(n: usize) -> WelchConfig {
        WelchConfig { window: Window::Hann, nperseg: n, noverlap: n / 2, detrend: Detrend::Mean }
    }

    /// Three channels: a 1 kHz tone delayed by `phase_deg[c]` on channel c, with seeded noise.
    fn delayed(n: usize, fs: f64, phase_deg: [f64; 3]) -> Vec<Vec<f64>> {
        let w = 2.0 * PI * 1000.0;
        (0..3)
            .map(|c| {
                let e = crate::dsp::welch::tests::noise(n, 20 + c as u64, 0.2);
                (0..n).map(|i| (w * i as f64 / fs - phase_deg[c].to_radians()).cos() + e[i]).collect()
            })
            .collect()
    }

    #[test]
    fn blocks_fed_as_they_arrive_give_the_whole_estimate() {
        use crate::dsp::samples::{Format, Recording};
        let (fs, n) = (32_768.0, 40_000);
        let x = delayed(n, fs, [0.0, 45.0, -120.0]);
        let config = cfg(1024);
        let views: Vec<ChannelView<'_>> = x.iter().map(|c| ChannelView::of_pascals(c)).collect();
        let whole = cross_spectra(&views, 1, fs, config, &Cancel::default()).unwrap();
        // The same samples as interleaved f64 frames in uneven blocks, some shorter than a
        // segment, consumed frames let go as a block stream does.
        let bytes: Vec<u8> = (0..n).flat_map(|i| x.iter().flat_map(move |c| c[i].to_le_bytes())).collect();
        let mut rec = Recording::stream(Format::F64, 3, 1.0);
        let mut acc = CrossAccumulator::new(3, 1, fs, config).unwrap();
        let mut at = 0;
        for len in [300usize, 5000, 7, 1200, 20_000, 13_493] {
            rec.push_block(bytes[at * 24..(at + len) * 24].to_vec().into()).unwrap();
            at += len;
            let v: Vec<ChannelView<'_>> = (0..3).map(|c| rec.channel(c)).collect();
            acc.advance(&v);
            let next = acc.next_start();
            rec.release_before(next);
        }
        assert_eq!(at, n);
        let v: Vec<ChannelView<'_>> = (0..3).map(|c| rec.channel(c)).collect();
        let streamed = acc.finish(&v).unwrap();
        assert_eq!(streamed.segments, whole.segments);
        for (a, b) in streamed.reference_psd.iter().zip(&whole.reference_psd) {
            assert!((a / b - 1.0).abs() < 1e-12);
        }
        for (i, (cs, cw)) in streamed.csd.iter().zip(&whole.csd).enumerate() {
            for (a, b) in cs.iter().zip(cw) {
                assert!((a - b).norm() <= 1e-12 * b.norm(), "channel {i}: {a} vs {b}");
            }
        }
        // Closed form: channel c lags the reference by its delay, so arg(conj(X_ref) X_c) at the
        // tone is -(phi_c - phi_ref) (the Fourier coefficient of cos(w t - phi) at +w is
        // proportional to exp(-i phi)): -(0 - 45) = 45 deg and -(-120 - 45) = 165 deg.
        let k = (1000.0 / streamed.resolution_hz()).round() as usize;
        for (i, want) in [(0, 45.0), (1, 165.0)] {
            assert!((streamed.phase_deg(i, k) - want).abs() < 1.0, "{i}: {}", streamed.phase_deg(i, k));
        }
    }

    #[test]
    fn the_first_non_finite_sample_is_named_and_cancellation_stops() {
        let (fs, n) = (32_768.0, 10_000);
        let mut x = delayed(n, fs, [0.0, 0.0, 0.0]);
        x[2][7777] = f64::NAN;
        x[1][8000] = f64::INFINITY;
        let run = |x: &[Vec<f64>], cancel: &Cancel| {
            let v: Vec<ChannelView<'_>> = x.iter().map(|c| ChannelView::of_pascals(c)).collect();
            cross_spectra(&v, 0, fs, cfg(256), cancel)
        };
        assert!(
            matches!(run(&x, &Cancel::default()), Err(WelchError::NotFinite { index: 7777, .. })),
            "the earliest of two"
        );
        // In the tail after the last whole segment (10000 = 77 x 128 + 144: the last segment
        // ends at 9984) of a channel other than the reference.
        let mut y = delayed(n, fs, [0.0, 0.0, 0.0]);
        y[1][9999] = f64::NEG_INFINITY;
        assert!(matches!(run(&y, &Cancel::default()), Err(WelchError::NotFinite { index: 9999, .. })));
        let stop = Cancel::new();
        stop.cancel();
        assert_eq!(run(&y, &stop), Err(WelchError::Stopped));
    }
}
