//! `jetloop bands`: one-third-octave band levels (IEC 61260-1), overall and A-weighted levels of a recording.

use crate::args::input::InputArgs;
use crate::args::spectral::CorrectionArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::bands_plot;
use crate::render::progress::spinner;
use crate::render::report::Report;
use crate::render::spectra::bands_report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::path::PathBuf;

/// `jetloop bands`.
#[derive(Debug, Args)]
pub struct BandsCmd {
    /// The recording and its calibration.
    #[command(flatten)]
    input: InputArgs,
    /// Welch (PSD) options.
    #[command(flatten)]
    welch: WelchArgs,
    /// Level corrections.
    #[command(flatten)]
    corrections: CorrectionArgs,
    /// Highest band centre in Hz (server default 100000).
    #[arg(long)]
    max_band_hz: Option<f64>,
    /// Write the band levels of every channel as a plot (SVG, or PNG for a .png name).
    #[arg(long)]
    plot: Option<PathBuf>,
}

impl BandsCmd {
    /// The BandLevels request for `samples` (the recording read): Welch options, highest
    /// band (Hz) and level corrections.
    ///
    /// # Errors
    /// [`Failure::Usage`] when a response curve cannot be read.
    pub(crate) fn request(&self, samples: pb::Samples) -> Result<pb::BandLevelsRequest, Failure> {
        Ok(pb::BandLevelsRequest {
            samples: Some(samples),
            welch: Some(self.welch.options()),
            max_band_frequency_hz: self.max_band_hz,
            corrections: self.corrections.corrections()?,
        })
    }
}

/// Runs `bands`.
impl Run for BandsCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let rec = a.input.open()?;
        let limit = crate::upload::max_request_samples(ch.clone()).await;
        crate::upload::fits_one_request(&rec, &a.input.file, limit, "BandLevels")?;
        let curves = rec.channel_curves.clone();
        let samples = rec.into_samples()?;
        let mut request = a.request(samples)?;
        request.corrections = crate::args::spectral::with_channel_curves(request.corrections.take(), &curves);
        let s = spinner("uploading and analysing on the server");
        let r = SpectrumServiceClient::new(ch)
            .max_encoding_message_size(256 * 1024 * 1024)
            .band_levels(request)
            .await;
        s.finish_and_clear();
        let r = r?.into_inner();
        if let Some(path) = &a.plot {
            crate::render::plot::write_plot(
                path,
                &bands_plot(&a.input.file.display().to_string(), &r.channels),
            )
            .map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(bands_report(r, &a.input.file))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> BandLevels request, without a server.

    use super::*;

    #[test]
    fn the_highest_band_the_welch_options_and_the_distances_reach_the_request() {
        let line = "bands mics.csv --sample-rate-hz 51200 --in-pascals --max-band-hz 10000 --overlap 0.75 \
                    --mic-distance-m 2,3 --reference-distance-m 1";
        let crate::Command::Bands(a) = crate::tests::command(line) else { panic!("not bands") };
        let r = a.request(pb::Samples::default()).expect("request");
        assert_eq!(r.max_band_frequency_hz, Some(10_000.0));
        assert_eq!(r.welch.and_then(|w| w.overlap_fraction), Some(0.75));
        let c = r.corrections.expect("corrections");
        assert_eq!(c.channels.iter().map(|x| x.distance_m).collect::<Vec<_>>(), vec![Some(2.0), Some(3.0)]);
        assert_eq!(c.reference_distance_m, Some(1.0));
    }
}
