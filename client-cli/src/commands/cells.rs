//! `jetloop cells`: shock-cell spacing (vortex-sheet model) and shock positions of a jet.

use crate::args::jet::CellArgs;
use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::cells_plot;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::jet_rows;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::shock_cell_service_client::ShockCellServiceClient;

/// `jetloop cells`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct CellsCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    cells: CellArgs,
    /// Write the shock positions along the jet as a plot (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

/// Runs `cells`.
impl Run for CellsCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ShockCellServiceClient::new(ch)
            .cell_spacing(pb::CellSpacingRequest {
                jet: Some(a.jet.input()?),
                options: Some(a.cells.options()),
            })
            .await?
            .into_inner();
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
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(path, &cells_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(rep.table(modes).table(shocks).provenance(r.provenance))
    }
}
