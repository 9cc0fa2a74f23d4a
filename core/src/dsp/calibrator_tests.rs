//! Calibrator readings against closed forms: the rms of a sinusoid is A / sqrt(2), a stated
//! level L is 20 uPa x 10^(L/20) Pa rms (ISO 1683), THD of known harmonic amplitudes is
//! sqrt(sum a_h^2) / a_1.

use super::*;
use crate::dsp::samples::{Format, Layout};
use std::f64::consts::PI;

fn cfg(level_db: f64, frequency_hz: f64) -> CalibratorConfig {
    CalibratorConfig {
        stated_level_db: level_db,
        stated_frequency_hz: frequency_hz,
        frequency_tolerance_fraction: CalibratorConfig::FREQUENCY_TOLERANCE_FRACTION.default,
        max_harmonic_order: CalibratorConfig::MAX_HARMONIC_ORDER.default as u32,
    }
}

fn one(x: Vec<f64>) -> Recording {
    Recording::from_values(x, Layout::Interleaved, 1, 1.0).unwrap()
}

fn read(x: Vec<f64>, fs: f64, c: &CalibratorConfig) -> Reading {
    read_channel(&one(x), 0, fs, c, &Cancel::new()).unwrap()
}

/// `n` samples at `fs` of `sum_h a_h sin(2 pi h f t + h)`.
fn tone(n: usize, fs: f64, f: f64, amplitudes: &[f64]) -> Vec<f64> {
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            amplitudes
                .iter()
                .enumerate()
                .map(|(h, a)| {
                    let h = (h + 1) as f64;
                    a * (2.0 * PI * h * f * t + h).sin()
                })
                .sum()
        })
        .collect()
}

fn db(a: f64, b: f64) -> f64 {
    20.0 * (a / b).log10()
}

#[test]
fn four_sensitivities_read_back_from_a_94_db_tone() {
    // p_rms = 20e-6 x 10^(94/20) = 1.0024 Pa (ISO 1683 reference); V_rms = S p_rms; a sine of
    // rms V has amplitude sqrt(2) V (closed forms).
    let (fs, n) = (48_000.0, 3 * 48_000);
    let c = cfg(94.0, 1000.0);
    let p_rms = 20e-6 * 10f64.powf(94.0 / 20.0);
    assert!((p_rms - 1.002_374).abs() < 1e-6);
    for s in [50e-3, 12.5e-3, 3.16e-3, 1e-3] {
        let r = read(tone(n, fs, 1000.0, &[2f64.sqrt() * s * p_rms]), fs, &c);
        assert!(db(r.sensitivity_v_per_pa(1.0), s).abs() < 1e-4, "{s}: {}", r.sensitivity_v_per_pa(1.0));
        assert!((r.tone_rms / (s * p_rms) - 1.0).abs() < 1e-5);
        assert!((r.frequency_hz - 1000.0).abs() < 1e-4, "{}", r.frequency_hz);
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
        assert!(r.thd < 1e-6 && r.level_span_db < 1e-4 && r.frequency_span_hz < 1e-3);
        assert_eq!(r.blocks, n / 8192);
    }
}

#[test]
fn a_tone_between_bins_reads_its_level_and_frequency_without_scalloping() {
    // Parseval: the summed power of a windowed sinusoid is A^2/2 wherever it falls between
    // bins; a flat-top peak reading would scallop by about 0.01 dB (Harris 1978).
    let (fs, n) = (51_200.0, 1 << 18);
    for f in [250.0, 251.37, 253.125, 1003.7] {
        let c = cfg(114.0, if f > 500.0 { 1000.0 } else { 250.0 });
        let r = read(tone(n, fs, f, &[0.3]), fs, &c);
        assert!(
            db(r.tone_rms, 0.3 / 2f64.sqrt()).abs() < 1e-4,
            "{f}: {} dB",
            db(r.tone_rms, 0.3 / 2f64.sqrt())
        );
        assert!((r.frequency_hz - f).abs() < 1e-3, "{f}: {}", r.frequency_hz);
        // 114 dB is 10x the pressure of 94 dB: 10 x 1.0024 = 10.024 Pa rms (closed form).
        assert!((r.pascals_per_unit * r.tone_rms - 10.0 * 20e-6 * 10f64.powf(94.0 / 20.0)).abs() < 1e-9);
    }
}

