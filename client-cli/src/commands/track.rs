//! `jetloop track`: a recording streamed to the live tracking RPC (TrackTones), as fast as
//! possible or at its own pace, with events printed as they come.

use crate::args::input::InputArgs;
use crate::args::spectral::positions;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::tracks::event_line;
use crate::render::tracks::event_row;
use crate::render::tracks::events_table;
use crate::render::tracks::mode_line;
use crate::render::tracks::mode_row;
use crate::render::tracks::mode_text;
use crate::render::tracks::modes_table;
use crate::render::tracks::track_report;
use crate::render::tracks::update_json;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::time::Duration;

/// `jetloop track`.
#[derive(Debug, Args)]
pub struct TrackCmd {
    /// The recording and its calibration.
    #[command(flatten)]
    input: InputArgs,
    /// Welch (PSD) options.
    #[command(flatten)]
    welch: WelchArgs,
    /// Send the frames at the recording's own pace (as a DAQ would), not as fast as possible.
    #[arg(long)]
    realtime: bool,
    /// Stream time between updates in s (server default: a quarter of the window).
    #[arg(long)]
    update_interval_s: Option<f64>,
    /// Analysis window in s (server default: 8 segments at 50 % overlap).
    #[arg(long)]
    window_s: Option<f64>,
    /// Relative frequency change of the strongest tone that counts as a jump (server default
    /// 0.05).
    #[arg(long)]
    jump_fraction: Option<f64>,
    /// Minimum tone-to-floor ratio in dB (server default 6).
    #[arg(long)]
    threshold_db: Option<f64>,
    /// Print every update and event as one JSON object per line instead of event lines.
    #[arg(long)]
    json_lines: bool,
    /// Frames per message, in s of recording.
    #[arg(long, default_value_t = 0.05)]
    block_s: f64,
    /// Microphone azimuths in degrees, one per channel, comma separated: every update then
    /// shows the azimuthal mode of the reference channel's strongest tone (a ring of three or
    /// more), live.
    #[arg(long, value_delimiter = ',', allow_negative_numbers = true)]
    azimuths_deg: Vec<f64>,
    /// Reference channel of the live cross-spectra (server default 0 when azimuths are given);
    /// with two channels each update shows the pair's symmetry.
    #[arg(long)]
    reference_channel: Option<u32>,
}

/// Interleaved raw frames of the recording: its own bytes when it is raw and interleaved, else
/// the values as f32.
pub(crate) fn frames_of(s: &pb::Samples) -> Result<(i32, usize, Vec<u8>), Failure> {
    let ch = s.channel_count.max(1) as usize;
    let planar = s.layout == pb::ChannelLayout::Planar as i32;
    match &s.data {
        Some(pb::samples::Data::Raw(r)) if !planar => {
            let width = match pb::SampleFormat::try_from(r.format) {
                Ok(pb::SampleFormat::I16Le) => 2,
                Ok(pb::SampleFormat::F64Le) => 8,
                _ => 4,
            };
            Ok((r.format, width * ch, r.data.to_vec()))
        }
        Some(pb::samples::Data::Values(v)) => {
            let n = v.values.len() / ch;
            let at = |k: usize, c: usize| if planar { v.values[c * n + k] } else { v.values[k * ch + c] };
            let bytes =
                (0..n).flat_map(|k| (0..ch).flat_map(move |c| (at(k, c) as f32).to_le_bytes())).collect();
            Ok((pb::SampleFormat::F32Le as i32, 4 * ch, bytes))
        }
        _ => Err(Failure::Usage("tracking needs interleaved raw samples or values".into())),
    }
}

impl TrackCmd {
    /// The first message of the TrackTones stream: the analysis settings, with the samples'
    /// rate, channels, calibration and names but no frames (sent as interleaved raw frames of
    /// `format`, see [`frames_of`]), the tracking settings and the microphone positions.
    pub(crate) fn config(&self, samples: &pb::Samples, format: i32) -> pb::TrackRequest {
        pb::TrackRequest {
            item: Some(pb::track_request::Item::Config(pb::TrackConfig {
                analysis: Some(pb::ExtractTonesRequest {
                    samples: Some(pb::Samples {
                        sample_rate_hz: samples.sample_rate_hz,
                        channel_count: samples.channel_count,
                        layout: pb::ChannelLayout::Interleaved as i32,
                        data: Some(pb::samples::Data::Raw(pb::RawSamples {
                            format,
                            data: Vec::new().into(),
                        })),
                        calibration: samples.calibration,
                        channel_names: samples.channel_names.clone(),
                        channel_calibrations: samples.channel_calibrations.clone(),
                    }),
                    welch: Some(self.welch.options()),
                    tones: Some(pb::ToneOptions { threshold_db: self.threshold_db, ..Default::default() }),
                    ..Default::default()
                }),
                window_s: self.window_s,
                update_interval_s: self.update_interval_s,
                jump_fraction: self.jump_fraction,
                reference_channel: self.reference_channel,
                positions: positions(&self.azimuths_deg),
            })),
        }
    }
}

