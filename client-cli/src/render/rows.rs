//! Table rows and tables built from responses, shared by several commands (jet summary,
//! tones, analysis settings, band levels, cautions, mode and stage names).

use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use jetloop_proto::pb;

/// Lower-case regime name for tables.
pub fn regime_name(r: i32) -> String {
    if r == pb::ExpansionRegime::Unspecified as i32 {
        return "n/a (jet given directly)".into();
    }
    pb::ExpansionRegime::try_from(r)
        .map(|e| e.as_str_name().trim_start_matches("EXPANSION_REGIME_").to_lowercase().replace('_', "-"))
        .unwrap_or_else(|_| format!("unknown ({r})"))
}

/// Short name of a guided mode: "m=1 r1" (round), "sym r1" / "anti r2" (planar).
pub fn mode_label(m: &pb::GuidedModeId) -> String {
    match pb::ModeShape::try_from(m.shape) {
        Ok(pb::ModeShape::Round) => format!("m={} r{}", m.azimuthal_order, m.radial_order),
        Ok(pb::ModeShape::PlanarSymmetric) => format!("sym r{}", m.radial_order),
        Ok(pb::ModeShape::PlanarAntisymmetric) => format!("anti r{}", m.radial_order),
        _ => "?".into(),
    }
}

/// Adds the fully expanded jet summary to `r`: Mj, sqrt(Mj^2-1), Uj (m/s), the ambient
/// sound speed (m/s), the reference length (m) and bj (m) when the jet has a width.
pub(crate) fn jet_rows(r: Report, j: &Option<pb::ExpandedJetSummary>) -> Report {
    let j = j.clone().unwrap_or_default();
    r.num("fully_expanded_mach_number", "Mj", j.fully_expanded_mach_number, "")
        .num("beta_from_sonic", "sqrt(Mj^2-1)", j.beta_from_sonic, "")
        .num("fully_expanded_velocity_m_per_s", "Uj", j.fully_expanded_velocity_m_per_s, "m/s")
        .num("ambient_sound_speed_m_per_s", "a_ambient", j.ambient_sound_speed_m_per_s, "m/s")
        .num("reference_length_m", "reference length (Dj or hj)", j.reference_length_m, "m")
        .opt("fully_expanded_width_m", "bj", j.fully_expanded_width_m, "m")
}

/// A table stored under `key`, titled `title`, of harmonic tones: order, frequency (Hz) and
/// Strouhal number.
pub(crate) fn tone_table(key: &'static str, title: &str, tones: &[pb::Tone]) -> Table {
    let mut t =
        Table::new(key, title).col("order", "n").col("frequency_hz", "f [Hz]").col("strouhal_number", "St");
    for x in tones {
        t.row(vec![
            Some(Val::Int(x.order.into())),
            Some(Val::Num(x.frequency_hz)),
            Some(Val::Num(x.strouhal_number)),
        ]);
    }
    t
}

/// Adds the level corrections applied, one row each.
pub(crate) fn correction_rows(mut r: Report, c: &[String]) -> Report {
    for (i, s) in c.iter().enumerate() {
        r = r.text(if i == 0 { "correction" } else { "correction_more" }, "level correction", s.clone());
    }
    r
}

/// The name of an azimuthal pattern (axisymmetric, standing, spinning and which way).
pub(crate) fn pattern_name(p: i32) -> &'static str {
    match pb::AzimuthalPattern::try_from(p) {
        Ok(pb::AzimuthalPattern::Axisymmetric) => "axisymmetric",
        Ok(pb::AzimuthalPattern::Standing) => "standing (flapping)",
        Ok(pb::AzimuthalPattern::SpinningIncreasing) => "spinning towards increasing azimuth (helical)",
        Ok(pb::AzimuthalPattern::SpinningDecreasing) => "spinning towards decreasing azimuth (helical)",
        Ok(pb::AzimuthalPattern::SenseUndetermined) => "sense not determined (order M/2 of an even ring)",
        _ => "?",
    }
}

/// The stage label of a tone for the table.
pub(crate) fn stage_text(t: &pb::ExtractedTone) -> String {
    if t.harmonic_order.is_some_and(|o| o >= 2) {
        return "(harmonic)".into();
    }
    match &t.best_stage {
        None => "none".into(),
        Some(s) => {
            let id = s.mode.as_ref().map(crate::render::rows::mode_label).unwrap_or_default();
            let letters =
                if s.customary_stage.is_empty() { String::new() } else { format!(" {}", s.customary_stage) };
            let dev =
                s.relative_deviation.map_or(String::new(), |d| format!(", {:+.1} % from closure", 100.0 * d));
            let near = if s.band_distance > 0.0 {
                format!(", {:.1} % outside band", 100.0 * s.band_distance)
            } else {
                ", in band".to_string()
            };
            let more =
                if t.stages.len() > 1 { format!(" (+{} more)", t.stages.len() - 1) } else { String::new() };
            format!("{id}{letters}{near}{dev}{more}")
        }
    }
}

