//! AnalyseRamp: a continuous ramp's request validated into domain types, and its answer.

use super::*;
use crate::api::Compute;
use crate::cancel::Cancel;
use crate::dsp::ramp::{analyse_ramp, Control, ControlQuantity, RampConfig, RampFrame};

/// Allowed |units per sample| and |offset| of the control.
const CONTROL_SCALE: Bounds = Bounds::closed(-1e9, 1e9, "");
/// Relative NPR change within one frame above which its tones are flagged as smeared.
const SMEAR_FRACTION: f64 = 0.02;

/// A validated ramp question.
#[derive(Debug, Clone)]
pub struct RampQuery {
    started: std::time::Instant,
    pub(super) samples: SampleSet,
    control: Control,
    frame: usize,
    welch: WelchConfig,
    tones: ToneConfig,
    mics: Vec<usize>,
    fit_channel: usize,
    defaults: Defaults,
}

impl RampQuery {
    /// The same question, its analysis stopped once `cancel` is set.
    pub fn with_cancel(mut self, cancel: crate::cancel::Cancel) -> Self {
        self.samples.cancel = cancel;
        self
    }
}

fn control(
    check: &mut Check,
    defaults: &mut Defaults,
    c: Option<pb::ControlChannel>,
    channels: usize,
) -> Option<Control> {
    let Some(pb::ControlChannel { channel, quantity, units_per_sample, offset, ambient_pressure_pa }) = c
    else {
        check.missing("control", "the channel that carries the NPR or reservoir pressure, and its scale");
        return None;
    };
    let p = "control";
    if channel as usize >= channels {
        check.other(
            format!("{p}.channel"),
            format!(
                "{p}.channel = {channel} is outside [0, {}] (the channels given)",
                channels.saturating_sub(1)
            ),
        );
    }
    if channels < 2 {
        check.other(
            "samples.channel_count",
            "a ramp needs at least one microphone channel beside the control",
        );
    }
    let scale = check.range(p, CONTROL_SCALE.check("units_per_sample", units_per_sample));
    if scale == Some(0.0) {
        check.other(
            format!("{p}.units_per_sample"),
            format!("{p}.units_per_sample = 0: give the control units per sample unit"),
        );
    }
    let offset = match offset {
        Some(o) => check.range(p, CONTROL_SCALE.check("offset", o)),
        None => Some(0.0),
    };
    let mut ambient = || {
        crate::api::field::Fields::new(check, defaults, p)
            .read(ambient_pressure_pa, &crate::dsp::ramp::AMBIENT_PRESSURE)
    };
    let quantity = match pb::ControlQuantity::try_from(quantity) {
        Ok(pb::ControlQuantity::NozzlePressureRatio) => Some(ControlQuantity::Npr),
        Ok(pb::ControlQuantity::ReservoirGaugePressurePa) => {
            ambient().map(|ambient_pa| ControlQuantity::GaugePa { ambient_pa })
        }
        Ok(pb::ControlQuantity::ReservoirAbsolutePressurePa) => {
            ambient().map(|ambient_pa| ControlQuantity::AbsolutePa { ambient_pa })
        }
        _ => {
            check.other(
                format!("{p}.quantity"),
                format!(
                    "{p}.quantity = {quantity}: say what the control measures (CONTROL_QUANTITY_NOZZLE_PRESSURE_RATIO, \
                     _RESERVOIR_GAUGE_PRESSURE_PA or _RESERVOIR_ABSOLUTE_PRESSURE_PA)"
                ),
            );
            None
        }
    };
    match (scale, offset, quantity) {
        (Some(units_per_sample), Some(offset), Some(quantity)) => {
            Some(Control { channel: channel as usize, units_per_sample, offset, quantity })
        }
        _ => None,
    }
}

impl TryFrom<pb::AnalyseRampRequest> for RampQuery {
    type Error = ApiError;

    fn try_from(req: pb::AnalyseRampRequest) -> Result<Self, ApiError> {
        ramp_query(req, false)
    }
}

/// Converts a ramp question; `stream` for the first message of a block stream, whose
/// recording grows (its length is not checked against the frame).
pub(super) fn ramp_query(req: pb::AnalyseRampRequest, stream: bool) -> Result<RampQuery, ApiError> {
    let pb::AnalyseRampRequest { samples, control: ctl, frame_duration_s, welch, tones, fit_channel } = req;
    let started = std::time::Instant::now();
    let mut defaults = Defaults::default();
    let samples = sample_set_for(samples, &mut defaults, stream)?;
    let channels = samples.recording.channel_count();
    let mut check = Check::new();
    let control = control(&mut check, &mut defaults, ctl, channels);
    let secs = crate::api::field::Fields::new(&mut check, &mut defaults, "")
        .read(frame_duration_s, &crate::dsp::ramp::FRAME_DURATION);
    let frame = secs.map(|t| (t * samples.fs).round() as usize);
    if let Some(f) = frame {
        if (!stream && f > samples.recording.len()) || f == 0 {
            check.other(
                "frame_duration_s",
                format!(
                    "frame_duration_s gives {f} samples per frame but the recording holds {} per channel: \
                         give a frame shorter than the recording",
                    samples.recording.len()
                ),
            );
        }
    }
    let w = welch_config(&mut check, &mut defaults, welch, samples.fs, frame.unwrap_or(0).max(1));
    let tones = super::tones::tone_config(&mut check, &mut defaults, tones);
    let ctl_channel = control.map(|c| c.channel);
    let mics: Vec<usize> = (0..channels).filter(|&c| Some(c) != ctl_channel).collect();
    let fit_channel = match fit_channel {
        Some(c) if Some(c as usize) == ctl_channel || c as usize >= channels => {
            check.other(
                "fit_channel",
                format!(
                    "fit_channel = {c} is the control channel or not a channel: give a microphone channel"
                ),
            );
            0
        }
        Some(c) => c as usize,
        None => mics.first().copied().unwrap_or(0),
    };
    let q = match (control, frame, w) {
        (Some(control), Some(frame), Some(welch)) => {
            Some(RampQuery { started, samples, control, frame, welch, tones, mics, fit_channel, defaults })
        }
        _ => None,
    };
    check.finish(q)
}

