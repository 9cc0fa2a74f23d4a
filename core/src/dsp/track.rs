//! Live tone tracking: a sliding analysis window per channel, updated every `update` frames,
//! tones matched to tracks with stable ids across updates, and events when a tone appears,
//! vanishes, or the strongest tone jumps to another frequency (a stage jump).
//!
//! - Each update is the Welch PSD and tone search ([`super::tones::find_tones`]) of the
//!   segments wholly inside the last `window` frames of each channel; segments lie on a fixed
//!   grid of stream time and each is transformed once.
//! - A tone continues a track when it lies within `max(2 bins, jump_fraction / 2 x f)` of the
//!   track's last frequency (strongest tones matched first); otherwise it opens a track
//!   (`Appeared`). A track missed by [`MISSES_TO_VANISH`] updates in a row ends (`Vanished`).
//! - When the frequency of a channel's strongest tone changes by more than `jump_fraction`
//!   between updates (on another track or on the same one: the track tolerance can absorb a
//!   jump at coarse resolution), a `Jumped` event is emitted with the time the window's centre
//!   passed (the strongest line changes when the new tone fills half the window).
//!
//! - With a reference channel, each update also holds the reference channel's strongest tone
//!   and the window's Welch cross-spectral densities of every channel against it at that
//!   tone's peak bin (scaled as [`super::cross::cross_spectra`]): phase, coherence and
//!   azimuthal mode at that tone, live. Only that bin is summed: it is all an update reports.
//!
//! Memory per channel is |X|^2 of the segments of one window (and their transforms with a
//! reference), less than one segment of samples and the live tracks: a stream of any length
//! holds no more.

use super::cross::CrossAtBin;
use super::samples::{first_non_finite, sum, SampleMoments};
use super::tones::{find_tones, Tone, ToneConfig};
use super::welch::{plan, Detrend, Psd, WelchConfig, WelchError};
use super::window::WindowSums;
use rayon::prelude::*;
use realfft::num_complex::Complex;
use realfft::RealToComplex;
use std::collections::VecDeque;
use std::sync::Arc;

/// Relative frequency change between updates reported as a stage jump.
pub const JUMP_FRACTION: crate::physics::Setting = crate::physics::Setting::new(
    "jump_fraction",
    crate::physics::Bounds::open_closed(0.0, 1.0, ""),
    0.05,
    "a stage jump is a few per cent or more",
);

/// Consecutive updates a track may be missed before it ends.
pub const MISSES_TO_VANISH: u32 = 2;

/// Tracking settings.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrackerConfig {
    /// Sample rate, Hz.
    pub fs: f64,
    /// Welch settings of each update.
    pub welch: WelchConfig,
    /// Frames analysed per update (at least one segment).
    pub window: usize,
    /// Frames between updates.
    pub update: usize,
    /// Tone search.
    pub tones: ToneConfig,
    /// Relative frequency change that counts as a jump.
    pub jump_fraction: f64,
}

/// A live track.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Track {
    /// Stable id (unique over the stream, all channels).
    pub id: u64,
    /// Last frequency, Hz.
    pub frequency_hz: f64,
    /// Last level, dB re 20 uPa.
    pub level_db: f64,
    missed: u32,
}

/// What happened.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum EventKind {
    /// A new track.
    Appeared,
    /// A track ended.
    Vanished,
    /// The strongest tone moved from track `from_id` at `from_hz`.
    Jumped {
        /// Previous strongest track.
        from_id: u64,
        /// Its last frequency, Hz.
        from_hz: f64,
    },
}

/// One event.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Event {
    /// Kind.
    pub kind: EventKind,
    /// Channel.
    pub channel: usize,
    /// Track id (the new strongest track for a jump).
    pub id: u64,
    /// Frequency, Hz.
    pub frequency_hz: f64,
    /// Stream time of the event, s from the first frame.
    pub time_s: f64,
}

