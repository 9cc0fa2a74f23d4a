//! `jetloop screech`: screech frequency by several models, harmonics and the feedback loop.

use crate::args::jet::JetSourceArgs;
use crate::args::jet::ScreechArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::screech::screech_report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;

/// `jetloop screech`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ScreechCmd {
    /// The jet: nozzle and operating point, or the fully expanded state.
    #[command(flatten)]
    jet: JetSourceArgs,
    /// Screech-model options.
    #[command(flatten)]
    screech: ScreechArgs,
}

impl ScreechCmd {
    /// The PredictScreech request: the jet and the screech-model options.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the jet is incompletely given.
    pub(crate) fn request(&self) -> Result<pb::PredictScreechRequest, Failure> {
        Ok(pb::PredictScreechRequest { jet: Some(self.jet.input()?), options: Some(self.screech.options()) })
    }
}

/// Runs `screech`.
impl Run for ScreechCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch).predict_screech(a.request()?).await?.into_inner();
        Ok(screech_report(r))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> PredictScreech request, without a server.

    use super::*;
    use jetloop_proto::pb::operating_point::Pressure;

    #[test]
    fn the_nozzle_the_npr_and_the_loop_options_reach_the_request() {
        let line = "screech --diameter-m 0.0254 --npr 3.5 --source-cells 4 --max-loop-order 6 --guided";
        let crate::Command::Screech(a) = crate::tests::command(line) else { panic!("not screech") };
        let r = a.request().expect("request");
        let Some(pb::jet_input::Source::Conditions(c)) = r.jet.and_then(|j| j.source) else {
            panic!("not conditions")
        };
        assert_eq!(c.operating_point.and_then(|o| o.pressure), Some(Pressure::NozzlePressureRatio(3.5)));
        let o = r.options.expect("options");
        let l = o.r#loop.expect("loop");
        assert_eq!(l.source, Some(pb::feedback_loop::Source::SourceCells(4.0)));
        assert_eq!(l.max_loop_order, Some(6));
        assert!(o.guided_modes.is_some());
    }
}
