//! Tones in a Welch PSD: broadband floor, peaks standing above it, sub-bin frequency, level,
//! bandwidth, harmonic families and sum/difference tones.
//!
//! - Floor: running median of ln(PSD) over `floor_window_bins` bins centred on each bin
//!   (narrower at the ends). A median ignores the few bins a tone occupies, so tones on a
//!   sloping floor (a screech tone on a shock-noise hump) are judged against the local level.
//! - Peaks: local maxima at least `threshold_db` above the floor; candidates are taken by
//!   decreasing tone-to-floor ratio (ties: lower frequency first) and kept when at least
//!   `min_separation_hz` from every kept tone.
//! - Frequency: Hann windows use Grandke's (1983) interpolation delta = (2 alpha - 1) /
//!   (alpha + 1), alpha = `sqrt(P[k+-1] / P[k])`, which is exact for a Hann-windowed sinusoid
//!   (apart from its negative-frequency image); other windows use a parabola through ln P at
//!   the three top bins, whose bias is up to a few hundredths of a bin (largest for
//!   Hamming, about 0.05 bin between bins).
//! - Level: the PSD minus the floor integrated over the window's main lobe (+-L bins) as SPL;
//!   for a sinusoid of amplitude A this is A^2/2 whatever the window (to the lobe's share of
//!   the window energy).

use super::limits::{FLOOR_BINS, HARM_ORDER, HARM_TOL, MAX_TONES, SEPARATION, THRESHOLD};
use super::welch::Psd;
use super::window::Window;
use super::{spl_db, CAUTION_LEVEL_DB};
use crate::physics::Setting;

/// Tone-search settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ToneConfig {
    /// Minimum tone-to-floor ratio, dB.
    pub threshold_db: f64,
    /// Minimum distance between tones, Hz.
    pub min_separation_hz: f64,
    /// Running-median length, bins (odd).
    pub floor_window_bins: usize,
    /// Most tones returned.
    pub max_tones: usize,
    /// Harmonic-matching tolerance in bins.
    pub harmonic_tolerance_bins: f64,
    /// Highest harmonic order searched.
    pub max_harmonic_order: u32,
}

impl ToneConfig {
    /// Minimum tone-to-floor ratio: 6 dB, a peak at four times the local floor density, clear
    /// of the spread of a Welch PSD's floor after a few tens of averages (common practice).
    pub const THRESHOLD_DB: Setting =
        Setting::new("threshold_db", THRESHOLD, 6.0, "a peak 4x the local floor density (common practice)");
    /// Minimum distance between tones: 0 means the window's main-lobe half-width, the least
    /// distance at which two peaks are separate tones.
    pub const MIN_SEPARATION_HZ: Setting =
        Setting::new("min_separation_hz", SEPARATION, 0.0, "0: the window's main-lobe half-width");
    /// Running-median length of the floor: 65 bins, wide enough that a tone's few bins do not
    /// move the median, narrow enough to follow a shock-noise hump.
    pub const FLOOR_WINDOW_BINS: Setting = Setting::new(
        "floor_window_bins",
        FLOOR_BINS,
        65.0,
        "wide enough to ignore a tone's bins, narrow enough to follow a broadband hump",
    );
    /// Most tones reported per channel.
    pub const MAX_TONES: Setting =
        Setting::new("max_tones", MAX_TONES, 50.0, "screech, its harmonics and other tones of a rig");
    /// Harmonic-matching tolerance: 2 bins, the Welch peak's frequency error plus a margin.
    pub const HARMONIC_TOLERANCE_BINS: Setting = Setting::new(
        "harmonic_tolerance_bins",
        HARM_TOL,
        2.0,
        "the sub-bin frequency error of a peak with a margin",
    );
    /// Highest harmonic order searched.
    pub const MAX_HARMONIC_ORDER: Setting =
        Setting::new("max_harmonic_order", HARM_ORDER, 10.0, "screech harmonics seen above the floor");
}

impl Default for ToneConfig {
    fn default() -> Self {
        Self {
            threshold_db: Self::THRESHOLD_DB.default,
            min_separation_hz: Self::MIN_SEPARATION_HZ.default,
            floor_window_bins: Self::FLOOR_WINDOW_BINS.default as usize,
            max_tones: Self::MAX_TONES.default as usize,
            harmonic_tolerance_bins: Self::HARMONIC_TOLERANCE_BINS.default,
            max_harmonic_order: Self::MAX_HARMONIC_ORDER.default as u32,
        }
    }
}

