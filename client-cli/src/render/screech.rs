//! Reports of the prediction commands: shock cells (`cells`), screech (`screech`),
//! shock-associated noise (`shock-noise`), screech sweeps (`sweep`) and guided jet modes
//! (`modes`).

use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::jet_rows;
use crate::render::rows::mode_tables;
use crate::render::rows::regime_name;
use crate::render::rows::tone_table;
use jetloop_proto::pb;

/// The jet, the waveguide modes (spacings in m) and the shock positions (m) of a
/// CellSpacing answer.
pub(crate) fn cells_report(r: pb::CellSpacingResponse) -> Report {
    let mut modes = Table::new("modes", "Waveguide modes")
        .col("mode", "mode")
        .col("vortex_sheet_spacing_m", "vortex sheet [m]")
        .col("spacing_m", "spacing [m]")
        .col("spacing_over_reference_length", "spacing / L")
        .col("bessel_zero", "j0,n");
    for m in &r.modes {
        modes.row(vec![
            Some(Val::Int(m.mode.into())),
            Some(Val::Num(m.vortex_sheet_spacing_m)),
            Some(Val::Num(m.spacing_m)),
            Some(Val::Num(m.spacing_over_reference_length)),
            m.bessel_zero.map(Val::Num),
        ]);
    }
    let mut shocks = Table::new("shocks", "Shock positions (fundamental mode)")
        .col("index", "shock")
        .col("axial_position_m", "x [m]")
        .col("axial_position_over_reference_length", "x / L");
    for s in &r.shocks {
        shocks.row(vec![
            Some(Val::Int(s.index.into())),
            Some(Val::Num(s.axial_position_m)),
            Some(Val::Num(s.axial_position_over_reference_length)),
        ]);
    }
    let rep = jet_rows(Report::new("Shock cells (vortex-sheet model)"), &r.jet).num(
        "spacing_factor",
        "spacing factor",
        r.spacing_factor,
        "",
    );
    rep.table(modes).table(shocks).provenance(r.provenance)
}

/// The jet, the feedback loop, one row per screech model (frequencies in Hz), the loop's
/// paths and orders, and the guided-mode bands and closure tones when asked for, of a
/// PredictScreech answer.
pub(crate) fn screech_report(r: pb::PredictScreechResponse) -> Report {
    let mut models = Table::new("predictions", "Screech predictions")
        .col("model", "model")
        .col("fundamental_hz", "f [Hz]")
        .col("strouhal_number", "St = f L/Uj")
        .col("harmonics_hz", "harmonics [Hz]");
    for p in &r.predictions {
        let h: Vec<String> = p.harmonics.iter().skip(1).map(|t| format!("{:.0}", t.frequency_hz)).collect();
        models.row(vec![
            Some(Val::Text(p.model.clone())),
            Some(Val::Num(p.fundamental_hz)),
            Some(Val::Num(p.strouhal_number)),
            Some(Val::Text(h.join(" "))),
        ]);
    }
    let fl = r.feedback_loop.clone().unwrap_or_default();
    let mut paths = Table::new("loop_segments", "Feedback loop paths")
        .col("label", "path")
        .col("length_m", "length [m]")
        .col("speed_m_per_s", "speed [m/s]")
        .col("time_s", "time [s]");
    for s in &fl.segments {
        paths.row(vec![
            Some(Val::Text(s.label.clone())),
            Some(Val::Num(s.length_m)),
            Some(Val::Num(s.speed_m_per_s)),
            Some(Val::Num(s.time_s)),
        ]);
    }
    let rep = jet_rows(Report::new("Screech prediction"), &r.jet)
        .num("spacing_m", "shock-cell spacing", r.spacing_m, "m")
        .num("spacing_factor", "spacing factor", r.spacing_factor, "")
        .num("convection_speed_m_per_s", "Uc", fl.convection_speed_m_per_s, "m/s")
        .num("convective_mach_number", "Mc = Uc/a", fl.convective_mach_number, "")
        .num("source_distance_m", "loop source distance", fl.source_distance_m, "m")
        .num("fixed_delay_s", "fixed delays", fl.fixed_delay_s, "s")
        .num("loop_time_s", "loop time tau", fl.loop_time_s, "s");
    let mut rep = rep.table(models).table(paths).table(tone_table(
        "loop_orders",
        "Loop orders (n periods in the loop time: f = n / tau)",
        &fl.orders,
    ));
    if !r.guided_modes.is_empty() {
        let (bands, closures) = mode_tables(&r.guided_modes, true);
        rep = rep.table(bands).table(closures);
    }
    rep.provenance(r.provenance)
}