fn direction(fr: &RampFrame) -> pb::SweepDirection {
    if fr.npr_change > 1e-9 * fr.npr_mean.abs() {
        pb::SweepDirection::Increasing
    } else if fr.npr_change < -1e-9 * fr.npr_mean.abs() {
        pb::SweepDirection::Decreasing
    } else {
        pb::SweepDirection::Unspecified
    }
}

impl Compute for RampQuery {
    type Response = pb::AnalyseRampResponse;

    /// Runs the short-time analysis and builds the response.
    ///
    /// # Errors
    /// As [`ToneQuery::compute`].
    fn compute(self, cancel: &Cancel) -> Result<pb::AnalyseRampResponse, ApiError> {
        let q = self.with_cancel(cancel.clone());
        let rec = &q.samples.recording;
        let mics: Vec<_> = q.mics.iter().map(|&c| rec.channel(c)).collect();
        let ctl = rec.channel(q.control.channel).unscaled();
        let frames = analyse_ramp(&mics, &ctl, &q.control, &q.config(), &q.samples.cancel)
            .map_err(|e| welch_error(e, q.samples.field))?;
        Ok(q.answer(&frames))
    }
}

impl RampQuery {
    /// How frames are cut and analysed.
    pub(super) fn config(&self) -> RampConfig {
        RampConfig { fs: self.samples.fs, frame: self.frame, welch: self.welch, tones: self.tones }
    }

    /// Analyses the frame from `start` (its samples must be held).
    pub(super) fn frame_at(&self, start: usize) -> Result<RampFrame, ApiError> {
        let rec = &self.samples.recording;
        let mics: Vec<_> = self.mics.iter().map(|&c| rec.channel(c)).collect();
        let ctl = rec.channel(self.control.channel).unscaled();
        crate::dsp::ramp::analyse_frame(
            &mics,
            &ctl,
            &self.control,
            &self.config(),
            start,
            &self.samples.cancel,
        )
        .map_err(|e| welch_error(e, self.samples.field))
    }

    /// Samples per frame.
    pub(super) fn frame_len(&self) -> usize {
        self.frame
    }

    /// The answer for `frames` (the recording's whole length known).
    pub(super) fn answer(&self, frames: &[RampFrame]) -> pb::AnalyseRampResponse {
        let q = self;
        let rec = &q.samples.recording;
        let fs = q.samples.fs;
        let fit_index = q.mics.iter().position(|&c| c == q.fit_channel).unwrap_or(0);
        let mut warnings = Vec::new();
        let smeared = frames.iter().filter(|f| (f.npr_change / f.npr_mean).abs() > SMEAR_FRACTION).count();
        if smeared > 0 {
            warnings.push(format!(
                "in {smeared} of {} frames the NPR changes by more than {} % within the frame: a stage jump inside \
                 such a frame is smeared over it; use shorter frames or a slower ramp",
                frames.len(),
                100.0 * SMEAR_FRACTION
            ));
        }
        let tail = rec.len() % q.frame;
        if tail > 0 {
            warnings.push(format!("the last {tail} samples per channel (less than one frame) are left out"));
        }
        let fit_points = frames
            .iter()
            .enumerate()
            .filter(|(_, f)| f.npr_mean > 1.0)
            .filter_map(|(i, f)| {
                f.tones[fit_index].map(|t| pb::MeasuredTone {
                    x: f.npr_mean,
                    frequency_hz: t.frequency_hz,
                    level_db: Some(t.level_db),
                    frequency_uncertainty_hz: None,
                    direction: direction(f) as i32,
                    acquisition_index: Some(i as u64),
                })
            })
            .collect();
        let out_frames = frames
            .iter()
            .map(|f| pb::RampFrame {
                start_s: f.start as f64 / fs,
                end_s: f.end as f64 / fs,
                nozzle_pressure_ratio: f.npr_mean,
                nozzle_pressure_ratio_change: f.npr_change,
                tones: q
                    .mics
                    .iter()
                    .zip(&f.tones)
                    .map(|(&c, t)| pb::RampTone {
                        channel: c as u32,
                        frequency_hz: t.map(|t| t.frequency_hz),
                        level_db: t.map(|t| t.level_db),
                        tone_to_floor_db: t.map(|t| t.tone_to_floor_db),
                    })
                    .collect(),
            })
            .collect();
        let mut used = SPECTRUM_MODELS.to_vec();
        used.push(models::TONE_EXTRACTION);
        pb::AnalyseRampResponse {
            frames: out_frames,
            fit_points,
            fit_channel: q.fit_channel as u32,
            warnings,
            compute_time_s: q.started.elapsed().as_secs_f64(),
            provenance: Some(provenance(&used, &q.defaults, Vec::new())),
        }
    }

    /// The same question, its compute time counted from now (a stream's end).
    pub(super) fn restarted(mut self) -> Self {
        self.started = std::time::Instant::now();
        self
    }
}
