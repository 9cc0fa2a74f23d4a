//! Reports of the spectral commands: tones of a recording, channel by channel (`tones`), the
//! PSD as CSV, the cross-channel analysis (`tones --cross` / `--azimuths-deg`) and band
//! levels (`bands`). Levels are in dB re 20 uPa, frequencies in Hz.

use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::analysis_rows;
use crate::render::rows::band_table;
use crate::render::rows::caution_rows;
use crate::render::rows::channel_label;
use crate::render::rows::channel_summary;
use crate::render::rows::correction_rows;
use crate::render::rows::pattern_name;
use crate::render::rows::stage_text;
use crate::render::rows::PER_CHANNEL_SUMMARY;
use jetloop_proto::pb;
use std::path::Path;

/// The ExtractTones answer for `file`: one section per channel (see [`tones_section`]), and
/// with several channels the analysis settings once and a summary table; `timing` says how
/// long the server took, `labelled` adds the stage column.
pub(crate) fn tones_report(r: pb::ExtractTonesResponse, file: &Path, timing: &str, labelled: bool) -> Report {
    let mut top =
        Report::new(format!("Tones in {} ({} channel(s), {timing})", file.display(), r.channels.len(),));
    let several = r.channels.len() > 1;
    for c in &r.channels {
        top = top.child(tones_section(c, labelled, several));
    }
    if several {
        top = channel_summary(top, &r.channels);
    }
    top.provenance(r.provenance)
}

/// One channel's section: analysis settings and levels, the tones (with the screech stage
/// each fits when `labelled`), harmonic families, combination tones, the match with a
/// predicted frequency, band levels, corrections, cautions and warnings. With `several`
/// channels the rows the summary shows once are hidden here.
pub(crate) fn tones_section(c: &pb::ChannelSpectrum, labelled: bool, several: bool) -> Report {
    let label = channel_label(&c.name, c.channel);
    let mut rep = Report::new(format!("-- {label}"));
    if let Some(an) = &c.analysis {
        rep = analysis_rows(rep.text("channel", "channel", label.clone()), an)
            .num("rms_pa", "rms pressure", c.rms_pa, "Pa")
            .num("overall_level_db", "overall level", c.overall_level_db, "dB re 20 uPa");
    }
    let mut t = Table::new("tones", format!("Tones, {label}"))
        .col("frequency_hz", "f [Hz]")
        .col("level_db", "L [dB re 20 uPa]")
        .col("tone_to_floor_db", "above floor [dB]")
        .col("bandwidth_3db_hz", "-3 dB width [Hz]")
        .col("family", "family")
        .col("harmonic_order", "order");
    if labelled {
        t = t.col("stage", "stage (guided mode)");
    }
    for x in &c.tones {
        let mut row = vec![
            Some(Val::Num(x.frequency_hz)),
            Some(Val::Num(x.level_db)),
            Some(Val::Num(x.tone_to_floor_db)),
            Some(Val::Num(x.bandwidth_3db_hz)),
            x.family.map(|v| Val::Int(v.into())),
            x.harmonic_order.map(|v| Val::Int(v.into())),
        ];
        if labelled {
            row.push(Some(Val::Text(stage_text(x))));
        }
        t.row(row);
    }
    rep = rep.table(t);
    let mut fam = Table::new("families", format!("Harmonic families, {label}"))
        .col("id", "family")
        .col("fundamental_hz", "f0 [Hz]")
        .col("orders", "orders")
        .col("level_db", "L [dB]");
    for f in &c.families {
        let orders: Vec<String> = f.orders.iter().map(u32::to_string).collect();
        fam.row(vec![
            Some(Val::Int(f.id.into())),
            Some(Val::Num(f.fundamental_hz)),
            Some(Val::Text(orders.join(" "))),
            Some(Val::Num(f.level_db)),
        ]);
    }
    rep = rep.table(fam);
    for comb in &c.combinations {
        let kind = if comb.is_sum { "sum" } else { "difference" };
        rep = rep.text(
            "combination",
            "combination tone",
            format!(
                "tone {} at the {kind} of families {} and {} ({:.1} Hz)",
                comb.tone_index, comb.family_a, comb.family_b, comb.expected_hz
            ),
        );
    }
    if let Some(m) = &c.predicted_match {
        let text = match (m.tone_frequency_hz, m.difference_hz) {
            (Some(f), Some(d)) => format!(
                "predicted {:.1} Hz, nearest tone {:.1} Hz ({:+.1} Hz, {:+.2} %): {}",
                m.predicted_hz,
                f,
                d,
                100.0 * m.relative_difference.unwrap_or(0.0),
                if m.matched { "matched" } else { "outside the tolerance" }
            ),
            _ => format!("predicted {:.1} Hz: no tones found", m.predicted_hz),
        };
        rep = rep.text("predicted_match", "screech prediction", text);
    }
    if let Some(b) = &c.bands {
        rep = rep
            .num("a_weighted_overall_db", "A-weighted overall", b.a_weighted_overall_db, "dB(A)")
            .table(band_table(b));
    }
    rep = correction_rows(rep, &c.corrections_applied);
    rep = caution_rows(rep, &c.cautions);
    for (i, w) in c.warnings.iter().enumerate() {
        rep = rep.text(if i == 0 { "warning" } else { "warning_more" }, "WARNING", w.clone());
    }
    if several {
        // Shown once for all channels in the summary above the sections.
        rep = rep.hide(&PER_CHANNEL_SUMMARY);
    }
    rep
}

