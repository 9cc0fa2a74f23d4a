//! `jetloop shock-noise`: peak frequency of shock-associated noise against observer angle.

use crate::args::jet::CellArgs;
use crate::args::jet::ConvectionArgs;
use crate::args::jet::JetSourceArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::shock_noise_plot;
use crate::render::report::Report;
use crate::render::screech::shock_noise_report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;

/// `jetloop shock-noise`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ShockNoiseCmd {
    /// The jet: nozzle and operating point, or the fully expanded state.
    #[command(flatten)]
    jet: JetSourceArgs,
    /// Convection speed.
    #[command(flatten)]
    convection: ConvectionArgs,
    /// Shock-cell model options.
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

impl ShockNoiseCmd {
    /// The PredictShockNoise request: the jet, convection, cell options and observer angles
    /// (deg).
    ///
    /// # Errors
    /// [`Failure::Usage`] when the jet is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::PredictShockNoiseRequest, Failure> {
        Ok(pb::PredictShockNoiseRequest {
            jet: Some(self.jet.input()?),
            convection: self.convection.convection(),
            cells: Some(self.cells.options()),
            observer_angles_deg: self.angles_deg.clone(),
        })
    }
}

/// Runs `shock-noise`.
impl Run for ShockNoiseCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch).predict_shock_noise(a.request()?).await?.into_inner();
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(path, &shock_noise_plot(&r)).map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(shock_noise_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> PredictShockNoise request, without a server.

    use super::*;

    #[test]
    fn the_angles_and_the_convection_speed_reach_the_request() {
        let line = "shock-noise --mj 1.4 --dj-m 0.02 --angles-deg 30,60,90 --convection-speed-m-per-s 230";
        let crate::Command::ShockNoise(a) = crate::tests::command(line) else { panic!("not shock-noise") };
        let r = a.request().expect("request");
        assert_eq!(r.observer_angles_deg, vec![30.0, 60.0, 90.0]);
        assert_eq!(
            r.convection,
            Some(pb::Convection { speed: Some(pb::convection::Speed::ConvectionSpeedMPerS(230.0)) })
        );
        assert_eq!(r.cells, Some(pb::CellOptions::default()), "cell options left to the server");
    }
}
