//! Reports of the commands that follow tones over time: the frames of an NPR ramp and the
//! fit points it gives (`ramp`), and the updates and events of live tracking (`track`), as
//! event lines, JSON lines and the closing tables.

use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::pattern_name;
use jetloop_proto::pb;
use std::path::Path;

/// The title of a ramp's report: the file, the frames and the server time.
pub(crate) fn ramp_title(r: &pb::AnalyseRampResponse, file: &Path) -> String {
    format!(
        "Ramp in {} ({} frames, {:.1} ms server time)",
        file.display(),
        r.frames.len(),
        r.compute_time_s * 1e3
    )
}

/// The fit points of a ramp as CSV for `jetloop fit --control npr`: npr, frequency_hz,
/// level_db (empty when unknown), direction (up, down or empty), in acquisition order.
pub(crate) fn ramp_points_csv(points: &[pb::MeasuredTone]) -> String {
    let mut csv = String::from("npr,frequency_hz,level_db,direction\n");
    for p in points {
        let dir = match pb::SweepDirection::try_from(p.direction) {
            Ok(pb::SweepDirection::Increasing) => "up",
            Ok(pb::SweepDirection::Decreasing) => "down",
            _ => "",
        };
        let level = p.level_db.map_or(String::new(), |l| format!("{l:.2}"));
        csv.push_str(&format!("{:.5},{:.2},{level},{dir}\n", p.x, p.frequency_hz));
    }
    csv
}

/// A ramp whose fit points went to `csv_file`: one line saying how many, and the warnings.
pub(crate) fn ramp_written_report(r: pb::AnalyseRampResponse, title: &str, csv_file: &Path) -> Report {
    let mut rep = Report::new(format!(
        "{title}: {} points of channel {} written to {}",
        r.fit_points.len(),
        r.fit_channel,
        csv_file.display()
    ));
    for w in &r.warnings {
        rep = rep.text("warning", "WARNING", w.clone());
    }
    rep.provenance(r.provenance)
}

/// A ramp shown in full: the fit-point count and channel, the warnings, and one row per
/// frame (times in s, the NPR and its change, the strongest tone of every microphone).
pub(crate) fn ramp_report(r: pb::AnalyseRampResponse, title: String) -> Report {
    let channels: Vec<u32> =
        r.frames.first().map(|f| f.tones.iter().map(|t| t.channel).collect()).unwrap_or_default();
    let mut t = Table::new("frames", "Frames (strongest tone per microphone)")
        .col("start_s", "from [s]")
        .col("end_s", "to [s]")
        .col("nozzle_pressure_ratio", "NPR")
        .col("nozzle_pressure_ratio_change", "NPR change");
    for c in &channels {
        t = t
            .col(format!("ch{c}_frequency_hz"), format!("ch {c} f [Hz]"))
            .col(format!("ch{c}_level_db"), format!("ch {c} L [dB re 20 uPa]"));
    }
    for f in &r.frames {
        let mut row = vec![
            Some(Val::Num(f.start_s)),
            Some(Val::Num(f.end_s)),
            Some(Val::Num(f.nozzle_pressure_ratio)),
            Some(Val::Num(f.nozzle_pressure_ratio_change)),
        ];
        for tone in &f.tones {
            row.push(tone.frequency_hz.map(Val::Num));
            row.push(tone.level_db.map(Val::Num));
        }
        t.row(row);
    }
    let mut rep = Report::new(title).int("fit_points", "fit points", r.fit_points.len() as u64, "").int(
        "fit_channel",
        "fit points from channel",
        r.fit_channel.into(),
        "",
    );
    for w in &r.warnings {
        rep = rep.text("warning", "WARNING", w.clone());
    }
    rep.table(t).provenance(r.provenance)
}

