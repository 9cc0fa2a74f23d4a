//! `jetloop tones`: tones, levels, harmonics, stage labels, band levels and cross-spectra of a recording.

use crate::args::input::InputArgs;
use crate::args::spectral::CorrectionArgs;
use crate::args::spectral::WelchArgs;
use crate::args::spectral::{positions, with_channel_curves};
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::charts::svg_plot;
use crate::render::progress::spinner;
use crate::render::report::Report;
use crate::render::rows::channel_label;
use crate::render::spectra::cross_report;
use crate::render::spectra::psd_csv;
use crate::render::spectra::tones_report;
use crate::upload;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::path::PathBuf;

/// `jetloop tones`.
#[derive(Debug, Args)]
pub struct TonesCmd {
    /// The recording and its calibration.
    #[command(flatten)]
    input: InputArgs,
    /// Welch (PSD) options.
    #[command(flatten)]
    welch: WelchArgs,
    /// Level corrections.
    #[command(flatten)]
    corrections: CorrectionArgs,
    /// Minimum tone-to-floor ratio in dB (server default 6).
    #[arg(long)]
    threshold_db: Option<f64>,
    /// Minimum distance between tones in Hz.
    #[arg(long)]
    min_separation_hz: Option<f64>,
    /// Most tones per channel (server default 50).
    #[arg(long)]
    max_tones: Option<u32>,
    /// Predicted screech frequency in Hz to match against the tones.
    #[arg(long)]
    predicted_hz: Option<f64>,
    /// Also show one-third-octave band levels.
    #[arg(long)]
    bands: bool,
    /// Write the PSD with its floor and tones as a plot, SVG or PNG by the extension (one file
    /// per channel, NAME-chK.svg, when there are several; see --overlay).
    #[arg(long)]
    plot: Option<PathBuf>,
    /// With --plot and several channels: every channel's PSD in one plot (one colour each)
    /// instead of one file per channel.
    #[arg(long, requires = "plot")]
    overlay: bool,
    /// With --plot: a linear frequency axis (default logarithmic).
    #[arg(long, requires = "plot")]
    linear_frequency: bool,
    /// Write the PSD as CSV (frequency_hz, density_pa2_per_hz, floor_pa2_per_hz).
    #[arg(long)]
    psd_csv: Option<PathBuf>,
    /// Send the samples in blocks of about this many bytes (ExtractTonesStream, and
    /// CrossSpectraStream with --cross or --azimuths-deg; 1024 to 33554432), so the server
    /// analyses while the upload runs; WAV and raw files are then read from disk a block at a
    /// time. Unset: blocks of 1 MiB for WAV and raw recordings over 4 MiB or over the server's
    /// limit on samples per request (ServerInfo), else one request.
    #[arg(long, value_parser = crate::upload::parse_block_bytes)]
    block_bytes: Option<usize>,
    /// The jet the recording was made at (nozzle and --npr, or --mj with --dj-m / --hj-m):
    /// each tone is then labelled with the screech stages (guided jet modes) it fits.
    #[command(flatten)]
    jet: crate::args::jet::JetSourceArgs,
    /// Stage labels: factor on the vortex-sheet shock-cell spacing in the closure (server
    /// default 1).
    #[arg(long)]
    spacing_factor: Option<f64>,
    /// Stage labels: convection ratio Uc/Uj in the closure (server default 0.7).
    #[arg(long)]
    convection_ratio: Option<f64>,
    /// Stage labels: a tone within this fraction of a band edge still fits the stage (server
    /// default 0.02).
    #[arg(long)]
    band_tolerance: Option<f64>,
    /// Microphone azimuths in degrees, one per channel, comma separated: adds the cross-channel
    /// analysis (phase and coherence of every channel against the reference at each tone, and
    /// the azimuthal mode of a ring, or the symmetry of a pair).
    #[arg(long, value_delimiter = ',', allow_negative_numbers = true)]
    azimuths_deg: Vec<f64>,
    /// Cross-channel analysis without positions (phase and coherence; pair symmetry for two
    /// channels).
    #[arg(long)]
    cross: bool,
    /// Reference channel of the cross-channel analysis (server default 0).
    #[arg(long)]
    reference_channel: Option<u32>,
}

