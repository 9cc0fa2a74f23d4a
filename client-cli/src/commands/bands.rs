//! `jetloop bands`: one-third-octave band levels (IEC 61260-1), overall and A-weighted levels of a recording.

use crate::args::input::InputArgs;
use crate::args::spectral::CorrectionArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::readers::spinner;
use crate::render::charts::bands_plot;
use crate::render::report::Report;
use crate::render::rows::band_table;
use crate::render::rows::caution_rows;
use crate::render::rows::correction_rows;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::path::PathBuf;

/// `jetloop bands`.
#[derive(Debug, Args)]
pub struct BandsCmd {
    #[command(flatten)]
    input: InputArgs,
    #[command(flatten)]
    welch: WelchArgs,
    #[command(flatten)]
    corrections: CorrectionArgs,
    /// Highest band centre in Hz (server default 100000).
    #[arg(long)]
    max_band_hz: Option<f64>,
    /// Write the band levels of every channel as a plot (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<PathBuf>,
}

/// Runs `bands`.
impl Run for BandsCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let samples = a.input.read()?;
        let s = spinner("uploading and analysing on the server");
        let r = SpectrumServiceClient::new(ch)
            .max_encoding_message_size(256 * 1024 * 1024)
            .band_levels(pb::BandLevelsRequest {
                samples: Some(samples),
                welch: Some(a.welch.options()),
                max_band_frequency_hz: a.max_band_hz,
                corrections: a.corrections.corrections()?,
            })
            .await;
        s.finish_and_clear();
        let r = r?.into_inner();
        let mut top = Report::new(format!("Band levels of {}", a.input.file.display()));
        for c in &r.channels {
            let label = if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
            let b = c.bands.clone().unwrap_or_default();
            let mut rep = Report::new(format!("-- {label}"))
                .text("channel", "channel", label)
                .num("overall_level_db", "overall level", b.overall_level_db, "dB re 20 uPa")
                .num("a_weighted_overall_db", "A-weighted overall", b.a_weighted_overall_db, "dB(A)")
                .num(
                    "outside_span_level_db",
                    "level outside the bands",
                    b.outside_span_level_db,
                    "dB re 20 uPa",
                )
                .table(band_table(&b));
            rep = correction_rows(rep, &c.corrections_applied);
            rep = caution_rows(rep, &c.cautions);
            top = top.child(rep);
        }
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(
                path,
                &bands_plot(&a.input.file.display().to_string(), &r.channels),
            )
            .map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(top.provenance(r.provenance))
    }
}
