//! Cross-channel analysis: the validated question and the answer.

use super::*;
use crate::api::Compute;
use crate::cancel::Cancel;
use crate::dsp::cross::CrossAtBin;
use crate::dsp::cross::{
    azimuthal_modes, cross_spectra, pair_symmetry, radians, CrossAccumulator, CrossSpectra, Pattern,
};
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
    pub(super) started: std::time::Instant,
    pub(super) samples: SampleSet,
    pub(super) welch: WelchConfig,
    tones: ToneConfig,
    pub(super) reference: usize,
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
        cross_query(req, None)
    }
}

/// Validates a CrossSpectra question. For the first message of a block stream (`stream`:
/// the frames per channel it announces, if any) raw interleaved bytes are required, the first
/// block may be empty, and the segment length is checked against the announced length.
pub(super) fn cross_query(
    req: pb::CrossSpectraRequest,
    stream: Option<Option<u64>>,
) -> Result<CrossQuery, ApiError> {
    let pb::CrossSpectraRequest { samples, welch, tones, reference_channel, positions, spectra_max_points } =
        req;
    let started = std::time::Instant::now();
    let mut defaults = Defaults::default();
    let (samples, known) = samples_and_known(samples, &mut defaults, stream)?;
    let channels = samples.recording.channel_count();
    let mut check = Check::new();
    if channels < 2 {
        check.other(
            "samples.channel_count",
            format!("samples.channel_count = {channels}: cross-channel analysis needs at least 2 channels"),
        );
    }
    let w = welch_config(&mut check, &mut defaults, welch, samples.fs, known);
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

/// How far above the reference's density at the same bin another channel's tone must stand
/// to be reported as missed by the reference, dB.
const NODE_EXCESS_DB: f64 = 10.0;

/// Frequencies reported in node warnings at most (strongest excess first).
const NODE_WARNINGS_MAX: usize = 5;

/// A tone of another channel that the reference misses.
#[derive(Debug, Clone, Copy)]
struct Missed {
    /// Peak bin.
    bin: usize,
    /// Refined frequency, Hz.
    frequency_hz: f64,
    /// Channel it stands in.
    channel: usize,
    /// Its density over the reference's at the peak bin, dB.
    excess_db: f64,
    /// Its density at the peak bin, Pa^2/Hz.
    density: f64,
}

/// Warnings for tones the reference channel misses: a tone found in another channel's PSD
/// (with the reference's tone settings), standing [`NODE_EXCESS_DB`] or more above the
/// reference's density at its peak bin, with no reference tone within the window's main lobe
/// of it. Tones are taken from the reference channel only, so with the reference at a node of
/// a standing mode such a tone would otherwise vanish from the answer without a word. One
/// sentence per frequency, naming the channels and the strongest one as a better reference.
/// `template` is the reference's PSD (its settings give the other channels' tone search).
fn node_warnings(
    cs: &crate::dsp::cross::CrossSpectra,
    template: &Psd,
    reference: usize,
    reference_tones: &[Tone],
    tone_cfg: &ToneConfig,
) -> Vec<String> {
    let lobe = template.config.window.main_lobe_half_width_bins();
    let others: Vec<usize> = (0..cs.psd.len() + 1).filter(|&c| c != reference).collect();
    let ratio = 10f64.powf(NODE_EXCESS_DB / 10.0);
    let mut missed: Vec<Missed> = Vec::new();
    for (i, &channel) in others.iter().enumerate() {
        let psd = Psd { density: cs.psd[i].clone(), ..template.clone() };
        for t in find_tones(&psd, tone_cfg).tones {
            let bin = t.peak_bin;
            let (density, r) = (cs.psd[i][bin], cs.reference_psd[bin]);
            let in_reference = reference_tones.iter().any(|rt| rt.peak_bin.abs_diff(bin) <= lobe);
            if !in_reference && density >= ratio * r {
                let excess_db = 10.0 * (density / r).log10();
                missed.push(Missed { bin, frequency_hz: t.frequency_hz, channel, excess_db, density });
            }
        }
    }
    // Tones of different channels within a main lobe of each other are one tone.
    missed.sort_by(|a, b| a.bin.cmp(&b.bin).then(a.channel.cmp(&b.channel)));
    let mut groups: Vec<Vec<Missed>> = Vec::new();
    for m in missed {
        match groups.last_mut() {
            Some(g) if m.bin - g[0].bin <= lobe => g.push(m),
            _ => groups.push(vec![m]),
        }
    }
    let max_excess = |g: &[Missed]| g.iter().map(|m| m.excess_db).fold(f64::MIN, f64::max);
    groups.sort_by(|a, b| max_excess(b).total_cmp(&max_excess(a)));
    let more = groups.len().saturating_sub(NODE_WARNINGS_MAX);
    let mut out: Vec<String> = groups
        .iter()
        .take(NODE_WARNINGS_MAX)
        .filter_map(|g| {
            let best = g.iter().max_by(|a, b| a.density.total_cmp(&b.density))?;
            let mut chans: Vec<usize> = g.iter().map(|m| m.channel).collect();
            chans.sort_unstable();
            chans.dedup();
            let list = chans.iter().map(usize::to_string).collect::<Vec<_>>().join(", ");
            let noun = if chans.len() == 1 { "channel" } else { "channels" };
            Some(format!(
                "a tone at {:.1} Hz stands in {noun} {list} (up to {:.1} dB above reference channel \
                 {reference} at that frequency) but is not found in reference channel {reference}, and \
                 tones are taken from the reference only: the reference may sit at a node of a standing \
                 mode; repeat with another reference, e.g. reference_channel = {} (strongest there)",
                best.frequency_hz,
                max_excess(g),
                best.channel
            ))
        })
        .collect();
    if more > 0 {
        out.push(format!(
            "{more} more tones stand in other channels but not in reference channel {reference}"
        ));
    }
    out
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
        let cs =
            cross_spectra(&views, q.reference, s.fs, q.welch, &s.cancel).map_err(|e| q.cross_error(e))?;
        // Tones of the reference channel from its own PSD (the same estimate as ExtractTones).
        let psd = s.psd(q.reference, q.welch)?;
        Ok(q.answer(&cs, &psd))
    }
}