/// The mode (or pair symmetry) of an update's strongest tone, in words.
pub(crate) fn mode_text(x: &pb::CrossTone) -> Option<String> {
    if let Some(m) = &x.modes {
        return Some(format!(
            "m = {} {} ({:.0} % of the energy)",
            m.dominant_order,
            pattern_name(m.pattern),
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

/// The name of a tracking event kind ("JUMP" in capitals: the event to notice).
pub(crate) fn kind_name(k: i32) -> &'static str {
    match pb::TrackEventKind::try_from(k) {
        Ok(pb::TrackEventKind::Appeared) => "appeared",
        Ok(pb::TrackEventKind::Vanished) => "vanished",
        Ok(pb::TrackEventKind::Jumped) => "JUMP",
        _ => "?",
    }
}

/// The empty table of tracking events, filled with [`event_row`].
pub(crate) fn events_table() -> Table {
    Table::new("events", "Events")
        .col("stream_time_s", "t [s]")
        .col("channel", "channel")
        .col("event", "event")
        .col("frequency_hz", "f [Hz]")
        .col("from_frequency_hz", "from [Hz]")
        .col("track_id", "track")
}

/// The row of one tracking event in [`events_table`].
pub(crate) fn event_row(e: &pb::TrackEvent) -> Vec<Option<Val>> {
    vec![
        Some(Val::Num(e.stream_time_s)),
        Some(Val::Int(e.channel.into())),
        Some(Val::Text(kind_name(e.kind).into())),
        Some(Val::Num(e.frequency_hz)),
        e.from_frequency_hz.map(Val::Num),
        Some(Val::Int(e.track_id)),
    ]
}

/// One tracking event as a line for standard error while the stream runs.
pub(crate) fn event_line(e: &pb::TrackEvent) -> String {
    let from = e.from_frequency_hz.map_or(String::new(), |f| format!(" from {f:.1} Hz"));
    format!(
        "t = {:8.3} s  channel {}  {:8}  {:.1} Hz{from}  (track {})",
        e.stream_time_s,
        e.channel,
        kind_name(e.kind),
        e.frequency_hz,
        e.track_id
    )
}

/// The empty table of the strongest tone's mode changes, filled with [`mode_row`].
pub(crate) fn modes_table() -> Table {
    Table::new("modes", "Mode of the strongest tone (when it changed)")
        .col("stream_time_s", "t [s]")
        .col("frequency_hz", "f [Hz]")
        .col("mode", "mode")
}

/// The row of a mode change at stream time `t_s` (s) of the strongest tone `x`.
pub(crate) fn mode_row(t_s: f64, x: &pb::CrossTone, text: String) -> Vec<Option<Val>> {
    vec![Some(Val::Num(t_s)), Some(Val::Num(x.frequency_hz)), Some(Val::Text(text))]
}

/// A mode change as a line for standard error while the stream runs.
pub(crate) fn mode_line(t_s: f64, x: &pb::CrossTone, text: &str) -> String {
    format!("t = {:8.3} s  mode at {:.1} Hz: {text}", t_s, x.frequency_hz)
}

/// One tracking update as a JSON object (for `--json-lines`): the tones of every channel
/// with their track ids, the strongest tone's cross-channel analysis and the events.
pub(crate) fn update_json(u: &pb::TrackUpdate) -> serde_json::Value {
    serde_json::json!({
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
    })
}

/// The closing report of a tracking run over `file`: `count` updates, `jumps` stage jumps,
/// the mode changes and the events.
pub(crate) fn track_report(file: &Path, count: u64, jumps: u64, modes: Table, events: Table) -> Report {
    Report::new(format!("Tracked {} ({count} updates, {jumps} jumps)", file.display()))
        .int("updates", "updates", count, "")
        .int("jumps", "stage jumps", jumps, "")
        .table(modes)
        .table(events)
}

#[cfg(test)]
mod tests {
    //! Answers and updates built by hand -> rows, CSV and event lines, without a server.

    use super::*;
    use serde_json::json;

    fn point(
        x: f64,
        frequency_hz: f64,
        level_db: Option<f64>,
        direction: pb::SweepDirection,
    ) -> pb::MeasuredTone {
        pb::MeasuredTone { x, frequency_hz, level_db, direction: direction as i32, ..Default::default() }
    }

    #[test]
    fn ramp_points_are_written_for_fit_with_their_direction() {
        let csv = ramp_points_csv(&[
            point(2.5, 6000.0, Some(131.456), pb::SweepDirection::Increasing),
            point(4.49999, 5012.345, None, pb::SweepDirection::Decreasing),
            point(3.0, 5500.0, Some(120.0), pb::SweepDirection::Unspecified),
        ]);
        assert_eq!(
            csv,
            "npr,frequency_hz,level_db,direction\n2.50000,6000.00,131.46,up\n4.49999,5012.35,,down\n3.00000,5500.00,120.00,\n"
        );
    }

    #[test]
    fn ramp_frames_have_a_frequency_and_level_column_per_microphone() {
        let tone = |channel, f: Option<f64>| pb::RampTone {
            channel,
            frequency_hz: f,
            level_db: f.map(|_| 130.0),
            ..Default::default()
        };
        let r = pb::AnalyseRampResponse {
            frames: vec![pb::RampFrame {
                start_s: 0.0,
                end_s: 0.1,
                nozzle_pressure_ratio: 2.5,
                nozzle_pressure_ratio_change: 0.01,
                tones: vec![tone(0, Some(6000.0)), tone(2, None)],
            }],
            fit_points: vec![point(2.5, 6000.0, None, pb::SweepDirection::Increasing)],
            fit_channel: 0,
            warnings: vec!["few frames".into()],
            compute_time_s: 0.25,
            ..Default::default()
        };
        let title = ramp_title(&r, Path::new("ramp.wav"));
        assert_eq!(title, "Ramp in ramp.wav (1 frames, 250.0 ms server time)");
        let v = ramp_report(r.clone(), title.clone()).to_json();
        assert_eq!(
            v["frames"][0],
            json!({"start_s": 0.0, "end_s": 0.1, "nozzle_pressure_ratio": 2.5, "nozzle_pressure_ratio_change": 0.01, "ch0_frequency_hz": 6000.0, "ch0_level_db": 130.0})
        );
        assert_eq!((v["fit_points"].clone(), v["warning"].clone()), (json!(1), json!("few frames")));
        let w = ramp_written_report(r, &title, Path::new("points.csv")).to_table();
        assert!(w.starts_with("Ramp in ramp.wav (1 frames, 250.0 ms server time): 1 points of channel 0 written to points.csv\n"), "{w}");
    }

    #[test]
    fn a_jump_event_is_one_line_and_one_row() {
        let e = pb::TrackEvent {
            kind: pb::TrackEventKind::Jumped as i32,
            channel: 3,
            track_id: 7,
            frequency_hz: 5857.6,
            from_frequency_hz: Some(5230.04),
            stream_time_s: 2.5,
            ..Default::default()
        };
        assert_eq!(
            event_line(&e),
            "t =    2.500 s  channel 3  JUMP      5857.6 Hz from 5230.0 Hz  (track 7)"
        );
        let mut t = events_table();
        t.row(event_row(&e));
        assert_eq!(t.to_csv(), "stream_time_s,channel,event,frequency_hz,from_frequency_hz,track_id\n2.5,3,JUMP,5857.6,5230.04,7\n");
        assert_eq!(kind_name(pb::TrackEventKind::Appeared as i32), "appeared");
    }

    #[test]
    fn an_update_as_json_carries_tracks_mode_and_events() {
        let x = pb::CrossTone {
            frequency_hz: 5230.0,
            modes: Some(pb::AzimuthalModes {
                dominant_order: 2,
                dominant_share: 0.9,
                pattern: pb::AzimuthalPattern::Standing as i32,
                ..Default::default()
            }),
            ..Default::default()
        };
        assert_eq!(mode_text(&x).as_deref(), Some("m = 2 standing (flapping) (90 % of the energy)"));
        assert_eq!(mode_line(1.25, &x, "m = 2"), "t =    1.250 s  mode at 5230.0 Hz: m = 2");
        let u = pb::TrackUpdate {
            stream_time_s: 1.25,
            channels: vec![pb::ChannelTracks {
                channel: 0,
                tones: vec![pb::TrackedTone {
                    track_id: 4,
                    frequency_hz: 5230.0,
                    level_db: 131.0,
                    ..Default::default()
                }],
                strongest_track_id: Some(4),
            }],
            events: vec![pb::TrackEvent { kind: pb::TrackEventKind::Vanished as i32, ..Default::default() }],
            strongest_cross: Some(x),
        };
        let v = update_json(&u);
        assert_eq!(
            v["channels"][0]["tones"][0],
            json!({"track_id": 4, "frequency_hz": 5230.0, "level_db": 131.0})
        );
        assert_eq!(v["strongest_cross"]["mode"], json!("m = 2 standing (flapping) (90 % of the energy)"));
        assert_eq!(v["events"][0]["kind"], json!("vanished"));
        let rep = track_report(Path::new("jump.wav"), 40, 1, modes_table(), events_table());
        assert!(rep.to_table().starts_with("Tracked jump.wav (40 updates, 1 jumps)\n"));
    }
}
