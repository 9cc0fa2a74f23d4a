//! A tracking stream: the configuration converted once, then frames decoded and fed to the
//! tracker block by block.

use super::*;
use crate::dsp::track::{EventKind, Tracker, TrackerConfig, Update};

/// Allowed window length, s.
const WINDOW_S: Bounds = Bounds::open_closed(0.0, 60.0, "s");
/// Allowed update interval, s.
const UPDATE_S: Bounds = Bounds::closed(0.01, 60.0, "s");

/// A tracking stream in progress.
#[derive(Debug)]
pub struct TrackSession {
    tracker: Tracker,
    template: Recording,
    channels: usize,
    messages: usize,
    /// Defaults applied to the configuration.
    pub defaults: Defaults,
    /// Microphone azimuths, degrees, when given (live mode decomposition).
    azimuths_deg: Option<Vec<f64>>,
    /// The jet's guided-mode bands, when stage labels were asked for.
    stages: Option<crate::api::stage_labels::StageContext>,
}

fn config_missing() -> ApiError {
    ApiError::Invalid(vec![FieldViolation {
        field: "config".into(),
        description: "config is required: the first message of a tracking stream carries the configuration"
            .into(),
    }])
}

impl TrackSession {
    /// Validates the first message.
    ///
    /// # Errors
    /// A missing configuration; bad fields under `config`.
    pub fn start(first: pb::TrackRequest) -> Result<(Self, Vec<pb::TrackUpdate>), ApiError> {
        let Some(pb::track_request::Item::Config(cfg)) = first.item else { return Err(config_missing()) };
        let pb::TrackConfig {
            analysis,
            window_s,
            update_interval_s,
            jump_fraction,
            reference_channel,
            positions,
        } = cfg;
        let Some(analysis) = analysis else {
            let mut check = Check::new();
            check.missing(
                "config.analysis",
                "the samples' format, rate and calibration, and the Welch settings",
            );
            return check.finish(None);
        };
        let q = tone_query(analysis, Some(None)).map_err(|e| e.within("config.analysis"))?;
        let mut check = Check::new();
        for (set, field) in [
            (q.predicted.is_some(), "predicted_screech_hz"),
            (q.bands.is_some(), "include_band_levels"),
            (q.psd_points.is_some(), "psd_output"),
        ] {
            if set {
                check.other(
                    format!("config.analysis.{field}"),
                    format!("config.analysis.{field} is not used by tracking: leave it unset"),
                );
            }
        }
        let mut defaults = q.defaults.clone();
        let stages = q.stages.clone();
        let channels = q.samples.recording.channel_count();
        let cross = if reference_channel.is_some() || !positions.is_empty() {
            if channels < 2 {
                check.other(
                    "config.reference_channel",
                    format!("config.reference_channel: cross-spectra need at least 2 channels; this stream has {channels}"),
                );
            }
            let (r, az) = super::cross::reference_and_azimuths(
                &mut check,
                &mut defaults,
                reference_channel,
                &positions,
                channels,
                "config.",
            );
            Some((r, az))
        } else {
            None
        };
        let fs = q.samples.fs;
        let n = q.welch.nperseg;
        let window = match window_s {
            None => {
                defaults.note(
                    "config.window_s",
                    "8 segments at 50 % overlap",
                    "enough averages for stable tones",
                );
                n * 9 / 2
            }
            Some(w) => {
                check.range("config", WINDOW_S.check("window_s", w)).map_or(n, |w| (w * fs).round() as usize)
            }
        };
        if window < n {
            check.other(
                "config.window_s",
                format!("config.window_s gives {window} frames, shorter than one segment of {n}"),
            );
        }
        let channels = q.samples.recording.channel_count();
        if window.saturating_mul(channels) > MAX_TOTAL_SAMPLES {
            check.other(
                "config.window_s",
                format!("config.window_s: {window} frames x {channels} channels exceed {MAX_TOTAL_SAMPLES} samples"),
            );
        }
        let update = match update_interval_s {
            None => {
                defaults.note(
                    "config.update_interval_s",
                    "a quarter of the window",
                    "four updates per window",
                );
                (window / 4).max(1)
            }
            Some(u) => check
                .range("config", UPDATE_S.check("update_interval_s", u))
                .map_or(1, |u| ((u * fs).round() as usize).max(1)),
        };
        let jump = crate::api::field::Fields::new(&mut check, &mut defaults, "config")
            .read(jump_fraction, &crate::dsp::track::JUMP_FRACTION);
        if !check.is_clean() {
            return check.finish(None);
        }
        let cfg = TrackerConfig {
            fs,
            welch: q.welch,
            window,
            update,
            tones: q.tones,
            jump_fraction: jump.unwrap_or(0.05),
        };
        let mut tracker = Tracker::new(cfg, channels).map_err(|e| welch_error(e, "config.window_s"))?;
        if let Some((r, _)) = &cross {
            tracker = tracker.with_reference(*r);
        }
        // The first frames, if the configuration carried any.
        let first_frames = q.samples.recording.clone();
        let template = {
            let mut t = q.samples.recording;
            // An empty recording of the same format, channels and calibration.
            t.clear();
            t
        };
        let azimuths_deg = cross.and_then(|(_, az)| az);
        let mut s = Self { tracker, template, channels, messages: 1, defaults, azimuths_deg, stages };
        let updates = s.feed(&first_frames)?;
        Ok((s, updates))
    }

