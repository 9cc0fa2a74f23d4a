//! The CalibratorSensitivity answer: a table of each channel's sensitivity and tone, the
//! warnings, and the calibration file (TOML, one `[[channel]]` per microphone) that
//! `--calibration-file` reads.

use crate::render::report::{Report, Table, Val};
use crate::render::rows::channel_label;
use jetloop_proto::pb;
use std::path::Path;

/// The short name of a warning kind for tables.
fn kind_name(kind: i32) -> &'static str {
    match pb::CalibratorWarningKind::try_from(kind) {
        Ok(pb::CalibratorWarningKind::FullScale) => "full scale",
        Ok(pb::CalibratorWarningKind::FlatTopped) => "flat-topped",
        Ok(pb::CalibratorWarningKind::FrequencyOff) => "frequency off",
        Ok(pb::CalibratorWarningKind::Unsteady) => "unsteady",
        Ok(pb::CalibratorWarningKind::Unspecified) | Err(_) => "other",
    }
}

/// The report of `r` for the recording `file`: the method figures, one row per channel and one
/// row per warning.
pub(crate) fn calibration_report(r: &pb::CalibratorSensitivityResponse, file: &Path) -> Report {
    let mut t = Table::new("channels", "Channels")
        .col("channel", "channel")
        .col("sensitivity_mv_per_pa", "S mV/Pa")
        .col("sensitivity_db_re_1v_per_pa", "S dB re 1 V/Pa")
        .col("pascals_per_unit", "Pa/unit")
        .col("tone_rms_units", "tone rms units")
        .col("frequency_hz", "f Hz")
        .col("frequency_deviation_percent", "f dev %")
        .col("frequency_span_hz", "f span Hz")
        .col("level_span_db", "level span dB")
        .col("thd_percent", "THD %")
        .col("thd_n_percent", "THD+N %")
        .col("warnings", "warnings");
    let mut w =
        Table::new("warnings", "Warnings").col("channel", "channel").col("kind", "kind").col("message", "");
    for c in &r.channels {
        let label = channel_label(&c.name, c.channel);
        t.row(vec![
            Some(Val::Text(label.clone())),
            c.sensitivity_v_per_pa.map(|s| Val::Num(1e3 * s)),
            c.sensitivity_db_re_1v_per_pa.map(Val::Num),
            Some(Val::Num(c.pascals_per_unit)),
            Some(Val::Num(c.tone_rms_units)),
            Some(Val::Num(c.frequency_hz)),
            Some(Val::Num(100.0 * c.frequency_deviation_fraction)),
            Some(Val::Num(c.frequency_span_hz)),
            Some(Val::Num(c.level_span_db)),
            Some(Val::Num(c.thd_percent)),
            Some(Val::Num(c.thd_n_percent)),
            Some(Val::Int(c.warnings.len() as u64)),
        ]);
        for x in &c.warnings {
            w.row(vec![
                Some(Val::Text(label.clone())),
                Some(Val::Text(kind_name(x.kind).into())),
                Some(Val::Text(x.message.clone())),
            ]);
        }
    }
    Report::new(format!("Calibrator reading of {}", file.display()))
        .num("stated_rms_pa", "stated rms pressure", r.stated_rms_pa, "Pa")
        .int("segment_length", "segment (block) length", u64::from(r.segment_length), "samples")
        .num("resolution_hz", "bin width", r.resolution_hz, "Hz")
        .num("block_duration_s", "stability block", r.block_duration_s, "s")
        .text("window", "window", r.window.clone())
        .table(t)
        .table(w)
        .provenance(r.provenance.clone())
}

/// A TOML basic string: a JSON string's escapes (\", \\, \n, \uXXXX) are TOML's too.
fn toml_string(s: &str) -> String {
    serde_json::Value::String(s.to_string()).to_string()
}

/// A TOML float that reads back as the same f64: Rust's shortest round-trip form ("0.05",
/// "1e-7" and "1.0" are all TOML floats). The values written are finite.
fn toml_float(v: f64) -> String {
    format!("{v:?}")
}

