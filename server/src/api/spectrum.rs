//! SpectrumService: samples, Welch and tone options converted to domain types in one step,
//! and the per-channel analysis turned into responses.

use super::error::{ApiError, Check, FieldViolation, PreconditionViolation};
use super::provenance::{provenance, Defaults};
use crate::dsp::bands::{band_levels, BandLevels};
use crate::dsp::samples::{ChannelView, DecodeError, Format, Layout, Recording};
use crate::dsp::tones::{find_tones, ToneConfig, ToneSet};
use crate::dsp::welch::{
    default_segment, segment_for_resolution, Detrend, Psd, WelchAccumulator, WelchConfig, WelchError,
    MAX_SEGMENT, MIN_SEGMENT,
};
use crate::dsp::window::Window;
use crate::dsp::{spl_db, CAUTION_LEVEL_DB};
use crate::physics::bounds::Bounds;
use crate::physics::models::{self, Model};
use jetloop_proto::pb;

/// Most samples in one request, all channels together (2^25).
pub const MAX_TOTAL_SAMPLES: usize = 1 << 25;
/// Most channels in one request.
pub const MAX_CHANNELS: u32 = 64;

const SAMPLE_RATE: Bounds = Bounds::open_closed(0.0, 1e8, "Hz");
const SCALE: Bounds = Bounds::open_closed(0.0, 1e9, "Pa per unit");
const SENSITIVITY: Bounds = Bounds::open_closed(0.0, 100.0, "V/Pa");
const VOLTS: Bounds = Bounds::open_closed(0.0, 1e6, "V per unit");
const OVERLAP: Bounds = Bounds::closed(0.0, 0.95, "");
const THRESHOLD: Bounds = Bounds::closed(0.0, 100.0, "dB");
const SEPARATION: Bounds = Bounds::closed(0.0, 1e6, "Hz");
const FLOOR_BINS: Bounds = Bounds::closed(3.0, 4097.0, "bins");
const MAX_TONES: Bounds = Bounds::closed(1.0, 1000.0, "");
const HARM_TOL: Bounds = Bounds::closed(0.1, 20.0, "bins");
const HARM_ORDER: Bounds = Bounds::closed(2.0, 50.0, "");
const PREDICTED: Bounds = Bounds::open_closed(0.0, 1e7, "Hz");
const MATCH_TOL: Bounds = Bounds::open_closed(0.0, 1.0, "");
const BAND_MAX: Bounds = Bounds::closed(20.0, 100_000.0, "Hz");
const PSD_POINTS: Bounds = Bounds::closed(16.0, 1_048_577.0, "");

/// Validated, calibrated samples, kept as received and read during the analysis.
#[derive(Debug, Clone)]
pub struct SampleSet {
    /// Sample rate, Hz.
    pub fs: f64,
    /// The samples.
    pub recording: Recording,
    /// Names.
    pub names: Vec<String>,
    /// Request field holding the samples (for errors found while reading them).
    pub field: &'static str,
}

impl SampleSet {
    /// Welch PSD of channel `c`, with a non-finite sample reported against the samples field.
    fn psd(&self, c: usize, config: WelchConfig) -> Result<Psd, ApiError> {
        let w = WelchAccumulator::new(self.fs, config).map_err(|e| welch_error(e, self.field))?;
        self.finish_psd(c, w)
    }

    /// Adds what is left of channel `c` to `w` and finishes the estimate.
    fn finish_psd(&self, c: usize, w: WelchAccumulator) -> Result<Psd, ApiError> {
        let view: ChannelView<'_> = self.recording.channel(c);
        w.finish(&view).map_err(|e| match e {
            WelchError::NotFinite { .. } => ApiError::Invalid(vec![FieldViolation {
                field: self.field.into(),
                description: format!("{}: channel {c}: {e}", self.field),
            }]),
            e => welch_error(e, self.field),
        })
    }
}

/// Kind of the precondition failure for a recording shorter than one Welch segment.
pub const RECORDING_TOO_SHORT: &str = "RECORDING_TOO_SHORT";

