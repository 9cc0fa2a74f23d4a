//! Cross-channel analysis: Welch-averaged cross-spectral densities against a reference channel,
//! magnitude-squared coherence and phase, symmetric/antisymmetric classification of a pair, and
//! azimuthal mode decomposition over a ring of microphones.
//!
//! - Cross-spectral density as `scipy.signal.csd(x, y)`: `Pxy = conj(X) Y` averaged over
//!   windowed, detrended, overlapping segments, one-sided (doubled except at DC and Nyquist),
//!   scaled by `1 / (fs sum w^2)`; x is the reference channel. Coherence as
//!   `scipy.signal.coherence`: `|Pxy|^2 / (Pxx Pyy)`. Phase `arg Pxy` in degrees: the phase of
//!   channel y relative to the reference (checked against SciPy in tests/python).
//! - Azimuth convention: microphone azimuths theta increase in one sense around the jet axis.
//!   A pattern `p(theta, t) = cos(omega t - m theta)` (m > 0) spins towards increasing theta;
//!   its Fourier coefficient at +omega is proportional to `exp(-i m theta)`, so channel j's
//!   phase relative to the reference is `-m (theta_j - theta_ref)`.
//! - Mode decomposition at a tone: complex amplitudes `a_j = Pxy_j / sqrt(Pxx)` (amplitude and
//!   phase of channel j locked to the reference), `c_m = (1/M) sum_j a_j exp(+i m theta_j)`;
//!   the energy of order m is `|c_m|^2`. A standing (flapping) pattern `cos(m theta) cos(omega t)`
//!   has equal energy in +m and -m; a spinning (helical) one in one sign only. Exact for
//!   equally spaced azimuths; orders beyond M/2 alias onto lower ones.

use super::samples::ChannelView;
use super::welch::{WelchConfig, WelchError};
use crate::cancel::Cancel;
use realfft::num_complex::Complex;
use std::f64::consts::PI;

mod accumulator;
pub use accumulator::CrossAccumulator;

/// Cross-spectral densities of several channels against one reference.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossSpectra {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Settings.
    pub config: WelchConfig,
    /// Segments averaged.
    pub segments: usize,
    /// PSD of the reference, Pa^2/Hz, bins k fs / nperseg.
    pub reference_psd: Vec<f64>,
    /// PSD of each other channel, Pa^2/Hz.
    pub psd: Vec<Vec<f64>>,
    /// Cross-spectral density reference -> channel, Pa^2/Hz.
    pub csd: Vec<Vec<Complex<f64>>>,
}

impl CrossSpectra {
    /// Bin spacing, Hz.
    pub fn resolution_hz(&self) -> f64 {
        self.fs / self.config.nperseg as f64
    }

    /// Every density at bin `k`.
    pub fn at_bin(&self, k: usize) -> CrossAtBin {
        CrossAtBin {
            reference_psd: self.reference_psd[k],
            psd: self.psd.iter().map(|p| p[k]).collect(),
            csd: self.csd.iter().map(|c| c[k]).collect(),
        }
    }

    /// Magnitude-squared coherence of channel `i` with the reference at bin `k`.
    pub fn coherence(&self, i: usize, k: usize) -> f64 {
        coherence(self.reference_psd[k], self.psd[i][k], self.csd[i][k])
    }

    /// Phase of channel `i` relative to the reference at bin `k`, degrees in (-180, 180].
    pub fn phase_deg(&self, i: usize, k: usize) -> f64 {
        self.csd[i][k].arg().to_degrees()
    }

    /// Complex amplitude of channel `i` locked to the reference at bin `k`: Pxy / sqrt(Pxx).
    pub fn locked_amplitude(&self, i: usize, k: usize) -> Complex<f64> {
        locked_amplitude(self.reference_psd[k], self.csd[i][k])
    }
}

/// The densities of several channels against one reference at one bin (scaled as
/// [`CrossSpectra`]): what a tone's phase, coherence and modes need.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossAtBin {
    /// PSD of the reference, Pa^2/Hz.
    pub reference_psd: f64,
    /// PSD of each other channel, Pa^2/Hz.
    pub psd: Vec<f64>,
    /// Cross-spectral density reference -> channel, Pa^2/Hz.
    pub csd: Vec<Complex<f64>>,
}

impl CrossAtBin {
    /// Magnitude-squared coherence of channel `i` with the reference.
    pub fn coherence(&self, i: usize) -> f64 {
        coherence(self.reference_psd, self.psd[i], self.csd[i])
    }

    /// Phase of channel `i` relative to the reference, degrees in (-180, 180].
    pub fn phase_deg(&self, i: usize) -> f64 {
        self.csd[i].arg().to_degrees()
    }