/// A tone found in the PSD.
#[derive(Debug, Clone, PartialEq)]
pub struct Tone {
    /// Refined frequency, Hz.
    pub frequency_hz: f64,
    /// Index of the peak bin.
    pub peak_bin: usize,
    /// Frequency of the peak bin, Hz.
    pub peak_bin_hz: f64,
    /// Density at the peak bin, Pa^2/Hz.
    pub peak_density: f64,
    /// Floor density at the peak bin, Pa^2/Hz.
    pub floor_density: f64,
    /// Peak over floor, dB.
    pub tone_to_floor_db: f64,
    /// Tone mean square above the floor, Pa^2.
    pub mean_square_pa2: f64,
    /// Tone level, dB re 20 uPa.
    pub level_db: f64,
    /// -3 dB bandwidth, Hz.
    pub bandwidth_3db_hz: f64,
    /// Harmonic family and order, when part of one.
    pub family: Option<(usize, u32)>,
}

/// Tones with the same fundamental.
#[derive(Debug, Clone, PartialEq)]
pub struct Family {
    /// Least-squares fundamental sum(k f_k) / sum(k^2), Hz.
    pub fundamental_hz: f64,
    /// Tone indices and their orders.
    pub members: Vec<(usize, u32)>,
    /// Total level of the members, dB.
    pub level_db: f64,
}

/// A tone at the sum or difference of two families' fundamentals.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Combination {
    /// Tone index.
    pub tone: usize,
    /// Families (a, b), fundamental of a below b's.
    pub families: (usize, usize),
    /// True for fa + fb, false for fb - fa.
    pub sum: bool,
    /// Expected frequency, Hz.
    pub expected_hz: f64,
}

/// Everything found.
#[derive(Debug, Clone, PartialEq)]
pub struct ToneSet {
    /// Floor density per bin, Pa^2/Hz.
    pub floor: Vec<f64>,
    /// Tones, by increasing frequency.
    pub tones: Vec<Tone>,
    /// Harmonic families.
    pub families: Vec<Family>,
    /// Sum and difference tones.
    pub combinations: Vec<Combination>,
    /// Name of the frequency estimator used.
    pub estimator: &'static str,
    /// Pairs of tones (indices into `tones`) closer than the window's main-lobe width: their
    /// lobes overlap, so each one's frequency and level are biased.
    pub unresolved: Vec<(usize, usize)>,
    /// Peaks dropped for lying more than [`DYNAMIC_RANGE_DB`] below the strongest one.
    pub below_dynamic_range: usize,
    /// Tones (indices into `tones`) whose 3 dB bandwidth exceeds [`BROAD_FACTOR`] times the
    /// widest a single steady sinusoid shows with this window ([`single_tone_width_bins`]):
    /// two tones inside one main lobe merged into one peak, or a tone that wanders.
    pub broad: Vec<usize>,
}

/// A peak wider than this many times a single steady sinusoid's widest 3 dB bandwidth is
/// flagged (margin for noise under the lobe at 10 dB tone-to-floor).
pub const BROAD_FACTOR: f64 = 1.3;

/// Broad peaks are judged only this far above the floor, where the floor cannot widen them.
pub const BROAD_MIN_TONE_TO_FLOOR_DB: f64 = 10.0;

/// The widest 3 dB bandwidth, in bins, that a single steady sinusoid shows in a PSD made with
/// `window`, measured as [`ToneSet`] measures tones (linear interpolation between bins) at
/// offsets from the bin centre of 0 to 0.5 bin. The window's power response is the DTFT of its
/// 64-point periodic form.
pub fn single_tone_width_bins(window: Window) -> f64 {
    // Computed once per window kind (a few thousand sines): updates of a live stream ask for it
    // many times a second.
    static CACHE: [std::sync::OnceLock<f64>; 4] = [
        std::sync::OnceLock::new(),
        std::sync::OnceLock::new(),
        std::sync::OnceLock::new(),
        std::sync::OnceLock::new(),
    ];
    let slot = match window {
        Window::Hann => 0,
        Window::Hamming => 1,
        Window::BlackmanHarris => 2,
        Window::FlatTop => 3,
    };
    *CACHE[slot].get_or_init(|| single_tone_width_uncached(window))
}

