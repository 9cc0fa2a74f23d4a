//! CalibrationService: a calibrator recording and what the calibrator states, validated into a
//! [`CalibratorQuery`], read channel by channel with `jetloop_core::dsp::calibrator`, and the
//! readings turned into the response.

use super::error::{ApiError, Check, FieldViolation, PreconditionViolation};
use super::field::Fields;
use super::provenance::{provenance, Defaults};
use super::spectrum::{sample_set, SampleSet, RECORDING_TOO_SHORT};
use super::Compute;
use crate::cancel::Cancel;
use crate::dsp::calibrator::{
    read_channel, CalibratorConfig, CalibratorError, Plan, Reading, Warning, STATED_FREQUENCY, STATED_LEVEL,
    WINDOW,
};
use crate::dsp::limits::VOLTS;
use crate::dsp::welch::WelchError;
use crate::physics::models;
use jetloop_proto::pb;

/// Kind of the precondition failure for a stated frequency the sample rate cannot carry.
pub const FREQUENCY_ABOVE_BAND: &str = "FREQUENCY_ABOVE_BAND";
/// Kind of the precondition failure for a channel with no tone.
pub const NO_CALIBRATOR_TONE: &str = "NO_CALIBRATOR_TONE";

/// A validated calibrator question.
#[derive(Debug, Clone)]
pub struct CalibratorQuery {
    samples: SampleSet,
    config: CalibratorConfig,
    /// Volts per unit of each channel (empty: not given).
    volts_per_unit: Vec<f64>,
    defaults: Defaults,
}

/// A stated value that is required: 0 (unset) is named as missing, anything else checked.
fn stated(
    check: &mut Check,
    name: &'static str,
    v: f64,
    bounds: crate::physics::Bounds,
    what: &str,
) -> Option<f64> {
    if v == 0.0 {
        check.missing(name, what);
        None
    } else {
        check.range("", bounds.check(name, v))
    }
}

impl TryFrom<pb::CalibratorSensitivityRequest> for CalibratorQuery {
    type Error = ApiError;

    fn try_from(req: pb::CalibratorSensitivityRequest) -> Result<Self, ApiError> {
        let pb::CalibratorSensitivityRequest {
            samples,
            stated_level_db,
            stated_frequency_hz,
            volts_per_unit,
            frequency_tolerance_fraction,
            max_harmonic_order,
        } = req;
        let mut check = Check::new();
        let mut defaults = Defaults::default();
        // The recording is read in its own units: no calibration to pascals may come with it.
        let samples = match samples {
            Some(s) if s.calibration.is_some() || !s.channel_calibrations.is_empty() => {
                let field = if s.calibration.is_some() {
                    "samples.calibration"
                } else {
                    "samples.channel_calibrations"
                };
                check.other(
                    field,
                    format!(
                        "{field} is set: a calibrator recording is sent in its recorded units (volts or \
                         counts); leave it unset and give volts_per_unit"
                    ),
                );
                None
            }
            Some(s) => Some(pb::Samples {
                calibration: Some(pb::Calibration { scale: Some(pb::calibration::Scale::InPascals(true)) }),
                ..s
            }),
            None => {
                check.missing("samples", "give the calibrator recording and its sample rate");
                None
            }
        };
        let level = stated(
            &mut check,
            "stated_level_db",
            stated_level_db,
            STATED_LEVEL,
            "the level the calibrator states, dB re 20 uPa (e.g. 94 or 114)",
        );
        let frequency = stated(
            &mut check,
            "stated_frequency_hz",
            stated_frequency_hz,
            STATED_FREQUENCY,
            "the frequency the calibrator states, Hz (e.g. 1000 or 250)",
        );
        let mut fields = Fields::new(&mut check, &mut defaults, "");
        let tolerance =
            fields.read(frequency_tolerance_fraction, &CalibratorConfig::FREQUENCY_TOLERANCE_FRACTION);
        let order = fields.read_count(max_harmonic_order, &CalibratorConfig::MAX_HARMONIC_ORDER);
        for (i, v) in volts_per_unit.iter().enumerate() {
            if let Err(e) = VOLTS.check("volts_per_unit", *v) {
                check.other(
                    format!("volts_per_unit[{i}]"),
                    format!("volts_per_unit[{i}] = {v} is outside the allowed range {}", e.allowed),
                );
            }
        }
        let samples = match samples {
            Some(s) if check.is_clean() => Some(sample_set(Some(s), &mut defaults)?),
            _ => None,
        };
        if let Some(s) = &samples {
            let channels = s.recording.channel_count();
            if !matches!(volts_per_unit.len(), 0 | 1) && volts_per_unit.len() != channels {
                check.other(
                    "volts_per_unit",
                    format!(
                        "volts_per_unit has {} entries for {channels} channels: give none, one for every \
                         channel, or one per channel",
                        volts_per_unit.len()
                    ),
                );
            }
        }
        let volts_per_unit = match (&samples, volts_per_unit.as_slice()) {
            (Some(s), [v]) => vec![*v; s.recording.channel_count()],
            _ => volts_per_unit,
        };
        let value = match (samples, level, frequency, tolerance, order) {
            (Some(samples), Some(l), Some(f), Some(t), Some(o)) => Some(CalibratorQuery {
                samples,
                config: CalibratorConfig {
                    stated_level_db: l,
                    stated_frequency_hz: f,
                    frequency_tolerance_fraction: t,
                    max_harmonic_order: o as u32,
                },
                volts_per_unit,
                defaults,
            }),
            _ => None,
        };
        check.finish(value)
    }
}