/// The API error for a Welch error about the samples at `field`. Segment and overlap choices
/// have already been checked in the conversion, so only a recording too short for one segment
/// and a non-finite sample remain reachable; every variant is mapped by name.
fn welch_error(e: WelchError, field: &str) -> ApiError {
    let description = e.to_string();
    match e {
        WelchError::TooShort { .. } => {
            ApiError::Precondition(PreconditionViolation::new(RECORDING_TOO_SHORT, field, description))
        }
        WelchError::NotFinite { .. } => ApiError::Invalid(vec![FieldViolation {
            field: field.into(),
            description: format!("{field}: {description}"),
        }]),
        WelchError::SegmentLength(_) | WelchError::Overlap { .. } => {
            ApiError::Invalid(vec![FieldViolation {
                field: "welch".into(),
                description: format!("welch: {description}"),
            }])
        }
    }
}

fn layout(check: &mut Check, v: i32) -> Option<Layout> {
    match pb::ChannelLayout::try_from(v) {
        Ok(pb::ChannelLayout::Unspecified | pb::ChannelLayout::Interleaved) => Some(Layout::Interleaved),
        Ok(pb::ChannelLayout::Planar) => Some(Layout::Planar),
        Err(_) => {
            check.other(
                "samples.layout",
                format!("samples.layout = {v} is not a ChannelLayout value (0, 1 or 2)"),
            );
            None
        }
    }
}

/// Converts and decodes `Samples` at `samples`.
///
/// # Errors
/// [`ApiError::TooLarge`] over [`MAX_TOTAL_SAMPLES`]; [`ApiError::Invalid`] for everything
/// else that is wrong, with the field named.
pub fn sample_set(s: Option<pb::Samples>, defaults: &mut Defaults) -> Result<SampleSet, ApiError> {
    sample_set_for(s, defaults, false)
}