/// Runs `track`.
impl Run for TrackCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.stream_channel().await?, self);
        let samples = a.input.read()?;
        let fs = samples.sample_rate_hz;
        let (format, frame_bytes, bytes) = frames_of(&samples)?;
        let config = a.config(&samples, format);
        if !(a.block_s > 0.0 && a.block_s <= 10.0) {
            return Err(Failure::Usage("--block-s must be in (0, 10]".into()));
        }
        let per_block = ((a.block_s * fs).round() as usize).max(1) * frame_bytes;
        let (tx, rx) = tokio::sync::mpsc::channel::<pb::TrackRequest>(4);
        let realtime = a.realtime;
        let pace = Duration::from_secs_f64(per_block as f64 / frame_bytes as f64 / fs);
        tokio::spawn(async move {
            if tx.send(config).await.is_err() {
                return;
            }
            let start = tokio::time::Instant::now();
            for (i, chunk) in bytes.chunks(per_block).enumerate() {
                if realtime {
                    tokio::time::sleep_until(start + pace * i as u32).await;
                }
                let m =
                    pb::TrackRequest { item: Some(pb::track_request::Item::Frames(chunk.to_vec().into())) };
                if tx.send(m).await.is_err() {
                    return;
                }
            }
        });
        let mut updates = SpectrumServiceClient::new(ch)
            .track_tones(tokio_stream::wrappers::ReceiverStream::new(rx))
            .await?
            .into_inner();
        let mut events = events_table();
        let mut modes = modes_table();
        let (mut count, mut jumps) = (0u64, 0u64);
        let mut last_mode: Option<String> = None;
        while let Some(u) = updates.message().await? {
            count += 1;
            if let Some(x) = &u.strongest_cross {
                let mode = mode_text(x);
                // Printed when the mode (order and pattern) changes, not every update.
                let key = mode.as_ref().map(|m| m.split(" (").next().unwrap_or_default().to_string());
                if key.is_some() && key != last_mode {
                    let text = mode.unwrap_or_default();
                    if !a.json_lines {
                        eprintln!("{}", mode_line(u.stream_time_s, x, &text));
                    }
                    modes.row(mode_row(u.stream_time_s, x, text));
                    last_mode = key;
                }
            }
            if a.json_lines {
                println!("{}", update_json(&u));
            }
            for e in &u.events {
                if e.kind == pb::TrackEventKind::Jumped as i32 {
                    jumps += 1;
                }
                if !a.json_lines {
                    eprintln!("{}", event_line(e));
                }
                events.row(event_row(e));
            }
        }
        if a.json_lines {
            let title = format!("Tracked {} ({count} updates, {jumps} jumps)", a.input.file.display());
            return Ok(Report::new(title).quiet());
        }
        Ok(track_report(&a.input.file, count, jumps, modes, events))
    }
}

#[cfg(test)]
mod tests {
    //! Command line and samples -> the tracking stream's first message and frames, without a
    //! server.

    use super::*;

    fn track(line: &str) -> TrackCmd {
        let crate::Command::Track(a) = crate::tests::command(line) else { panic!("{line}") };
        a
    }

    #[test]
    fn the_config_carries_the_tracking_settings_and_no_frames() {
        let a = track(
            "track jump.wav --pa-per-unit 2000 --threshold-db 8 --jump-fraction 0.04 --window-s 0.3 \
             --update-interval-s 0.2 --azimuths-deg 0,90,180,270 --reference-channel 1 --segment 2048",
        );
        let samples = pb::Samples {
            sample_rate_hz: 51_200.0,
            channel_count: 4,
            data: Some(pb::samples::Data::Values(pb::SampleValues { values: vec![0.0; 8] })),
            channel_names: vec!["a".into(), "b".into(), "c".into(), "d".into()],
            ..Default::default()
        };
        let Some(pb::track_request::Item::Config(c)) =
            a.config(&samples, pb::SampleFormat::F32Le as i32).item
        else {
            panic!("not a config")
        };
        assert_eq!((c.window_s, c.update_interval_s, c.jump_fraction), (Some(0.3), Some(0.2), Some(0.04)));
        assert_eq!(c.reference_channel, Some(1));
        assert_eq!(
            c.positions.iter().map(|p| p.azimuth_deg).collect::<Vec<_>>(),
            vec![0.0, 90.0, 180.0, 270.0]
        );
        let an = c.analysis.expect("analysis");
        assert_eq!(an.tones.and_then(|t| t.threshold_db), Some(8.0));
        assert_eq!(an.welch.and_then(|w| w.segment), Some(pb::welch_options::Segment::SegmentLength(2048)));
        let s = an.samples.expect("samples");
        assert_eq!((s.sample_rate_hz, s.channel_count, s.channel_names.len()), (51_200.0, 4, 4));
        assert_eq!(s.layout, pb::ChannelLayout::Interleaved as i32);
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert!(r.data.is_empty(), "the frames follow in their own messages");
    }

    #[test]
    fn planar_values_are_interleaved_as_f32_frames() {
        let s = pb::Samples {
            channel_count: 2,
            layout: pb::ChannelLayout::Planar as i32,
            data: Some(pb::samples::Data::Values(pb::SampleValues { values: vec![1.0, 2.0, 10.0, 20.0] })),
            ..Default::default()
        };
        let (format, frame_bytes, bytes) = frames_of(&s).expect("frames");
        assert_eq!((format, frame_bytes), (pb::SampleFormat::F32Le as i32, 8));
        let got: Vec<f32> = bytes.chunks(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect();
        assert_eq!(got, vec![1.0, 10.0, 2.0, 20.0], "frame by frame");
    }
}