    /// Complex amplitude of channel `i` locked to the reference: Pxy / sqrt(Pxx).
    pub fn locked_amplitude(&self, i: usize) -> Complex<f64> {
        locked_amplitude(self.reference_psd, self.csd[i])
    }
}

/// |Pxy|^2 / (Pxx Pyy); 0 where either density is 0.
fn coherence(pxx: f64, pyy: f64, pxy: Complex<f64>) -> f64 {
    let d = pxx * pyy;
    if d > 0.0 {
        pxy.norm_sqr() / d
    } else {
        0.0
    }
}

/// Pxy / sqrt(Pxx); 0 where Pxx is 0.
fn locked_amplitude(pxx: f64, pxy: Complex<f64>) -> Complex<f64> {
    let r = pxx.sqrt();
    if r > 0.0 {
        pxy / r
    } else {
        Complex::new(0.0, 0.0)
    }
}

/// Welch cross-spectra of `channels` against `channels[reference]` (the result's `psd` and
/// `csd` list the other channels in order), stopping when `cancel` is set: one
/// [`CrossAccumulator`] fed every channel at once.
///
/// # Errors
/// [`WelchError`] for a bad segment length or overlap, too few samples, a non-finite sample,
/// or [`WelchError::Stopped`].
pub fn cross_spectra(
    channels: &[ChannelView<'_>],
    reference: usize,
    fs: f64,
    config: WelchConfig,
    cancel: &Cancel,
) -> Result<CrossSpectra, WelchError> {
    CrossAccumulator::new(channels.len(), reference, fs, config)?.with_cancel(cancel.clone()).finish(channels)
}

/// Symmetry of a pair of microphones on opposite sides of the jet at one tone.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PairSymmetry {
    /// True when the two are in phase (|phase| < 90 deg): symmetric; else antisymmetric.
    pub symmetric: bool,
    /// Confidence in [0, 1]: coherence times |cos(phase)| (1 for perfectly coherent signals
    /// exactly in or out of phase).
    pub confidence: f64,
}

/// Classifies a pair from its relative phase (degrees) and coherence.
pub fn pair_symmetry(phase_deg: f64, coherence: f64) -> PairSymmetry {
    let c = phase_deg.to_radians().cos();
    PairSymmetry { symmetric: c >= 0.0, confidence: (coherence.clamp(0.0, 1.0) * c.abs()).clamp(0.0, 1.0) }
}

/// The pattern an azimuthal decomposition shows.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pattern {
    /// m = 0 dominates.
    Axisymmetric,
    /// +m and -m of the dominant order carry comparable energy: a standing (flapping) pattern.
    Standing,
    /// One sign dominates: spinning (helical) towards increasing azimuth (m > 0) ...
    SpinningIncreasing,
    /// ... or towards decreasing azimuth (m < 0).
    SpinningDecreasing,
    /// The dominant order is the ring's Nyquist order M/2 (M even), where +m and -m alias
    /// (e^{i M/2 theta_k} = (-1)^k = e^{-i M/2 theta_k}): standing and either spin look
    /// alike, so the sense is not determined.
    SenseUndetermined,
}

/// Azimuthal decomposition at one tone.
#[derive(Debug, Clone, PartialEq)]
pub struct ModeDecomposition {
    /// (m, energy |c_m|^2 in Pa^2 per bin density units) for each order.
    pub energy: Vec<(i32, f64)>,
    /// Dominant |m| (energy of +m and -m together).
    pub dominant_order: u32,
    /// Share of the total energy in +-dominant_order.
    pub dominant_share: f64,
    /// Spin ratio (E(+m) - E(-m)) / (E(+m) + E(-m)) of the dominant order: +1 spinning towards
    /// increasing azimuth, -1 decreasing, 0 standing (and 0 at the Nyquist order M/2 of an
    /// even ring, where the sense is not determined).
    pub spin_ratio: f64,
    /// The pattern.
    pub pattern: Pattern,
}

/// Spin ratio beyond which a pattern counts as spinning (|ratio| of 0.6: three quarters or
/// more of the order's energy in one sign; common practice for ring arrays).
pub const SPIN_THRESHOLD: f64 = 0.6;