impl TonesCmd {
    /// The tone-search options given on the command line.
    fn tone_options(&self) -> pb::ToneOptions {
        pb::ToneOptions {
            threshold_db: self.threshold_db,
            min_separation_hz: self.min_separation_hz,
            max_tones: self.max_tones,
            ..Default::default()
        }
    }

    /// The ExtractTones request for `samples` (the recording read): Welch and tone options,
    /// the predicted frequency (Hz), band levels, the PSD when a plot or CSV of it is asked
    /// for, stage labels when a jet is given, and level corrections.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the jet is incompletely given or a response curve cannot be
    /// read.
    pub(crate) fn request(&self, samples: pb::Samples) -> Result<pb::ExtractTonesRequest, Failure> {
        let want_psd = self.plot.is_some() || self.psd_csv.is_some();
        Ok(pb::ExtractTonesRequest {
            samples: Some(samples),
            welch: Some(self.welch.options()),
            tones: Some(self.tone_options()),
            predicted_screech_hz: self.predicted_hz,
            match_tolerance_fraction: None,
            include_band_levels: self.bands,
            max_band_frequency_hz: None,
            psd_output: Some(pb::PsdOutputOptions { include: want_psd, max_points: None }),
            stage_labels: if self.jet.given() {
                Some(pb::StageLabelOptions {
                    jet: Some(self.jet.input()?),
                    modes: Some(pb::GuidedModeOptions {
                        spacing_factor: self.spacing_factor,
                        convection_ratio: self.convection_ratio,
                        ..Default::default()
                    }),
                    band_tolerance_fraction: self.band_tolerance,
                })
            } else {
                None
            },
            corrections: self.corrections.corrections()?,
        })
    }

    /// The CrossSpectra request for `samples`: the same Welch and tone options, the reference
    /// channel and the microphone positions (azimuths in degrees).
    pub(crate) fn cross_request(&self, samples: pb::Samples) -> pb::CrossSpectraRequest {
        pb::CrossSpectraRequest {
            samples: Some(samples),
            welch: Some(self.welch.options()),
            tones: Some(self.tone_options()),
            reference_channel: self.reference_channel,
            positions: positions(&self.azimuths_deg),
            spectra_max_points: None,
        }
    }

    /// Writes each channel's PSD as a plot and as CSV when asked for (one file per channel,
    /// NAME-chK.ext, with several channels; one plot of them all with --overlay).
    fn write_psd_files(&self, r: &pb::ExtractTonesResponse) -> Result<(), Failure> {
        let several = r.channels.len() > 1;
        for c in &r.channels {
            let Some(p) = &c.psd else { continue };
            let label = channel_label(&c.name, c.channel);
            let suffix = |path: &PathBuf| -> PathBuf {
                if several {
                    let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("psd");
                    let ext = path.extension().and_then(|s| s.to_str()).unwrap_or("");
                    path.with_file_name(format!("{stem}-ch{}.{ext}", c.channel))
                } else {
                    path.clone()
                }
            };
            if let Some(path) = self.plot.as_ref().filter(|_| !(several && self.overlay)) {
                let path = suffix(path);
                crate::render::plot::write_plot(
                    &path,
                    &svg_plot(&label, &[(label.clone(), p, &c.tones)], self.linear_frequency),
                )
                .map_err(Failure::Usage)?;
                eprintln!("wrote PSD plot {}", path.display());
            }
            if let Some(path) = &self.psd_csv {
                let path = suffix(path);
                std::fs::write(&path, psd_csv(p))
                    .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
                eprintln!("wrote PSD {}", path.display());
            }
        }
        if let Some(path) = self.plot.as_ref().filter(|_| several && self.overlay) {
            let series: Vec<(String, &pb::PsdData, &[pb::ExtractedTone])> = r
                .channels
                .iter()
                .filter_map(|c| {
                    c.psd.as_ref().map(|p| (channel_label(&c.name, c.channel), p, c.tones.as_slice()))
                })
                .collect();
            let title = self.input.file.display().to_string();
            crate::render::plot::write_plot(path, &svg_plot(&title, &series, self.linear_frequency))
                .map_err(Failure::Usage)?;
            eprintln!("wrote PSD plot of {} channels {}", series.len(), path.display());
        }
        Ok(())
    }
}

