//! `jetloop modes`: guided-jet-mode bands, closure tones and dispersion curves.

use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::dispersion_plot;
use crate::render::report::Report;
use crate::render::screech::modes_report;
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

impl ModesCmd {
    /// The GuidedModes request: a dimensionless vortex sheet (--mj with a temperature ratio),
    /// else the jet given; the closure options and the points per dispersion curve.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the jet is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::GuidedModesRequest, Failure> {
        use pb::guided_modes_request::Source;
        use pb::vortex_sheet_jet::Temperature;
        let temperature = match (self.tj_over_ta, self.t0_over_ta) {
            (Some(t), _) => Some(Temperature::StaticTemperatureRatio(t)),
            (None, Some(t)) => Some(Temperature::TotalTemperatureRatio(t)),
            _ => None,
        };
        let source = match (temperature, self.jet.mach()) {
            (Some(t), Some(mj)) => Source::VortexSheet(pb::VortexSheetJet {
                fully_expanded_mach_number: mj,
                temperature: Some(t),
                gamma: None,
                geometry: if self.planar { pb::SheetGeometry::Planar } else { pb::SheetGeometry::Round }
                    as i32,
            }),
            _ => Source::Jet(self.jet.input()?),
        };
        Ok(pb::GuidedModesRequest {
            source: Some(source),
            options: Some(pb::GuidedModeOptions {
                modes: Vec::new(),
                convection_ratio: self.convection_ratio,
                spacing_factor: self.spacing_factor,
                cell_modes: self.cell_modes,
            }),
            curve_points: self.curve_points,
        })
    }
}

/// Runs `modes`.
impl Run for ModesCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch).guided_modes(a.request()?).await?.into_inner();
        if let Some(path) = &a.plot {
            let sheet = r.sheet.unwrap_or_default();
            crate::render::plot::write_plot(path, &dispersion_plot(&r, &sheet)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(modes_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> GuidedModes request, without a server.

    use super::*;
    use pb::guided_modes_request::Source;

    fn request(line: &str) -> Result<pb::GuidedModesRequest, Failure> {
        let crate::Command::Modes(a) = crate::tests::command(line) else { panic!("{line}") };
        a.request()
    }

    #[test]
    fn mj_with_a_temperature_ratio_is_a_dimensionless_vortex_sheet() {
        let r = request("modes --mj 1.3 --t0-over-ta 1 --planar --curve-points 20 --cell-modes 3")
            .expect("request");
        let Some(Source::VortexSheet(v)) = r.source else { panic!("{:?}", r.source) };
        assert_eq!(v.fully_expanded_mach_number, 1.3);
        assert_eq!(v.temperature, Some(pb::vortex_sheet_jet::Temperature::TotalTemperatureRatio(1.0)));
        assert_eq!(v.geometry, pb::SheetGeometry::Planar as i32);
        assert_eq!(r.curve_points, Some(20));
        assert_eq!(r.options.and_then(|o| o.cell_modes), Some(3));
    }

    #[test]
    fn a_nozzle_at_an_npr_is_sent_as_the_jet() {
        let r = request("modes --diameter-m 0.0254 --npr 3 --spacing-factor 0.8").expect("request");
        let Some(Source::Jet(j)) = r.source else { panic!("{:?}", r.source) };
        assert!(matches!(j.source, Some(pb::jet_input::Source::Conditions(_))), "{j:?}");
        assert_eq!(r.options.and_then(|o| o.spacing_factor), Some(0.8));
    }
}
