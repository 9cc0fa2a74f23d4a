//! Cross-channel analysis: the validated question and the answer.

use super::*;
use crate::api::Compute;
use crate::cancel::Cancel;
use crate::dsp::cross::CrossAtBin;
use crate::dsp::cross::{azimuthal_modes, cross_spectra, pair_symmetry, radians, Pattern};
use crate::dsp::tones::Tone;

/// Allowed microphone azimuth, degrees.
const AZIMUTH: Bounds = Bounds::closed(-360.0, 360.0, "deg");
/// Allowed polar angle, degrees.
const POLAR: Bounds = Bounds::closed(0.0, 180.0, "deg");
/// Allowed distance, m.
const DISTANCE: Bounds = Bounds::open_closed(0.0, 1000.0, "m");
/// Allowed points per returned cross-spectrum.
const SPECTRA_POINTS: Bounds = Bounds::closed(16.0, 1_048_577.0, "");

/// A validated cross-channel question with its decoded samples.
#[derive(Debug, Clone)]
pub struct CrossQuery {
    started: std::time::Instant,
    samples: SampleSet,
    welch: WelchConfig,
    tones: ToneConfig,
    reference: usize,
    azimuths_deg: Option<Vec<f64>>,
    spectra_points: Option<usize>,
    defaults: Defaults,
}

impl CrossQuery {
    /// The same question, stopped once `cancel` is set.
    pub fn with_cancel(mut self, cancel: crate::cancel::Cancel) -> Self {
        self.samples.cancel = cancel;
        self
    }
}

impl TryFrom<pb::CrossSpectraRequest> for CrossQuery {
    type Error = ApiError;

    fn try_from(req: pb::CrossSpectraRequest) -> Result<Self, ApiError> {
        let pb::CrossSpectraRequest {
            samples,
            welch,
            tones,
            reference_channel,
            positions,
            spectra_max_points,
        } = req;
        let started = std::time::Instant::now();
        let mut defaults = Defaults::default();
        let samples = sample_set_for(samples, &mut defaults, false)?;
        let channels = samples.recording.channel_count();
        let mut check = Check::new();
        if channels < 2 {
            check.other(
                "samples.channel_count",
                format!(
                    "samples.channel_count = {channels}: cross-channel analysis needs at least 2 channels"
                ),
            );
        }
        let w = welch_config(&mut check, &mut defaults, welch, samples.fs, samples.recording.len());
        let tones = super::tones::tone_config(&mut check, &mut defaults, tones);
        let (reference, azimuths_deg) =
            reference_and_azimuths(&mut check, &mut defaults, reference_channel, &positions, channels, "");
        let spectra_points = spectra_max_points.and_then(|m| {
            check.range("", SPECTRA_POINTS.check("spectra_max_points", f64::from(m))).map(|v| v as usize)
        });
        let q = w.map(|welch| CrossQuery {
            started,
            samples,
            welch,
            tones,
            reference,
            azimuths_deg,
            spectra_points,
            defaults,
        });
        check.finish(q)
    }
}

fn pattern(p: Pattern) -> pb::AzimuthalPattern {
    match p {
        Pattern::Axisymmetric => pb::AzimuthalPattern::Axisymmetric,
        Pattern::Standing => pb::AzimuthalPattern::Standing,
        Pattern::SpinningIncreasing => pb::AzimuthalPattern::SpinningIncreasing,
        Pattern::SpinningDecreasing => pb::AzimuthalPattern::SpinningDecreasing,
        Pattern::SenseUndetermined => pb::AzimuthalPattern::SenseUndetermined,
    }
}

/// The reference channel (unset: 0) and the microphone azimuths (one position per channel, or
/// none), each checked, with `prefix` before the field names.
pub(crate) fn reference_and_azimuths(
    check: &mut Check,
    defaults: &mut Defaults,
    reference_channel: Option<u32>,
    positions: &[pb::MicrophonePosition],
    channels: usize,
    prefix: &str,
) -> (usize, Option<Vec<f64>>) {
    let reference = match reference_channel {
        None => {
            defaults.note(&format!("{prefix}reference_channel"), "0", "the first channel");
            0
        }
        Some(r) if (r as usize) < channels => r as usize,
        Some(r) => {
            check.other(
                format!("{prefix}reference_channel"),
                format!(
                    "reference_channel = {r} is outside [0, {}] (the channels given)",
                    channels.saturating_sub(1)
                ),
            );
            0
        }
    };
    let azimuths_deg = if positions.is_empty() {
        None
    } else if positions.len() != channels {
        check.other(
            format!("{prefix}positions"),
            format!("positions holds {} entries; give one per channel ({channels}) or none", positions.len()),
        );
        None
    } else {
        let mut az = Vec::with_capacity(channels);
        for (i, p) in positions.iter().enumerate() {
            let path = format!("{prefix}positions[{i}]");
            let pb::MicrophonePosition { azimuth_deg, polar_angle_deg, distance_m } = *p;
            az.push(check.range(&path, AZIMUTH.check("azimuth_deg", azimuth_deg)).unwrap_or(0.0));
            if let Some(v) = polar_angle_deg {
                check.range(&path, POLAR.check("polar_angle_deg", v));
            }
            if let Some(v) = distance_m {
                check.range(&path, DISTANCE.check("distance_m", v));
            }
        }
        Some(az)
    };
    (reference, azimuths_deg)
}