/// A PSD as CSV: frequency_hz, density_pa2_per_hz, floor_pa2_per_hz (empty where the
/// answer has no floor).
pub(crate) fn psd_csv(p: &pb::PsdData) -> String {
    let mut csv = String::from("frequency_hz,density_pa2_per_hz,floor_pa2_per_hz\n");
    for (i, f) in p.frequency_hz.iter().enumerate() {
        let fl = p.floor_pa2_per_hz.get(i).map_or(String::new(), |v| v.to_string());
        csv.push_str(&format!("{f},{},{fl}\n", p.density_pa2_per_hz[i]));
    }
    csv
}

/// The cross-channel report: one row per tone of the reference channel, with every
/// channel's phase (deg) and coherence and the azimuthal mode or pair symmetry.
pub(crate) fn cross_report(r: &pb::CrossSpectraResponse) -> Report {
    let mut t =
        Table::new("cross_tones", format!("Cross-channel, reference channel {}", r.reference_channel))
            .col("frequency_hz", "f [Hz]")
            .col("level_db", "L [dB re 20 uPa]")
            .col("channels", "channel: phase [deg] / coherence")
            .col("mode", "mode");
    for x in &r.tones {
        let chans: Vec<String> = x
            .channels
            .iter()
            .map(|c| format!("{}: {:+.1} / {:.3}", c.channel, c.phase_deg, c.coherence))
            .collect();
        let mode = match (&x.modes, &x.pair) {
            (Some(m), _) => format!(
                "m = {} {} ({:.0} % of energy, spin ratio {:+.2})",
                m.dominant_order,
                pattern_name(m.pattern),
                100.0 * m.dominant_share,
                m.spin_ratio
            ),
            (None, Some(p)) => format!(
                "{} (confidence {:.2})",
                if p.symmetric { "symmetric" } else { "antisymmetric" },
                p.confidence
            ),
            _ => String::new(),
        };
        t.row(vec![
            Some(Val::Num(x.frequency_hz)),
            Some(Val::Num(x.level_db)),
            Some(Val::Text(chans.join("; "))),
            Some(Val::Text(mode)),
        ]);
    }
    let mut rep = Report::new("-- cross-channel").table(t);
    for (i, w) in r.warnings.iter().enumerate() {
        rep = rep.text(if i == 0 { "warning" } else { "warning_more" }, "WARNING", w.clone());
    }
    rep
}