/// As [`sample_set`]; for the first message of a block stream (`stream`), raw interleaved
/// bytes are required and an empty first block is allowed.
fn sample_set_for(
    s: Option<pb::Samples>,
    defaults: &mut Defaults,
    stream: bool,
) -> Result<SampleSet, ApiError> {
    use pb::calibration::Scale;
    use pb::samples::Data;
    let mut check = Check::new();
    let Some(pb::Samples { sample_rate_hz, channel_count, layout: lay, data, calibration, channel_names }) =
        s
    else {
        check.missing("samples", "give the sample rate and the samples");
        return check.finish(None);
    };
    let fs = check.range("samples", SAMPLE_RATE.check("sample_rate_hz", sample_rate_hz));
    let channels = if channel_count == 0 {
        defaults.note("samples.channel_count", "1", "one channel");
        1
    } else {
        channel_count
    };
    if channels > MAX_CHANNELS {
        check.other(
            "samples.channel_count",
            format!("samples.channel_count = {channels} is outside the allowed range [1, {MAX_CHANNELS}]"),
        );
    }
    if !channel_names.is_empty() && channel_names.len() != channels as usize {
        check.other(
            "samples.channel_names",
            format!("samples.channel_names has {} names for {channels} channels", channel_names.len()),
        );
    }
    let layout = layout(&mut check, lay);
    let scale = match calibration.and_then(|c| c.scale) {
        None => {
            defaults.note("samples.calibration", "1 Pa per unit", "samples taken as pascals");
            Some(1.0)
        }
        Some(Scale::PascalsPerUnit(k)) => {
            check.range("samples.calibration", SCALE.check("pascals_per_unit", k))
        }
        Some(Scale::Microphone(pb::MicrophoneChain { sensitivity_v_per_pa, volts_per_unit })) => {
            let p = "samples.calibration.microphone";
            let s = check.range(p, SENSITIVITY.check("sensitivity_v_per_pa", sensitivity_v_per_pa));
            let v = check.range(p, VOLTS.check("volts_per_unit", volts_per_unit));
            s.zip(v).map(|(s, v)| v / s)
        }
    };
    let mut raw_format = None;
    let (count, field) = match &data {
        Some(Data::Raw(r)) => {
            raw_format = match pb::SampleFormat::try_from(r.format) {
                Ok(pb::SampleFormat::F32Le) => Some(Format::F32),
                Ok(pb::SampleFormat::F64Le) => Some(Format::F64),
                Ok(pb::SampleFormat::I16Le) => Some(Format::I16),
                Ok(pb::SampleFormat::I32Le) => Some(Format::I32),
                _ => {
                    check.other(
                        "samples.raw.format",
                        format!(
                            "samples.raw.format = {} is not a known sample format: use SAMPLE_FORMAT_F32_LE, \
                             _F64_LE, _I16_LE or _I32_LE",
                            r.format
                        ),
                    );
                    None
                }
            };
            (raw_format.map_or(0, |f| r.data.len() / f.width()), "samples.raw.data")
        }
        Some(Data::Values(v)) => (v.values.len(), "samples.values.values"),
        None => {
            check.missing("samples.data", "set raw (bytes and format) or values");
            (0, "samples.data")
        }
    };
    if count > MAX_TOTAL_SAMPLES {
        return Err(ApiError::TooLarge {
            field: field.into(),
            limit: format!("{MAX_TOTAL_SAMPLES} samples per request (all channels)"),
            actual: format!("{count} samples"),
        });
    }
    if stream {
        if matches!(data, Some(Data::Values(_))) {
            check.other(
                "samples.values",
                "block streams carry raw bytes: set samples.raw (its format, and optionally the first frames)",
            );
        }
        if layout == Some(Layout::Planar) {
            check.other(
                "samples.layout",
                "block streams carry interleaved frames: use CHANNEL_LAYOUT_INTERLEAVED (or leave it unset)",
            );
        }
    }
    if !stream && data.is_some() && count == 0 && check.is_clean() {
        check.other(field, format!("{field} is empty: there are no samples to analyse"));
    }
    let (Some(fs), Some(layout), Some(scale), Some(data)) = (fs, layout, scale, data) else {
        return check.finish(None);
    };
    if !check.is_clean() {
        return check.finish(None);
    }
    let recording = match data {
        // The check above is clean, so a raw format was recognized.
        Data::Raw(r) => {
            Recording::from_bytes(r.data, raw_format.unwrap_or(Format::F32), layout, channels as usize, scale)
        }
        Data::Values(v) => Recording::from_values(v.values, layout, channels as usize, scale),
    };
    match recording {
        Ok(recording) => Ok(SampleSet { fs, recording, names: channel_names, field }),
        Err(e @ DecodeError::Ragged { .. }) => {
            check.other(field, format!("{field}: {e} (samples.channel_count = {channels})"));
            check.finish(None)
        }
    }
}