/// Adds the analysis settings: window, segment, overlap, averages, resolution and ENBW
/// (Hz), the PSD random error and the samples left over.
pub(crate) fn analysis_rows(r: Report, a: &pb::AnalysisParameters) -> Report {
    r.text("window", "window", a.window.clone())
        .int("segment_length", "segment length", a.segment_length.into(), "samples")
        .int("overlap_samples", "overlap", a.overlap_samples.into(), "samples")
        .int("averages", "averages", a.averages.into(), "")
        .num("frequency_resolution_hz", "resolution", a.frequency_resolution_hz, "Hz")
        .num("enbw_hz", "noise bandwidth (ENBW)", a.enbw_hz, "Hz")
        .num("normalized_random_error", "PSD random error (std/mean)", a.normalized_random_error, "")
        .int("unused_samples", "samples after the last segment", a.unused_samples, "")
}

/// The one-third-octave band table: nominal and exact centres (Hz), level (dB re 20 uPa),
/// A-weighted level (dB(A)) and whether the band is resolved.
pub(crate) fn band_table(b: &pb::BandSummary) -> Table {
    let mut t = Table::new("bands", "One-third-octave bands (IEC 61260-1, base ten)")
        .col("nominal_hz", "band [Hz]")
        .col("exact_hz", "exact centre [Hz]")
        .col("level_db", "L [dB re 20 uPa]")
        .col("a_weighted_level_db", "L_A [dB(A)]")
        .col("resolved", "resolved");
    for x in &b.bands {
        t.row(vec![
            Some(Val::Plain(x.nominal_hz)),
            Some(Val::Num(x.exact_hz)),
            Some(Val::Num(x.level_db)),
            Some(Val::Num(x.a_weighted_level_db)),
            Some(Val::Flag(x.resolved)),
        ]);
    }
    t
}

/// Adds the cautions, one row each.
pub(crate) fn caution_rows(mut r: Report, c: &[String]) -> Report {
    for (i, s) in c.iter().enumerate() {
        r = r.text(if i == 0 { "caution" } else { "caution_more" }, "CAUTION", s.clone());
    }
    r
}

/// A channel's name for tables and plots: its name in the recording, else "channel N".
pub(crate) fn channel_label(name: &str, channel: u32) -> String {
    if name.is_empty() {
        format!("channel {channel}")
    } else {
        name.to_string()
    }
}

/// Rows of a channel section that the summary of several channels shows once.
pub(crate) const PER_CHANNEL_SUMMARY: [&str; 13] = [
    "channel",
    "window",
    "segment_length",
    "overlap_samples",
    "averages",
    "frequency_resolution_hz",
    "enbw_hz",
    "normalized_random_error",
    "unused_samples",
    "rms_pa",
    "overall_level_db",
    "caution",
    "caution_more",
];

/// The analysis settings once (every channel is analysed alike), one table row per channel,
/// and the strongest caution once.
pub(crate) fn channel_summary(mut top: Report, channels: &[pb::ChannelSpectrum]) -> Report {
    if let Some(an) = channels.first().and_then(|c| c.analysis.as_ref()) {
        top = analysis_rows(top, an);
    }
    let mut t = Table::new("summary", "Channels")
        .col("channel", "channel")
        .col("rms_pa", "rms [Pa]")
        .col("overall_level_db", "overall [dB re 20 uPa]")
        .col("tone_count", "tones")
        .col("strongest_tone_hz", "strongest tone [Hz]")
        .col("strongest_tone_level_db", "its level [dB re 20 uPa]");
    for c in channels {
        let label = channel_label(&c.name, c.channel);
        let top_tone = c.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db));
        t.row(vec![
            Some(Val::Text(label)),
            Some(Val::Num(c.rms_pa)),
            Some(Val::Num(c.overall_level_db)),
            Some(Val::Int(c.tones.len() as u64)),
            top_tone.map(|x| Val::Num(x.frequency_hz)),
            top_tone.map(|x| Val::Num(x.level_db)),
        ]);
    }
    let loudest = channels
        .iter()
        .filter(|c| !c.cautions.is_empty())
        .max_by(|a, b| a.overall_level_db.total_cmp(&b.overall_level_db));
    if let Some(c) = loudest {
        top = top.text("caution", "CAUTION", c.cautions[0].clone());
    }
    top.table(t)
}