fn single_tone_width_uncached(window: Window) -> f64 {
    let w = window.values(64);
    let n = w.len() as f64;
    let response = |delta: f64| {
        let (mut re, mut im) = (0.0, 0.0);
        for (k, v) in w.iter().enumerate() {
            let ph = 2.0 * std::f64::consts::PI * delta * k as f64 / n;
            re += v * ph.cos();
            im -= v * ph.sin();
        }
        re * re + im * im
    };
    (0..=10)
        .map(|i| {
            let off = 0.05 * f64::from(i);
            let p: Vec<f64> = (-8..=8).map(|j| response(f64::from(j) - off)).collect();
            let k = (0..p.len()).max_by(|&a, &b| p[a].total_cmp(&p[b])).unwrap_or(8);
            bandwidth(&p, k, 1.0)
        })
        .fold(0.0, f64::max)
}

/// Lines more than this many dB below the strongest peak are not reported: beyond the dynamic
/// range of any measurement chain (24-bit converters reach about 144 dB; common practice), so
/// only rounding noise of noise-free or synthetic data lies there.
pub const DYNAMIC_RANGE_DB: f64 = 160.0;

impl ToneSet {
    /// True when any tone is at or above the caution level.
    pub fn exceeds_caution(&self) -> bool {
        self.tones.iter().any(|t| t.level_db >= CAUTION_LEVEL_DB)
    }
}

/// Running median of ln(p) over `width` bins (made odd), exponentiated. Near the ends the
/// window is cut short, and for an even count the upper median is taken.
///
/// The values are ranked once (one radix sort of the whole spectrum) and the window is a bit
/// set over the ranks: a bin entering or leaving sets or clears one bit, and the median moves
/// to a neighbouring set bit (one or two word scans) as the window slides. So the cost is one
/// sort plus O(n) word operations, whatever the width.
pub fn floor_estimate(p: &[f64], width: usize) -> Vec<f64> {
    let n = p.len();
    let half = width.max(3) / 2;
    // The median of ln(p) is ln of the median of p (ln is increasing and the median is an
    // element), so the values are ranked as they are: no logarithms to take.
    let vals: Vec<f64> = p.iter().map(|v| v.max(f64::MIN_POSITIVE)).collect();
    let order = rank_order(&vals);
    let mut rank = vec![0usize; n];
    for (r, &i) in order.iter().enumerate() {
        rank[i] = r;
    }
    let mut bits = vec![0u64; n.div_ceil(64)];
    // The window [lo, hi) and the rank m of its median, with `below` set bits under m.
    let (mut lo, mut hi, mut m, mut below) = (0usize, 0usize, 0usize, 0usize);
    let mut out = Vec::with_capacity(n);
    for k in 0..n {
        let (want_lo, want_hi) = (k.saturating_sub(half), (k + half + 1).min(n));
        while hi < want_hi {
            let r = rank[hi];
            bits[r >> 6] |= 1 << (r & 63);
            below += usize::from(r < m);
            hi += 1;
        }
        while lo < want_lo {
            let r = rank[lo];
            bits[r >> 6] &= !(1 << (r & 63));
            below -= usize::from(r < m);
            lo += 1;
        }
        // The median is the set bit with exactly `(hi - lo) / 2` set bits below it.
        let target = (hi - lo) / 2;
        loop {
            if below > target {
                m = previous_set(&bits, m);
                below -= 1;
                continue;
            }
            let here = bits[m >> 6] >> (m & 63) & 1 == 1;
            if below == target && here {
                break;
            }
            m = next_set(&bits, m);
            below += usize::from(here);
        }
        out.push(vals[order[m]]);
    }
    out
}