/// Welch settings before the data length is known.
fn welch_config(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::WelchOptions>,
    fs: f64,
    samples: usize,
) -> Option<WelchConfig> {
    use pb::welch_options::Segment;
    let pb::WelchOptions { window, segment, overlap_fraction, detrend } = o.unwrap_or_default();
    let window = match pb::WindowKind::try_from(window) {
        Ok(pb::WindowKind::Unspecified) => {
            defaults.note("welch.window", "WINDOW_KIND_HANN", "the usual window for tone analysis");
            Some(Window::Hann)
        }
        Ok(pb::WindowKind::Hann) => Some(Window::Hann),
        Ok(pb::WindowKind::Hamming) => Some(Window::Hamming),
        Ok(pb::WindowKind::BlackmanHarris) => Some(Window::BlackmanHarris),
        Ok(pb::WindowKind::FlatTop) => Some(Window::FlatTop),
        Err(_) => {
            check
                .other("welch.window", format!("welch.window = {window} is not a WindowKind value (0 to 4)"));
            None
        }
    };
    let detrend = match pb::DetrendKind::try_from(detrend) {
        Ok(pb::DetrendKind::Unspecified | pb::DetrendKind::Mean) => Some(Detrend::Mean),
        Ok(pb::DetrendKind::None) => Some(Detrend::None),
        Err(_) => {
            check.other(
                "welch.detrend",
                format!("welch.detrend = {detrend} is not a DetrendKind value (0 to 2)"),
            );
            None
        }
    };
    let span = if samples == usize::MAX {
        format!("[{MIN_SEGMENT}, {MAX_SEGMENT}] samples")
    } else {
        format!("[{MIN_SEGMENT}, {}] samples (the data has {samples} per channel)", MAX_SEGMENT.min(samples))
    };
    let nperseg = match segment {
        Some(Segment::SegmentLength(n)) => {
            let n = n as usize;
            if !(MIN_SEGMENT..=MAX_SEGMENT).contains(&n) || n > samples {
                check.other(
                    "welch.segment_length",
                    format!("welch.segment_length = {n} is outside the allowed range {span}"),
                );
                None
            } else {
                Some(n)
            }
        }
        Some(Segment::ResolutionHz(r)) => {
            match check.range("welch", Bounds::open_closed(0.0, fs, "Hz").check("resolution_hz", r)) {
                None => None,
                Some(r) => match segment_for_resolution(fs, r) {
                    Some(n) if n <= samples => Some(n),
                    n => {
                        let need = n.map_or(format!("more than {MAX_SEGMENT}"), |n| n.to_string());
                        check.other(
                            "welch.resolution_hz",
                            format!(
                                "welch.resolution_hz = {r} needs segments of {need} samples, outside \
                                 the allowed range {span}"
                            ),
                        );
                        None
                    }
                },
            }
        }
        None => {
            if samples < MIN_SEGMENT {
                check.other(
                    "samples",
                    format!(
                        "samples: {samples} samples per channel are too few for one segment of {MIN_SEGMENT}"
                    ),
                );
                None
            } else {
                let n = default_segment(fs, samples);
                defaults.note(
                    "welch.segment_length",
                    &n.to_string(),
                    "power of two giving at most 10 Hz resolution, and at least 4 segments' worth of data",
                );
                Some(n)
            }
        }
    };
    let overlap = match overlap_fraction {
        None => {
            defaults.note("welch.overlap_fraction", "0.5", "50 % overlap (common practice with Hann)");
            Some(0.5)
        }
        Some(f) => check.range("welch", OVERLAP.check("overlap_fraction", f)),
    };
    match (window, detrend, nperseg, overlap) {
        (Some(window), Some(detrend), Some(nperseg), Some(f)) => {
            let noverlap = ((f * nperseg as f64).round() as usize).min(nperseg - 1);
            Some(WelchConfig { window, nperseg, noverlap, detrend })
        }
        _ => None,
    }
}

fn tone_config(check: &mut Check, o: Option<pb::ToneOptions>) -> ToneConfig {
    let pb::ToneOptions {
        threshold_db,
        min_separation_hz,
        floor_window_bins,
        max_tones,
        harmonic_tolerance_bins,
        max_harmonic_order,
    } = o.unwrap_or_default();
    let d = ToneConfig::default();
    let mut get = |v: Option<f64>, b: Bounds, name: &'static str, dflt: f64| match v {
        None => dflt,
        Some(v) => check.range("tones", b.check(name, v)).unwrap_or(dflt),
    };
    ToneConfig {
        threshold_db: get(threshold_db, THRESHOLD, "threshold_db", d.threshold_db),
        min_separation_hz: get(min_separation_hz, SEPARATION, "min_separation_hz", d.min_separation_hz),
        floor_window_bins: get(floor_window_bins.map(f64::from), FLOOR_BINS, "floor_window_bins", 65.0)
            as usize,
        max_tones: get(max_tones.map(f64::from), MAX_TONES, "max_tones", 50.0) as usize,
        harmonic_tolerance_bins: get(
            harmonic_tolerance_bins,
            HARM_TOL,
            "harmonic_tolerance_bins",
            d.harmonic_tolerance_bins,
        ),
        max_harmonic_order: get(max_harmonic_order.map(f64::from), HARM_ORDER, "max_harmonic_order", 10.0)
            as u32,
    }
}