/// The jet, the convection speed and the peak frequency (Hz) at each observer angle (deg)
/// and shock-cell mode of a PredictShockNoise answer.
pub(crate) fn shock_noise_report(r: pb::PredictShockNoiseResponse) -> Report {
    let mut t = Table::new("peaks", "Shock-associated noise peak")
        .col("observer_angle_deg", "angle [deg]")
        .col("mode", "mode")
        .col("peak_frequency_hz", "f_peak [Hz]")
        .col("strouhal_number", "St");
    for p in &r.peaks {
        t.row(vec![
            Some(Val::Num(p.observer_angle_deg)),
            Some(Val::Int(p.mode.into())),
            p.peak_frequency_hz.map(Val::Num),
            p.strouhal_number.map(Val::Num),
        ]);
    }
    let rep = jet_rows(Report::new("Shock-associated noise"), &r.jet)
        .num("convection_speed_m_per_s", "Uc", r.convection_speed_m_per_s, "m/s")
        .num("convective_mach_number", "Mc = Uc/a", r.convective_mach_number, "");
    rep.table(t).provenance(r.provenance)
}

/// The points of a SweepScreech answer, one row each: the swept value (its column key and
/// header in `swept`; `None` when the NPR is swept, which is then the NPR column), the jet,
/// the regime (only when some point has one: a jet given directly has none), the Powell and
/// Tam frequencies and one column per loop order (frequencies in Hz).
pub(crate) fn sweep_table(r: &pb::SweepScreechResponse, swept: Option<(&str, &str)>) -> Table {
    let orders = r.points.iter().map(|p| p.loop_frequencies_hz.len()).max().unwrap_or(0);
    let regimes = r.points.iter().any(|p| p.regime != pb::ExpansionRegime::Unspecified as i32);
    let mut t = Table::new("points", "Sweep");
    t = match swept {
        None => t.col("nozzle_pressure_ratio", "NPR"),
        Some((key, header)) => t.col(key, header).col("nozzle_pressure_ratio", "NPR"),
    };
    t = t.col("fully_expanded_mach_number", "Mj");
    if regimes {
        t = t.col("regime", "regime");
    }
    t = t
        .col("fully_expanded_velocity_m_per_s", "Uj [m/s]")
        .col("reference_length_m", "L [m]")
        .col("spacing_m", "Ls [m]")
        .col("powell_fundamental_hz", "Powell [Hz]")
        .col("tam_1986_hz", "Tam 1986 [Hz]");
    for n in 1..=orders {
        t = t.col(format!("loop_n{n}_hz"), format!("n={n} [Hz]"));
    }
    for p in &r.points {
        let mut row = Vec::new();
        if swept.is_some() {
            row.push(Some(Val::Num(p.value)));
        }
        row.push(Some(Val::Num(p.nozzle_pressure_ratio)));
        row.push(Some(Val::Num(p.fully_expanded_mach_number)));
        if regimes {
            row.push(Some(Val::Text(regime_name(p.regime))));
        }
        row.extend([
            Some(Val::Num(p.fully_expanded_velocity_m_per_s)),
            Some(Val::Num(p.reference_length_m)),
            p.spacing_m.map(Val::Num),
            p.powell_fundamental_hz.map(Val::Num),
            p.tam_1986_hz.map(Val::Num),
        ]);
        for n in 0..orders {
            row.push(p.loop_frequencies_hz.get(n).copied().map(Val::Num));
        }
        t.row(row);
    }
    t
}

/// A sweep shown in full: its points as the table `points` (see [`sweep_table`]).
pub(crate) fn sweep_report(r: pb::SweepScreechResponse, points: Table) -> Report {
    Report::new(format!(
        "Screech sweep ({} points, {:.3} ms server time)",
        r.points.len(),
        r.compute_time_s * 1e3
    ))
    .num("compute_time_s", "server compute time", r.compute_time_s, "s")
    .hide(&["compute_time_s"])
    .table(points)
    .provenance(r.provenance)
}

/// A sweep whose points went to the CSV file `csv_file`: one summary line (the counts,
/// cautions and sources stay in the JSON form).
pub(crate) fn sweep_written_report(r: pb::SweepScreechResponse, csv_file: &std::path::Path) -> Report {
    let rep = Report::new(format!(
        "Screech sweep: {} points written to {} ({:.3} ms server time)",
        r.points.len(),
        csv_file.display(),
        r.compute_time_s * 1e3
    ))
    .int("points", "points", r.points.len() as u64, "")
    .text("csv_file", "CSV file", csv_file.display().to_string())
    .num("compute_time_s", "server compute time", r.compute_time_s, "s")
    .hide(&["compute_time_s"]);
    rep.provenance(r.provenance).title_only()
}

