//! Live tracking on synthetic tones of known frequency: tones that appear, vanish, drift and jump.

use super::*;
use crate::dsp::samples::ChannelView;
use crate::dsp::welch::Detrend;
use crate::dsp::window::Window;
use std::f64::consts::PI;

fn tracker(fs: f64) -> Tracker {
    let welch = WelchConfig { window: Window::Hann, nperseg: 2048, noverlap: 1024, detrend: Detrend::Mean };
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
    let jumps: Vec<&Event> =
        ups.iter().flat_map(|u| &u.events).filter(|e| matches!(e.kind, EventKind::Jumped { .. })).collect();
    assert_eq!(jumps.len(), 1, "{jumps:?}");
    let j = jumps[0];
    assert!((j.time_s - 3.0).abs() <= 0.1, "jump at {} s", j.time_s);
    let bin = fs / 2048.0;
    let EventKind::Jumped { from_hz, .. } = j.kind else { unreachable!() };
    assert!((from_hz - 2000.0).abs() < bin && (j.frequency_hz - 2300.0).abs() < bin, "{j:?}");
}

#[test]
fn live_cross_terms_at_the_tone_equal_the_batch_cross_spectra_of_the_same_segments() {
    // The batch cross_spectra is checked against scipy.signal.csd / coherence in
    // tests/python; the live update, formed at one bin from the segments inside its window,
    // must give the same densities there (to rounding of a different summation order).
    let fs = 25_600.0;
    let n = (2.0 * fs) as usize;
    let chans: Vec<Vec<f64>> = (0..3u64)
        .map(|c| {
            let noise = crate::dsp::welch::tests::noise(n, 20 + c, 0.05);
            (0..n).map(|i| (2.0 * PI * 2000.0 * i as f64 / fs - 0.7 * c as f64).sin() + noise[i]).collect()
        })
        .collect();
    let interleaved: Vec<f64> = (0..n).flat_map(|i| chans.iter().map(move |x| x[i])).collect();
    let mut t = tracker(fs);
    t = Tracker::new(t.cfg, 3).unwrap().with_reference(0);
    let ups = t.push(&interleaved).unwrap();
    let u = ups.last().unwrap();
    let (at, tone) = u.cross.as_ref().expect("a tone on the reference");
    assert!((tone.frequency_hz - 2000.0).abs() < fs / 2048.0);
    // Segments of 2048 frames every 1024 wholly inside the window of 9216 frames.
    let end = (u.time_s * fs).round() as usize;
    let first = (end - 9 * 1024).div_ceil(1024) * 1024;
    let last = (end - 2048) / 1024 * 1024 + 2048;
    let views: Vec<ChannelView<'_>> =
        chans.iter().map(|x| ChannelView::of_pascals(&x[first..last])).collect();
    let cs =
        crate::dsp::cross::cross_spectra(&views, 0, fs, t.cfg.welch, &crate::cancel::Cancel::new()).unwrap();
    assert_eq!(cs.segments, 8);
    let k = tone.peak_bin;
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b.abs().max(1e-300);
    assert!(close(at.reference_psd, cs.reference_psd[k]));
    for i in 0..2 {
        assert!(close(at.psd[i], cs.psd[i][k]), "channel {}", i + 1);
        assert!((at.csd[i] - cs.csd[i][k]).norm() <= 1e-12 * cs.csd[i][k].norm(), "channel {}", i + 1);
        assert!((at.phase_deg(i) - cs.phase_deg(i, k)).abs() < 1e-9);
    }
    // Memory: |X|^2 (one unit per bin) and the transform (two) of 3 channels for the 8
    // segments of a window, and one segment of pending samples per channel.
    assert_eq!(t.held_samples(), 8 * 1025 * 3 * 3 + 2048 * 3);
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

/// A tracker of one channel whose window is one segment of 1024 frames (25 Hz bins at
/// 25.6 kHz), updated every segment: the track tolerance max(2 bins, jump_fraction / 2 x f)
/// is then 50 Hz near 600 Hz.
fn one_segment_tracker(fs: f64) -> Tracker {
    let welch = WelchConfig { window: Window::Hann, nperseg: 1024, noverlap: 512, detrend: Detrend::Mean };
    let cfg = TrackerConfig {
        fs,
        welch,
        window: 1024,
        update: 1024,
        tones: ToneConfig { threshold_db: 10.0, ..ToneConfig::default() },
        jump_fraction: JUMP_FRACTION.default,
    };
    Tracker::new(cfg, 1).unwrap()
}

/// The jumps of a tone of instantaneous frequency `f(t)` Hz (phase integrated sample by
/// sample, so a step is phase-continuous), 6 s at 25.6 kHz on seeded noise at -60 dB.
fn jumps_of(f: impl Fn(f64) -> f64) -> Vec<Event> {
    let fs = 25_600.0;
    let n = (6.0 * fs) as usize;
    let noise = crate::dsp::welch::tests::noise(n, 5, 0.001);
    let mut phase = 0.0f64;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let v = phase.sin() + noise[i];
            phase += 2.0 * PI * f(i as f64 / fs) / fs;
            v
        })
        .collect();
    let mut t = one_segment_tracker(fs);
    let mut ups = Vec::new();
    for chunk in x.chunks(3001) {
        ups.extend(t.push(chunk).unwrap());
    }
    assert!(ups.len() > 100, "{} updates", ups.len());
    ups.into_iter().flat_map(|u| u.events).filter(|e| matches!(e.kind, EventKind::Jumped { .. })).collect()
}

#[test]
fn a_jump_the_track_tolerance_absorbs_is_still_reported() {
    // Regression: 600 -> 645 Hz at t = 3 s (a segment boundary: 76800 = 75 x 1024 frames)
    // stays on one track (45 Hz is within the 50 Hz tolerance), and the jump test compared
    // track ids, so no jump was reported. 645 / 600 - 1 = 7.5 % exceeds the default jump
    // fraction JUMP_FRACTION = 5 % (closed form), so exactly one jump is due.
    const { assert!(645.0 / 600.0 - 1.0 > JUMP_FRACTION.default) };
    let jumps = jumps_of(|t| if t < 3.0 { 600.0 } else { 645.0 });
    assert_eq!(jumps.len(), 1, "{jumps:?}");
    let j = jumps[0];
    let EventKind::Jumped { from_hz, .. } = j.kind else { unreachable!() };
    let bin = 25_600.0 / 1024.0;
    assert!((from_hz - 600.0).abs() < 0.5 * bin && (j.frequency_hz - 645.0).abs() < 0.5 * bin, "{j:?}");
    // The window (40 ms) whose centre passed 3 s.
    assert!((j.time_s - 3.0).abs() <= 0.05, "{j:?}");
}

#[test]
fn a_slow_drift_is_not_a_jump() {
    // 600 Hz rising at 100 Hz/s to 900 Hz over 3 s: 4 Hz per 40 ms update, 0.67 % of 600 Hz,
    // well under the 5 % jump fraction per update (closed form), though the whole drift is
    // 50 %: no jump.
    let per_update = 100.0 * 1024.0 / 25_600.0;
    assert!(per_update / 600.0 < JUMP_FRACTION.default);
    let jumps = jumps_of(|t| 600.0 + 100.0 * (t - 1.5).clamp(0.0, 3.0));
    assert!(jumps.is_empty(), "{jumps:?}");
}
