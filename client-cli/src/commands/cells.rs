//! `jetloop cells`: shock-cell spacing (vortex-sheet model) and shock positions of a jet.

use crate::args::jet::CellArgs;
use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::cells_plot;
use crate::render::report::Report;
use crate::render::screech::cells_report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::shock_cell_service_client::ShockCellServiceClient;

/// `jetloop cells`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct CellsCmd {
    /// The jet: nozzle and operating point, or the fully expanded state.
    #[command(flatten)]
    jet: JetSourceArgs,
    /// Shock-cell model options.
    #[command(flatten)]
    cells: CellArgs,
    /// Write the shock positions along the jet as a plot (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

impl CellsCmd {
    /// The CellSpacing request: the jet and the shock-cell options.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the jet is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::CellSpacingRequest, Failure> {
        Ok(pb::CellSpacingRequest { jet: Some(self.jet.input()?), options: Some(self.cells.options()) })
    }
}

/// Runs `cells`.
impl Run for CellsCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ShockCellServiceClient::new(ch).cell_spacing(a.request()?).await?.into_inner();
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(path, &cells_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(cells_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> CellSpacing request, without a server.

    use super::*;

    fn request(line: &str) -> Result<pb::CellSpacingRequest, Failure> {
        let crate::Command::Cells(a) = crate::tests::command(line) else { panic!("{line}") };
        a.request()
    }

    #[test]
    fn the_cell_options_and_a_planar_jet_given_directly_reach_the_request() {
        let r =
            request("cells --mj 1.4 --hj-m 0.01 --modes 3 --shocks 6 --spacing-factor 0.8").expect("request");
        assert_eq!(
            r.options,
            Some(pb::CellOptions { spacing_factor: Some(0.8), modes: Some(3), shock_count: Some(6) })
        );
        let Some(pb::jet_input::Source::FullyExpanded(j)) = r.jet.and_then(|j| j.source) else {
            panic!("not a fully expanded jet")
        };
        assert_eq!(j.fully_expanded_mach_number, 1.4);
        assert_eq!(j.size, Some(pb::fully_expanded_jet::Size::PlanarHeightM(0.01)));
        let e = request("cells --mj 1.4").unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--dj-m")), "{e:?}");
    }
}