/// Runs `tones`.
impl Run for TonesCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let rec = a.input.open()?;
        let cross = a.cross || !a.azimuths_deg.is_empty();
        let limit = upload::max_request_samples(ch.clone()).await;
        let over = rec.sample_count() > limit;
        if rec.disk.is_none() {
            // Values read from text travel in one request.
            upload::fits_one_request(&rec, &a.input.file, limit, "ExtractTones of a CSV recording")?;
        }
        let wire_bytes = match (&rec.disk, &rec.samples.data) {
            (Some(d), _) => d.frames * d.wire_frame_bytes() as u64,
            (None, Some(pb::samples::Data::Raw(r))) => r.data.len() as u64,
            _ => 0,
        };
        let block = a.block_bytes.or((over || wire_bytes > 4 << 20).then_some(1 << 20));
        let labelled = a.jet.given();
        let client = |ch| {
            SpectrumServiceClient::new(ch)
                .max_decoding_message_size(256 * 1024 * 1024)
                .max_encoding_message_size(256 * 1024 * 1024)
        };
        // Block streams last as long as their upload: a connection without the default call
        // limit (--timeout still applies).
        let mut streams = match block {
            Some(_) => Some(client(ctx.stream_channel().await?)),
            None => None,
        };
        let mut unary = client(ch);
        // From disk, block by block: the tones through ExtractTonesStream and, when asked for,
        // the cross-channel analysis through CrossSpectraStream (the file read a second time),
        // so a recording of any length is analysed holding a few blocks. Otherwise the samples
        // are read into memory (they fit one request: checked above).
        // A calibration file's per-channel response curves and ring azimuths.
        let (curves, file_azimuths) = (rec.channel_curves.clone(), rec.azimuths_deg.clone());
        let (mut req, blocks, mut cross_input) = match (block, rec.disk.clone()) {
            (Some(block), Some(disk)) => {
                let cross_input = cross.then(|| {
                    (a.cross_request(rec.samples.clone()), Some(upload::Blocks::Disk(disk.clone(), block)))
                });
                (a.request(rec.samples)?, Some(upload::Blocks::Disk(disk, block)), cross_input)
            }
            _ => {
                let samples = rec.into_samples()?;
                let blocks = block.and_then(|b| upload::blocks_of(&samples, b)).map(upload::Blocks::Memory);
                let cross_input = cross.then(|| (a.cross_request(samples.clone()), None));
                (a.request(samples)?, blocks, cross_input)
            }
        };
        req.corrections = with_channel_curves(req.corrections.take(), &curves);
        if let Some((xreq, _)) = cross_input.as_mut().filter(|(x, _)| x.positions.is_empty()) {
            xreq.positions = positions(&file_azimuths);
        }
        let (r, timing) = match (blocks, streams.as_mut()) {
            (Some(blocks), Some(client)) => {
                let (r, n) = upload::extract_in_blocks(client, req, blocks).await?;
                let t = format!(
                    "sent in {n} blocks; {:.1} ms from the last block to the answer",
                    r.compute_time_s * 1e3
                );
                (r, t)
            }
            _ => {
                let s = spinner("uploading and analysing on the server");
                let r = unary.extract_tones(req).await;
                s.finish_and_clear();
                let r = r?.into_inner();
                let t = format!("{:.1} ms server time", r.compute_time_s * 1e3);
                (r, t)
            }
        };
        a.write_psd_files(&r)?;
        let mut top = tones_report(r, &a.input.file, &timing, labelled);
        let x = match (cross_input, streams.as_mut()) {
            (None, _) => None,
            (Some((xreq, Some(blocks))), Some(client)) => {
                Some(upload::cross_in_blocks(client, xreq, blocks).await?.0)
            }
            (Some((xreq, _)), _) => {
                let s = spinner("cross-channel analysis on the server");
                let x = unary.cross_spectra(xreq).await;
                s.finish_and_clear();
                Some(x?.into_inner())
            }
        };
        if let Some(x) = x {
            top = top.child(cross_report(&x));
        }
        Ok(top)
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> ExtractTones and CrossSpectra requests, and samples -> blocks, without
    //! a server.

    use super::*;

    fn tones(line: &str) -> TonesCmd {
        let crate::Command::Tones(a) = crate::tests::command(line) else { panic!("{line}") };
        a
    }

    #[test]
    fn the_tone_options_prediction_bands_and_psd_reach_the_request() {
        let a = tones(
            "tones demo.wav --pa-per-unit 2000 --threshold-db 8 --min-separation-hz 50 --max-tones 10 \
             --predicted-hz 5100 --bands --psd-csv psd.csv --window hamming",
        );
        let r = a.request(pb::Samples { sample_rate_hz: 204_800.0, ..Default::default() }).expect("request");
        let t = r.tones.expect("tone options");
        assert_eq!((t.threshold_db, t.min_separation_hz, t.max_tones), (Some(8.0), Some(50.0), Some(10)));
        assert_eq!(r.predicted_screech_hz, Some(5100.0));
        assert!(r.include_band_levels);
        assert_eq!(r.psd_output.map(|p| p.include), Some(true), "the PSD is asked for by --psd-csv");
        assert_eq!(r.welch.map(|w| w.window), Some(pb::WindowKind::Hamming as i32));
        assert_eq!(r.samples.map(|s| s.sample_rate_hz), Some(204_800.0));
        assert!(r.stage_labels.is_none() && r.corrections.is_none());
        let r = tones("tones demo.wav --pa-per-unit 2000").request(pb::Samples::default()).expect("request");
        assert_eq!(r.psd_output.map(|p| p.include), Some(false));
    }

    #[test]
    fn a_jet_asks_for_stage_labels_with_the_closure_options() {
        let a = tones(
            "tones demo.wav --pa-per-unit 2000 --diameter-m 0.0254 --npr 3.75 --spacing-factor 0.8 \
             --convection-ratio 0.6 --band-tolerance 0.05",
        );
        let l = a.request(pb::Samples::default()).expect("request").stage_labels.expect("stage labels");
        let Some(pb::jet_input::Source::Conditions(c)) = l.jet.and_then(|j| j.source) else {
            panic!("not conditions")
        };
        assert_eq!(
            c.operating_point.and_then(|o| o.pressure),
            Some(pb::operating_point::Pressure::NozzlePressureRatio(3.75))
        );
        let m = l.modes.expect("modes");
        assert_eq!((m.spacing_factor, m.convection_ratio), (Some(0.8), Some(0.6)));
        assert_eq!(l.band_tolerance_fraction, Some(0.05));
    }

    #[test]
    fn the_cross_request_carries_the_ring_and_the_reference_channel() {
        let a = tones("tones ring.wav --pa-per-unit 2000 --azimuths-deg 0,90,180,270 --reference-channel 2");
        let x = a.cross_request(pb::Samples::default());
        assert_eq!(x.reference_channel, Some(2));
        assert_eq!(
            x.positions.iter().map(|p| p.azimuth_deg).collect::<Vec<_>>(),
            vec![0.0, 90.0, 180.0, 270.0]
        );
    }
}
