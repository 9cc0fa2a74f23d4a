//! Live tone tracking: a sliding analysis window per channel, updated every `update` frames,
//! tones matched to tracks with stable ids across updates, and events when a tone appears,
//! vanishes, or the strongest tone jumps to another frequency (a stage jump).
//!
//! - Each update is the Welch PSD and tone search ([`super::tones::find_tones`]) of the last
//!   `window` frames of each channel.
//! - A tone continues a track when it lies within `max(2 bins, jump_fraction / 2 x f)` of the
//!   track's last frequency (strongest tones matched first); otherwise it opens a track
//!   (`Appeared`). A track missed by [`MISSES_TO_VANISH`] updates in a row ends (`Vanished`).
//! - When the strongest tone of a channel moves to another track whose frequency differs by
//!   more than `jump_fraction`, a `Jumped` event is emitted with the time the window's centre
//!   passed (the strongest line changes when the new tone fills half the window).
//!
//! - With a reference channel, each update also holds the window's Welch cross-spectra of
//!   every channel against it ([`super::cross::cross_spectra`]) and the reference channel's
//!   strongest tone: phase, coherence and azimuthal mode at that tone, live.
//!
//! Memory per channel is one window of samples and the live tracks: a stream of any length
//! holds no more.

use super::cross::{cross_spectra, CrossSpectra};
use super::samples::ChannelView;
use super::tones::{find_tones, Tone, ToneConfig};
use super::welch::{welch, Psd, WelchConfig, WelchError};
use crate::cancel::Cancel;
use rayon::prelude::*;
use std::collections::VecDeque;

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
    /// With a reference channel: the window's cross-spectra against it and the reference
    /// channel's strongest tone (none when it has no tone).
    pub cross: Option<(CrossSpectra, Option<Tone>)>,
    /// The reference channel of `cross`.
    pub reference: Option<usize>,
}

#[derive(Debug, Clone, Default)]
struct ChannelState {
    ring: VecDeque<f64>,
    tracks: Vec<Track>,
    strongest: Option<u64>,
}

/// A tracker fed frames as they arrive.
#[derive(Debug, Clone)]
pub struct Tracker {
    cfg: TrackerConfig,
    reference: Option<usize>,
    channels: Vec<ChannelState>,
    frames: u64,
    since: usize,
    next_id: u64,
}

impl Tracker {
    /// A tracker of `channels` channels.
    ///
    /// # Errors
    /// [`WelchError::TooShort`] when the window is shorter than one segment.
    pub fn new(cfg: TrackerConfig, channels: usize) -> Result<Self, WelchError> {
        if cfg.window < cfg.welch.nperseg {
            return Err(WelchError::TooShort { nperseg: cfg.welch.nperseg, samples: cfg.window });
        }
        Ok(Self {
            cfg,
            reference: None,
            channels: vec![ChannelState::default(); channels],
            frames: 0,
            since: 0,
            next_id: 1,
        })
    }

    /// Adds cross-spectra against channel `reference` to every update (two channels or more).
    pub fn with_reference(mut self, reference: usize) -> Self {
        self.reference = Some(reference);
        self
    }

    /// Samples kept between calls: one window of every channel.
    pub fn held_samples(&self) -> usize {
        self.cfg.window.saturating_mul(self.channels.len())
    }

    /// Frames pushed so far.
    pub fn frames(&self) -> u64 {
        self.frames
    }

    /// Appends interleaved frames (pascals) and returns the updates they complete.
    ///
    /// # Errors
    /// [`WelchError::NotFinite`] for a sample that is not finite.
    pub fn push(&mut self, interleaved: &[f64]) -> Result<Vec<Update>, WelchError> {
        let m = self.channels.len().max(1);
        let mut out = Vec::new();
        for frame in interleaved.chunks_exact(m) {
            for (st, &v) in self.channels.iter_mut().zip(frame) {
                if st.ring.len() == self.cfg.window {
                    st.ring.pop_front();
                }
                st.ring.push_back(v);
            }
            self.frames += 1;
            self.since += 1;
            if self.since >= self.cfg.update
                && self.channels.first().is_some_and(|c| c.ring.len() == self.cfg.window)
            {
                self.since = 0;
                out.push(self.analyse()?);
            }
        }
        Ok(out)
    }

