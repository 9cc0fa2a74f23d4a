//! `jetloop modes`: guided-jet-mode bands, closure tones and dispersion curves.

use crate::output::{Report, Table, Val};
use crate::plot::{Axis, Marker, Plot, COLOURS};
use crate::tones::{mode_label, JetSourceArgs};
use crate::{Ctx, Failure, Run};
use clap::Args;
use jetloop_proto::pb::{self, tone_service_client::ToneServiceClient};
use std::path::PathBuf;

/// `jetloop modes`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ModesCmd {
    /// The jet (nozzle and --npr, or --mj with --dj-m / --hj-m); or --mj with a temperature
    /// ratio below for a jet without a size (Strouhal numbers only).
    #[command(flatten)]
    jet: JetSourceArgs,
    /// Dimensionless jet: fully expanded static temperature ratio Tj/Ta (with --mj).
    #[arg(long, requires = "mj", conflicts_with = "t0_over_ta")]
    tj_over_ta: Option<f64>,
    /// Dimensionless jet: reservoir-to-ambient temperature ratio T0/Ta (with --mj; 1 = cold).
    #[arg(long, requires = "mj")]
    t0_over_ta: Option<f64>,
    /// Dimensionless jet: planar instead of round.
    #[arg(long)]
    planar: bool,
    /// Convection ratio Uc/Uj in the closure (server default 0.7).
    #[arg(long)]
    convection_ratio: Option<f64>,
    /// Shock-cell modes used in the closure (server default 2).
    #[arg(long)]
    cell_modes: Option<u32>,
    /// Factor on the vortex-sheet shock-cell spacing (server default 1).
    #[arg(long)]
    spacing_factor: Option<f64>,
    /// Points per dispersion curve (server default 100).
    #[arg(long)]
    curve_points: Option<u32>,
    /// Write the dispersion curves, bands and closure tones as a plot (SVG, or PNG for a .png
    /// name).
    #[arg(long)]
    plot: Option<PathBuf>,
}

fn outcome_name(o: i32) -> &'static str {
    match pb::ClosureOutcome::try_from(o) {
        Ok(pb::ClosureOutcome::InBand) => "in band",
        Ok(pb::ClosureOutcome::BelowBand) => "below band",
        Ok(pb::ClosureOutcome::AboveBand) => "above band",
        Ok(pb::ClosureOutcome::NoBand) => "no band",
        _ => "?",
    }
}