/// The name of a closure outcome (in, below or above the band, or no band).
pub(crate) fn outcome_name(o: i32) -> &'static str {
    match pb::ClosureOutcome::try_from(o) {
        Ok(pb::ClosureOutcome::InBand) => "in band",
        Ok(pb::ClosureOutcome::BelowBand) => "below band",
        Ok(pb::ClosureOutcome::AboveBand) => "above band",
        Ok(pb::ClosureOutcome::NoBand) => "no band",
        _ => "?",
    }
}

/// The band table and the closure-tone table of guided-mode results (`hz`: with hertz).
pub fn mode_tables(modes: &[pb::GuidedModeResult], hz: bool) -> (Table, Table) {
    let mut bands = Table::new("modes", "Guided modes: bands where the upstream mode propagates")
        .col("mode", "mode")
        .col("family", "family")
        .col("customary_stage", "stage")
        .col("band_low_strouhal", "St low")
        .col("band_high_strouhal", "St high");
    if hz {
        bands = bands.col("band_low_hz", "low [Hz]").col("band_high_hz", "high [Hz]");
    }
    let mut tones = Table::new("closures", "Closure tones (omega/Uc - k_s,n = k_guided)")
        .col("mode", "mode")
        .col("cell_mode", "cell mode n")
        .col("outcome", "outcome")
        .col("strouhal_number", "St");
    if hz {
        tones = tones.col("frequency_hz", "f [Hz]");
    }
    for m in modes {
        let id = m.mode.as_ref().map(mode_label).unwrap_or_default();
        let b = m.branch_point.unwrap_or_default();
        let s = m.saddle_point;
        let mut row = vec![
            Some(Val::Text(id.clone())),
            Some(Val::Text(m.family.clone())),
            Some(Val::Text(m.customary_stage.clone())),
            m.has_band.then_some(Val::Num(b.strouhal_number)),
            s.as_ref().map(|s| Val::Num(s.strouhal_number)),
        ];
        if hz {
            row.push(if m.has_band { b.frequency_hz.map(Val::Num) } else { None });
            row.push(s.as_ref().and_then(|s| s.frequency_hz).map(Val::Num));
        }
        bands.row(row);
        for t in &m.tones {
            let mut row = vec![
                Some(Val::Text(id.clone())),
                Some(Val::Int(t.cell_mode.into())),
                Some(Val::Text(outcome_name(t.outcome).into())),
                t.tone.as_ref().map(|p| Val::Num(p.strouhal_number)),
            ];
            if hz {
                row.push(t.tone.as_ref().and_then(|p| p.frequency_hz).map(Val::Num));
            }
            tones.row(row);
        }
    }
    (bands, tones)
}

#[cfg(test)]
mod tests {
    //! Response -> rows, without a server: messages built by hand, the rows they give.

    use super::*;
    use serde_json::json;

    fn round(m: u32, r: u32) -> pb::GuidedModeId {
        pb::GuidedModeId { shape: pb::ModeShape::Round as i32, azimuthal_order: m, radial_order: r }
    }

    #[test]
    fn names_of_regimes_modes_outcomes_and_patterns() {
        assert_eq!(regime_name(pb::ExpansionRegime::UnderExpanded as i32), "under-expanded");
        assert_eq!(regime_name(pb::ExpansionRegime::Unspecified as i32), "n/a (jet given directly)");
        assert_eq!(regime_name(99), "unknown (99)");
        assert_eq!(mode_label(&round(1, 1)), "m=1 r1");
        let planar = pb::GuidedModeId {
            shape: pb::ModeShape::PlanarAntisymmetric as i32,
            azimuthal_order: 0,
            radial_order: 2,
        };
        assert_eq!(mode_label(&planar), "anti r2");
        assert_eq!(outcome_name(pb::ClosureOutcome::BelowBand as i32), "below band");
        assert_eq!(pattern_name(pb::AzimuthalPattern::Standing as i32), "standing (flapping)");
    }

    #[test]
    fn a_tone_table_has_one_row_per_harmonic_in_csv_and_json() {
        let tones = [
            pb::Tone { order: 1, frequency_hz: 5230.5, strouhal_number: 0.31 },
            pb::Tone { order: 2, frequency_hz: 10461.0, strouhal_number: 0.62 },
        ];
        let t = tone_table("powell", "Powell", &tones);
        assert_eq!(t.to_csv(), "order,frequency_hz,strouhal_number\n1,5230.5,0.31\n2,10461,0.62\n");
        let j = Report::new("x").table(t).to_json();
        assert_eq!(j["powell"][1], json!({"order": 2, "frequency_hz": 10461.0, "strouhal_number": 0.62}));
    }

