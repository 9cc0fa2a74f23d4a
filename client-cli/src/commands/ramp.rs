//! `jetloop ramp`: tones against NPR from a continuous ramp (a recording with an NPR or
//! reservoir-pressure channel beside the microphones), with the points written for `fit`.

use crate::args::input::InputArgs;
use crate::args::spectral::WelchArgs;
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::progress::spinner;
use crate::render::report::Report;
use crate::render::tracks::ramp_points_csv;
use crate::render::tracks::ramp_report;
use crate::render::tracks::ramp_title;
use crate::render::tracks::ramp_written_report;
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
    /// The recording and its calibration.
    #[command(flatten)]
    input: InputArgs,
    /// Welch (PSD) options.
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

impl RampCmd {
    /// The AnalyseRamp request for `samples` (the recording read): the control channel and
    /// its scaling, the frame length (s), the Welch options and the fit channel.
    pub(crate) fn request(&self, samples: pb::Samples) -> pb::AnalyseRampRequest {
        pb::AnalyseRampRequest {
            samples: Some(samples),
            control: Some(pb::ControlChannel {
                channel: self.control_channel,
                quantity: match self.control {
                    ControlArg::Npr => pb::ControlQuantity::NozzlePressureRatio,
                    ControlArg::GaugePa => pb::ControlQuantity::ReservoirGaugePressurePa,
                    ControlArg::AbsolutePa => pb::ControlQuantity::ReservoirAbsolutePressurePa,
                } as i32,
                units_per_sample: self.control_per_unit,
                offset: self.control_offset,
                ambient_pressure_pa: self.ambient_pressure_pa,
            }),
            frame_duration_s: self.frame_s,
            welch: Some(self.welch.options()),
            tones: None,
            fit_channel: self.fit_channel,
        }
    }
}

/// Runs `ramp`; the fit points, when asked for, are written here.
impl Run for RampCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let (ch, a) = (ctx.channel().await?, self);
        let rec = a.input.open()?;
        let limit = crate::upload::max_request_samples(ch.clone()).await;
        let r = match rec.disk.clone() {
            // A file on disk over the limit streams frame by frame through AnalyseRampStream
            // (1 MiB blocks; no default call limit on the stream's connection).
            Some(disk) if rec.sample_count() > limit => {
                let mut client = SpectrumServiceClient::new(ctx.stream_channel().await?);
                let blocks = crate::upload::Blocks::Disk(disk, 1 << 20);
                crate::upload::ramp_in_blocks(&mut client, a.request(rec.samples), blocks).await?.0
            }
            _ => {
                crate::upload::fits_one_request(&rec, &a.input.file, limit, "AnalyseRamp")?;
                let samples = rec.into_samples()?;
                let s = spinner("uploading and analysing the ramp on the server");
                let r = SpectrumServiceClient::new(ch)
                    .max_encoding_message_size(256 * 1024 * 1024)
                    .analyse_ramp(a.request(samples))
                    .await;
                s.finish_and_clear();
                r?.into_inner()
            }
        };
        let title = ramp_title(&r, &a.input.file);
        if let Some(path) = &a.points_csv {
            std::fs::write(path, ramp_points_csv(&r.fit_points))
                .map_err(|e| Failure::Usage(format!("cannot write {}: {e}", path.display())))?;
            return Ok(ramp_written_report(r, &title, path));
        }
        Ok(ramp_report(r, title))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> AnalyseRamp request, without a server.

    use super::*;

    #[test]
    fn the_control_channel_its_scaling_and_the_frames_reach_the_request() {
        let line = "ramp ramp.wav --pa-per-unit 2000 --control-channel 1 --control gauge-pa \
                    --control-per-unit 1000000 --control-offset -500 --ambient-pressure-pa 95000 --frame-s 0.1 \
                    --fit-channel 0 --window blackman-harris";
        let crate::Command::Ramp(a) = crate::tests::command(line) else { panic!("not ramp") };
        let r = a.request(pb::Samples { sample_rate_hz: 51_200.0, ..Default::default() });
        assert_eq!(r.samples.map(|s| s.sample_rate_hz), Some(51_200.0));
        assert_eq!(
            r.control,
            Some(pb::ControlChannel {
                channel: 1,
                quantity: pb::ControlQuantity::ReservoirGaugePressurePa as i32,
                units_per_sample: 1e6,
                offset: Some(-500.0),
                ambient_pressure_pa: Some(95_000.0),
            })
        );
        assert_eq!((r.frame_duration_s, r.fit_channel), (Some(0.1), Some(0)));
        assert_eq!(r.welch.map(|w| w.window), Some(pb::WindowKind::BlackmanHarris as i32));
    }
}