/// Runs `modes`.
impl Run for ModesCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        use pb::guided_modes_request::Source;
        use pb::vortex_sheet_jet::Temperature;
        let temperature = match (a.tj_over_ta, a.t0_over_ta) {
            (Some(t), _) => Some(Temperature::StaticTemperatureRatio(t)),
            (None, Some(t)) => Some(Temperature::TotalTemperatureRatio(t)),
            _ => None,
        };
        let source = match (temperature, a.jet.mach()) {
            (Some(t), Some(mj)) => Source::VortexSheet(pb::VortexSheetJet {
                fully_expanded_mach_number: mj,
                temperature: Some(t),
                gamma: None,
                geometry: if a.planar { pb::SheetGeometry::Planar } else { pb::SheetGeometry::Round } as i32,
            }),
            _ => Source::Jet(a.jet.input()?),
        };
        let r = ToneServiceClient::new(ch)
            .guided_modes(pb::GuidedModesRequest {
                source: Some(source),
                options: Some(pb::GuidedModeOptions {
                    modes: Vec::new(),
                    convection_ratio: a.convection_ratio,
                    spacing_factor: a.spacing_factor,
                    cell_modes: a.cell_modes,
                }),
                curve_points: a.curve_points,
            })
            .await?
            .into_inner();
        let sheet = r.sheet.unwrap_or_default();
        let hz = sheet.reference_length_m.is_some();
        let (bands, tones) = mode_tables(&r.modes, hz);
        if let Some(path) = &a.plot {
            crate::plot::write_plot(path, &dispersion_plot(&r, &sheet)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(Report::new(format!(
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
        .provenance(r.provenance))
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

/// Dispersion curves St against k L: upstream parts solid, the rest dashed; branch and saddle
/// points marked; the sonic line dotted; closure tones as dots.
fn dispersion_plot(r: &pb::GuidedModesResponse, sheet: &pb::VortexSheetParameters) -> String {
    let pts = r.modes.iter().flat_map(|m| m.curve.iter());
    let (mut kmin, mut smax) = (0.0_f64, 0.0_f64);
    for p in pts {
        kmin = kmin.min(p.wavenumber_times_length);
        smax = smax.max(p.strouhal_number);
    }
    let smax = (smax * 1.1).max(0.1);
    let kmin = (kmin * 1.05).min(-0.1);
    let x = Axis::linear(kmin, 0.0, "axial wavenumber k L (L = Dj or hj; negative: upstream phase)");
    let y = Axis::linear(0.0, smax, "Strouhal number f L / Uj");
    let mut p = Plot::new("Guided jet modes of the vortex sheet", 860.0, 560.0, x, y);
    // Sonic line k = -omega / a_ambient: k L = -2 pi Mj St / (a/aj).
    let slope = -2.0 * std::f64::consts::PI * sheet.fully_expanded_mach_number / sheet.sound_speed_ratio;
    let st_end = (kmin / slope).min(smax);
    p.line(&[(0.0, 0.0), (slope * st_end, st_end)], "#555", true, Some("sonic line k = -omega/a"));
    for (i, m) in r.modes.iter().enumerate() {
        let colour = COLOURS[i % COLOURS.len()];
        let id = m.mode.as_ref().map(mode_label).unwrap_or_default();
        let up: Vec<(f64, f64)> = m
            .curve
            .iter()
            .filter(|q| q.upstream)
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        let down: Vec<(f64, f64)> = m
            .curve
            .iter()
            .filter(|q| !q.upstream)
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        let label =
            if m.customary_stage.is_empty() { id.clone() } else { format!("{id} ({})", m.customary_stage) };
        if up.len() >= 2 {
            p.line(&up, colour, false, Some(&format!("{label}: upstream band")));
            p.line(&down, colour, true, None);
        } else {
            p.line(&down, colour, true, Some(&format!("{label}: no band")));
        }
        let marks: Vec<(f64, f64)> = m
            .branch_point
            .iter()
            .chain(m.saddle_point.iter())
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        p.markers(&marks, colour, Marker::Ring, None);
        let tones: Vec<(f64, f64)> = m
            .tones
            .iter()
            .filter_map(|t| t.tone.as_ref())
            .map(|q| (q.wavenumber_times_length, q.strouhal_number))
            .collect();
        p.markers(&tones, colour, Marker::Dot, None);
    }
    p.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plot_draws_a_band_line_per_mode_and_the_sonic_line() {
        let pt = |k: f64, st: f64, up: bool| pb::ModePoint {
            strouhal_number: st,
            wavenumber_times_length: k,
            upstream: up,
            ..Default::default()
        };
        let r = pb::GuidedModesResponse {
            modes: vec![pb::GuidedModeResult {
                mode: Some(pb::GuidedModeId {
                    shape: pb::ModeShape::Round as i32,
                    azimuthal_order: 1,
                    radial_order: 1,
                }),
                has_band: true,
                branch_point: Some(pt(-3.0, 0.46, true)),
                saddle_point: Some(pt(-3.3, 0.47, true)),
                curve: vec![
                    pt(-3.0, 0.46, true),
                    pt(-3.3, 0.47, true),
                    pt(-5.0, 0.3, false),
                    pt(-7.0, 0.1, false),
                ],
                customary_stage: "B".into(),
                ..Default::default()
            }],
            ..Default::default()
        };
        let sheet = pb::VortexSheetParameters {
            fully_expanded_mach_number: 1.2,
            sound_speed_ratio: 1.13,
            ..Default::default()
        };
        let svg = dispersion_plot(&r, &sheet);
        assert!(svg.contains("m=1 r1 (B): upstream band"));
        assert!(svg.contains("sonic line"));
        assert_eq!(svg.matches("<polyline").count(), 3);
    }
}
