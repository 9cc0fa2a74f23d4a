//! Spectrum subcommands: tones, bands, synth; PSD plots as SVG.

use crate::output::{Report, Table, Val};
use crate::plot::{Axis, Marker, Plot, COLOURS};
use crate::readers::{spinner, InputArgs};
use crate::{Ctx, Failure, Run};
use clap::{Args, ValueEnum};
use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use std::path::PathBuf;

/// Windows on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum WindowArg {
    /// Hann (default).
    Hann,
    /// Hamming.
    Hamming,
    /// 4-term Blackman-Harris.
    BlackmanHarris,
    /// 5-term flat-top.
    FlatTop,
}

/// Welch options.
#[derive(Debug, Args)]
pub struct WelchArgs {
    /// Window (server default Hann).
    #[arg(long, value_enum)]
    window: Option<WindowArg>,
    /// Segment length in samples.
    #[arg(long, conflicts_with = "resolution_hz")]
    segment: Option<u32>,
    /// Wanted frequency resolution in Hz (the segment is the next power of two).
    #[arg(long)]
    resolution_hz: Option<f64>,
    /// Overlap fraction (server default 0.5).
    #[arg(long)]
    overlap: Option<f64>,
}

impl WelchArgs {
    pub fn options(&self) -> pb::WelchOptions {
        use pb::welch_options::Segment;
        pb::WelchOptions {
            window: match self.window {
                None => pb::WindowKind::Unspecified,
                Some(WindowArg::Hann) => pb::WindowKind::Hann,
                Some(WindowArg::Hamming) => pb::WindowKind::Hamming,
                Some(WindowArg::BlackmanHarris) => pb::WindowKind::BlackmanHarris,
                Some(WindowArg::FlatTop) => pb::WindowKind::FlatTop,
            } as i32,
            segment: match (self.segment, self.resolution_hz) {
                (Some(n), _) => Some(Segment::SegmentLength(n)),
                (None, Some(r)) => Some(Segment::ResolutionHz(r)),
                _ => None,
            },
            overlap_fraction: self.overlap,
            detrend: 0,
        }
    }
}

/// Level corrections: microphone response curves, distance and atmospheric absorption.
#[derive(Debug, Args)]
pub struct CorrectionArgs {
    /// A response correction curve applied to every channel (free-field or pressure response,
    /// protective grid, ...): CSV with a header row and columns frequency_hz,correction_db; the
    /// correction is added to the measured level. Repeat for several curves (they add up).
    #[arg(long)]
    response_curve: Vec<PathBuf>,
    /// Microphone distance from the source in m: one value for every channel, or one per
    /// channel, comma separated (with --reference-distance-m).
    #[arg(long, value_delimiter = ',', requires = "reference_distance_m")]
    mic_distance_m: Vec<f64>,
    /// Correct levels to this distance in m by spherical spreading 20 log10(r / r_ref).
    #[arg(long, requires = "mic_distance_m")]
    reference_distance_m: Option<f64>,
    /// Also correct for atmospheric absorption (ISO 9613-1) over r - r_ref: air temperature
    /// in K (with --relative-humidity-percent).
    #[arg(long, requires_all = ["relative_humidity_percent", "reference_distance_m"])]
    air_temperature_k: Option<f64>,
    /// Relative humidity in percent, for the absorption.
    #[arg(long, requires = "air_temperature_k")]
    relative_humidity_percent: Option<f64>,
    /// Atmospheric pressure in Pa, for the absorption (server default 101325).
    #[arg(long, requires = "air_temperature_k")]
    air_pressure_pa: Option<f64>,
}

impl CorrectionArgs {
    /// The corrections message, or none when no option was given.
    pub fn corrections(&self) -> Result<Option<pb::LevelCorrections>, Failure> {
        if self.response_curve.is_empty() && self.reference_distance_m.is_none() {
            return Ok(None);
        }
        let curves = self.response_curve.iter().map(|p| read_curve(p)).collect::<Result<Vec<_>, _>>()?;
        let distances: Vec<Option<f64>> = if self.mic_distance_m.is_empty() {
            vec![None]
        } else {
            self.mic_distance_m.iter().map(|d| Some(*d)).collect()
        };
        Ok(Some(pb::LevelCorrections {
            channels: distances
                .into_iter()
                .map(|distance_m| pb::ChannelCorrection { curves: curves.clone(), distance_m })
                .collect(),
            reference_distance_m: self.reference_distance_m,
            atmosphere: self.air_temperature_k.map(|t| pb::Atmosphere {
                temperature_k: t,
                relative_humidity_percent: self.relative_humidity_percent.unwrap_or_default(),
                pressure_pa: self.air_pressure_pa,
            }),
        }))
    }
}