/// Indices of `vals` (positive, not NaN) in increasing order of value.
///
/// Positive floats order as their bit patterns. The top [`RANK_DIGITS`] x [`RANK_DIGIT_BITS`]
/// bits (sign, exponent and the leading mantissa bits: a relative resolution of about 4e-6)
/// are ordered by a least-significant-digit radix sort, which has no data-dependent branches
/// (a comparison sort of noise mispredicts about every other comparison); runs equal in those
/// bits are then sorted by the whole value.
fn rank_order(vals: &[f64]) -> Vec<usize> {
    let n = vals.len();
    let keys: Vec<u64> = vals.iter().map(|v| v.to_bits()).collect();
    let Ok(count) = u32::try_from(n) else {
        // Beyond any spectrum the limits allow: a plain comparison sort.
        let mut order: Vec<usize> = (0..n).collect();
        order.sort_unstable_by_key(|&i| keys[i]);
        return order;
    };
    let low = 64 - RANK_DIGITS * RANK_DIGIT_BITS;
    let mask = (1u64 << RANK_DIGIT_BITS) - 1;
    let digit = |k: u64, p: u32| ((k >> (low + p * RANK_DIGIT_BITS)) & mask) as usize;
    let mut hist = vec![vec![0u32; 1 << RANK_DIGIT_BITS]; RANK_DIGITS as usize];
    for &k in &keys {
        for (p, h) in (0..RANK_DIGITS).zip(hist.iter_mut()) {
            h[digit(k, p)] += 1;
        }
    }
    let mut order: Vec<u32> = (0..count).collect();
    let mut next = vec![0u32; n];
    for (p, h) in (0..RANK_DIGITS).zip(hist.iter_mut()) {
        // A digit all keys share orders nothing.
        if h.contains(&count) {
            continue;
        }
        let mut start = 0;
        for c in h.iter_mut() {
            let here = *c;
            *c = start;
            start += here;
        }
        for &i in &order {
            let d = digit(keys[i as usize], p);
            next[h[d] as usize] = i;
            h[d] += 1;
        }
        std::mem::swap(&mut order, &mut next);
    }
    let mut order: Vec<usize> = order.into_iter().map(|i| i as usize).collect();
    let top = |i: usize| keys[i] >> low;
    let mut start = 0;
    for end in 1..=n {
        if end == n || top(order[end]) != top(order[start]) {
            if end - start > 1 {
                order[start..end].sort_unstable_by_key(|&i| keys[i]);
            }
            start = end;
        }
    }
    order
}

/// Radix digits of the ranking sort.
const RANK_DIGITS: u32 = 3;
/// Bits per radix digit (1024 buckets: small beside a 4097-bin spectrum).
const RANK_DIGIT_BITS: u32 = 10;

/// The first set bit above bit `r` (one exists).
fn next_set(bits: &[u64], r: usize) -> usize {
    let r = r + 1;
    let mut w = r >> 6;
    let mut word = bits[w] & (!0u64 << (r & 63));
    while word == 0 {
        w += 1;
        word = bits[w];
    }
    (w << 6) + word.trailing_zeros() as usize
}

/// The last set bit below bit `r` (one exists).
fn previous_set(bits: &[u64], r: usize) -> usize {
    let mut w = r >> 6;
    let mut word = bits[w] & ((1u64 << (r & 63)) - 1);
    while word == 0 {
        w -= 1;
        word = bits[w];
    }
    (w << 6) + 63 - word.leading_zeros() as usize
}

/// Sub-bin peak position in bins. The floor is subtracted first so broadband noise under the
/// lobe does not pull the estimate towards the bin centre.
fn refine(window: Window, p: &[f64], floor: &[f64], k: usize) -> f64 {
    if k == 0 || k + 1 >= p.len() {
        return k as f64;
    }
    let tiny = p[k] * 1e-12;
    let above = |j: usize| (p[j] - floor[j]).max(tiny);
    let (l, c, r) = (above(k - 1), above(k), above(k + 1));
    match window {
        Window::Hann => {
            let (alpha, dir) = if r >= l { ((r / c).sqrt(), 1.0) } else { ((l / c).sqrt(), -1.0) };
            let delta = ((2.0 * alpha - 1.0) / (alpha + 1.0)).clamp(0.0, 0.5);
            k as f64 + dir * delta
        }
        _ => {
            let (a, b, g) = (l.ln(), c.ln(), r.ln());
            let den = a - 2.0 * b + g;
            if den.abs() < 1e-300 {
                k as f64
            } else {
                k as f64 + (0.5 * (a - g) / den).clamp(-0.5, 0.5)
            }
        }
    }
}

fn bandwidth(p: &[f64], k: usize, df: f64) -> f64 {
    let half = p[k] / 2.0;
    let mut l = k;
    while l > 0 && p[l - 1] > half {
        l -= 1;
    }
    let left = if l == 0 { 0.0 } else { l as f64 - (p[l] - half) / (p[l] - p[l - 1]) };
    let mut r = k;
    while r + 1 < p.len() && p[r + 1] > half {
        r += 1;
    }
    let right = if r + 1 >= p.len() { r as f64 } else { r as f64 + (p[r] - half) / (p[r] - p[r + 1]) };
    (right - left) * df
}