/// A validated tone-extraction question with its decoded samples.
#[derive(Debug, Clone)]
pub struct ToneQuery {
    started: std::time::Instant,
    samples: SampleSet,
    welch: WelchConfig,
    tones: ToneConfig,
    predicted: Option<(f64, f64)>,
    bands: Option<f64>,
    psd_points: Option<Option<usize>>,
    defaults: Defaults,
}

impl TryFrom<pb::ExtractTonesRequest> for ToneQuery {
    type Error = ApiError;

    fn try_from(req: pb::ExtractTonesRequest) -> Result<Self, ApiError> {
        tone_query(req, None)
    }
}

/// Converts a tone request. `stream` is `Some(expected frames per channel, if known)` for the
/// first message of a block stream, whose data is still to come.
fn tone_query(req: pb::ExtractTonesRequest, stream: Option<Option<u64>>) -> Result<ToneQuery, ApiError> {
    let pb::ExtractTonesRequest {
        samples,
        welch,
        tones,
        predicted_screech_hz,
        match_tolerance_fraction,
        include_band_levels,
        max_band_frequency_hz,
        psd_output,
    } = req;
    let started = std::time::Instant::now();
    let mut defaults = Defaults::default();
    let samples = sample_set_for(samples, &mut defaults, stream.is_some())?;
    let known = match stream {
        None => samples.recording.len(),
        Some(Some(frames)) => usize::try_from(frames).unwrap_or(usize::MAX),
        Some(None) => usize::MAX,
    };
    let mut check = Check::new();
    let w = welch_config(&mut check, &mut defaults, welch, samples.fs, known);
    let tones = tone_config(&mut check, tones);
    let predicted = predicted_screech_hz.and_then(|f| {
        let f = check.range("", PREDICTED.check("predicted_screech_hz", f))?;
        let tol = match match_tolerance_fraction {
            None => 0.05,
            Some(t) => check.range("", MATCH_TOL.check("match_tolerance_fraction", t))?,
        };
        Some((f, tol))
    });
    let bands = include_band_levels.then(|| match max_band_frequency_hz {
        None => 100_000.0,
        Some(f) => check.range("", BAND_MAX.check("max_band_frequency_hz", f)).unwrap_or(100_000.0),
    });
    let psd_points = psd_output.filter(|p| p.include).map(|p| {
        p.max_points.and_then(|m| {
            check.range("psd_output", PSD_POINTS.check("max_points", f64::from(m))).map(|v| v as usize)
        })
    });
    let q =
        w.map(|welch| ToneQuery { started, samples, welch, tones, predicted, bands, psd_points, defaults });
    check.finish(q)
}

/// A validated band-level question.
#[derive(Debug, Clone)]
pub struct BandQuery {
    samples: SampleSet,
    welch: WelchConfig,
    max_hz: f64,
    defaults: Defaults,
}

impl TryFrom<pb::BandLevelsRequest> for BandQuery {
    type Error = ApiError;

    fn try_from(req: pb::BandLevelsRequest) -> Result<Self, ApiError> {
        let pb::BandLevelsRequest { samples, welch, max_band_frequency_hz } = req;
        let mut defaults = Defaults::default();
        let samples = sample_set(samples, &mut defaults)?;
        let mut check = Check::new();
        let w = welch_config(&mut check, &mut defaults, welch, samples.fs, samples.recording.len());
        let max_hz = match max_band_frequency_hz {
            None => 100_000.0,
            Some(f) => check.range("", BAND_MAX.check("max_band_frequency_hz", f)).unwrap_or(100_000.0),
        };
        check.finish(w.map(|welch| BandQuery { samples, welch, max_hz, defaults }))
    }
}