#[test]
fn noise_leaves_the_level_within_a_hundredth_of_a_db_and_shows_in_thd_n() {
    // Tone 1 V rms with 1 % and 0.5 % harmonics: THD = sqrt(0.01^2 + 0.005^2) = 1.118 %
    // (definition). White noise of sigma has sigma^2 (20000 - 20) / (fs / 2) of its power in
    // the 20 Hz - 20 kHz band; THD+N = sqrt(harmonics^2 + that) / 1 V.
    let (fs, n) = (48_000.0, 1 << 18);
    let a = 2f64.sqrt();
    let mut x = tone(n, fs, 1000.0, &[a, 0.01 * a, 0.005 * a]);
    let sigma = 0.003;
    let noise = crate::dsp::welch::tests::noise(n, 11, sigma);
    for (v, e) in x.iter_mut().zip(noise) {
        *v += e;
    }
    let r = read(x, fs, &cfg(94.0, 1000.0));
    assert!(db(r.tone_rms, 1.0).abs() < 0.01, "{}", db(r.tone_rms, 1.0));
    let thd = (0.01f64.powi(2) + 0.005f64.powi(2)).sqrt();
    assert!((r.thd / thd - 1.0).abs() < 0.02, "{} against {thd}", r.thd);
    let in_band = sigma * sigma * (20_000.0 - 20.0) / (fs / 2.0);
    let thd_n = (thd * thd + in_band).sqrt();
    assert!((r.thd_n / thd_n - 1.0).abs() < 0.03, "{} against {thd_n}", r.thd_n);
    assert_eq!(r.harmonics[0].order, 2);
    assert!((r.harmonics[0].rms / 0.01 - 1.0).abs() < 0.02);
    assert!(r.warnings.is_empty(), "{:?}", r.warnings);
}

#[test]
fn clipped_tones_are_reported_and_clean_quantized_ones_are_not() {
    let (fs, n) = (48_000.0, 1 << 17);
    let i16_rec = |x: &[f64]| {
        let bytes: Vec<u8> =
            x.iter().flat_map(|v| (v.round().clamp(-32768.0, 32767.0) as i16).to_le_bytes()).collect();
        Recording::from_bytes(bytes.into(), Format::I16, Layout::Interleaved, 1, 1.0).unwrap()
    };
    let c = cfg(94.0, 1000.0);
    // 40000 counts of amplitude on a 16-bit converter: clipped at full scale and flat-topped.
    let r = read_channel(&i16_rec(&tone(n, fs, 1000.0, &[40_000.0])), 0, fs, &c, &Cancel::new()).unwrap();
    assert!(
        matches!(r.warnings[0], Warning::FullScale { samples, .. } if samples > 1000),
        "{:?}",
        r.warnings
    );
    assert!(r.warnings.iter().any(|w| matches!(w, Warning::FlatTopped { .. })), "{:?}", r.warnings);
    // A float recording clipped at +-1 by an analogue stage: flat tops, no full scale.
    let x: Vec<f64> = tone(n, fs, 250.0, &[1.3]).into_iter().map(|v| v.clamp(-1.0, 1.0)).collect();
    let r = read(x, fs, &cfg(114.0, 250.0));
    assert_eq!(r.full_scale_samples, None);
    assert!(
        matches!(r.warnings.as_slice(), [Warning::FlatTopped { value, .. }] if value.abs() == 1.0),
        "{:?}",
        r.warnings
    );
    // Clean 16-bit tones, loud and quiet (a quiet 250 Hz tone of 100 counts rests on its crest
    // value for several samples by quantization alone): no warning.
    for (f, a) in [(1000.0, 20_000.0), (250.0, 100.0), (250.0, 30_000.0)] {
        let rec = i16_rec(&tone(n, fs, f, &[a]));
        let r = read_channel(&rec, 0, fs, &cfg(94.0, f), &Cancel::new()).unwrap();
        assert!(r.warnings.is_empty(), "{f} Hz, {a} counts: {:?}", r.warnings);
        assert_eq!(r.full_scale_samples, Some(0));
    }
}

#[test]
fn a_tone_off_its_stated_frequency_is_reported() {
    let (fs, n) = (48_000.0, 1 << 17);
    let c = cfg(94.0, 1000.0);
    let r = read(tone(n, fs, 1050.0, &[1.0]), fs, &c);
    assert!((r.frequency_hz - 1050.0).abs() < 1e-3);
    assert!(
        matches!(r.warnings.as_slice(), [Warning::FrequencyOff { measured_hz, .. }] if (measured_hz - 1050.0).abs() < 1e-3),
        "{:?}",
        r.warnings
    );
    assert!(r.warnings[0].to_string().contains("+5.00 %"), "{}", r.warnings[0]);
    // 0.5 % off is inside the 1 % tolerance.
    assert!(read(tone(n, fs, 1005.0, &[1.0]), fs, &c).warnings.is_empty());
}