/// Finds tones in `psd`.
pub fn find_tones(psd: &Psd, cfg: &ToneConfig) -> ToneSet {
    let p = &psd.density;
    let df = psd.resolution_hz();
    let floor = floor_estimate(p, cfg.floor_window_bins);
    let lobe = psd.config.window.main_lobe_half_width_bins();
    let ratio = 10f64.powf(cfg.threshold_db / 10.0);
    // Local maxima at or above the threshold: the three tests as flags over whole slices (no
    // branch: on noise "is this a local maximum" is a coin toss a branch predictor loses),
    // then the rare bins that pass all three.
    let n = p.len();
    let mut cand: Vec<(usize, f64)> = Vec::new();
    if n >= 3 {
        let flags: Vec<u8> = p[1..n - 1]
            .iter()
            .zip(&p[..n - 2])
            .zip(&p[2..])
            .zip(&floor[1..n - 1])
            .map(|(((c, l), r), f)| u8::from(c > l) & u8::from(c >= r) & u8::from(*c >= ratio * f))
            .collect();
        for (i, _) in flags.iter().enumerate().filter(|(_, f)| **f != 0) {
            cand.push((i + 1, p[i + 1] / floor[i + 1]));
        }
    }
    // An absolute floor relative to the strongest line: rounding noise of noise-free data
    // would otherwise stand far above its own (tiny) running-median floor.
    let strongest = cand.iter().map(|&(k, _)| p[k]).fold(0.0_f64, f64::max);
    let cut = strongest * 10f64.powf(-DYNAMIC_RANGE_DB / 10.0);
    let before = cand.len();
    cand.retain(|&(k, _)| p[k] >= cut);
    let below_dynamic_range = before - cand.len();
    cand.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    let min_sep = cfg.min_separation_hz.max(lobe as f64 * df);
    let mut kept: Vec<usize> = Vec::new();
    for (k, _) in cand {
        if kept.len() >= cfg.max_tones {
            break;
        }
        if kept.iter().all(|&j| (j as f64 - k as f64).abs() * df >= min_sep) {
            kept.push(k);
        }
    }
    kept.sort_unstable();
    let mut tones: Vec<Tone> = kept
        .iter()
        .map(|&k| {
            let lo = k.saturating_sub(lobe);
            let hi = (k + lobe).min(p.len() - 1);
            let ms: f64 = (lo..=hi).map(|j| (p[j] - floor[j]).max(0.0)).sum::<f64>() * df;
            Tone {
                frequency_hz: refine(psd.config.window, p, &floor, k) * df,
                peak_bin: k,
                peak_bin_hz: k as f64 * df,
                peak_density: p[k],
                floor_density: floor[k],
                tone_to_floor_db: 10.0 * (p[k] / floor[k]).log10(),
                mean_square_pa2: ms,
                level_db: spl_db(ms),
                bandwidth_3db_hz: bandwidth(p, k, df),
                family: None,
            }
        })
        .collect();
    let tol = cfg.harmonic_tolerance_bins * df;
    let mut families: Vec<Family> = Vec::new();
    for i in 0..tones.len() {
        if tones[i].family.is_some() {
            continue;
        }
        let f0 = tones[i].frequency_hz;
        let mut members = vec![(i, 1u32)];
        for order in 2..=cfg.max_harmonic_order {
            let target = f64::from(order) * f0;
            let best = (0..tones.len())
                .filter(|&j| j != i && tones[j].family.is_none() && !members.iter().any(|m| m.0 == j))
                .map(|j| (j, (tones[j].frequency_hz - target).abs()))
                .filter(|(_, d)| *d <= tol)
                .min_by(|a, b| a.1.total_cmp(&b.1));
            if let Some((j, _)) = best {
                members.push((j, order));
            }
        }
        if members.len() >= 2 {
            let id = families.len();
            let num: f64 = members.iter().map(|&(j, k)| f64::from(k) * tones[j].frequency_hz).sum();
            let den: f64 = members.iter().map(|&(_, k)| f64::from(k * k)).sum();
            let ms: f64 = members.iter().map(|&(j, _)| tones[j].mean_square_pa2).sum();
            for &(j, k) in &members {
                tones[j].family = Some((id, k));
            }
            families.push(Family { fundamental_hz: num / den, members, level_db: spl_db(ms) });
        }
    }
    let mut combinations = Vec::new();
    for a in 0..families.len() {
        for b in 0..families.len() {
            let (fa, fb) = (families[a].fundamental_hz, families[b].fundamental_hz);
            if a == b || fa >= fb {
                continue;
            }
            for (sum, expected) in [(true, fa + fb), (false, fb - fa)] {
                if let Some(t) = (0..tones.len())
                    .filter(|&t| tones[t].family.is_none_or(|(f, _)| f != a && f != b))
                    .find(|&t| (tones[t].frequency_hz - expected).abs() <= tol)
                {
                    combinations.push(Combination { tone: t, families: (a, b), sum, expected_hz: expected });
                }
            }
        }
    }
    let estimator = match psd.config.window {
        Window::Hann => "Grandke (1983) two-bin interpolation for the Hann window",
        _ => "parabola through ln(PSD) at the three top bins",
    };
    // Main lobes (2 x half-width bins wide) that overlap.
    let unresolved = (1..tones.len())
        .filter(|&i| tones[i].peak_bin - tones[i - 1].peak_bin < 2 * lobe)
        .map(|i| (i - 1, i))
        .collect();
    let widest = single_tone_width_bins(psd.config.window) * df;
    let broad = (0..tones.len())
        .filter(|&i| {
            tones[i].tone_to_floor_db >= BROAD_MIN_TONE_TO_FLOOR_DB
                && tones[i].bandwidth_3db_hz > BROAD_FACTOR * widest
        })
        .collect();
    ToneSet { floor, tones, families, combinations, estimator, unresolved, below_dynamic_range, broad }
}