/// The API error for a channel that cannot be read.
fn reading_error(e: CalibratorError, field: &str, channel: usize) -> ApiError {
    let description = format!("channel {channel}: {e}");
    match e {
        CalibratorError::TooShort { .. } => {
            ApiError::Precondition(PreconditionViolation::new(RECORDING_TOO_SHORT, field, description))
        }
        CalibratorError::AboveBand { .. } | CalibratorError::Resolution(_) => ApiError::Precondition(
            PreconditionViolation::new(FREQUENCY_ABOVE_BAND, "stated_frequency_hz", description),
        ),
        CalibratorError::NoTone | CalibratorError::NotNearStated { .. } => {
            ApiError::Precondition(PreconditionViolation::new(NO_CALIBRATOR_TONE, field, description))
        }
        CalibratorError::Welch(WelchError::Stopped) => ApiError::Stopped(crate::cancel::Stopped),
        CalibratorError::Welch(e) => ApiError::Invalid(vec![FieldViolation {
            field: field.into(),
            description: format!("{field}: channel {channel}: {e}"),
        }]),
    }
}

fn warning_message(w: &Warning) -> pb::CalibratorWarning {
    let kind = match w {
        Warning::FullScale { .. } => pb::CalibratorWarningKind::FullScale,
        Warning::FlatTopped { .. } => pb::CalibratorWarningKind::FlatTopped,
        Warning::FrequencyOff { .. } => pb::CalibratorWarningKind::FrequencyOff,
        Warning::Unsteady { .. } => pb::CalibratorWarningKind::Unsteady,
    };
    pb::CalibratorWarning { kind: kind as i32, message: w.to_string() }
}

/// One channel's reading as a message.
pub fn channel_message(
    c: usize,
    name: String,
    r: &Reading,
    stated_hz: f64,
    volts: Option<f64>,
) -> pb::CalibratorChannel {
    let s = volts.map(|v| r.sensitivity_v_per_pa(v));
    pb::CalibratorChannel {
        channel: c as u32,
        name,
        pascals_per_unit: r.pascals_per_unit,
        sensitivity_v_per_pa: s,
        sensitivity_db_re_1v_per_pa: s.map(|s| 20.0 * s.log10()),
        volts_per_unit: volts,
        tone_rms_units: r.tone_rms,
        frequency_hz: r.frequency_hz,
        frequency_deviation_fraction: r.frequency_hz / stated_hz - 1.0,
        frequency_span_hz: r.frequency_span_hz,
        level_span_db: r.level_span_db,
        blocks: r.blocks as u32,
        thd_percent: 100.0 * r.thd,
        thd_n_percent: 100.0 * r.thd_n,
        harmonics: r
            .harmonics
            .iter()
            .map(|h| pb::CalibratorHarmonic {
                order: h.order,
                frequency_hz: h.frequency_hz,
                level_re_fundamental_db: (h.rms > 0.0).then(|| 20.0 * (h.rms / r.tone_rms).log10()),
            })
            .collect(),
        full_scale_samples: r.full_scale_samples.map(|n| n as u64),
        longest_flat_run: r.longest_flat_run as u64,
        warnings: r.warnings.iter().map(warning_message).collect(),
    }
}