/// One update.
#[derive(Debug, Clone, PartialEq)]
pub struct Update {
    /// Stream time of the window's end, s.
    pub time_s: f64,
    /// Per channel: the live tracks (strongest first) and the strongest track's id.
    pub channels: Vec<(Vec<Track>, Option<u64>)>,
    /// Events since the previous update.
    pub events: Vec<Event>,
    /// With a reference channel that has a tone in this window: its strongest tone and the
    /// window's cross-spectral densities of every other channel against it at the tone's peak
    /// bin.
    pub cross: Option<(CrossAtBin, Tone)>,
    /// The reference channel of `cross`.
    pub reference: Option<usize>,
}

#[derive(Debug, Clone, Default)]
struct ChannelState {
    /// Samples from the start of the next segment on (fewer than one segment): a ring, so a
    /// segment taken moves no samples.
    pending: VecDeque<f64>,
    tracks: Vec<Track>,
    /// The strongest tone of the last update (none when it found no tone): its track id and
    /// frequency, Hz.
    strongest: Option<(u64, f64)>,
}

/// One segment: its first frame, |X|^2 of every channel's one-sided FFT X (of the windowed,
/// detrended segment), formed once however many updates the segment falls in, and, with a
/// reference channel, the transforms themselves (the cross terms are formed at one bin only,
/// the reference's strongest tone, when an update needs them).
struct Segment {
    start: u64,
    power: Vec<Vec<f64>>,
    spectra: Vec<Vec<Complex<f64>>>,
}

/// A tracker fed frames as they arrive.
///
/// Segments lie on a fixed grid of stream time (segment s starts at frame s x step), and each
/// is transformed once, when its last frame arrives; an update averages the segments wholly
/// inside its window (the same Welch estimate as [`super::welch::welch`] over those segments). So the work
/// per second of stream does not grow with the update rate or the window length.
pub struct Tracker {
    cfg: TrackerConfig,
    reference: Option<usize>,
    channels: Vec<ChannelState>,
    frames: u64,
    since: usize,
    next_id: u64,
    window: Vec<f64>,
    sums: WindowSums,
    fft: Arc<dyn RealToComplex<f64>>,
    step: usize,
    /// Frame at which the next segment starts.
    next_start: u64,
    /// Segments that can still fall inside a window, oldest first.
    segments: VecDeque<Segment>,
}

impl std::fmt::Debug for Tracker {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Tracker")
            .field("cfg", &self.cfg)
            .field("frames", &self.frames)
            .finish_non_exhaustive()
    }
}

impl Tracker {
    /// A tracker of `channels` channels.
    ///
    /// # Errors
    /// [`WelchError::TooShort`] when the window is shorter than one segment;
    /// [`WelchError::SegmentLength`] or [`WelchError::Overlap`] for bad Welch settings.
    pub fn new(cfg: TrackerConfig, channels: usize) -> Result<Self, WelchError> {
        cfg.welch.check()?;
        let n = cfg.welch.nperseg;
        if cfg.window < n {
            return Err(WelchError::TooShort { nperseg: n, samples: cfg.window });
        }
        let window = cfg.welch.window.values(n);
        let sums = WindowSums::of(&window);
        Ok(Self {
            cfg,
            reference: None,
            channels: vec![ChannelState::default(); channels],
            frames: 0,
            since: 0,
            next_id: 1,
            window,
            sums,
            fft: plan(n),
            step: n - cfg.welch.noverlap,
            next_start: 0,
            segments: VecDeque::new(),
        })
    }

    /// Adds cross-spectra against channel `reference` to every update (two channels or more).
    pub fn with_reference(mut self, reference: usize) -> Self {
        self.reference = Some(reference);
        self
    }

    /// Segments a window holds at most.
    fn segments_per_window(&self) -> usize {
        (self.cfg.window - self.cfg.welch.noverlap) / self.step
    }