/// The vortex sheet and the guided-mode bands and closure tones (with hertz when the jet
/// has a size) of a GuidedModes answer.
pub(crate) fn modes_report(r: pb::GuidedModesResponse) -> Report {
    let sheet = r.sheet.unwrap_or_default();
    let hz = sheet.reference_length_m.is_some();
    let (bands, tones) = mode_tables(&r.modes, hz);
    Report::new(format!(
        "Guided jet modes, Mj {:.4} ({})",
        sheet.fully_expanded_mach_number,
        if sheet.round { "round" } else { "planar" }
    ))
    .num("sound_speed_ratio", "a_ambient / aj", sheet.sound_speed_ratio, "")
    .num("density_ratio", "rho_j / rho_ambient", sheet.density_ratio, "")
    .num("convection_ratio", "Uc / Uj", r.convection_ratio, "")
    .num("spacing_factor", "spacing factor", r.spacing_factor, "")
    .table(bands)
    .table(tones)
    .provenance(r.provenance)
}

#[cfg(test)]
mod tests {
    //! Answers built by hand -> report rows and CSV lines, without a server.

    use super::*;
    use serde_json::json;

    fn jet() -> Option<pb::ExpandedJetSummary> {
        Some(pb::ExpandedJetSummary { fully_expanded_mach_number: 1.5, ..Default::default() })
    }

    fn tone(order: u32, frequency_hz: f64) -> pb::Tone {
        pb::Tone { order, frequency_hz, strouhal_number: 0.1 * f64::from(order) }
    }

    #[test]
    fn cells_list_each_waveguide_mode_and_shock_position() {
        let r = pb::CellSpacingResponse {
            jet: jet(),
            spacing_factor: 0.8,
            modes: vec![pb::CellMode {
                mode: 1,
                spacing_m: 0.0231,
                bessel_zero: Some(2.405),
                ..Default::default()
            }],
            shocks: vec![
                pb::ShockPosition { index: 1, axial_position_m: 0.0231, ..Default::default() },
                pb::ShockPosition { index: 2, axial_position_m: 0.0462, ..Default::default() },
            ],
            ..Default::default()
        };
        let rep = cells_report(r);
        let v = rep.to_json();
        assert_eq!(v["spacing_factor"], json!(0.8));
        assert_eq!(v["fully_expanded_mach_number"], json!(1.5));
        assert_eq!(v["modes"][0]["bessel_zero"], json!(2.405));
        assert_eq!(
            v["shocks"][1],
            json!({"index": 2, "axial_position_m": 0.0462, "axial_position_over_reference_length": 0.0})
        );
        assert!(rep.to_table().contains("Shock positions (fundamental mode)\n"));
    }

    #[test]
    fn screech_rows_give_each_model_its_harmonics_and_the_loop_its_paths_and_orders() {
        let r = pb::PredictScreechResponse {
            jet: jet(),
            predictions: vec![pb::ScreechModelPrediction {
                model: "Powell".into(),
                fundamental_hz: 5230.4,
                harmonics: vec![tone(1, 5230.4), tone(2, 10460.8), tone(3, 15691.2)],
                ..Default::default()
            }],
            feedback_loop: Some(pb::FeedbackLoopResult {
                loop_time_s: 7.6e-4,
                segments: vec![pb::LoopSegmentTime {
                    label: "upstream acoustic".into(),
                    length_m: 0.1,
                    speed_m_per_s: 340.0,
                    time_s: 2.9e-4,
                }],
                orders: vec![tone(4, 5263.0)],
                ..Default::default()
            }),
            ..Default::default()
        };
        let v = screech_report(r.clone()).to_json();
        assert_eq!(
            v["predictions"][0],
            json!({"model": "Powell", "fundamental_hz": 5230.4, "strouhal_number": 0.0, "harmonics_hz": "10461 15691"})
        );
        assert_eq!(v["loop_segments"][0]["label"], json!("upstream acoustic"));
        assert_eq!(v["loop_orders"][0], json!({"order": 4, "frequency_hz": 5263.0, "strouhal_number": 0.4}));
        assert_eq!(v["loop_time_s"], json!(7.6e-4));
        assert!(v.get("modes").is_none(), "no guided-mode tables unless asked for");
        let guided = pb::PredictScreechResponse {
            guided_modes: vec![pb::GuidedModeResult { family: "helical".into(), ..Default::default() }],
            ..r
        };
        assert_eq!(screech_report(guided).to_json()["modes"][0]["family"], json!("helical"));
    }