/// The BandLevels answer for `file`: one section per channel with its overall,
/// A-weighted and outside-the-bands levels and the band table.
pub(crate) fn bands_report(r: pb::BandLevelsResponse, file: &Path) -> Report {
    let mut top = Report::new(format!("Band levels of {}", file.display()));
    for c in &r.channels {
        let label = channel_label(&c.name, c.channel);
        let b = c.bands.clone().unwrap_or_default();
        let mut rep = Report::new(format!("-- {label}"))
            .text("channel", "channel", label)
            .num("overall_level_db", "overall level", b.overall_level_db, "dB re 20 uPa")
            .num("a_weighted_overall_db", "A-weighted overall", b.a_weighted_overall_db, "dB(A)")
            .num("outside_span_level_db", "level outside the bands", b.outside_span_level_db, "dB re 20 uPa")
            .table(band_table(&b));
        rep = correction_rows(rep, &c.corrections_applied);
        rep = caution_rows(rep, &c.cautions);
        top = top.child(rep);
    }
    top.provenance(r.provenance)
}

#[cfg(test)]
mod tests {
    //! Answers built by hand -> report rows and CSV lines, without a server.

    use super::*;
    use serde_json::json;

    fn tone(frequency_hz: f64, level_db: f64, family: u32, order: u32) -> pb::ExtractedTone {
        pb::ExtractedTone {
            frequency_hz,
            level_db,
            tone_to_floor_db: 30.0,
            family: Some(family),
            harmonic_order: Some(order),
            ..Default::default()
        }
    }

    fn channel(channel: u32, name: &str) -> pb::ChannelSpectrum {
        pb::ChannelSpectrum {
            channel,
            name: name.into(),
            analysis: Some(pb::AnalysisParameters { window: "hann".into(), ..Default::default() }),
            rms_pa: 100.0,
            overall_level_db: 134.0,
            tones: vec![tone(5230.0, 131.5, 0, 1), tone(10460.0, 122.0, 0, 2)],
            families: vec![pb::HarmonicFamily {
                id: 0,
                fundamental_hz: 5230.0,
                orders: vec![1, 2],
                ..Default::default()
            }],
            predicted_match: Some(pb::PredictionMatch {
                predicted_hz: 5100.0,
                tone_frequency_hz: Some(5230.0),
                difference_hz: Some(130.0),
                relative_difference: Some(0.0255),
                matched: true,
                ..Default::default()
            }),
            warnings: vec!["clipped".into(), "short".into()],
            ..Default::default()
        }
    }

    #[test]
    fn a_channel_section_lists_its_tones_families_match_and_warnings() {
        let rep = tones_section(&channel(0, ""), false, false);
        let v = rep.to_json();
        assert_eq!(v["channel"], json!("channel 0"));
        assert_eq!(v["tones"][1]["frequency_hz"], json!(10460.0));
        assert_eq!(v["tones"][1]["harmonic_order"], json!(2));
        assert!(v["tones"][0].get("stage").is_none(), "no stage column without a jet");
        assert_eq!(v["families"][0]["orders"], json!("1 2"));
        assert_eq!(
            v["predicted_match"],
            json!("predicted 5100.0 Hz, nearest tone 5230.0 Hz (+130.0 Hz, +2.55 %): matched")
        );
        assert_eq!((v["warning"].clone(), v["warning_more"].clone()), (json!("clipped"), json!("short")));
        let t = rep.to_table();
        assert!(t.starts_with("-- channel 0\n"), "{t}");
        assert!(t.contains("Tones, channel 0\n"), "{t}");
    }

    #[test]
    fn labelled_tones_get_a_stage_column() {
        let v = tones_section(&channel(1, "mic_a"), true, false).to_json();
        assert_eq!(v["tones"][0]["stage"], json!("none"));
        assert_eq!(v["tones"][1]["stage"], json!("(harmonic)"));
    }

