//! Synthetic signals for the end-to-end tests and the benchmarks (invented data): sinusoids,
//! microphone rings, f32 frames, and seeded noise generators, so every run sends the same bytes.

use std::f64::consts::PI;

/// `n` samples at `fs` Hz of a sinusoid of frequency `f` Hz and amplitude `amplitude`.
pub fn sine(n: usize, fs: f64, f: f64, amplitude: f64) -> Vec<f64> {
    (0..n).map(|i| amplitude * (2.0 * PI * f * i as f64 / fs).sin()).collect()
}

/// `values` as little-endian f32 bytes (raw f32 frames when the values are interleaved).
pub fn f32_le(values: &[f64]) -> Vec<u8> {
    values.iter().flat_map(|v| (*v as f32).to_le_bytes()).collect()
}

/// `m` channels of `n` samples at `fs` Hz of a pressure pattern `p(theta_j, t)` on a ring of
/// microphones, microphone j at azimuth theta_j = 2 pi j / m.
pub fn ring_channels(m: usize, n: usize, fs: f64, p: impl Fn(f64, f64) -> f64) -> Vec<Vec<f64>> {
    (0..m)
        .map(|j| {
            let th = 2.0 * PI * j as f64 / m as f64;
            (0..n).map(|i| p(th, i as f64 / fs)).collect()
        })
        .collect()
}

/// Channels of equal length interleaved frame by frame.
pub fn interleave(channels: &[Vec<f64>]) -> Vec<f64> {
    let n = channels.first().map_or(0, Vec::len);
    (0..n).flat_map(|i| channels.iter().map(move |c| c[i])).collect()
}

/// Benchmark data (invented): `frames` interleaved f32 frames of `m` microphones equally
/// spaced on a ring, a tone of amplitude 10 at 5 kHz spinning as m = 1 (cos(omega t - theta)),
/// plus a deterministic pseudo-random floor (uniform in [-0.5, 0.5], [`Lcg`] seeded with `seed`).
pub fn ring_f32(m: usize, frames: usize, fs: f64, seed: u64) -> Vec<u8> {
    let mut rng = Lcg::new(seed);
    let mut bytes = Vec::with_capacity(m * frames * 4);
    for k in 0..frames {
        let t = k as f64 / fs;
        for j in 0..m {
            let r = rng.centered();
            let th = 2.0 * PI * j as f64 / m as f64;
            let v = 10.0 * (2.0 * PI * 5000.0 * t - th).cos() + r;
            bytes.extend_from_slice(&(v as f32).to_le_bytes());
        }
    }
    bytes
}

/// 2^53, the scale of a uniform deviate made from the top 53 bits of a 64-bit state.
const TWO_53: f64 = (1u64 << 53) as f64;

/// A 64-bit linear congruential generator (Knuth's MMIX constants): a seeded, portable noise
/// source for synthetic recordings.
#[derive(Debug, Clone)]
pub struct Lcg(u64);

impl Lcg {
    /// A generator whose first step starts from `seed`.
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    /// The next state.
    pub fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
        self.0
    }

    /// Uniform in [-0.5, 0.5).
    pub fn centered(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 / TWO_53) - 0.5
    }

    /// Uniform in (0, 1): never 0, so its logarithm is finite.
    pub fn open_unit(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / TWO_53
    }

    /// A Gaussian deviate of standard deviation `sigma` (Box-Muller on two [`Lcg::open_unit`]
    /// draws).
    pub fn normal(&mut self, sigma: f64) -> f64 {
        let (u1, u2) = (self.open_unit(), self.open_unit());
        sigma * (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
    }
}

/// Marsaglia's xorshift64 generator (shifts 13, 7, 17): a seeded noise source for synthetic
/// recordings. The seed must not be 0.
#[derive(Debug, Clone)]
pub struct XorShift(u64);

impl XorShift {
    /// A generator whose first step starts from `seed` (not 0).
    pub fn new(seed: u64) -> Self {
        Self(seed)
    }

    /// The next state.
    pub fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        self.0
    }

    /// Uniform in [-0.5, 0.5).
    pub fn centered(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / TWO_53 - 0.5
    }
}