    /// The reference channel, when cross-spectra are formed (two channels or more).
    fn cross_reference(&self) -> Option<usize> {
        self.reference.filter(|&r| self.channels.len() >= 2 && r < self.channels.len())
    }

    /// Samples kept between calls, in f64 units: for each segment a window can hold, one unit
    /// per bin and channel (|X|^2) and, with a reference, two more (the complex transform);
    /// and less than one segment of pending samples per channel.
    pub fn held_samples(&self) -> usize {
        let bins = self.cfg.welch.nperseg / 2 + 1;
        let m = self.channels.len();
        let units = m * if self.cross_reference().is_some() { 3 } else { 1 };
        let per_segment = bins.saturating_mul(units);
        per_segment
            .saturating_mul(self.segments_per_window())
            .saturating_add(self.cfg.welch.nperseg.saturating_mul(m))
    }

    /// Frames pushed so far.
    pub fn frames(&self) -> u64 {
        self.frames
    }

    /// Transforms the segment starting at `next_start` (every channel's pending samples hold
    /// it) and forms its terms of the Welch sums, each channel on its own core.
    fn take_segment(&mut self) -> Result<(), WelchError> {
        let n = self.cfg.welch.nperseg;
        let (fft, w, detrend) = (&self.fft, &self.window, self.cfg.welch.detrend);
        let start = self.next_start;
        let transformed: Vec<(Vec<Complex<f64>>, Vec<f64>)> = self
            .channels
            .par_iter()
            .map(|st| {
                // The segment made contiguous, then detrended and windowed in place.
                let (a, b) = st.pending.as_slices();
                let mut buf = Vec::with_capacity(n);
                buf.extend_from_slice(&a[..a.len().min(n)]);
                buf.extend_from_slice(&b[..n - buf.len()]);
                if let Some((i, v)) = first_non_finite(&buf) {
                    return Err(WelchError::NotFinite { index: start as usize + i, value: v });
                }
                let mean = match detrend {
                    Detrend::Mean => sum(&buf) / n as f64,
                    Detrend::None => 0.0,
                };
                for (v, wv) in buf.iter_mut().zip(w) {
                    *v = (*v - mean) * wv;
                }
                let mut out = fft.make_output_vec();
                let mut scratch = fft.make_scratch_vec();
                // Lengths match the plan by construction.
                let _ = fft.process_with_scratch(&mut buf, &mut out, &mut scratch);
                let power = out.iter().map(|v| v.norm_sqr()).collect();
                Ok((out, power))
            })
            .collect::<Result<_, _>>()?;
        for st in &mut self.channels {
            st.pending.drain(..self.step);
        }
        let (mut spectra, power): (Vec<_>, Vec<_>) = transformed.into_iter().unzip();
        if self.cross_reference().is_none() {
            spectra = Vec::new();
        }
        self.segments.push_back(Segment { start, power, spectra });
        while self.segments.len() > self.segments_per_window() {
            self.segments.pop_front();
        }
        self.next_start += self.step as u64;
        Ok(())
    }

    /// Appends interleaved frames (pascals) and returns the updates they complete.
    ///
    /// # Errors
    /// [`WelchError::NotFinite`] for a sample that is not finite.
    pub fn push(&mut self, interleaved: &[f64]) -> Result<Vec<Update>, WelchError> {
        let m = self.channels.len().max(1);
        let cols: Vec<Vec<f64>> =
            (0..m).map(|c| interleaved.chunks_exact(m).map(|f| f[c]).collect()).collect();
        self.push_channels(&cols)
    }

