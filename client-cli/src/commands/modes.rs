//! `jetloop modes`: guided-jet-mode bands, closure tones and dispersion curves.

use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::dispersion_plot;
use crate::render::report::Report;
use crate::render::rows::mode_tables;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;
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
            crate::render::plot::write_plot(path, &dispersion_plot(&r, &sheet)).map_err(Failure::Usage)?;
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