/// Decomposes amplitudes `a` (locked to the reference) at azimuths `theta_rad` into orders
/// `-(M-1)/2 ..= M/2`.
pub fn azimuthal_modes(a: &[Complex<f64>], theta_rad: &[f64]) -> ModeDecomposition {
    let m_count = a.len() as i32;
    let lo = -((m_count - 1) / 2);
    let hi = m_count / 2;
    let energy: Vec<(i32, f64)> = (lo..=hi)
        .map(|m| {
            let c: Complex<f64> = a
                .iter()
                .zip(theta_rad)
                .map(|(aj, th)| aj * Complex::from_polar(1.0, f64::from(m) * th))
                .sum::<Complex<f64>>()
                / f64::from(m_count);
            (m, c.norm_sqr())
        })
        .collect();
    let e = |m: i32| energy.iter().find(|(k, _)| *k == m).map_or(0.0, |x| x.1);
    let total: f64 = energy.iter().map(|x| x.1).sum();
    let best = (0..=hi as u32)
        .max_by(|&x, &y| {
            let ex = e(x as i32) + if x > 0 { e(-(x as i32)) } else { 0.0 };
            let ey = e(y as i32) + if y > 0 { e(-(y as i32)) } else { 0.0 };
            ex.total_cmp(&ey)
        })
        .unwrap_or(0);
    let (ep, en) = (e(best as i32), if best > 0 { e(-(best as i32)) } else { 0.0 });
    let dominant_share = if total > 0.0 { (ep + en) / total } else { 0.0 };
    let spin_ratio =
        if best > 0 && ep + en > 0.0 && -(best as i32) >= lo { (ep - en) / (ep + en) } else { 0.0 };
    let pattern = match best {
        0 => Pattern::Axisymmetric,
        // With an even ring the highest order M/2 has no separate -m (it aliases): neither
        // spin nor standing can be told.
        _ if -(best as i32) < lo => Pattern::SenseUndetermined,
        _ if spin_ratio >= SPIN_THRESHOLD => Pattern::SpinningIncreasing,
        _ if spin_ratio <= -SPIN_THRESHOLD => Pattern::SpinningDecreasing,
        _ => Pattern::Standing,
    };
    ModeDecomposition { energy, dominant_order: best, dominant_share, spin_ratio, pattern }
}