fn analysis(psd: &Psd, samples: usize, tones: Option<&ToneSet>) -> pb::AnalysisParameters {
    pb::AnalysisParameters {
        window: psd.config.window.name().to_string(),
        segment_length: psd.config.nperseg as u32,
        overlap_samples: psd.config.noverlap as u32,
        averages: psd.segments as u32,
        frequency_resolution_hz: psd.resolution_hz(),
        enbw_hz: psd.enbw_hz(),
        enbw_bins: psd.sums.enbw_bins(),
        coherent_gain: psd.sums.coherent_gain(),
        detrend: match psd.config.detrend {
            Detrend::Mean => "mean",
            Detrend::None => "none",
        }
        .into(),
        normalized_random_error: psd.normalized_random_error(),
        sample_rate_hz: psd.fs,
        samples_per_channel: samples as u64,
        unused_samples: psd.unused_samples as u64,
        frequency_estimator: tones.map(|t| t.estimator.to_string()).unwrap_or_default(),
        floor_estimator: tones
            .map(|_| "running median of ln(PSD) over floor_window_bins bins".to_string())
            .unwrap_or_default(),
    }
}

fn band_summary(b: &BandLevels) -> pb::BandSummary {
    pb::BandSummary {
        bands: b
            .bands
            .iter()
            .map(|x| pb::OneThirdOctaveBand {
                nominal_hz: x.nominal_hz,
                exact_hz: x.exact_hz,
                lower_edge_hz: x.lower_hz,
                upper_edge_hz: x.upper_hz,
                level_db: x.level_db,
                a_weighted_level_db: x.a_weighted_level_db,
                resolved: x.resolved,
            })
            .collect(),
        overall_level_db: b.overall_db,
        a_weighted_overall_db: b.a_weighted_overall_db,
        band_span_level_db: b.band_span_db,
        outside_span_level_db: b.outside_span_db,
    }
}

fn caution(level_db: f64, what: &str) -> String {
    format!(
        "{what} reaches {level_db:.1} dB re 20 uPa, above {CAUTION_LEVEL_DB} dB: hearing damage is possible \
         near the rig. Follow local occupational-noise codes (common limits 85 dB(A) daily exposure, \
         140 dB(C) peak) and the facility's procedures."
    )
}

fn psd_data(psd: &Psd, floor: Option<&[f64]>, max_points: Option<usize>) -> pb::PsdData {
    let bins = psd.density.len();
    let g = max_points.map_or(1, |m| bins.div_ceil(m).max(1));
    let avg =
        |v: &[f64]| -> Vec<f64> { v.chunks(g).map(|c| c.iter().sum::<f64>() / c.len() as f64).collect() };
    let freqs: Vec<f64> = (0..bins).map(|k| psd.frequency(k)).collect();
    pb::PsdData {
        frequency_hz: avg(&freqs),
        density_pa2_per_hz: avg(&psd.density),
        floor_pa2_per_hz: floor.map(avg).unwrap_or_default(),
        decimation: g as u32,
    }
}

const SPECTRUM_MODELS: [Model; 2] = [models::WELCH_PSD, models::SPL];

/// Runs the tone extraction and builds the response.
///
/// # Errors
/// None in practice: every configuration was checked against the data length; a failure is
/// reported as FAILED_PRECONDITION.
pub fn tones_response(q: &ToneQuery) -> Result<pb::ExtractTonesResponse, ApiError> {
    let psds = (0..q.samples.recording.channel_count())
        .map(|c| q.samples.psd(c, q.welch))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(tones_answer(q, &psds, q.started))
}

