//! `jetloop ramp`: tones against NPR from a continuous ramp (a recording with an NPR or
//! reservoir-pressure channel beside the microphones), with the points written for `fit`.

use crate::args::input::InputArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::report::Report;
use crate::render::report::Table;
use crate::render::report::Val;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use jetloop_proto::pb::spectrum_service_client::SpectrumServiceClient;
use std::path::PathBuf;

/// What the control channel measures once scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ControlArg {
    /// The nozzle pressure ratio.
    Npr,
    /// Reservoir gauge pressure in Pa (above ambient).
    GaugePa,
    /// Reservoir absolute pressure in Pa.
    AbsolutePa,
}

/// `jetloop ramp`.
#[derive(Debug, Args)]
pub struct RampCmd {
    #[command(flatten)]
    input: InputArgs,
    #[command(flatten)]
    welch: WelchArgs,
    /// Channel (0-based) that carries the control signal; the others are microphones.
    #[arg(long)]
    control_channel: u32,
    /// What the control channel measures once scaled.
    #[arg(long, value_enum)]
    control: ControlArg,
    /// Control units (NPR, or Pa) per sample unit as recorded (the microphone calibration is
    /// not applied to it). Example: a 0-10 V gauge transducer over 0-1 MPa recorded in volts:
    /// --control gauge-pa --control-per-unit 100000.
    #[arg(long, allow_negative_numbers = true)]
    control_per_unit: f64,
    /// Added to the control after scaling, in its unit (server default 0).
    #[arg(long, allow_negative_numbers = true)]
    control_offset: Option<f64>,
    /// Ambient pressure in Pa for a pressure control (server default 101325).
    #[arg(long)]
    ambient_pressure_pa: Option<f64>,
    /// Frame length in s: one point per frame (server default 0.25).
    #[arg(long)]
    frame_s: Option<f64>,
    /// Microphone channel whose strongest tones become the fit points (default: the first
    /// microphone).
    #[arg(long)]
    fit_channel: Option<u32>,
    /// Write the fit points as CSV for `jetloop fit --control npr` (npr, frequency_hz,
    /// level_db, direction in acquisition order) and print a one-line summary.
    #[arg(long)]
    points_csv: Option<PathBuf>,
}

impl Run for RampCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let samples = a.input.read()?;
        let s = crate::readers::spinner("uploading and analysing the ramp on the server");
        let r = SpectrumServiceClient::new(ch)
            .max_encoding_message_size(256 * 1024 * 1024)
            .analyse_ramp(pb::AnalyseRampRequest {
                samples: Some(samples),
                control: Some(pb::ControlChannel {
                    channel: a.control_channel,
                    quantity: match a.control {
                        ControlArg::Npr => pb::ControlQuantity::NozzlePressureRatio,
                        ControlArg::GaugePa => pb::ControlQuantity::ReservoirGaugePressurePa,
                        ControlArg::AbsolutePa => pb::ControlQuantity::ReservoirAbsolutePressurePa,
                    } as i32,
                    units_per_sample: a.control_per_unit,
                    offset: a.control_offset,
                    ambient_pressure_pa: a.ambient_pressure_pa,
                }),
                frame_duration_s: a.frame_s,
                welch: Some(a.welch.options()),
                tones: None,
                fit_channel: a.fit_channel,
            })
            .await;
        s.finish_and_clear();
        let r = r?.into_inner();
        let title = format!(
            "Ramp in {} ({} frames, {:.1} ms server time)",
            a.input.file.display(),
            r.frames.len(),
            r.compute_time_s * 1e3
        );
        if let Some(path) = &a.points_csv {
            let mut csv = String::from("npr,frequency_hz,level_db,direction\n");
            for p in &r.fit_points {
                let dir = match pb::SweepDirection::try_from(p.direction) {
                    Ok(pb::SweepDirection::Increasing) => "up",
                    Ok(pb::SweepDirection::Decreasing) => "down",
                    _ => "",
                };
                let level = p.level_db.map_or(String::new(), |l| format!("{l:.2}"));
                csv.push_str(&format!("{:.5},{:.2},{level},{dir}\n", p.x, p.frequency_hz));
            }
            std::fs::write(path, csv)
                .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
            let mut rep = Report::new(format!(
                "{title}: {} points of channel {} written to {}",
                r.fit_points.len(),
                r.fit_channel,
                path.display()
            ));
            for w in &r.warnings {
                rep = rep.text("warning", "WARNING", w.clone());
            }
            return Ok(rep.provenance(r.provenance));
        }
        let channels: Vec<u32> =
            r.frames.first().map(|f| f.tones.iter().map(|t| t.channel).collect()).unwrap_or_default();
        let mut t = Table::new("frames", "Frames (strongest tone per microphone)")
            .col("start_s", "from [s]")
            .col("end_s", "to [s]")
            .col("nozzle_pressure_ratio", "NPR")
            .col("nozzle_pressure_ratio_change", "NPR change");
        for c in &channels {
            t = t
                .col(format!("ch{c}_frequency_hz"), format!("ch {c} f [Hz]"))
                .col(format!("ch{c}_level_db"), format!("ch {c} L [dB re 20 uPa]"));
        }
        for f in &r.frames {
            let mut row = vec![
                Some(Val::Num(f.start_s)),
                Some(Val::Num(f.end_s)),
                Some(Val::Num(f.nozzle_pressure_ratio)),
                Some(Val::Num(f.nozzle_pressure_ratio_change)),
            ];
            for tone in &f.tones {
                row.push(tone.frequency_hz.map(Val::Num));
                row.push(tone.level_db.map(Val::Num));
            }
            t.row(row);
        }
        let mut rep = Report::new(title).int("fit_points", "fit points", r.fit_points.len() as u64, "").int(
            "fit_channel",
            "fit points from channel",
            r.fit_channel.into(),
            "",
        );
        for w in &r.warnings {
            rep = rep.text("warning", "WARNING", w.clone());
        }
        Ok(rep.table(t).provenance(r.provenance))
    }
}