    fn analyse(&mut self) -> Result<Update, WelchError> {
        let fs = self.cfg.fs;
        let time_s = self.frames as f64 / fs;
        let centre_s = time_s - 0.5 * self.cfg.window as f64 / fs;
        let mut events = Vec::new();
        let mut channels = Vec::with_capacity(self.channels.len());
        let windows: Vec<Vec<f64>> =
            self.channels.iter().map(|st| st.ring.iter().copied().collect()).collect();
        // The channels' PSDs, each on its own core.
        let psds: Vec<Psd> =
            windows.par_iter().map(|x| welch(x, fs, self.cfg.welch)).collect::<Result<Vec<_>, _>>()?;
        let mut reference_strongest = None;
        for (c, (st, psd)) in self.channels.iter_mut().zip(&psds).enumerate() {
            let df = psd.resolution_hz();
            let mut found = find_tones(psd, &self.cfg.tones).tones;
            found.sort_by(|a, b| b.level_db.total_cmp(&a.level_db));
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
            if let (Some(prev), Some(now)) = (st.strongest, strongest) {
                if prev != now.id {
                    let from_hz =
                        st.tracks.iter().chain(&live).find(|t| t.id == prev).map(|t| t.frequency_hz);
                    if let Some(from_hz) = from_hz {
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
                }
            }
            st.strongest = strongest.map(|t| t.id);
            live.sort_by(|a, b| b.level_db.total_cmp(&a.level_db));
            st.tracks = live.clone();
            channels.push((live, st.strongest));
        }
        let cross = match self.reference.filter(|_| windows.len() >= 2) {
            Some(r) => {
                let views: Vec<ChannelView<'_>> =
                    windows.iter().map(|x| ChannelView::of_pascals(x)).collect();
                Some((cross_spectra(&views, r, fs, self.cfg.welch, &Cancel::default())?, reference_strongest))
            }
            None => None,
        };
        Ok(Update { time_s, channels, events, cross, reference: self.reference })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::welch::Detrend;
    use crate::dsp::window::Window;
    use std::f64::consts::PI;

    fn tracker(fs: f64) -> Tracker {
        let welch =
            WelchConfig { window: Window::Hann, nperseg: 2048, noverlap: 1024, detrend: Detrend::Mean };
        let cfg = TrackerConfig {
            fs,
            welch,
            window: 9 * 1024,
            update: (0.1 * fs) as usize,
            tones: ToneConfig { threshold_db: 10.0, ..ToneConfig::default() },
            jump_fraction: 0.05,
        };
        Tracker::new(cfg, 1).unwrap()
    }

    fn run(x: &[f64], fs: f64) -> Vec<Update> {
        let mut t = tracker(fs);
        let mut out = Vec::new();
        // Blocks that do not line up with the updates, as a DAQ delivers them.
        for chunk in x.chunks(3001) {
            out.extend(t.push(chunk).unwrap());
        }
        out
    }

    #[test]
    fn a_tone_that_jumps_gives_one_jump_event_at_its_time_with_both_frequencies() {
        // Synthetic: 2000 Hz for 3 s, then 2300 Hz (a 15 % stage jump), on seeded noise.
        let fs = 25_600.0;
        let n = (6.0 * fs) as usize;
        let noise = crate::dsp::welch::tests::noise(n, 3, 0.01);
        let x: Vec<f64> = (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                let f = if t < 3.0 { 2000.0 } else { 2300.0 };
                (2.0 * PI * f * t).sin() + noise[i]
            })
            .collect();
        let ups = run(&x, fs);
        let jumps: Vec<&Event> = ups
            .iter()
            .flat_map(|u| &u.events)
            .filter(|e| matches!(e.kind, EventKind::Jumped { .. }))
            .collect();
        assert_eq!(jumps.len(), 1, "{jumps:?}");
        let j = jumps[0];
        assert!((j.time_s - 3.0).abs() <= 0.1, "jump at {} s", j.time_s);
        let bin = fs / 2048.0;
        let EventKind::Jumped { from_hz, .. } = j.kind else { unreachable!() };
        assert!((from_hz - 2000.0).abs() < bin && (j.frequency_hz - 2300.0).abs() < bin, "{j:?}");
    }

    #[test]
    fn a_tone_that_fades_out_gives_one_vanish_event() {
        let fs = 25_600.0;
        let n = (5.0 * fs) as usize;
        let noise = crate::dsp::welch::tests::noise(n, 4, 0.01);
        let x: Vec<f64> = (0..n)
            .map(|i| {
                let t = i as f64 / fs;
                let amp = if t < 2.0 { 1.0 } else { (1.0 - (t - 2.0) / 0.5).max(0.0) };
                amp * (2.0 * PI * 3000.0 * t).sin() + noise[i]
            })
            .collect();
        let ups = run(&x, fs);
        let appeared: Vec<u64> = ups
            .iter()
            .flat_map(|u| &u.events)
            .filter(|e| e.kind == EventKind::Appeared && (e.frequency_hz - 3000.0).abs() < 20.0)
            .map(|e| e.id)
            .collect();
        assert_eq!(appeared.len(), 1, "{appeared:?}");
        let vanished: Vec<&Event> = ups
            .iter()
            .flat_map(|u| &u.events)
            .filter(|e| e.kind == EventKind::Vanished && e.id == appeared[0])
            .collect();
        assert_eq!(vanished.len(), 1);
        assert!(vanished[0].time_s > 2.0 && vanished[0].time_s < 3.5, "{:?}", vanished[0]);
    }
}