    /// Appends the same number of new frames to every channel (one slice per channel, pascals)
    /// and returns the updates they complete: copied in runs up to the next segment end or
    /// update, not frame by frame.
    ///
    /// # Errors
    /// [`WelchError::NotFinite`] for a sample that is not finite.
    pub fn push_channels(&mut self, cols: &[Vec<f64>]) -> Result<Vec<Update>, WelchError> {
        let len = cols.iter().map(Vec::len).min().unwrap_or(0);
        let n = self.cfg.welch.nperseg;
        let window = self.cfg.window as u64;
        let mut out = Vec::new();
        let mut k = 0;
        while k < len {
            // Frames until the current segment is whole, and until the next update is due.
            let to_segment = n - self.channels.first().map_or(0, |c| c.pending.len());
            let to_update = self
                .cfg
                .update
                .saturating_sub(self.since)
                .max(usize::try_from(window.saturating_sub(self.frames)).unwrap_or(usize::MAX))
                .max(1);
            let t = (len - k).min(to_segment).min(to_update);
            for (st, col) in self.channels.iter_mut().zip(cols) {
                st.pending.extend(&col[k..k + t]);
            }
            k += t;
            self.frames += t as u64;
            self.since += t;
            if self.channels.first().is_some_and(|c| c.pending.len() == n) {
                self.take_segment()?;
            }
            if self.since >= self.cfg.update && self.frames >= window {
                self.since = 0;
                out.push(self.analyse()?);
            }
        }
        Ok(out)
    }

    /// The segments wholly inside the window that ends now, and the scale of their sums at
    /// each bin (as [`super::welch::welch`] scales them: one-sided, per hertz, averaged).
    fn inside(&self) -> (Vec<&Segment>, impl Fn(usize) -> f64) {
        let first = self.frames.saturating_sub(self.cfg.window as u64);
        let inside: Vec<&Segment> = self.segments.iter().filter(|s| s.start >= first).collect();
        let n = self.cfg.welch.nperseg;
        let last = if n % 2 == 0 { n / 2 } else { n / 2 + 1 };
        let scale = 1.0 / (self.cfg.fs * self.sums.sum_sq) / inside.len().max(1) as f64;
        (inside, move |b: usize| if b == 0 || b == last { scale } else { 2.0 * scale })
    }

    /// The Welch PSD of every channel over the window that ends now and its tones, strongest
    /// first: each channel on its own core, in one parallel pass.
    fn window_tones(&self) -> Vec<(Psd, Vec<Tone>)> {
        let (inside, factor) = self.inside();
        let bins = self.cfg.welch.nperseg / 2 + 1;
        let tone_cfg = self.cfg.tones;
        (0..self.channels.len())
            .into_par_iter()
            .map(|c| {
                let mut density = vec![0.0; bins];
                for s in &inside {
                    for (d, x) in density.iter_mut().zip(&s.power[c]) {
                        *d += x;
                    }
                }
                for (b, d) in density.iter_mut().enumerate() {
                    *d *= factor(b);
                }
                let psd = Psd {
                    fs: self.cfg.fs,
                    config: self.cfg.welch,
                    density,
                    segments: inside.len(),
                    unused_samples: 0,
                    sums: self.sums,
                    moments: SampleMoments::default(),
                };
                let mut found = find_tones(&psd, &tone_cfg).tones;
                found.sort_by(|a, b| b.level_db.total_cmp(&a.level_db));
                (psd, found)
            })
            .collect()
    }

    /// The window's cross-spectral densities against reference `r` at bin `k` (scaled as
    /// [`super::cross::cross_spectra`] scales them), with the channels' PSDs `psds` at that bin.
    fn cross_at(&self, r: usize, k: usize, psds: &[Psd]) -> CrossAtBin {
        let (inside, factor) = self.inside();
        let others = (0..self.channels.len()).filter(|&c| c != r);
        CrossAtBin {
            reference_psd: psds[r].density[k],
            psd: others.clone().map(|c| psds[c].density[k]).collect(),
            csd: others
                .map(|c| {
                    let sum: Complex<f64> =
                        inside.iter().map(|s| s.spectra[r][k].conj() * s.spectra[c][k]).sum();
                    sum * factor(k)
                })
                .collect(),
        }
    }