/// Reads a response curve CSV (header row, then frequency_hz,correction_db).
fn read_curve(path: &std::path::Path) -> Result<pb::ResponseCurve, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
    let (mut frequencies_hz, mut corrections_db) = (Vec::new(), Vec::new());
    let mut header = false;
    for (i, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let cells: Vec<&str> = line.split(',').map(str::trim).collect();
        match (cells.first().map(|c| c.parse::<f64>()), cells.get(1).map(|c| c.parse::<f64>())) {
            (Some(Ok(f)), Some(Ok(db))) if cells.len() == 2 => {
                frequencies_hz.push(f);
                corrections_db.push(db);
            }
            _ if frequencies_hz.is_empty() && !header => header = true, // the header row
            _ => {
                return Err(Failure::Usage(format!(
                    "{} line {}: expected frequency_hz,correction_db",
                    path.display(),
                    i + 1
                )))
            }
        }
    }
    let name = path.file_stem().and_then(|s| s.to_str()).unwrap_or("curve").chars().take(64).collect();
    Ok(pb::ResponseCurve { name, frequencies_hz, corrections_db })
}

fn correction_rows(mut r: Report, c: &[String]) -> Report {
    for (i, s) in c.iter().enumerate() {
        r = r.text(if i == 0 { "correction" } else { "correction_more" }, "level correction", s.clone());
    }
    r
}

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
    jet: crate::tones::JetSourceArgs,
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

/// Microphone positions from azimuths alone (degrees).
pub(crate) fn positions(azimuths_deg: &[f64]) -> Vec<pb::MicrophonePosition> {
    azimuths_deg
        .iter()
        .map(|&azimuth_deg| pb::MicrophonePosition { azimuth_deg, polar_angle_deg: None, distance_m: None })
        .collect()
}

pub(crate) fn pattern_name(p: i32) -> &'static str {
    match pb::AzimuthalPattern::try_from(p) {
        Ok(pb::AzimuthalPattern::Axisymmetric) => "axisymmetric",
        Ok(pb::AzimuthalPattern::Standing) => "standing (flapping)",
        Ok(pb::AzimuthalPattern::SpinningIncreasing) => "spinning towards increasing azimuth (helical)",
        Ok(pb::AzimuthalPattern::SpinningDecreasing) => "spinning towards decreasing azimuth (helical)",
        _ => "?",
    }
}