    #[test]
    fn several_channels_get_one_summary_and_their_sections_hide_what_it_shows() {
        let r = pb::ExtractTonesResponse {
            channels: vec![channel(0, "mic_a"), channel(1, "mic_b")],
            ..Default::default()
        };
        let rep = tones_report(r, Path::new("mics.csv"), "12.0 ms server time", false);
        let t = rep.to_table();
        assert!(t.starts_with("Tones in mics.csv (2 channel(s), 12.0 ms server time)\n"), "{t}");
        assert_eq!(t.matches("  window ").count(), 1, "the settings once: {t}");
        assert_eq!(t.matches("\nChannels\n").count(), 1, "{t}");
        let v = rep.to_json();
        assert_eq!(v["channels"][1]["channel"], json!("mic_b"), "JSON keeps every row");
        assert_eq!(v["summary"][0]["strongest_tone_hz"], json!(5230.0));
    }

    #[test]
    fn the_psd_csv_has_one_line_per_bin_and_an_empty_floor_where_there_is_none() {
        let p = pb::PsdData {
            frequency_hz: vec![0.0, 12.5],
            density_pa2_per_hz: vec![1e-3, 2.5],
            floor_pa2_per_hz: vec![1e-4],
            ..Default::default()
        };
        assert_eq!(
            psd_csv(&p),
            "frequency_hz,density_pa2_per_hz,floor_pa2_per_hz\n0,0.001,0.0001\n12.5,2.5,\n"
        );
    }

    #[test]
    fn cross_rows_give_each_channel_phase_and_coherence_and_the_mode_or_pair() {
        let at = |channel, phase_deg, coherence| pb::ChannelAtTone {
            channel,
            phase_deg,
            coherence,
            ..Default::default()
        };
        let r = pb::CrossSpectraResponse {
            reference_channel: 0,
            tones: vec![
                pb::CrossTone {
                    frequency_hz: 5230.0,
                    level_db: 131.0,
                    channels: vec![at(0, 0.0, 1.0), at(1, -90.04, 0.9987)],
                    modes: Some(pb::AzimuthalModes {
                        dominant_order: 1,
                        dominant_share: 0.97,
                        spin_ratio: 0.95,
                        pattern: pb::AzimuthalPattern::SpinningIncreasing as i32,
                        ..Default::default()
                    }),
                    ..Default::default()
                },
                pb::CrossTone {
                    frequency_hz: 10460.0,
                    pair: Some(pb::PairSymmetry { symmetric: false, confidence: 0.8 }),
                    ..Default::default()
                },
            ],
            warnings: vec!["a tone at 2000.0 Hz stands in channels 0, 2".into()],
            ..Default::default()
        };
        let v = cross_report(&r).to_json();
        assert_eq!(v["warning"], json!("a tone at 2000.0 Hz stands in channels 0, 2"));
        assert_eq!(v["cross_tones"][0]["channels"], json!("0: +0.0 / 1.000; 1: -90.0 / 0.999"));
        assert_eq!(
            v["cross_tones"][0]["mode"],
            json!("m = 1 spinning towards increasing azimuth (helical) (97 % of energy, spin ratio +0.95)")
        );
        assert_eq!(v["cross_tones"][1]["mode"], json!("antisymmetric (confidence 0.80)"));
    }

    #[test]
    fn band_sections_are_named_after_their_channel_with_the_overall_levels() {
        let r = pb::BandLevelsResponse {
            channels: vec![pb::ChannelBands {
                channel: 1,
                name: "mic_b".into(),
                bands: Some(pb::BandSummary {
                    overall_level_db: 120.5,
                    a_weighted_overall_db: 118.25,
                    ..Default::default()
                }),
                cautions: vec!["few averages".into()],
                ..Default::default()
            }],
            ..Default::default()
        };
        let rep = bands_report(r, Path::new("mics.csv"));
        let v = rep.to_json();
        assert_eq!(v["channels"][0]["channel"], json!("mic_b"));
        assert_eq!(v["channels"][0]["overall_level_db"], json!(120.5));
        assert_eq!(v["channels"][0]["caution"], json!("few averages"));
        assert!(rep.to_table().starts_with("Band levels of mics.csv\n-- mic_b\n"));
    }
}
