//! `jetloop track`: a recording streamed to the live tracking RPC (TrackTones), as fast as
//! possible or at its own pace, with events printed as they come.

use crate::args::input::InputArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::time::Duration;

/// `jetloop track`.
#[derive(Debug, Args)]
pub struct TrackCmd {
    #[command(flatten)]
    input: InputArgs,
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

/// The mode (or pair symmetry) of an update's strongest tone, in words.
pub(crate) fn mode_text(x: &pb::CrossTone) -> Option<String> {
    if let Some(m) = &x.modes {
        return Some(format!(
            "m = {} {} ({:.0} % of the energy)",
            m.dominant_order,
            crate::render::rows::pattern_name(m.pattern),
            100.0 * m.dominant_share
        ));
    }
    x.pair.as_ref().map(|p| {
        format!(
            "{} (confidence {:.2})",
            if p.symmetric { "symmetric" } else { "antisymmetric" },
            p.confidence
        )
    })
}

pub(crate) fn kind_name(k: i32) -> &'static str {
    match pb::TrackEventKind::try_from(k) {
        Ok(pb::TrackEventKind::Appeared) => "appeared",
        Ok(pb::TrackEventKind::Vanished) => "vanished",
        Ok(pb::TrackEventKind::Jumped) => "JUMP",
        _ => "?",
    }
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

/// Runs `track`.
impl Run for TrackCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let samples = a.input.read()?;
        let fs = samples.sample_rate_hz;
        let (format, frame_bytes, bytes) = frames_of(&samples)?;
        let config = pb::TrackRequest {
            item: Some(pb::track_request::Item::Config(pb::TrackConfig {
                analysis: Some(pb::ExtractTonesRequest {
                    samples: Some(pb::Samples {
                        sample_rate_hz: fs,
                        channel_count: samples.channel_count,
                        layout: pb::ChannelLayout::Interleaved as i32,
                        data: Some(pb::samples::Data::Raw(pb::RawSamples {
                            format,
                            data: Vec::new().into(),
                        })),
                        calibration: samples.calibration,
                        channel_names: samples.channel_names.clone(),
                    }),
                    welch: Some(a.welch.options()),
                    tones: Some(pb::ToneOptions { threshold_db: a.threshold_db, ..Default::default() }),
                    ..Default::default()
                }),
                window_s: a.window_s,
                update_interval_s: a.update_interval_s,
                jump_fraction: a.jump_fraction,
                reference_channel: a.reference_channel,
                positions: crate::args::spectral::positions(&a.azimuths_deg),
            })),
        };
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
        let mut events = Table::new("events", "Events")
            .col("stream_time_s", "t [s]")
            .col("channel", "channel")
            .col("event", "event")
            .col("frequency_hz", "f [Hz]")
            .col("from_frequency_hz", "from [Hz]")
            .col("track_id", "track");
        let mut modes = Table::new("modes", "Mode of the strongest tone (when it changed)")
            .col("stream_time_s", "t [s]")
            .col("frequency_hz", "f [Hz]")
            .col("mode", "mode");
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
                        eprintln!("t = {:8.3} s  mode at {:.1} Hz: {text}", u.stream_time_s, x.frequency_hz);
                    }
                    modes.row(vec![
                        Some(Val::Num(u.stream_time_s)),
                        Some(Val::Num(x.frequency_hz)),
                        Some(Val::Text(text)),
                    ]);
                    last_mode = key;
                }
            }
            if a.json_lines {
                let line = serde_json::json!({
                    "stream_time_s": u.stream_time_s,
                    "channels": u.channels.iter().map(|c| serde_json::json!({
                        "channel": c.channel,
                        "strongest_track_id": c.strongest_track_id,
                        "tones": c.tones.iter().map(|t| serde_json::json!({
                            "track_id": t.track_id, "frequency_hz": t.frequency_hz, "level_db": t.level_db,
                        })).collect::<Vec<_>>(),
                    })).collect::<Vec<_>>(),
                    "strongest_cross": u.strongest_cross.as_ref().map(|x| serde_json::json!({
                        "frequency_hz": x.frequency_hz,
                        "mode": mode_text(x),
                        "channels": x.channels.iter().map(|c| serde_json::json!({
                            "channel": c.channel, "phase_deg": c.phase_deg, "coherence": c.coherence,
                        })).collect::<Vec<_>>(),
                    })),
                    "events": u.events.iter().map(|e| serde_json::json!({
                        "kind": kind_name(e.kind), "channel": e.channel, "track_id": e.track_id,
                        "frequency_hz": e.frequency_hz, "from_frequency_hz": e.from_frequency_hz,
                        "stream_time_s": e.stream_time_s,
                    })).collect::<Vec<_>>(),
                });
                println!("{line}");
            }
            for e in &u.events {
                if e.kind == pb::TrackEventKind::Jumped as i32 {
                    jumps += 1;
                }
                if !a.json_lines {
                    let from = e.from_frequency_hz.map_or(String::new(), |f| format!(" from {f:.1} Hz"));
                    eprintln!(
                        "t = {:8.3} s  channel {}  {:8}  {:.1} Hz{from}  (track {})",
                        e.stream_time_s,
                        e.channel,
                        kind_name(e.kind),
                        e.frequency_hz,
                        e.track_id
                    );
                }
                events.row(vec![
                    Some(Val::Num(e.stream_time_s)),
                    Some(Val::Int(e.channel.into())),
                    Some(Val::Text(kind_name(e.kind).into())),
                    Some(Val::Num(e.frequency_hz)),
                    e.from_frequency_hz.map(Val::Num),
                    Some(Val::Int(e.track_id)),
                ]);
            }
        }
        let rep = Report::new(format!("Tracked {} ({count} updates, {jumps} jumps)", a.input.file.display()));
        if a.json_lines {
            return Ok(rep.quiet());
        }
        Ok(rep
            .int("updates", "updates", count, "")
            .int("jumps", "stage jumps", jumps, "")
            .table(modes)
            .table(events))
    }
}