/// The answer from one PSD per channel; `t` is when the server's work began.
fn tones_answer(q: &ToneQuery, psds: &[Psd], t: std::time::Instant) -> pb::ExtractTonesResponse {
    let mut out = Vec::with_capacity(psds.len());
    for (c, psd) in psds.iter().enumerate() {
        let set = find_tones(psd, &q.tones);
        let rms_pa = psd.moments.rms_about_mean();
        let overall = spl_db(rms_pa * rms_pa);
        let mut cautions = Vec::new();
        if let Some(t) = set.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)) {
            if t.level_db >= CAUTION_LEVEL_DB {
                cautions.push(caution(t.level_db, &format!("The tone at {:.1} Hz", t.frequency_hz)));
            }
        }
        if overall >= CAUTION_LEVEL_DB {
            cautions.push(caution(overall, "The overall level"));
        }
        let predicted_match = q.predicted.map(|(f, tol)| {
            let nearest = set
                .tones
                .iter()
                .enumerate()
                .min_by(|a, b| (a.1.frequency_hz - f).abs().total_cmp(&(b.1.frequency_hz - f).abs()));
            let tol_hz = tol * f;
            match nearest {
                None => pb::PredictionMatch { predicted_hz: f, tolerance_hz: tol_hz, ..Default::default() },
                Some((i, t)) => pb::PredictionMatch {
                    predicted_hz: f,
                    tone_index: Some(i as u32),
                    tone_frequency_hz: Some(t.frequency_hz),
                    difference_hz: Some(t.frequency_hz - f),
                    relative_difference: Some((t.frequency_hz - f) / f),
                    matched: (t.frequency_hz - f).abs() <= tol_hz,
                    tolerance_hz: tol_hz,
                },
            }
        });
        out.push(pb::ChannelSpectrum {
            channel: c as u32,
            name: q.samples.names.get(c).cloned().unwrap_or_default(),
            analysis: Some(analysis(psd, q.samples.recording.len(), Some(&set))),
            rms_pa,
            overall_level_db: overall,
            tones: set
                .tones
                .iter()
                .map(|t| pb::ExtractedTone {
                    frequency_hz: t.frequency_hz,
                    peak_bin_frequency_hz: t.peak_bin_hz,
                    level_db: t.level_db,
                    mean_square_pa2: t.mean_square_pa2,
                    peak_density_pa2_per_hz: t.peak_density,
                    floor_density_pa2_per_hz: t.floor_density,
                    tone_to_floor_db: t.tone_to_floor_db,
                    bandwidth_3db_hz: t.bandwidth_3db_hz,
                    family: t.family.map(|f| f.0 as u32),
                    harmonic_order: t.family.map(|f| f.1),
                })
                .collect(),
            families: set
                .families
                .iter()
                .enumerate()
                .map(|(i, f)| pb::HarmonicFamily {
                    id: i as u32,
                    fundamental_hz: f.fundamental_hz,
                    tone_indices: f.members.iter().map(|m| m.0 as u32).collect(),
                    orders: f.members.iter().map(|m| m.1).collect(),
                    level_db: f.level_db,
                })
                .collect(),
            combinations: set
                .combinations
                .iter()
                .map(|c| pb::CombinationTone {
                    tone_index: c.tone as u32,
                    family_a: c.families.0 as u32,
                    family_b: c.families.1 as u32,
                    is_sum: c.sum,
                    expected_hz: c.expected_hz,
                })
                .collect(),
            predicted_match,
            bands: q.bands.map(|m| band_summary(&band_levels(psd, m))),
            psd: q.psd_points.map(|m| psd_data(psd, Some(&set.floor), m)),
            cautions,
        });
    }
    let mut used = SPECTRUM_MODELS.to_vec();
    used.push(models::TONE_EXTRACTION);
    if q.bands.is_some() {
        used.push(models::THIRD_OCTAVE);
        used.push(models::A_WEIGHTING);
    }
    pb::ExtractTonesResponse {
        channels: out,
        compute_time_s: t.elapsed().as_secs_f64(),
        provenance: Some(provenance(&used, &q.defaults, Vec::new())),
    }
}

/// A block stream being analysed: the validated question, the recording as it grows, and one
/// Welch accumulator per channel that takes each segment as soon as its last frame arrives.
#[derive(Debug)]
pub struct ToneStream {
    query: ToneQuery,
    welch: Vec<WelchAccumulator>,
    blocks: usize,
}

fn not_first(field: &str) -> ApiError {
    ApiError::Invalid(vec![FieldViolation {
        field: field.into(),
        description: format!("{field} belongs in the first message of the stream only"),
    }])
}