/// Degrees to radians of each azimuth.
pub fn radians(deg: &[f64]) -> Vec<f64> {
    deg.iter().map(|d| d * PI / 180.0).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::welch::Detrend;
    use crate::dsp::window::Window;

    fn cfg(n: usize) -> WelchConfig {
        WelchConfig { window: Window::Hann, nperseg: n, noverlap: n / 2, detrend: Detrend::Mean }
    }

    /// A ring of `m` microphones with pattern `f(theta, t)` plus seeded noise of `sigma`.
    fn ring(
        m: usize,
        n: usize,
        fs: f64,
        sigma: f64,
        f: impl Fn(f64, f64) -> f64,
    ) -> (Vec<Vec<f64>>, Vec<f64>) {
        let th: Vec<f64> = (0..m).map(|j| 2.0 * PI * j as f64 / m as f64).collect();
        let x = th
            .iter()
            .enumerate()
            .map(|(j, &t)| {
                let noise = crate::dsp::welch::tests::noise(n, 100 + j as u64, sigma);
                (0..n).map(|i| f(t, i as f64 / fs) + noise[i]).collect()
            })
            .collect();
        (x, th)
    }

    fn decompose(x: &[Vec<f64>], th: &[f64], fs: f64, f0: f64) -> ModeDecomposition {
        let views: Vec<ChannelView<'_>> = x.iter().map(|c| ChannelView::of_pascals(c)).collect();
        let cs = cross_spectra(&views, 0, fs, cfg(4096), &Cancel::default()).unwrap();
        let k = (f0 / cs.resolution_hz()).round() as usize;
        let mut a = vec![Complex::new(cs.reference_psd[k].sqrt(), 0.0)];
        a.extend((0..cs.csd.len()).map(|i| cs.locked_amplitude(i, k)));
        azimuthal_modes(&a, th)
    }

    #[test]
    fn a_ring_of_eight_tells_spinning_standing_and_axisymmetric_patterns() {
        // Definitions above; 10 dB tone-to-noise: tone mean square 0.5 (amplitude 1), noise
        // variance 0.05 (synthetic, seeded).
        let (fs, n, f0, sigma) = (51_200.0, 1 << 16, 2000.0, 0.05_f64.sqrt());
        let w = 2.0 * PI * f0;
        let (x, th) = ring(8, n, fs, sigma, |t, s| (w * s - t).cos());
        let d = decompose(&x, &th, fs, f0);
        assert_eq!((d.dominant_order, d.pattern), (1, Pattern::SpinningIncreasing), "{d:?}");
        let (x, th) = ring(8, n, fs, sigma, |t, s| (w * s + t).cos());
        let d = decompose(&x, &th, fs, f0);
        assert_eq!((d.dominant_order, d.pattern), (1, Pattern::SpinningDecreasing), "{d:?}");
        let (x, th) = ring(8, n, fs, sigma, |t, s| t.cos() * (w * s).cos());
        let d = decompose(&x, &th, fs, f0);
        assert_eq!((d.dominant_order, d.pattern), (1, Pattern::Standing), "{d:?}");
        let (x, th) = ring(8, n, fs, sigma, |_, s| (w * s).cos());
        let d = decompose(&x, &th, fs, f0);
        assert_eq!((d.dominant_order, d.pattern), (0, Pattern::Axisymmetric), "{d:?}");
        assert!(d.dominant_share > 0.9);
    }

    #[test]
    fn opposite_microphones_tell_symmetric_from_antisymmetric() {
        let (fs, n, f0) = (51_200.0, 1 << 16, 3000.0);
        let w = 2.0 * PI * f0;
        for (sign, symmetric) in [(1.0, true), (-1.0, false)] {
            let a: Vec<f64> = crate::dsp::welch::tests::noise(n, 7, 0.3)
                .iter()
                .enumerate()
                .map(|(i, e)| (w * i as f64 / fs).sin() + e)
                .collect();
            let b: Vec<f64> = crate::dsp::welch::tests::noise(n, 8, 0.3)
                .iter()
                .enumerate()
                .map(|(i, e)| sign * (w * i as f64 / fs).sin() + e)
                .collect();
            let v = [ChannelView::of_pascals(&a), ChannelView::of_pascals(&b)];
            let cs = cross_spectra(&v, 0, fs, cfg(4096), &Cancel::default()).unwrap();
            let k = (f0 / cs.resolution_hz()).round() as usize;
            let s = pair_symmetry(cs.phase_deg(0, k), cs.coherence(0, k));
            assert_eq!(s.symmetric, symmetric);
            assert!(s.confidence > 0.9, "{s:?}");
        }
    }

    /// Amplitudes of p_k(t) = cos(m theta_k - s w t) locked to p_0 on a ring of `count`
    /// microphones at theta_k = 2 pi k / count (closed form: p_k = Re(A_k e^{i w t}) with
    /// A_k = e^{-i s m theta_k}, and A_0 = 1 is real, so no reference rotation is needed).
    fn spinning_ring(count: usize, m: i32, sense: f64) -> (Vec<Complex<f64>>, Vec<f64>) {
        let th: Vec<f64> = (0..count).map(|k| 2.0 * PI * k as f64 / count as f64).collect();
        let a = th.iter().map(|&t| Complex::from_polar(1.0, -sense * f64::from(m) * t)).collect();
        (a, th)
    }

    #[test]
    fn the_sense_at_the_nyquist_order_of_an_even_ring_is_not_determined() {
        // Six microphones: orders -2 ..= 3. At m = M/2 = 3, e^{i 3 theta_k} = (-1)^k = e^{-i 3
        // theta_k} (closed form: 3 x 2 pi k / 6 = pi k), so +3 and -3 alias and a spin cannot be
        // told from a standing pattern (spatial sampling theorem on the ring).
        for sense in [1.0, -1.0] {
            let (a, th) = spinning_ring(6, 3, sense);
            let d = azimuthal_modes(&a, &th);
            assert_eq!(d.dominant_order, 3, "{d:?}");
            // All the energy is in order 3: |c_3|^2 = 1 (closed form: the sum of six unit terms
            // over 6).
            assert!((d.dominant_share - 1.0).abs() < 1e-12, "{d:?}");
            assert_eq!(d.pattern, Pattern::SenseUndetermined, "sense {sense}: {d:?}");
        }
        // A standing cos(3 theta) cos(w t) pattern at that order is no better told.
        let th: Vec<f64> = (0..6).map(|k| 2.0 * PI * f64::from(k) / 6.0).collect();
        let a: Vec<Complex<f64>> = th.iter().map(|&t| Complex::new((3.0 * t).cos(), 0.0)).collect();
        assert_eq!(azimuthal_modes(&a, &th).pattern, Pattern::SenseUndetermined);
        // Below the Nyquist order the six microphones still tell the sense: m = 1 and 2
        // spinning either way (p_k = cos(m theta_k - s w t), closed form above).
        for m in [1, 2] {
            for (sense, want) in [(1.0, Pattern::SpinningIncreasing), (-1.0, Pattern::SpinningDecreasing)] {
                let (a, th) = spinning_ring(6, m, sense);
                let d = azimuthal_modes(&a, &th);
                assert_eq!((d.dominant_order, d.pattern), (m as u32, want), "m {m} sense {sense}: {d:?}");
            }
        }
        // An odd ring has no Nyquist order: on 7 microphones m = 3 spins are told apart.
        let (a, th) = spinning_ring(7, 3, -1.0);
        assert_eq!(azimuthal_modes(&a, &th).pattern, Pattern::SpinningDecreasing);
    }
}