#[test]
fn rumble_louder_than_the_calibrator_is_not_taken_for_it() {
    // A 94 dB 1 kHz tone under a 40 Hz rumble ten times its amplitude (handling noise): the
    // reading is the 1 kHz tone's rms A / sqrt(2) (closed form), not the rumble's.
    let (fs, n) = (48_000.0, 1 << 17);
    let c = cfg(94.0, 1000.0);
    let calibrator = tone(n, fs, 1000.0, &[0.1]);
    let rumble = tone(n, fs, 40.0, &[1.0]);
    let x: Vec<f64> = calibrator.iter().zip(&rumble).map(|(a, b)| a + b).collect();
    let r = read(x, fs, &c);
    assert!((r.frequency_hz - 1000.0).abs() < 1e-3, "{}", r.frequency_hz);
    assert!((r.tone_rms / (0.1 / 2f64.sqrt()) - 1.0).abs() < 1e-3, "{}", r.tone_rms);
    // A 2 kHz tone stated as 250 Hz, with nothing near 250 Hz: refused, naming where it is.
    let e = read_channel(&one(tone(n, fs, 2000.0, &[1.0])), 0, fs, &cfg(94.0, 250.0), &Cancel::new())
        .unwrap_err();
    assert!(
        matches!(e, CalibratorError::NotNearStated { found_hz, .. } if (found_hz - 2000.0).abs() < 10.0),
        "{e:?}"
    );
    assert!(e.to_string().contains("stated 250 Hz"), "{e}");
}

#[test]
fn a_recording_shorter_than_eight_blocks_is_refused_naming_the_minimum() {
    // 48 kHz, 1 kHz: bins of at most 10 Hz need 4800 samples, the next power of two is 8192.
    let (fs, c) = (48_000.0, cfg(94.0, 1000.0));
    let plan = Plan::new(fs, 1000.0).unwrap();
    assert_eq!((plan.nperseg, plan.min_samples()), (8192, 65_536));
    let e = read_channel(&one(tone(65_535, fs, 1000.0, &[1.0])), 0, fs, &c, &Cancel::new()).unwrap_err();
    assert!(matches!(e, CalibratorError::TooShort { minimum: 65_536, samples: 65_535, .. }), "{e:?}");
    assert!(e.to_string().contains("65536 (8 blocks of 8192 samples, 1.365 s)"), "{e}");
    assert!(read_channel(&one(tone(65_536, fs, 1000.0, &[1.0])), 0, fs, &c, &Cancel::new()).is_ok());
    // 250 Hz: bins of at most 10 Hz as well; 24 kHz cannot carry a 10 kHz calibrator.
    assert_eq!(Plan::new(fs, 250.0).unwrap().nperseg, 8192);
    let e = read_channel(&one(vec![0.0; 1 << 17]), 0, 24_000.0, &cfg(94.0, 10_000.0), &Cancel::new());
    assert!(matches!(e, Err(CalibratorError::AboveBand { .. })), "{e:?}");
    let e = read_channel(&one(vec![0.0; 1 << 17]), 0, fs, &c, &Cancel::new());
    assert!(matches!(e, Err(CalibratorError::NoTone)), "{e:?}");
}

#[test]
fn a_level_step_and_a_frequency_drift_show_in_the_block_spans() {
    let (fs, n) = (48_000.0, 1 << 18);
    let nb = 8192;
    // +0.5 dB halfway, on a block boundary: the block levels span 0.5 dB (closed form).
    let step = 10f64.powf(0.5 / 20.0);
    let x: Vec<f64> = tone(n, fs, 1000.0, &[1.0])
        .into_iter()
        .enumerate()
        .map(|(i, v)| if i >= n / 2 { v * step } else { v })
        .collect();
    let r = read(x, fs, &cfg(94.0, 1000.0));
    assert!((r.level_span_db - 0.5).abs() < 1e-3, "{}", r.level_span_db);
    assert!(matches!(r.warnings.as_slice(), [Warning::Unsteady { .. }]), "{:?}", r.warnings);
    // A linear drift 995 -> 1005 Hz over the recording: each block's centroid is the mean
    // frequency over the block, so the first and last block centres are (count - 1) blocks
    // apart: span = 10 Hz x (count - 1) nb / n.
    let (f0, rate) = (995.0, 10.0 * fs / n as f64);
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            (2.0 * PI * (f0 * t + 0.5 * rate * t * t)).sin()
        })
        .collect();
    let r = read(x, fs, &cfg(94.0, 1000.0));
    let count = n / nb;
    let want = 10.0 * ((count - 1) * nb) as f64 / n as f64;
    assert!((r.frequency_span_hz - want).abs() < 0.02, "{} against {want}", r.frequency_span_hz);
    assert!((r.frequency_hz - 1000.0).abs() < 0.02, "{}", r.frequency_hz);
}

#[test]
fn settings_defaults_lie_in_their_bounds() {
    for s in [CalibratorConfig::FREQUENCY_TOLERANCE_FRACTION, CalibratorConfig::MAX_HARMONIC_ORDER] {
        assert!(s.bounds.contains(s.default), "{}", s.name);
    }
    assert!(STATED_LEVEL.contains(94.0) && STATED_LEVEL.contains(114.0));
}