    fn analyse(&mut self) -> Result<Update, WelchError> {
        let fs = self.cfg.fs;
        let time_s = self.frames as f64 / fs;
        let centre_s = time_s - 0.5 * self.cfg.window as f64 / fs;
        let mut events = Vec::new();
        let mut channels = Vec::with_capacity(self.channels.len());
        let (psds, found_all): (Vec<Psd>, Vec<Vec<Tone>>) = self.window_tones().into_iter().unzip();
        let mut reference_strongest = None;
        for (c, (st, (psd, found))) in self.channels.iter_mut().zip(psds.iter().zip(found_all)).enumerate() {
            let df = psd.resolution_hz();
            if Some(c) == self.reference {
                reference_strongest = found.first().cloned();
            }
            let mut matched = vec![false; st.tracks.len()];
            let mut live: Vec<Track> = Vec::with_capacity(found.len());
            for t in &found {
                let tol = |f: f64| (2.0 * df).max(0.5 * self.cfg.jump_fraction * f);
                let best = st
                    .tracks
                    .iter()
                    .enumerate()
                    .filter(|(i, tr)| {
                        !matched[*i] && (tr.frequency_hz - t.frequency_hz).abs() <= tol(tr.frequency_hz)
                    })
                    .min_by(|a, b| {
                        (a.1.frequency_hz - t.frequency_hz)
                            .abs()
                            .total_cmp(&(b.1.frequency_hz - t.frequency_hz).abs())
                    })
                    .map(|(i, _)| i);
                let track = match best {
                    Some(i) => {
                        matched[i] = true;
                        Track {
                            id: st.tracks[i].id,
                            frequency_hz: t.frequency_hz,
                            level_db: t.level_db,
                            missed: 0,
                        }
                    }
                    None => {
                        let id = self.next_id;
                        self.next_id += 1;
                        events.push(Event {
                            kind: EventKind::Appeared,
                            channel: c,
                            id,
                            frequency_hz: t.frequency_hz,
                            time_s,
                        });
                        Track { id, frequency_hz: t.frequency_hz, level_db: t.level_db, missed: 0 }
                    }
                };
                live.push(track);
            }
            for (i, tr) in st.tracks.iter().enumerate() {
                if matched[i] {
                    continue;
                }
                let missed = tr.missed + 1;
                if missed >= MISSES_TO_VANISH {
                    events.push(Event {
                        kind: EventKind::Vanished,
                        channel: c,
                        id: tr.id,
                        frequency_hz: tr.frequency_hz,
                        time_s,
                    });
                } else {
                    live.push(Track { missed, ..*tr });
                }
            }
            // The strongest tone seen in this update (tracks missed this time do not count).
            let strongest = live
                .iter()
                .filter(|t| t.missed == 0)
                .max_by(|a, b| a.level_db.total_cmp(&b.level_db))
                .copied();
            // A jump is a change of the strongest tone's frequency by more than the jump
            // fraction since the last update, on the same track or another: the track tolerance
            // (two bins at coarse resolution) can keep a stage jump on one track.
            if let (Some((prev, from_hz)), Some(now)) = (st.strongest, strongest) {
                if (now.frequency_hz - from_hz).abs() > self.cfg.jump_fraction * from_hz {
                    events.push(Event {
                        kind: EventKind::Jumped { from_id: prev, from_hz },
                        channel: c,
                        id: now.id,
                        frequency_hz: now.frequency_hz,
                        time_s: centre_s,
                    });
                }
            }
            st.strongest = strongest.map(|t| (t.id, t.frequency_hz));
            live.sort_by(|a, b| b.level_db.total_cmp(&a.level_db));
            st.tracks = live.clone();
            channels.push((live, st.strongest.map(|(id, _)| id)));
        }
        let cross = self
            .cross_reference()
            .zip(reference_strongest)
            .map(|(r, t)| (self.cross_at(r, t.peak_bin, &psds), t));
        Ok(Update { time_s, channels, events, cross, reference: self.reference })
    }
}

#[cfg(test)]
#[path = "track_tests.rs"]
mod tests;