    #[test]
    fn a_shock_noise_peak_beyond_the_model_has_an_empty_frequency() {
        let r = pb::PredictShockNoiseResponse {
            peaks: vec![
                pb::ShockNoisePeak {
                    observer_angle_deg: 90.0,
                    mode: 1,
                    peak_frequency_hz: Some(11_000.0),
                    strouhal_number: Some(0.9),
                    ..Default::default()
                },
                pb::ShockNoisePeak { observer_angle_deg: 30.0, mode: 1, ..Default::default() },
            ],
            ..Default::default()
        };
        let v = shock_noise_report(r).to_json();
        assert_eq!(v["peaks"][0]["peak_frequency_hz"], json!(11_000.0));
        assert_eq!(v["peaks"][1], json!({"observer_angle_deg": 30.0, "mode": 1}));
    }

    fn point(value: f64, regime: pb::ExpansionRegime, loops: &[f64]) -> pb::SweepPoint {
        pb::SweepPoint {
            value,
            nozzle_pressure_ratio: 3.0,
            fully_expanded_mach_number: 1.36,
            regime: regime as i32,
            powell_fundamental_hz: Some(6100.0),
            loop_frequencies_hz: loops.to_vec(),
            ..Default::default()
        }
    }

    #[test]
    fn an_npr_sweep_has_the_npr_first_the_regime_and_one_column_per_loop_order() {
        let r = pb::SweepScreechResponse {
            points: vec![
                point(3.0, pb::ExpansionRegime::UnderExpanded, &[1500.0, 3000.0]),
                point(3.1, pb::ExpansionRegime::Subsonic, &[]),
            ],
            ..Default::default()
        };
        let csv = sweep_table(&r, None).to_csv();
        let lines: Vec<&str> = csv.lines().collect();
        assert_eq!(
            lines[0],
            "nozzle_pressure_ratio,fully_expanded_mach_number,regime,fully_expanded_velocity_m_per_s,\
             reference_length_m,spacing_m,powell_fundamental_hz,tam_1986_hz,loop_n1_hz,loop_n2_hz"
        );
        assert_eq!(lines[1], "3,1.36,under-expanded,0,0,,6100,,1500,3000");
        assert_eq!(lines[2], "3,1.36,subsonic,0,0,,6100,,,");
    }

    #[test]
    fn a_reflector_sweep_of_a_jet_given_directly_has_the_distance_first_and_no_regime() {
        let r = pb::SweepScreechResponse {
            points: vec![point(0.01, pb::ExpansionRegime::Unspecified, &[5000.0])],
            compute_time_s: 0.002,
            ..Default::default()
        };
        let t = sweep_table(&r, Some(("reflector_distance_m", "reflector [m]")));
        let csv = t.to_csv();
        assert!(csv.starts_with("reflector_distance_m,nozzle_pressure_ratio,fully_expanded_mach_number,fully_expanded_velocity_m_per_s,"), "{csv}");
        assert_eq!(csv.lines().nth(1), Some("0.01,3,1.36,0,0,,6100,,5000"));
        let shown = sweep_report(r.clone(), t).to_table();
        assert!(shown.starts_with("Screech sweep (1 points, 2.000 ms server time)\n"), "{shown}");
        assert!(!shown.contains("server compute time"), "hidden from the table: {shown}");
        let written = sweep_written_report(r, std::path::Path::new("map.csv"));
        assert_eq!(written.to_table(), "Screech sweep: 1 points written to map.csv (2.000 ms server time)\n");
        assert_eq!(written.to_json()["csv_file"], json!("map.csv"));
    }

    #[test]
    fn guided_modes_of_a_jet_with_a_size_show_hertz() {
        let m = pb::GuidedModeResult {
            mode: Some(pb::GuidedModeId {
                shape: pb::ModeShape::Round as i32,
                azimuthal_order: 1,
                radial_order: 1,
            }),
            has_band: true,
            branch_point: Some(pb::ModePoint {
                strouhal_number: 0.3,
                frequency_hz: Some(4000.0),
                ..Default::default()
            }),
            ..Default::default()
        };
        let sheet = |reference_length_m| pb::VortexSheetParameters {
            fully_expanded_mach_number: 1.3,
            round: true,
            reference_length_m,
            ..Default::default()
        };
        let r =
            pb::GuidedModesResponse { sheet: Some(sheet(Some(0.025))), modes: vec![m], ..Default::default() };
        let rep = modes_report(r.clone());
        assert!(rep.to_table().starts_with("Guided jet modes, Mj 1.3000 (round)\n"));
        assert_eq!(rep.to_json()["modes"][0]["band_low_hz"], json!(4000.0));
        let r = pb::GuidedModesResponse { sheet: Some(sheet(None)), ..r };
        let v = modes_report(r).to_json();
        assert_eq!(v["modes"][0]["band_low_strouhal"], json!(0.3));
        assert!(v["modes"][0].get("band_low_hz").is_none(), "no size, no hertz: {v}");
    }
}