impl ToneStream {
    /// Validates the first message and takes the frames it carries.
    ///
    /// # Errors
    /// As for ExtractTones, with field paths under `request`; a missing `request`; values or
    /// planar channels.
    pub fn start(first: pb::SampleBlock) -> Result<Self, ApiError> {
        let pb::SampleBlock { request, frames, expected_frames } = first;
        let Some(request) = request else {
            let mut check = Check::new();
            check.missing("request", "the first message of a block stream carries the question");
            return check.finish(None);
        };
        let mut query = tone_query(request, Some(expected_frames)).map_err(|e| e.within("request"))?;
        query.samples.field = "frames";
        let (fs, config) = (query.samples.fs, query.welch);
        let welch = (0..query.samples.recording.channel_count())
            .map(|_| WelchAccumulator::new(fs, config))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| welch_error(e, "frames"))?;
        let mut stream = Self { query, welch, blocks: 0 };
        stream.push(frames)?;
        Ok(stream)
    }

    /// Takes a later message.
    ///
    /// # Errors
    /// A `request` or `expected_frames` after the first message; frames that are not whole;
    /// more than [`MAX_TOTAL_SAMPLES`] in all (`RESOURCE_EXHAUSTED`).
    pub fn next(&mut self, block: pb::SampleBlock) -> Result<(), ApiError> {
        if block.request.is_some() {
            return Err(not_first("request"));
        }
        if block.expected_frames.is_some() {
            return Err(not_first("expected_frames"));
        }
        self.push(block.frames)
    }

    fn push(&mut self, frames: bytes::Bytes) -> Result<(), ApiError> {
        self.blocks += 1;
        let rec = &mut self.query.samples.recording;
        rec.push_block(frames).map_err(|e| {
            ApiError::Invalid(vec![FieldViolation {
                field: "frames".into(),
                description: format!("frames of message {}: {e}", self.blocks),
            }])
        })?;
        let total = rec.len() * rec.channel_count();
        if total > MAX_TOTAL_SAMPLES {
            return Err(ApiError::TooLarge {
                field: "frames".into(),
                limit: format!("{MAX_TOTAL_SAMPLES} samples per stream (all channels)"),
                actual: format!("{total} samples after message {}", self.blocks),
            });
        }
        for (c, w) in self.welch.iter_mut().enumerate() {
            w.advance(&rec.channel(c));
        }
        Ok(())
    }

    /// Messages taken so far.
    pub fn messages(&self) -> usize {
        self.blocks
    }

    /// Finishes every channel's estimate and builds the answer.
    ///
    /// # Errors
    /// A stream too short for one segment (FAILED_PRECONDITION); a non-finite sample.
    pub fn finish(self) -> Result<pb::ExtractTonesResponse, ApiError> {
        let t = std::time::Instant::now();
        let q = &self.query;
        let psds = self
            .welch
            .into_iter()
            .enumerate()
            .map(|(c, w)| q.samples.finish_psd(c, w))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(tones_answer(q, &psds, t))
    }
}

/// Runs the band analysis and builds the response.
///
/// # Errors
/// As [`tones_response`].
pub fn bands_response(q: &BandQuery) -> Result<pb::BandLevelsResponse, ApiError> {
    let mut out = Vec::new();
    for c in 0..q.samples.recording.channel_count() {
        let psd = q.samples.psd(c, q.welch)?;
        let b = band_levels(&psd, q.max_hz);
        let mut cautions = Vec::new();
        if b.overall_db >= CAUTION_LEVEL_DB {
            cautions.push(caution(b.overall_db, "The overall level"));
        }
        out.push(pb::ChannelBands {
            channel: c as u32,
            name: q.samples.names.get(c).cloned().unwrap_or_default(),
            analysis: Some(analysis(&psd, q.samples.recording.len(), None)),
            bands: Some(band_summary(&b)),
            cautions,
        });
    }
    let mut used = SPECTRUM_MODELS.to_vec();
    used.extend([models::THIRD_OCTAVE, models::A_WEIGHTING]);
    Ok(pb::BandLevelsResponse { channels: out, provenance: Some(provenance(&used, &q.defaults, Vec::new())) })
}