/// One tone of the reference channel with every other channel at its peak bin: phase,
/// coherence and relative level; with two channels their symmetry, with three or more and
/// azimuths the azimuthal modes.
pub(crate) fn cross_tone(
    at: &CrossAtBin,
    reference: usize,
    azimuths_deg: Option<&[f64]>,
    t: &Tone,
) -> pb::CrossTone {
    let channels = at.psd.len() + 1;
    let others: Vec<usize> = (0..channels).filter(|&c| c != reference).collect();
    let chans: Vec<pb::ChannelAtTone> = others
        .iter()
        .enumerate()
        .map(|(i, &c)| pb::ChannelAtTone {
            channel: c as u32,
            phase_deg: at.phase_deg(i),
            coherence: at.coherence(i),
            relative_level_db: 10.0 * (at.psd[i] / at.reference_psd).log10(),
        })
        .collect();
    let pair = (channels == 2).then(|| {
        let p = pair_symmetry(at.phase_deg(0), at.coherence(0));
        pb::PairSymmetry { symmetric: p.symmetric, confidence: p.confidence }
    });
    let modes = match (azimuths_deg, channels >= 3) {
        (Some(az), true) => {
            // Amplitudes in channel order: the reference's own is real.
            let mut a = Vec::with_capacity(channels);
            let mut theta = Vec::with_capacity(channels);
            for (c, th) in radians(az).into_iter().enumerate() {
                theta.push(th);
                if c == reference {
                    a.push(realfft::num_complex::Complex::new(at.reference_psd.sqrt(), 0.0));
                } else {
                    let i = others.iter().position(|&o| o == c).unwrap_or(0);
                    a.push(at.locked_amplitude(i));
                }
            }
            let d = azimuthal_modes(&a, &theta);
            Some(pb::AzimuthalModes {
                orders: d
                    .energy
                    .iter()
                    .map(|&(order, energy)| pb::AzimuthalOrder { order, energy })
                    .collect(),
                dominant_order: d.dominant_order,
                dominant_share: d.dominant_share,
                spin_ratio: d.spin_ratio,
                pattern: pattern(d.pattern) as i32,
            })
        }
        _ => None,
    };
    pb::CrossTone {
        frequency_hz: t.frequency_hz,
        bin_frequency_hz: t.peak_bin_hz,
        level_db: t.level_db,
        channels: chans,
        pair,
        modes,
    }
}

impl Compute for CrossQuery {
    type Response = pb::CrossSpectraResponse;

    /// Computes and builds the CrossSpectra response.
    ///
    /// # Errors
    /// As the spectral analysis: a non-finite sample, a recording shorter than one segment, or a
    /// call stopped by its deadline.
    fn compute(self, cancel: &Cancel) -> Result<pb::CrossSpectraResponse, ApiError> {
        let q = &self.with_cancel(cancel.clone());
        let s = &q.samples;
        let channels = s.recording.channel_count();
        let views: Vec<ChannelView<'_>> = (0..channels).map(|c| s.recording.channel(c)).collect();
        let cs = cross_spectra(&views, q.reference, s.fs, q.welch, &s.cancel).map_err(|e| match e {
            WelchError::NotFinite { .. } => ApiError::Invalid(vec![FieldViolation {
                field: s.field.into(),
                description: format!("{}: {e}", s.field),
            }]),
            e => welch_error(e, s.field),
        })?;
        // Tones of the reference channel from its own PSD (the same estimate as ExtractTones).
        let psd = s.psd(q.reference, q.welch)?;
        let set = find_tones(&psd, &q.tones);
        let others: Vec<usize> = (0..channels).filter(|&c| c != q.reference).collect();
        let mut order: Vec<usize> = (0..set.tones.len()).collect();
        order.sort_by(|&a, &b| set.tones[b].level_db.total_cmp(&set.tones[a].level_db));
        let tones = order
            .iter()
            .map(|&ti| {
                let t = &set.tones[ti];
                cross_tone(&cs.at_bin(t.peak_bin), q.reference, q.azimuths_deg.as_deref(), t)
            })
            .collect();
        let spectra = match q.spectra_points {
            None => Vec::new(),
            Some(max) => {
                let bins = cs.reference_psd.len();
                let stride = bins.div_ceil(max).max(1);
                let ks: Vec<usize> = (0..bins).step_by(stride).collect();
                others
                    .iter()
                    .enumerate()
                    .map(|(i, &c)| pb::CrossSpectrum {
                        channel: c as u32,
                        frequency_hz: ks.iter().map(|&k| k as f64 * cs.resolution_hz()).collect(),
                        magnitude_pa2_per_hz: ks.iter().map(|&k| cs.csd[i][k].norm()).collect(),
                        phase_deg: ks.iter().map(|&k| cs.phase_deg(i, k)).collect(),
                        coherence: ks.iter().map(|&k| cs.coherence(i, k)).collect(),
                    })
                    .collect()
            }
        };
        let mut notes =
            vec!["Phase is arg(conj(X_ref) X_channel): positive when the channel leads the reference."
                .to_string()];
        if q.azimuths_deg.is_some() && channels >= 3 {
            notes.push(
                "Azimuthal orders: a pattern cos(omega t - m theta) with m > 0 spins towards increasing azimuth; \
                 the decomposition is exact for equally spaced microphones, orders above M/2 alias onto lower ones, \
                 and at M/2 of an even ring +m and -m alias, so the sense there is not determined."
                    .into(),
            );
        }
        let mut used = SPECTRUM_MODELS.to_vec();
        used.push(models::TONE_EXTRACTION);
        used.push(models::CROSS_SPECTRA);
        Ok(pb::CrossSpectraResponse {
            reference_channel: q.reference as u32,
            analysis: Some(analysis(&psd, s.recording.len(), Some(&set))),
            tones,
            spectra,
            compute_time_s: q.started.elapsed().as_secs_f64(),
            provenance: Some(provenance(&used, &q.defaults, notes)),
        })
    }
}