impl CrossQuery {
    /// A cross-spectral estimate for this question, stopped by the samples' cancellation flag.
    ///
    /// # Errors
    /// A bad segment length or overlap (already checked when the question was validated).
    pub(super) fn accumulator(&self) -> Result<CrossAccumulator, ApiError> {
        let s = &self.samples;
        CrossAccumulator::new(s.recording.channel_count(), self.reference, s.fs, self.welch)
            .map(|a| a.with_cancel(s.cancel.clone()))
            .map_err(|e| welch_error(e, s.field))
    }

    /// A cross-spectral estimate's error, against the samples field.
    pub(super) fn cross_error(&self, e: WelchError) -> ApiError {
        let field = self.samples.field;
        match e {
            WelchError::NotFinite { .. } => ApiError::Invalid(vec![FieldViolation {
                field: field.into(),
                description: format!("{field}: {e}"),
            }]),
            e => welch_error(e, field),
        }
    }

    /// Builds the answer from the cross-spectra `cs` and the reference channel's PSD `psd`.
    pub(super) fn answer(&self, cs: &CrossSpectra, psd: &Psd) -> pb::CrossSpectraResponse {
        let q = self;
        let s = &q.samples;
        let channels = s.recording.channel_count();
        // Tones of the reference channel from its own PSD (the same estimate as ExtractTones).
        let set = find_tones(psd, &q.tones);
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
        pb::CrossSpectraResponse {
            reference_channel: q.reference as u32,
            analysis: Some(analysis(psd, s.recording.len(), Some(&set))),
            tones,
            spectra,
            warnings: node_warnings(cs, psd, q.reference, &set.tones, &q.tones),
            compute_time_s: q.started.elapsed().as_secs_f64(),
            provenance: Some(provenance(&used, &q.defaults, notes)),
        }
    }
}