/// The calibration file of `r`: one `[[channel]]` per channel with its name (the recording's,
/// else "channel N"), and `sensitivity_v_per_pa` with `volts_per_unit` when the volts were
/// known, else `pa_per_unit`; the reading's figures and warnings as comments. `source` names
/// the recording and `stated` the calibrator (level dB, frequency Hz).
pub(crate) fn calibration_toml(
    r: &pb::CalibratorSensitivityResponse,
    source: &Path,
    stated: (f64, f64),
) -> String {
    let mut out = format!(
        "# Microphone calibration from the sound-calibrator recording {} ({} dB re 20 uPa, {} Hz stated;\n\
         # {:.6} Pa rms). One [[channel]] per microphone, in channel order; read with --calibration-file.\n",
        source.display(),
        stated.0,
        stated.1,
        r.stated_rms_pa
    );
    for c in &r.channels {
        out.push_str("\n[[channel]]\n");
        out.push_str(&format!("name = {}\n", toml_string(&channel_label(&c.name, c.channel))));
        match (c.sensitivity_v_per_pa, c.volts_per_unit) {
            (Some(s), Some(v)) => {
                out.push_str(&format!("sensitivity_v_per_pa = {}\n", toml_float(s)));
                out.push_str(&format!("volts_per_unit = {}\n", toml_float(v)));
            }
            _ => out.push_str(&format!("pa_per_unit = {}\n", toml_float(c.pascals_per_unit))),
        }
        out.push_str(&format!(
            "# tone {:.3} Hz ({:+.3} %), level span {:.3} dB, frequency span {:.3} Hz, THD {:.3} %, THD+N {:.3} %\n",
            c.frequency_hz,
            100.0 * c.frequency_deviation_fraction,
            c.level_span_db,
            c.frequency_span_hz,
            c.thd_percent,
            c.thd_n_percent
        ));
        for w in &c.warnings {
            out.push_str(&format!("# WARNING: {}\n", w.message.replace('\n', " ")));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    //! Answers built by hand -> table rows and calibration files, without a server.

    use super::*;

    pub(crate) fn answer() -> pb::CalibratorSensitivityResponse {
        let ch = |channel: u32, name: &str, s: Option<f64>, v: Option<f64>, k: f64| pb::CalibratorChannel {
            channel,
            name: name.into(),
            sensitivity_v_per_pa: s,
            volts_per_unit: v,
            pascals_per_unit: k,
            frequency_hz: 1000.1,
            ..Default::default()
        };
        pb::CalibratorSensitivityResponse {
            channels: vec![
                ch(0, "mic \"A\"", Some(0.050_123), Some(1.0), 1.0 / 0.050_123),
                ch(1, "", Some(3.16e-3), Some(10.0 / 32_768.0), 10.0 / 32_768.0 / 3.16e-3),
                pb::CalibratorChannel {
                    warnings: vec![pb::CalibratorWarning {
                        kind: pb::CalibratorWarningKind::FlatTopped as i32,
                        message: "flat-topped: 40 consecutive samples".into(),
                    }],
                    ..ch(2, "no volts", None, None, 2.5e-4)
                },
            ],
            stated_rms_pa: 1.002_374,
            ..Default::default()
        }
    }

    #[test]
    fn the_file_reads_back_through_the_calibration_file_reader_with_the_same_factors() {
        use pb::calibration::Scale;
        let dir = std::env::temp_dir().join(format!("jetloop-calib-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let f = dir.join("cal.toml");
        std::fs::write(&f, calibration_toml(&answer(), Path::new("cal.wav"), (94.0, 1000.0))).expect("write");
        let back = crate::args::input::read_calibration_file(&f).expect("the written file reads back");
        let names: Vec<&str> = back.iter().map(|c| c.name.as_str()).collect();
        assert_eq!(names, ["mic \"A\"", "channel 1", "no volts"]);
        let scales: Vec<Option<Scale>> = back.iter().map(|c| c.calibration.scale).collect();
        // Exactly the numbers of the answer (TOML floats round-trip f64).
        assert_eq!(
            scales,
            vec![
                Some(Scale::Microphone(pb::MicrophoneChain {
                    sensitivity_v_per_pa: 0.050_123,
                    volts_per_unit: 1.0
                })),
                Some(Scale::Microphone(pb::MicrophoneChain {
                    sensitivity_v_per_pa: 3.16e-3,
                    volts_per_unit: 10.0 / 32_768.0
                })),
                Some(Scale::PascalsPerUnit(2.5e-4)),
            ]
        );
        let _ = std::fs::remove_dir_all(dir);
    }

    #[test]
    fn the_table_has_a_row_per_channel_and_per_warning() {
        let json = calibration_report(&answer(), Path::new("cal.wav")).to_json();
        let rows = json["channels"].as_array().expect("channels");
        assert_eq!(rows.len(), 3);
        assert!((rows[0]["sensitivity_mv_per_pa"].as_f64().unwrap_or(0.0) - 50.123).abs() < 1e-9);
        assert!(rows[2].get("sensitivity_mv_per_pa").is_none(), "no volts, no sensitivity");
        let w = json["warnings"].as_array().expect("warnings");
        assert_eq!((w.len(), w[0]["kind"].as_str()), (1, Some("flat-topped")));
    }
}