/// The tone nearest a predicted frequency.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PredictionMatch {
    /// Predicted frequency, Hz.
    pub predicted_hz: f64,
    /// Tolerance, Hz (relative tolerance times the prediction).
    pub tolerance_hz: f64,
    /// Index of the nearest tone and its frequency in Hz; `None` when there are no tones.
    pub nearest: Option<(usize, f64)>,
}

impl PredictionMatch {
    /// Frequency of the nearest tone minus the prediction, Hz.
    pub fn difference_hz(&self) -> Option<f64> {
        self.nearest.map(|(_, f)| f - self.predicted_hz)
    }

    /// True when the nearest tone lies within the tolerance.
    pub fn matched(&self) -> bool {
        self.difference_hz().is_some_and(|d| d.abs() <= self.tolerance_hz)
    }
}

/// Matches a predicted frequency `predicted_hz` against the tones found, within a relative
/// tolerance `rel_tolerance` of the prediction (ties go to the first tone in frequency order).
pub fn match_prediction(set: &ToneSet, predicted_hz: f64, rel_tolerance: f64) -> PredictionMatch {
    let nearest = set
        .tones
        .iter()
        .enumerate()
        .min_by(|a, b| {
            (a.1.frequency_hz - predicted_hz).abs().total_cmp(&(b.1.frequency_hz - predicted_hz).abs())
        })
        .map(|(i, t)| (i, t.frequency_hz));
    PredictionMatch { predicted_hz, tolerance_hz: rel_tolerance * predicted_hz, nearest }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::welch::{tests::noise, welch, Detrend, WelchConfig};
    use std::f64::consts::PI;

    fn hann(n: usize) -> WelchConfig {
        WelchConfig { window: Window::Hann, nperseg: n, noverlap: n / 2, detrend: Detrend::Mean }
    }

    #[test]
    fn single_tone_widths_match_the_window_responses() {
        // Hann: sampled power response 1, 0.25 at +-1 bin on a bin centre (width 4/3 bin by
        // interpolation), and 0.7268 at +-0.5 bin with 0.0295 at +-1.5 bin halfway between
        // bins (width 2.05 bins): values of the Hann kernel |W(d)|^2 = (sinc(d)/(1-d^2))^2
        // (Harris 1978). The widest Hann width is halfway between bins.
        let hann = single_tone_width_bins(Window::Hann);
        let half: f64 = {
            let k = |d: f64| ((PI * d).sin() / (PI * d) / (1.0 - d * d)).powi(2);
            let (top, side) = (k(0.5), k(1.5));
            2.0 * (0.5 + (top - top / 2.0) / (top - side))
        };
        assert!((hann - half).abs() < 0.02, "{hann} vs {half}");
        // Wider windows give wider single-tone peaks (Harris 1978: 3 dB widths grow from Hann
        // to Blackman-Harris to flat-top).
        let bh = single_tone_width_bins(Window::BlackmanHarris);
        let ft = single_tone_width_bins(Window::FlatTop);
        assert!(hann < bh && bh < ft, "{hann} {bh} {ft}");
    }

    #[test]
    fn two_tones_in_one_lobe_are_flagged_and_a_single_tone_is_not() {
        // Two equal tones 2 bins apart, each halfway between bins, merge into one Hann peak:
        // it is flagged as broad (or, if found as two, as an unresolved pair). A single tone
        // at any offset is neither.
        let fs = 51_200.0;
        let n = 4096;
        let df = fs / n as f64;
        for (i, frac) in [0.0, 0.25, 0.5].iter().enumerate() {
            let sig = |fs_: &[f64]| -> Vec<f64> {
                noise(1 << 18, 40 + i as u64, 1e-3)
                    .iter()
                    .enumerate()
                    .map(|(k, v)| v + fs_.iter().map(|f| (2.0 * PI * f * k as f64 / fs).sin()).sum::<f64>())
                    .collect()
            };
            let one = find_tones(
                &welch(&sig(&[(300.0 + frac) * df]), fs, hann(n)).unwrap(),
                &ToneConfig::default(),
            );
            assert!(one.broad.is_empty() && one.unresolved.is_empty(), "offset {frac}: {:?}", one.tones);
            let two = find_tones(
                &welch(&sig(&[(300.0 + frac) * df, (302.0 + frac) * df]), fs, hann(n)).unwrap(),
                &ToneConfig::default(),
            );
            assert!(!two.broad.is_empty() || !two.unresolved.is_empty(), "offset {frac}: {:?}", two.tones);
        }
    }

    #[test]
    fn sliding_floor_equals_a_median_taken_afresh_at_every_bin() {
        // The definition: sort the (cut-short) window at each bin and take element len/2.
        let p: Vec<f64> =
            crate::dsp::welch::tests::noise(3001, 11, 1.0).iter().map(|v| v * v + 1e-3).collect();
        // Repeated values, and values that differ only in their last mantissa bits (the
        // ranking sorts those in a second pass).
        let ties: Vec<f64> = p.iter().map(|v| 1.0 + (v * 20.0).round()).collect();
        let close: Vec<f64> =
            p.iter().map(|v| f64::from_bits(1.0f64.to_bits() + (v * 1e4) as u64 % 4096)).collect();
        // Short spectra, and a window wider than the spectrum.
        let short = [&p[..1], &p[..2], &p[..70], &p[..500]];
        let cases = [3usize, 4, 65, 201]
            .into_iter()
            .flat_map(|w| [(&p[..], w), (&ties[..], w), (&close[..], w)])
            .chain([(short[0], 65), (short[1], 3), (short[2], 65), (short[3], 4097)]);
        for (p, width) in cases {
            let half = width.max(3) / 2;
            let fast = floor_estimate(p, width);
            for (k, f) in fast.iter().enumerate() {
                let mut w: Vec<f64> = p[k.saturating_sub(half)..(k + half + 1).min(p.len())].to_vec();
                w.sort_by(f64::total_cmp);
                assert_eq!(*f, w[w.len() / 2], "width {width}, bin {k}");
                // The same element as the median of the logarithms (ln is increasing).
                let mut l: Vec<f64> = w.iter().map(|v| v.ln()).collect();
                l.sort_by(f64::total_cmp);
                assert!((f.ln() - l[l.len() / 2]).abs() <= 1e-12 * l[l.len() / 2].abs().max(1.0));
            }
        }
    }

    proptest::proptest! {
        #[test]
        fn sliding_floor_is_the_fresh_median_over_any_range_of_values(
            // Decades from 1e-300 to 1e300 (every radix digit in play), with repeats.
            exps in proptest::collection::vec((-300i32..300, 0u8..4), 1..300),
            width in 3usize..80,
        ) {
            let p: Vec<f64> = exps.iter().map(|&(e, m)| (1.0 + f64::from(m) * 0.25) * 10f64.powi(e)).collect();
            let half = width / 2;
            let fast = floor_estimate(&p, width);
            for (k, f) in fast.iter().enumerate() {
                let mut w: Vec<f64> = p[k.saturating_sub(half)..(k + half + 1).min(p.len())].to_vec();
                w.sort_by(f64::total_cmp);
                proptest::prop_assert_eq!(*f, w[w.len() / 2]);
            }
        }
    }

    #[test]
    fn tone_between_bins_within_one_percent_of_a_bin_at_20_db() {
        // A tone halfway between bins (and at other offsets), 20 dB above the noise in the
        // tone's bandwidth: the frequency error stays below 1 % of a bin.
        let fs = 51_200.0;
        let n = 4096;
        let df = fs / n as f64;
        for (i, frac) in [0.0, 0.13, 0.25, 0.37, 0.5].iter().enumerate() {
            let f = (300.0 + frac) * df;
            let a = 1.0;
            // Tone-to-noise 20 dB in one ENBW: sigma^2 (ENBW/(fs/2)) = (A^2/2) / 100.
            let enbw = 1.5 * df;
            let sigma = ((a * a / 2.0) / 100.0 / (enbw / (fs / 2.0))).sqrt();
            let x: Vec<f64> = noise(1 << 20, 11 + i as u64, sigma)
                .iter()
                .enumerate()
                .map(|(k, v)| v + a * (2.0 * PI * f * k as f64 / fs).sin())
                .collect();
            let psd = welch(&x, fs, hann(n)).unwrap();
            let set = find_tones(&psd, &ToneConfig::default());
            let t = set.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)).unwrap();
            let err_bins = (t.frequency_hz - f).abs() / df;
            assert!(err_bins < 0.01, "offset {frac}: error {err_bins} bins");
            // Level within 0.2 dB of A^2/2 (closed form) despite the noise under the lobe.
            assert!((t.level_db - spl_db(a * a / 2.0)).abs() < 0.2, "{}", t.level_db);
        }
    }

    #[test]
    fn harmonics_of_a_synthetic_screech_signal_are_grouped() {
        // Fundamental 4.2 kHz with harmonics at 2f and 3f, a second tone family at 5.5 kHz
        // (a coexisting mode) and its difference tone, on noise.
        let fs = 102_400.0;
        let f0 = 4_200.0;
        let f1 = 5_500.0;
        let x: Vec<f64> = noise(1 << 19, 3, 0.5)
            .iter()
            .enumerate()
            .map(|(k, v)| {
                let t = k as f64 / fs;
                20.0 * v
                    + 400.0 * (2.0 * PI * f0 * t).sin()
                    + 120.0 * (2.0 * PI * 2.0 * f0 * t + 0.3).sin()
                    + 40.0 * (2.0 * PI * 3.0 * f0 * t + 1.1).sin()
                    + 160.0 * (2.0 * PI * f1 * t).sin()
                    + 60.0 * (2.0 * PI * 2.0 * f1 * t).sin()
                    + 20.0 * (2.0 * PI * (f1 - f0) * t).sin()
            })
            .collect();
        let psd = welch(&x, fs, hann(8192)).unwrap();
        let set = find_tones(&psd, &ToneConfig::default());
        assert_eq!(set.families.len(), 2, "{:?}", set.families);
        let fam = &set.families[0];
        assert!((fam.fundamental_hz - f0).abs() < 0.01 * psd.resolution_hz());
        let orders: Vec<u32> = fam.members.iter().map(|m| m.1).collect();
        assert_eq!(orders, vec![1, 2, 3]);
        assert!((set.families[1].fundamental_hz - f1).abs() < 0.01 * psd.resolution_hz());
        assert!(set
            .combinations
            .iter()
            .any(|c| !c.sum && (set.tones[c.tone].frequency_hz - (f1 - f0)).abs() < 1.0));
        // Level of the fundamental: 400^2/2 Pa^2 -> 10 log10(80000 / 4e-10) = 143.01 dB
        // (closed form), which crosses the caution level.
        let t0 = &set.tones[fam.members[0].0];
        assert!((t0.level_db - 143.010_299_957).abs() < 0.05, "{}", t0.level_db);
        assert!(set.exceeds_caution());
    }

    #[test]
    fn tone_on_a_sloping_floor_is_found_against_the_local_level() {
        // A broad hump (noise shaped by a smooth gain) 25 dB high with a weak tone on its
        // flank: the running median follows the hump, so the tone is found and no hump bin is
        // reported as a tone.
        let fs = 51_200.0;
        let n = 4096;
        let base = noise(1 << 19, 5, 1.0);
        let mut x = vec![0.0; base.len()];
        // First-order resonance (a two-pole filter) centred near 6 kHz makes the hump.
        let (r, th) = (0.97, 2.0 * PI * 6000.0 / fs);
        let (a1, a2) = (2.0 * r * th.cos(), -r * r);
        for k in 0..x.len() {
            let y1 = if k >= 1 { x[k - 1] } else { 0.0 };
            let y2 = if k >= 2 { x[k - 2] } else { 0.0 };
            x[k] = base[k] + a1 * y1 + a2 * y2;
        }
        let ft = 7_300.0;
        for (k, v) in x.iter_mut().enumerate() {
            *v += 3.0 * (2.0 * PI * ft * k as f64 / fs).sin();
        }
        let psd = welch(&x, fs, hann(n)).unwrap();
        let set = find_tones(&psd, &ToneConfig { threshold_db: 10.0, ..ToneConfig::default() });
        assert_eq!(set.tones.len(), 1, "{:?}", set.tones.iter().map(|t| t.frequency_hz).collect::<Vec<_>>());
        assert!((set.tones[0].frequency_hz - ft).abs() < 0.05 * psd.resolution_hz());
    }
}