impl Compute for CalibratorQuery {
    type Response = pb::CalibratorSensitivityResponse;

    /// Reads every channel and builds the response.
    ///
    /// # Errors
    /// `FAILED_PRECONDITION` for a recording shorter than the minimum (naming it), a stated
    /// frequency too high for the sample rate, or a silent channel; `INVALID_ARGUMENT` for a
    /// non-finite sample; stopped when `cancel` is set.
    fn compute(self, cancel: &Cancel) -> Result<pb::CalibratorSensitivityResponse, ApiError> {
        let q = self;
        let (fs, rec) = (q.samples.fs, &q.samples.recording);
        let mut channels = Vec::with_capacity(rec.channel_count());
        for c in 0..rec.channel_count() {
            let r = read_channel(rec, c, fs, &q.config, cancel)
                .map_err(|e| reading_error(e, q.samples.field, c))?;
            let name = q.samples.names.get(c).cloned().unwrap_or_default();
            channels.push(channel_message(
                c,
                name,
                &r,
                q.config.stated_frequency_hz,
                q.volts_per_unit.get(c).copied(),
            ));
        }
        // The channels were read, so the plan exists.
        let plan = Plan::new(fs, q.config.stated_frequency_hz).unwrap_or(Plan { fs, nperseg: 0 });
        let used = [models::CALIBRATOR_READING, models::WELCH_PSD, models::SPL];
        Ok(pb::CalibratorSensitivityResponse {
            channels,
            stated_rms_pa: q.config.stated_rms_pa(),
            segment_length: plan.nperseg as u32,
            resolution_hz: plan.resolution_hz(),
            block_duration_s: plan.block_duration_s(),
            minimum_samples: plan.min_samples() as u64,
            window: WINDOW.name().to_string(),
            provenance: Some(provenance(&used, &q.defaults, Vec::new())),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn request(n: usize, volts: Vec<f64>) -> pb::CalibratorSensitivityRequest {
        let values =
            (0..n).map(|i| (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / 48_000.0).sin()).collect();
        pb::CalibratorSensitivityRequest {
            samples: Some(pb::Samples {
                sample_rate_hz: 48_000.0,
                data: Some(pb::samples::Data::Values(pb::SampleValues { values })),
                ..Default::default()
            }),
            stated_level_db: 94.0,
            stated_frequency_hz: 1000.0,
            volts_per_unit: volts,
            ..Default::default()
        }
    }

    fn fields(e: ApiError) -> Vec<String> {
        match e {
            ApiError::Invalid(v) => v.into_iter().map(|f| f.field).collect(),
            other => panic!("expected INVALID_ARGUMENT, got {other:?}"),
        }
    }

    #[test]
    fn defaults_are_recorded_and_bad_fields_named() {
        let q = CalibratorQuery::try_from(request(1 << 17, vec![1.0])).unwrap();
        let recorded: Vec<&str> = q.defaults.0.iter().map(|d| d.field.as_str()).collect();
        assert!(
            recorded.contains(&"frequency_tolerance_fraction") && recorded.contains(&"max_harmonic_order")
        );
        let mut bad = request(1 << 17, vec![1.0, 2.0]);
        bad.stated_level_db = 0.0;
        bad.stated_frequency_hz = 5.0;
        bad.frequency_tolerance_fraction = Some(0.9);
        let e = CalibratorQuery::try_from(bad).unwrap_err();
        assert_eq!(fields(e), ["stated_level_db", "stated_frequency_hz", "frequency_tolerance_fraction"]);
        let e = CalibratorQuery::try_from(request(1 << 17, vec![1.0, 2.0])).unwrap_err();
        assert_eq!(fields(e), ["volts_per_unit"]);
        let mut cal = request(1 << 17, vec![]);
        cal.samples.as_mut().unwrap().calibration =
            Some(pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(1.0)) });
        assert_eq!(fields(CalibratorQuery::try_from(cal).unwrap_err()), ["samples.calibration"]);
    }

    #[test]
    fn a_short_recording_fails_its_precondition_naming_the_minimum() {
        let q = CalibratorQuery::try_from(request(10_000, vec![])).unwrap();
        match q.compute(&Cancel::new()).unwrap_err() {
            ApiError::Precondition(p) => {
                assert_eq!(p.kind, RECORDING_TOO_SHORT);
                assert!(p.description.contains("fewer than the 65536"), "{}", p.description);
            }
            other => panic!("{other:?}"),
        }
    }
}
