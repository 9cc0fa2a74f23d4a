//! `jetloop screech`: screech frequency by several models, harmonics and the feedback loop.

use crate::args::jet::JetSourceArgs;
use crate::args::jet::ScreechArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::jet_rows;
use crate::render::rows::tone_table;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::tone_service_client::ToneServiceClient;

/// `jetloop screech`.
#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct ScreechCmd {
    #[command(flatten)]
    jet: JetSourceArgs,
    #[command(flatten)]
    screech: ScreechArgs,
}

/// Runs `screech`.
impl Run for ScreechCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let r = ToneServiceClient::new(ch)
            .predict_screech(pb::PredictScreechRequest {
                jet: Some(a.jet.input()?),
                options: Some(a.screech.options()),
            })
            .await?
            .into_inner();
        let mut models = Table::new("predictions", "Screech predictions")
            .col("model", "model")
            .col("fundamental_hz", "f [Hz]")
            .col("strouhal_number", "St = f L/Uj")
            .col("harmonics_hz", "harmonics [Hz]");
        for p in &r.predictions {
            let h: Vec<String> =
                p.harmonics.iter().skip(1).map(|t| format!("{:.0}", t.frequency_hz)).collect();
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
            let (bands, closures) = crate::render::rows::mode_tables(&r.guided_modes, true);
            rep = rep.table(bands).table(closures);
        }
        Ok(rep.provenance(r.provenance))
    }
}