    #[test]
    fn jet_rows_carry_every_summary_field_and_the_width_only_when_there_is_one() {
        let j = pb::ExpandedJetSummary {
            fully_expanded_mach_number: 1.5,
            fully_expanded_velocity_m_per_s: 448.0,
            fully_expanded_width_m: None,
            ..Default::default()
        };
        let v = jet_rows(Report::new("jet"), &Some(j)).to_json();
        assert_eq!(v["fully_expanded_mach_number"], json!(1.5));
        assert_eq!(v["fully_expanded_velocity_m_per_s"], json!(448.0));
        assert!(v.get("fully_expanded_width_m").is_none(), "{v}");
    }

    #[test]
    fn band_rows_keep_nominal_and_exact_centres() {
        let b = pb::BandSummary {
            bands: vec![pb::OneThirdOctaveBand {
                nominal_hz: 1000.0,
                exact_hz: 1000.0,
                level_db: 94.0,
                a_weighted_level_db: 94.0,
                resolved: true,
                ..Default::default()
            }],
            ..Default::default()
        };
        assert_eq!(
            band_table(&b).to_csv(),
            "nominal_hz,exact_hz,level_db,a_weighted_level_db,resolved\n1000,1000,94,94,true\n"
        );
    }

    #[test]
    fn stage_text_names_the_stage_its_distance_and_leaves_harmonics_to_their_fundamental() {
        let stage = pb::StageMatch {
            mode: Some(round(1, 1)),
            customary_stage: "C".into(),
            relative_deviation: Some(-0.012),
            band_distance: 0.0,
            ..Default::default()
        };
        let t = pb::ExtractedTone {
            best_stage: Some(stage.clone()),
            stages: vec![stage.clone(), stage],
            ..Default::default()
        };
        assert_eq!(stage_text(&t), "m=1 r1 C, in band, -1.2 % from closure (+1 more)");
        let h = pb::ExtractedTone { harmonic_order: Some(2), ..t.clone() };
        assert_eq!(stage_text(&h), "(harmonic)");
        assert_eq!(stage_text(&pb::ExtractedTone::default()), "none");
    }

    #[test]
    fn mode_tables_list_bands_and_closures_with_hertz_when_asked() {
        let p = |st: f64, hz: f64| pb::ModePoint {
            strouhal_number: st,
            frequency_hz: Some(hz),
            ..Default::default()
        };
        let m = pb::GuidedModeResult {
            mode: Some(round(0, 1)),
            family: "axisymmetric".into(),
            customary_stage: "A1".into(),
            branch_point: Some(p(0.40, 6000.0)),
            saddle_point: Some(p(0.45, 6750.0)),
            has_band: true,
            tones: vec![
                pb::ClosureTone {
                    cell_mode: 1,
                    outcome: pb::ClosureOutcome::InBand as i32,
                    tone: Some(p(0.42, 6300.0)),
                    ..Default::default()
                },
                pb::ClosureTone {
                    cell_mode: 2,
                    outcome: pb::ClosureOutcome::AboveBand as i32,
                    tone: None,
                    ..Default::default()
                },
            ],
            ..Default::default()
        };
        let (bands, tones) = mode_tables(std::slice::from_ref(&m), true);
        assert_eq!(bands.to_csv().lines().nth(1), Some("m=0 r1,axisymmetric,A1,0.4,0.45,6000,6750"));
        assert_eq!(
            tones.to_csv().lines().skip(1).collect::<Vec<_>>(),
            vec!["m=0 r1,1,in band,0.42,6300", "m=0 r1,2,above band,,"]
        );
        let (bands, _) = mode_tables(&[m], false);
        assert!(!bands.to_csv().contains("band_low_hz"));
    }

    #[test]
    fn a_summary_of_several_channels_shows_each_channel_once_and_the_loudest_caution() {
        let tone = |f: f64, l: f64| pb::ExtractedTone { frequency_hz: f, level_db: l, ..Default::default() };
        let ch = |i: u32, l: f64, cautions: Vec<String>| pb::ChannelSpectrum {
            channel: i,
            overall_level_db: l,
            tones: vec![tone(5230.0, l - 3.0), tone(10460.0, l - 10.0)],
            cautions,
            ..Default::default()
        };
        let v = channel_summary(
            Report::new("x"),
            &[ch(0, 120.0, vec![]), ch(1, 150.0, vec!["above 140 dB".into()])],
        )
        .to_json();
        assert_eq!(v["summary"].as_array().map(Vec::len), Some(2));
        assert_eq!(v["summary"][1]["strongest_tone_hz"], json!(5230.0));
        assert_eq!(v["summary"][1]["tone_count"], json!(2));
        assert_eq!(v["summary"][0]["channel"], json!("channel 0"));
        assert_eq!(v["caution"], json!("above 140 dB"));
    }
}