    /// Bytes the session keeps between messages: one analysis window of every channel.
    pub fn held_bytes(&self) -> usize {
        self.tracker.held_samples().saturating_mul(std::mem::size_of::<f64>())
    }

    /// Takes a later message.
    ///
    /// # Errors
    /// A second configuration; frames that are not whole; a non-finite sample.
    pub fn push(&mut self, msg: pb::TrackRequest) -> Result<Vec<pb::TrackUpdate>, ApiError> {
        self.messages += 1;
        match msg.item {
            Some(pb::track_request::Item::Frames(bytes)) => {
                let mut rec = self.template.clone();
                rec.push_block(bytes).map_err(|e| {
                    ApiError::Invalid(vec![FieldViolation {
                        field: "frames".into(),
                        description: format!("frames of message {}: {e}", self.messages),
                    }])
                })?;
                self.feed(&rec)
            }
            Some(pb::track_request::Item::Config(_)) => Err(ApiError::Invalid(vec![FieldViolation {
                field: "config".into(),
                description: format!(
                    "config sent again in message {}: only the first message carries it",
                    self.messages
                ),
            }])),
            None => Err(ApiError::Invalid(vec![FieldViolation {
                field: "item".into(),
                description: format!("message {} is empty: set frames", self.messages),
            }])),
        }
    }

    fn feed(&mut self, rec: &Recording) -> Result<Vec<pb::TrackUpdate>, ApiError> {
        let frames = rec.len();
        if frames == 0 {
            return Ok(Vec::new());
        }
        let cols: Vec<Vec<f64>> = (0..self.channels).map(|c| rec.channel(c).to_vec()).collect();
        let updates = self.tracker.push_channels(&cols).map_err(|e| {
            ApiError::Invalid(vec![FieldViolation {
                field: "frames".into(),
                description: format!("frames: {e}"),
            }])
        })?;
        Ok(updates
            .into_iter()
            .map(|u| update_message(u, self.azimuths_deg.as_deref(), self.stages.as_ref()))
            .collect())
    }
}

fn update_message(
    u: Update,
    azimuths_deg: Option<&[f64]>,
    stages: Option<&crate::api::stage_labels::StageContext>,
) -> pb::TrackUpdate {
    let strongest_cross = u
        .cross
        .as_ref()
        .map(|(at, t)| super::cross::cross_tone(at, u.reference.unwrap_or(0), azimuths_deg, t));
    pb::TrackUpdate {
        strongest_cross,
        stream_time_s: u.time_s,
        channels: u
            .channels
            .iter()
            .enumerate()
            .map(|(c, (tracks, strongest))| pb::ChannelTracks {
                channel: c as u32,
                tones: tracks
                    .iter()
                    .map(|t| pb::TrackedTone {
                        track_id: t.id,
                        frequency_hz: t.frequency_hz,
                        level_db: t.level_db,
                        best_stage: stages.and_then(|s| s.label(t.frequency_hz).into_iter().next()),
                    })
                    .collect(),
                strongest_track_id: *strongest,
            })
            .collect(),
        events: u
            .events
            .iter()
            .map(|e| {
                let (kind, from_id, from_hz) = match e.kind {
                    EventKind::Appeared => (pb::TrackEventKind::Appeared, None, None),
                    EventKind::Vanished => (pb::TrackEventKind::Vanished, None, None),
                    EventKind::Jumped { from_id, from_hz } => {
                        (pb::TrackEventKind::Jumped, Some(from_id), Some(from_hz))
                    }
                };
                pb::TrackEvent {
                    kind: kind as i32,
                    channel: e.channel as u32,
                    track_id: e.id,
                    frequency_hz: e.frequency_hz,
                    from_track_id: from_id,
                    from_frequency_hz: from_hz,
                    stream_time_s: e.time_s,
                }
            })
            .collect(),
    }
}
