//! Samples: bytes or values, layout, sample rate and calibration, decoded once.

use super::*;
use crate::cancel::Cancel;

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
    /// Stops the analysis when set (deadline passed, caller gone).
    pub cancel: Cancel,
}

impl SampleSet {
    /// Welch PSD of channel `c`, with a non-finite sample reported against the samples field.
    pub(super) fn psd(&self, c: usize, config: WelchConfig) -> Result<Psd, ApiError> {
        let w = WelchAccumulator::new(self.fs, config)
            .map_err(|e| welch_error(e, self.field))?
            .with_cancel(self.cancel.clone());
        self.finish_psd(c, w)
    }

    /// Adds what is left of channel `c` to `w` and finishes the estimate.
    pub(super) fn finish_psd(&self, c: usize, w: WelchAccumulator) -> Result<Psd, ApiError> {
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

/// Sample bytes a `Samples` message holds: the raw bytes, or 8 per packed value.
pub fn held_bytes(s: Option<&pb::Samples>) -> usize {
    match s.and_then(|s| s.data.as_ref()) {
        Some(pb::samples::Data::Raw(r)) => r.data.len(),
        Some(pb::samples::Data::Values(v)) => v.values.len().saturating_mul(8),
        None => 0,
    }
}

/// Bytes per sample value of `s`: 8 for values, the raw format's width, 0 when unknown.
pub fn sample_width(s: Option<&pb::Samples>) -> usize {
    match s.and_then(|s| s.data.as_ref()) {
        Some(pb::samples::Data::Values(_)) => 8,
        Some(pb::samples::Data::Raw(r)) => match pb::SampleFormat::try_from(r.format) {
            Ok(pb::SampleFormat::F32Le | pb::SampleFormat::I32Le) => 4,
            Ok(pb::SampleFormat::F64Le) => 8,
            Ok(pb::SampleFormat::I16Le) => 2,
            Ok(pb::SampleFormat::Unspecified) | Err(_) => 0,
        },
        None => 0,
    }
}

/// Sample values in `bytes` bytes of width `width` (0 when the width is unknown).
pub fn values_in(bytes: usize, width: usize) -> u64 {
    bytes.checked_div(width).unwrap_or(0) as u64
}

/// The samples of a request (`stream` None) or of a block stream's first message (`Some`, with
/// the frames per channel the stream announces, if any), and the frames per channel known in
/// advance for choosing a default segment (the recording's, the announced count, or unbounded).
///
/// # Errors
/// As [`sample_set_for`].
pub(super) fn samples_and_known(
    samples: Option<pb::Samples>,
    defaults: &mut Defaults,
    stream: Option<Option<u64>>,
) -> Result<(SampleSet, usize), ApiError> {
    let samples = sample_set_for(samples, defaults, stream.is_some())?;
    let known = match stream {
        None => samples.recording.len(),
        Some(Some(frames)) => usize::try_from(frames).unwrap_or(usize::MAX),
        Some(None) => usize::MAX,
    };
    Ok((samples, known))
}

/// As [`sample_set`]; for the first message of a block stream (`stream`), raw interleaved
/// bytes are required and an empty first block is allowed.
pub(super) fn sample_set_for(
    s: Option<pb::Samples>,
    defaults: &mut Defaults,
    stream: bool,
) -> Result<SampleSet, ApiError> {
    use pb::samples::Data;
    let mut check = Check::new();
    let Some(pb::Samples {
        sample_rate_hz,
        channel_count,
        layout: lay,
        data,
        calibration,
        channel_names,
        channel_calibrations,
    }) = s
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
    // One calibration for every channel, or one per channel (never both, never neither).
    let (scale, channel_scales) = match (calibration, channel_calibrations.is_empty()) {
        (Some(c), true) => (scale_of(&mut check, Some(c), "samples.calibration"), None),
        (None, false) => {
            if channel_calibrations.len() != channels as usize {
                check.other(
                    "samples.channel_calibrations",
                    format!(
                        "samples.channel_calibrations has {} entries for {channels} channels: give one per channel",
                        channel_calibrations.len()
                    ),
                );
            }
            let scales: Vec<Option<f64>> = channel_calibrations
                .into_iter()
                .enumerate()
                .map(|(i, c)| scale_of(&mut check, Some(c), &format!("samples.channel_calibrations[{i}]")))
                .collect();
            (Some(1.0), scales.into_iter().collect::<Option<Vec<f64>>>())
        }
        (Some(_), false) => {
            check.other(
                "samples.channel_calibrations",
                "samples.channel_calibrations and samples.calibration are both set: give one calibration for \
                 all channels or one per channel, not both",
            );
            (None, None)
        }
        (None, true) => (scale_of(&mut check, None, "samples.calibration"), None),
    };
    let mut raw_format = None;
    let (count, field) = match &data {
        Some(Data::Raw(r)) => {
            raw_format = match pb::SampleFormat::try_from(r.format) {
                Ok(pb::SampleFormat::F32Le) => Some(Format::F32),
                Ok(pb::SampleFormat::F64Le) => Some(Format::F64),
                Ok(pb::SampleFormat::I16Le) => Some(Format::I16),
                Ok(pb::SampleFormat::I32Le) => Some(Format::I32),
                Ok(pb::SampleFormat::Unspecified) | Err(_) => {
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
    let recording = match channel_scales {
        Some(scales) => recording.and_then(|r| r.with_channel_scales(scales)),
        None => recording,
    };
    match recording {
        Ok(recording) => {
            Ok(SampleSet { fs, recording, names: channel_names, field, cancel: Cancel::default() })
        }
        Err(e @ DecodeError::Ragged { .. }) => {
            check.other(field, format!("{field}: {e} (samples.channel_count = {channels})"));
            check.finish(None)
        }
        Err(e @ DecodeError::Calibrations { .. }) => {
            check.other("samples.channel_calibrations", format!("samples.channel_calibrations: {e}"));
            check.finish(None)
        }
    }
}

/// Pascals per unit of one calibration message at `path` (`samples.calibration` or an entry of
/// `samples.channel_calibrations`); `None` with the violation recorded when it is missing or
/// out of range.
fn scale_of(check: &mut Check, calibration: Option<pb::Calibration>, path: &str) -> Option<f64> {
    use pb::calibration::Scale;
    match calibration.and_then(|c| c.scale) {
        None => {
            check.missing(
                path,
                "give pascals_per_unit, microphone (sensitivity and volts per unit), or in_pascals = true \
                 for samples already in pascals; no unit is assumed",
            );
            None
        }
        Some(Scale::InPascals(true)) => Some(1.0),
        Some(Scale::InPascals(false)) => {
            check.other(
                format!("{path}.in_pascals"),
                format!(
                    "{path}.in_pascals = false: set it true only for samples already in pascals; \
                     otherwise give pascals_per_unit or microphone"
                ),
            );
            None
        }
        Some(Scale::PascalsPerUnit(k)) => check.range(path, SCALE.check("pascals_per_unit", k)),
        Some(Scale::Microphone(pb::MicrophoneChain { sensitivity_v_per_pa, volts_per_unit })) => {
            let p = format!("{path}.microphone");
            let s = check.range(&p, SENSITIVITY.check("sensitivity_v_per_pa", sensitivity_v_per_pa));
            let v = check.range(&p, VOLTS.check("volts_per_unit", volts_per_unit));
            s.zip(v).map(|(s, v)| v / s)
        }
    }
}
