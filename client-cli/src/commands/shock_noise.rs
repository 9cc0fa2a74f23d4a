//! `jetloop shock-noise`: peak frequency of shock-associated noise against observer angle.

use crate::args::jet::CellArgs;
use crate::args::jet::ConvectionArgs;
use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::shock_noise_plot;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::jet_rows;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;

/// `jetloop shock-noise`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ShockNoiseCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    convection: ConvectionArgs,
    #[command(flatten)]
    cells: CellArgs,
    /// Observer angles from the downstream jet axis in degrees, comma separated (server
    /// default 30..180 in 10 degree steps).
    #[arg(long, value_delimiter = ',')]
    angles_deg: Vec<f64>,
    /// Write the peak frequency against observer angle as a plot, one series per shock-cell
    /// mode (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<std::path::PathBuf>,
}

/// Runs `shock-noise`.
impl Run for ShockNoiseCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch)
            .predict_shock_noise(pb::PredictShockNoiseRequest {
                jet: Some(a.jet.input()?),
                convection: a.convection.convection(),
                cells: Some(a.cells.options()),
                observer_angles_deg: a.angles_deg,
            })
            .await?
            .into_inner();
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
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(path, &shock_noise_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(rep.table(t).provenance(r.provenance))
    }
}
