//! `jetloop tones`: tones, levels, harmonics, stage labels, band levels and cross-spectra of a recording.

use crate::args::input::InputArgs;
use crate::args::spectral::positions;
use crate::args::spectral::CorrectionArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::readers::spinner;
use crate::render::charts::svg_plot;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use crate::render::rows::analysis_rows;
use crate::render::rows::band_table;
use crate::render::rows::caution_rows;
use crate::render::rows::channel_summary;
use crate::render::rows::correction_rows;
use crate::render::rows::pattern_name;
use crate::render::rows::stage_text;
use crate::render::rows::PER_CHANNEL_SUMMARY;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::path::PathBuf;

/// `jetloop tones`.
#[derive(Debug, Args)]
pub struct TonesCmd {
    #[command(flatten)]
    input: InputArgs,
    #[command(flatten)]
    welch: WelchArgs,
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
    /// Send the samples in blocks of about this many bytes (ExtractTonesStream), so the server
    /// analyses while the upload runs; 0 sends one request. Unset: blocks of 1 MiB for raw
    /// interleaved data over 4 MiB, else one request.
    #[arg(long)]
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

/// The cross-channel report: one row per tone of the reference channel.
pub(crate) fn cross_report(r: &pb::CrossSpectraResponse) -> Report {
    let mut t =
        Table::new("cross_tones", format!("Cross-channel, reference channel {}", r.reference_channel))
            .col("frequency_hz", "f [Hz]")
            .col("level_db", "L [dB re 20 uPa]")
            .col("channels", "channel: phase [deg] / coherence")
            .col("mode", "mode");
    for x in &r.tones {
        let chans: Vec<String> = x
            .channels
            .iter()
            .map(|c| format!("{}: {:+.1} / {:.3}", c.channel, c.phase_deg, c.coherence))
            .collect();
        let mode = match (&x.modes, &x.pair) {
            (Some(m), _) => format!(
                "m = {} {} ({:.0} % of energy, spin ratio {:+.2})",
                m.dominant_order,
                pattern_name(m.pattern),
                100.0 * m.dominant_share,
                m.spin_ratio
            ),
            (None, Some(p)) => format!(
                "{} (confidence {:.2})",
                if p.symmetric { "symmetric" } else { "antisymmetric" },
                p.confidence
            ),
            _ => String::new(),
        };
        t.row(vec![
            Some(Val::Num(x.frequency_hz)),
            Some(Val::Num(x.level_db)),
            Some(Val::Text(chans.join("; "))),
            Some(Val::Text(mode)),
        ]);
    }
    Report::new("-- cross-channel").table(t)
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
}

/// Raw interleaved samples cut into blocks of whole frames of about `block` bytes; `None` when
/// the samples are values or planar.
pub(crate) fn blocks_of(samples: &pb::Samples, block: usize) -> Option<Vec<bytes::Bytes>> {
    let Some(pb::samples::Data::Raw(raw)) = &samples.data else {
        return None;
    };
    if samples.layout == pb::ChannelLayout::Planar as i32 {
        return None;
    }
    let width = match pb::SampleFormat::try_from(raw.format).ok()? {
        pb::SampleFormat::I16Le => 2,
        pb::SampleFormat::F32Le | pb::SampleFormat::I32Le => 4,
        pb::SampleFormat::F64Le => 8,
        pb::SampleFormat::Unspecified => return None,
    };
    let frame = width * samples.channel_count.max(1) as usize;
    let step = (block / frame).max(1) * frame;
    Some(
        (0..raw.data.len())
            .step_by(step)
            .map(|a| raw.data.slice(a..(a + step).min(raw.data.len())))
            .collect(),
    )
}

/// Sends the question and then the blocks, with a progress bar of bytes sent on a terminal.
pub(crate) async fn extract_in_blocks(
    client: &mut SpectrumServiceClient<crate::connect::Conn>,
    mut req: pb::ExtractTonesRequest,
    blocks: Vec<bytes::Bytes>,
) -> Result<pb::ExtractTonesResponse, tonic::Status> {
    use tokio_stream::StreamExt;
    if let Some(pb::samples::Data::Raw(raw)) = req.samples.as_mut().and_then(|s| s.data.as_mut()) {
        raw.data = bytes::Bytes::new();
    }
    let total: u64 = blocks.iter().map(|b| b.len() as u64).sum();
    let bar = indicatif::ProgressBar::new(total);
    bar.set_style(
        indicatif::ProgressStyle::with_template("sending {bar:30} {bytes}/{total_bytes} ({bytes_per_sec})")
            .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar()),
    );
    let shown = bar.clone();
    let first = pb::SampleBlock { request: Some(req), ..Default::default() };
    let rest = blocks.into_iter().map(|frames| pb::SampleBlock { frames, ..Default::default() });
    let msgs = tokio_stream::iter(std::iter::once(first).chain(rest)).map(move |m| {
        shown.inc(m.frames.len() as u64);
        if shown.position() >= total {
            shown.set_style(
                indicatif::ProgressStyle::with_template("{spinner} last block sent; finishing the analysis")
                    .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner()),
            );
            shown.enable_steady_tick(std::time::Duration::from_millis(120));
        }
        m
    });
    let r = client.extract_tones_stream(msgs).await;
    bar.finish_and_clear();
    r.map(tonic::Response::into_inner)
}