/// The cross-channel report: one row per tone of the reference channel.
fn cross_report(r: &pb::CrossSpectraResponse) -> Report {
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

/// The stage label of a tone for the table.
fn stage_text(t: &pb::ExtractedTone) -> String {
    if t.harmonic_order.is_some_and(|o| o >= 2) {
        return "(harmonic)".into();
    }
    match &t.best_stage {
        None => "none".into(),
        Some(s) => {
            let id = s.mode.as_ref().map(crate::tones::mode_label).unwrap_or_default();
            let letters =
                if s.customary_stage.is_empty() { String::new() } else { format!(" {}", s.customary_stage) };
            let dev =
                s.relative_deviation.map_or(String::new(), |d| format!(", {:+.1} % from closure", 100.0 * d));
            let near = if s.band_distance > 0.0 {
                format!(", {:.1} % outside band", 100.0 * s.band_distance)
            } else {
                ", in band".to_string()
            };
            let more =
                if t.stages.len() > 1 { format!(" (+{} more)", t.stages.len() - 1) } else { String::new() };
            format!("{id}{letters}{near}{dev}{more}")
        }
    }
}

/// Raw interleaved samples cut into blocks of whole frames of about `block` bytes; `None` when
/// the samples are values or planar.
fn blocks_of(samples: &pb::Samples, block: usize) -> Option<Vec<bytes::Bytes>> {
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
async fn extract_in_blocks(
    client: &mut SpectrumServiceClient<crate::Conn>,
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

fn analysis_rows(r: Report, a: &pb::AnalysisParameters) -> Report {
    r.text("window", "window", a.window.clone())
        .int("segment_length", "segment length", a.segment_length.into(), "samples")
        .int("overlap_samples", "overlap", a.overlap_samples.into(), "samples")
        .int("averages", "averages", a.averages.into(), "")
        .num("frequency_resolution_hz", "resolution", a.frequency_resolution_hz, "Hz")
        .num("enbw_hz", "noise bandwidth (ENBW)", a.enbw_hz, "Hz")
        .num("normalized_random_error", "PSD random error (std/mean)", a.normalized_random_error, "")
        .int("unused_samples", "samples after the last segment", a.unused_samples, "")
}

fn band_table(b: &pb::BandSummary) -> Table {
    let mut t = Table::new("bands", "One-third-octave bands (IEC 61260-1, base ten)")
        .col("nominal_hz", "band [Hz]")
        .col("exact_hz", "exact centre [Hz]")
        .col("level_db", "L [dB re 20 uPa]")
        .col("a_weighted_level_db", "L_A [dB(A)]")
        .col("resolved", "resolved");
    for x in &b.bands {
        t.row(vec![
            Some(Val::Plain(x.nominal_hz)),
            Some(Val::Num(x.exact_hz)),
            Some(Val::Num(x.level_db)),
            Some(Val::Num(x.a_weighted_level_db)),
            Some(Val::Flag(x.resolved)),
        ]);
    }
    t
}

fn caution_rows(mut r: Report, c: &[String]) -> Report {
    for (i, s) in c.iter().enumerate() {
        r = r.text(if i == 0 { "caution" } else { "caution_more" }, "CAUTION", s.clone());
    }
    r
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
                    crate::plot::write_plot(
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
            crate::plot::write_plot(path, &svg_plot(&title, &series, a.linear_frequency))
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

/// One-third-octave band levels against band centre (log frequency), a series per channel,
/// each band's level and, dashed, its A-weighted level.
pub fn bands_plot(title: &str, channels: &[pb::ChannelBands]) -> String {
    use crate::plot::{Axis, Marker, Plot, COLOURS};
    let all = || channels.iter().filter_map(|c| c.bands.as_ref()).flat_map(|b| b.bands.iter());
    let (fmin, fmax) = all().fold((f64::MAX, 0.0f64), |(a, b), x| (a.min(x.exact_hz), b.max(x.exact_hz)));
    let (lmin, lmax) = all()
        .flat_map(|x| [x.level_db, x.a_weighted_level_db])
        .filter(|v| v.is_finite())
        .fold((f64::MAX, f64::MIN), |(a, b), v| (a.min(v), b.max(v)));
    if fmax <= 0.0 || lmax < lmin {
        return String::from("<svg xmlns=\"http://www.w3.org/2000/svg\"/>");
    }
    let mut p = Plot::new(
        &format!("One-third-octave band levels (IEC 61260-1), {title}"),
        900.0,
        480.0,
        Axis::log(fmin / 1.2, fmax * 1.2, "band centre frequency [Hz]"),
        Axis::linear(lmin.max(lmax - 80.0), lmax + 3.0, "band level [dB re 20 uPa]"),
    );
    for (k, c) in channels.iter().enumerate() {
        let Some(b) = &c.bands else { continue };
        let name = if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
        let colour = COLOURS[k % COLOURS.len()];
        let lin: Vec<(f64, f64)> = b.bands.iter().map(|x| (x.exact_hz, x.level_db)).collect();
        let aw: Vec<(f64, f64)> = b.bands.iter().map(|x| (x.exact_hz, x.a_weighted_level_db)).collect();
        p.line(&lin, colour, false, None);
        p.markers(&lin, colour, Marker::Dot, Some(&format!("{name}, dB re 20 uPa")));
        p.line(&aw, colour, true, Some(&format!("{name}, A-weighted, dB(A)")));
    }
    p.finish()
}

/// Rows of a channel section that the summary of several channels shows once.
const PER_CHANNEL_SUMMARY: [&str; 13] = [
    "channel",
    "window",
    "segment_length",
    "overlap_samples",
    "averages",
    "frequency_resolution_hz",
    "enbw_hz",
    "normalized_random_error",
    "unused_samples",
    "rms_pa",
    "overall_level_db",
    "caution",
    "caution_more",
];

/// The analysis settings once (every channel is analysed alike), one table row per channel,
/// and the strongest caution once.
fn channel_summary(mut top: Report, channels: &[pb::ChannelSpectrum]) -> Report {
    if let Some(an) = channels.first().and_then(|c| c.analysis.as_ref()) {
        top = analysis_rows(top, an);
    }
    let mut t = Table::new("summary", "Channels")
        .col("channel", "channel")
        .col("rms_pa", "rms [Pa]")
        .col("overall_level_db", "overall [dB re 20 uPa]")
        .col("tone_count", "tones")
        .col("strongest_tone_hz", "strongest tone [Hz]")
        .col("strongest_tone_level_db", "its level [dB re 20 uPa]");
    for c in channels {
        let label = if c.name.is_empty() { format!("channel {}", c.channel) } else { c.name.clone() };
        let top_tone = c.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db));
        t.row(vec![
            Some(Val::Text(label)),
            Some(Val::Num(c.rms_pa)),
            Some(Val::Num(c.overall_level_db)),
            Some(Val::Int(c.tones.len() as u64)),
            top_tone.map(|x| Val::Num(x.frequency_hz)),
            top_tone.map(|x| Val::Num(x.level_db)),
        ]);
    }
    let loudest = channels
        .iter()
        .filter(|c| !c.cautions.is_empty())
        .max_by(|a, b| a.overall_level_db.total_cmp(&b.overall_level_db));
    if let Some(c) = loudest {
        top = top.text("caution", "CAUTION", c.cautions[0].clone());
    }
    top.table(t)
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
            crate::plot::write_plot(path, &bands_plot(&a.input.file.display().to_string(), &r.channels))
                .map_err(Failure::Usage)?;
            eprintln!("wrote {}", path.display());
        }
        Ok(top.provenance(r.provenance))
    }
}

/// An SVG plot of PSDs in dB re (20 uPa)^2/Hz against frequency (logarithmic, or linear with
/// `linear`): one channel with its floor, or several overlaid in one colour each. Tones are
/// marked at their peak density and labelled with their frequency and their level in
/// dB re 20 uPa (the tone's power summed over its bins, so it sits above the density curve).
pub fn svg_plot(
    title: &str,
    channels: &[(String, &pb::PsdData, &[pb::ExtractedTone])],
    linear: bool,
) -> String {
    let db = |d: f64| 10.0 * (d.max(1e-30) / 4e-10).log10();
    let series = |p: &pb::PsdData, ys: &[f64]| -> Vec<(f64, f64)> {
        p.frequency_hz.iter().zip(ys).filter(|(f, _)| **f > 0.0).map(|(f, d)| (*f, db(*d))).collect()
    };
    let all: Vec<Vec<(f64, f64)>> =
        channels.iter().map(|(_, p, _)| series(p, &p.density_pa2_per_hz)).collect();
    let flat = || all.iter().flatten();
    let (Some(fmin), Some(fmax)) =
        (flat().map(|p| p.0).min_by(f64::total_cmp), flat().map(|p| p.0).max_by(f64::total_cmp))
    else {
        return String::from("<svg xmlns=\"http://www.w3.org/2000/svg\"/>");
    };
    let ymax = flat().map(|p| p.1).fold(f64::MIN, f64::max) + 5.0;
    let ymin = flat().map(|p| p.1).fold(f64::MAX, f64::min);
    let x = if linear {
        Axis::linear(0.0, fmax, "frequency [Hz]")
    } else {
        Axis::log(fmin, fmax, "frequency [Hz]")
    };
    let mut plot = Plot::new(
        &format!("PSD, {title}"),
        900.0,
        480.0,
        x,
        Axis::linear(ymin, ymax, "PSD [dB re (20 uPa)^2/Hz]"),
    );
    let one = channels.len() == 1;
    for (k, ((label, p, tones), pts)) in channels.iter().zip(&all).enumerate() {
        let c = COLOURS[k % COLOURS.len()];
        plot.line(pts, c, false, Some(&if one { "PSD".to_string() } else { format!("{label} PSD") }));
        if one {
            let floor = series(p, &p.floor_pa2_per_hz);
            if !floor.is_empty() {
                plot.line(&floor, "#999", true, Some("broadband floor (running median)"));
            }
        }
        let shown: Vec<&pb::ExtractedTone> =
            tones.iter().filter(|t| t.frequency_hz >= fmin && t.frequency_hz <= fmax).collect();
        let marks: Vec<(f64, f64)> =
            shown.iter().map(|t| (t.frequency_hz, db(t.peak_density_pa2_per_hz))).collect();
        let mark_colour = if one { COLOURS[1] } else { c };
        let legend =
            if one { "tones: Hz, tone level in dB re 20 uPa".to_string() } else { format!("{label} tones") };
        plot.markers(&marks, mark_colour, Marker::Ring, Some(&legend));
        for t in shown {
            plot.label(
                t.frequency_hz,
                db(t.peak_density_pa2_per_hz),
                &format!("{:.0} Hz, {:.1} dB", t.frequency_hz, t.level_db),
                mark_colour,
            );
        }
    }
    plot.finish()
}