/// Runs `tones`.
impl Run for TonesCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let samples = a.input.read()?;
        let cross_samples = (a.cross || !a.azimuths_deg.is_empty()).then(|| samples.clone());
        let want_psd = a.plot.is_some() || a.psd_csv.is_some();
        let req = pb::ExtractTonesRequest {
            samples: Some(samples),
            welch: Some(a.welch.options()),
            tones: Some(a.tone_options()),
            predicted_screech_hz: a.predicted_hz,
            match_tolerance_fraction: None,
            include_band_levels: a.bands,
            max_band_frequency_hz: None,
            psd_output: Some(pb::PsdOutputOptions { include: want_psd, max_points: None }),
            stage_labels: if a.jet.given() {
                Some(pb::StageLabelOptions {
                    jet: Some(a.jet.input()?),
                    modes: Some(pb::GuidedModeOptions {
                        spacing_factor: a.spacing_factor,
                        convection_ratio: a.convection_ratio,
                        ..Default::default()
                    }),
                    band_tolerance_fraction: a.band_tolerance,
                })
            } else {
                None
            },
            corrections: a.corrections.corrections()?,
        };
        let labelled = a.jet.given();
        let mut client = SpectrumServiceClient::new(ch)
            .max_decoding_message_size(256 * 1024 * 1024)
            .max_encoding_message_size(256 * 1024 * 1024);
        let raw_len = match req.samples.as_ref().and_then(|s| s.data.as_ref()) {
            Some(pb::samples::Data::Raw(r)) => r.data.len(),
            _ => 0,
        };
        let block = a.block_bytes.unwrap_or(if raw_len > 4 << 20 { 1 << 20 } else { 0 });
        let blocks = if block == 0 { None } else { req.samples.as_ref().and_then(|s| blocks_of(s, block)) };
        let (r, timing) = match blocks {
            Some(blocks) => {
                let n = blocks.len();
                let r = extract_in_blocks(&mut client, req, blocks).await?;
                let t = format!(
                    "sent in {n} blocks; {:.1} ms from the last block to the answer",
                    r.compute_time_s * 1e3
                );
                (r, t)
            }
            None => {
                let s = spinner("uploading and analysing on the server");
                let r = client.extract_tones(req).await;
                s.finish_and_clear();
                let r = r?.into_inner();
                let t = format!("{:.1} ms server time", r.compute_time_s * 1e3);
                (r, t)
            }
        };
        let mut top = Report::new(format!(
            "Tones in {} ({} channel(s), {timing})",
            a.input.file.display(),
            r.channels.len(),
        ));
        let several = r.channels.len() > 1;
        for c in &r.channels {
            let label = if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
            let mut rep = Report::new(format!("-- {label}"));
            if let Some(an) = &c.analysis {
                rep = analysis_rows(rep.text("channel", "channel", label.clone()), an)
                    .num("rms_pa", "rms pressure", c.rms_pa, "Pa")
                    .num("overall_level_db", "overall level", c.overall_level_db, "dB re 20 uPa");
            }
            let mut t = Table::new("tones", format!("Tones, {label}"))
                .col("frequency_hz", "f [Hz]")
                .col("level_db", "L [dB re 20 uPa]")
                .col("tone_to_floor_db", "above floor [dB]")
                .col("bandwidth_3db_hz", "-3 dB width [Hz]")
                .col("family", "family")
                .col("harmonic_order", "order");
            if labelled {
                t = t.col("stage", "stage (guided mode)");
            }
            for x in &c.tones {
                let mut row = vec![
                    Some(Val::Num(x.frequency_hz)),
                    Some(Val::Num(x.level_db)),
                    Some(Val::Num(x.tone_to_floor_db)),
                    Some(Val::Num(x.bandwidth_3db_hz)),
                    x.family.map(|v| Val::Int(v.into())),
                    x.harmonic_order.map(|v| Val::Int(v.into())),
                ];
                if labelled {
                    row.push(Some(Val::Text(stage_text(x))));
                }
                t.row(row);
            }
            rep = rep.table(t);
            let mut fam = Table::new("families", format!("Harmonic families, {label}"))
                .col("id", "family")
                .col("fundamental_hz", "f0 [Hz]")
                .col("orders", "orders")
                .col("level_db", "L [dB]");
            for f in &c.families {
                let orders: Vec<String> = f.orders.iter().map(u32::to_string).collect();
                fam.row(vec![
                    Some(Val::Int(f.id.into())),
                    Some(Val::Num(f.fundamental_hz)),
                    Some(Val::Text(orders.join(" "))),
                    Some(Val::Num(f.level_db)),
                ]);
            }
            rep = rep.table(fam);
            for comb in &c.combinations {
                let kind = if comb.is_sum { "sum" } else { "difference" };
                rep = rep.text(
                    "combination",
                    "combination tone",
                    format!(
                        "tone {} at the {kind} of families {} and {} ({:.1} Hz)",
                        comb.tone_index, comb.family_a, comb.family_b, comb.expected_hz
                    ),
                );
            }
            if let Some(m) = &c.predicted_match {
                let text = match (m.tone_frequency_hz, m.difference_hz) {
                    (Some(f), Some(d)) => format!(
                        "predicted {:.1} Hz, nearest tone {:.1} Hz ({:+.1} Hz, {:+.2} %): {}",
                        m.predicted_hz,
                        f,
                        d,
                        100.0 * m.relative_difference.unwrap_or(0.0),
                        if m.matched { "matched" } else { "outside the tolerance" }
                    ),
                    _ => format!("predicted {:.1} Hz: no tones found", m.predicted_hz),
                };
                rep = rep.text("predicted_match", "screech prediction", text);
            }
            if let Some(b) = &c.bands {
                rep = rep
                    .num("a_weighted_overall_db", "A-weighted overall", b.a_weighted_overall_db, "dB(A)")
                    .table(band_table(b));
            }
            rep = correction_rows(rep, &c.corrections_applied);
            rep = caution_rows(rep, &c.cautions);
            for (i, w) in c.warnings.iter().enumerate() {
                rep = rep.text(if i == 0 { "warning" } else { "warning_more" }, "WARNING", w.clone());
            }
            if let Some(p) = &c.psd {
                let suffix = |path: &PathBuf| -> PathBuf {
                    if several {
                        let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("psd");
                        let ext = path.extension().and_then(|s| s.to_str()).unwrap_or("");
                        path.with_file_name(format!("{stem}-ch{}.{ext}", c.channel))
                    } else {
                        path.clone()
                    }
                };
                if let Some(path) = a.plot.as_ref().filter(|_| !(several && a.overlay)) {
                    let path = suffix(path);
                    crate::render::plot::write_plot(
                        &path,
                        &svg_plot(&label, &[(label.clone(), p, &c.tones)], a.linear_frequency),
                    )
                    .map_err(Failure::Usage)?;
                    eprintln!("wrote PSD plot {}", path.display());
                }
                if let Some(path) = &a.psd_csv {
                    let path = suffix(path);
                    let mut csv = String::from("frequency_hz,density_pa2_per_hz,floor_pa2_per_hz\n");
                    for (i, f) in p.frequency_hz.iter().enumerate() {
                        let fl = p.floor_pa2_per_hz.get(i).map_or(String::new(), |v| v.to_string());
                        csv.push_str(&format!("{f},{},{fl}\n", p.density_pa2_per_hz[i]));
                    }
                    std::fs::write(&path, csv)
                        .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
                    eprintln!("wrote PSD {}", path.display());
                }
            }
            if several {
                // Shown once for all channels in the summary above the sections.
                rep = rep.hide(&PER_CHANNEL_SUMMARY);
            }
            top = top.child(rep);
        }
        if several {
            top = channel_summary(top, &r.channels);
        }
        if let Some(path) = a.plot.as_ref().filter(|_| several && a.overlay) {
            let series: Vec<(String, &pb::PsdData, &[pb::ExtractedTone])> = r
                .channels
                .iter()
                .filter_map(|c| {
                    let label =
                        if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
                    c.psd.as_ref().map(|p| (label, p, c.tones.as_slice()))
                })
                .collect();
            let title = a.input.file.display().to_string();
            crate::render::plot::write_plot(path, &svg_plot(&title, &series, a.linear_frequency))
                .map_err(Failure::Usage)?;
            eprintln!("wrote PSD plot of {} channels {}", series.len(), path.display());
        }
        if let Some(samples) = cross_samples {
            let positions = positions(&a.azimuths_deg);
            let s = spinner("cross-channel analysis on the server");
            let x = client
                .cross_spectra(pb::CrossSpectraRequest {
                    samples: Some(samples),
                    welch: Some(a.welch.options()),
                    tones: Some(a.tone_options()),
                    reference_channel: a.reference_channel,
                    positions,
                    spectra_max_points: None,
                })
                .await;
            s.finish_and_clear();
            top = top.child(cross_report(&x?.into_inner()));
        }
        Ok(top.provenance(r.provenance))
    }
}
