//! `jetloop calibrate`: each microphone's sensitivity from a recording of a sound calibrator
//! (IEC 60942), printed as a table and written (`-o FILE`) as the calibration file that
//! `--calibration-file` reads.

use crate::args::input::{InputArgs, InputKind, LayoutArg, RawFormat};
use crate::commands::Run;
use crate::connect::Ctx;
use crate::failure::Failure;
use crate::render::calibration::{calibration_report, calibration_toml};
use crate::render::progress::spinner;
use crate::render::report::Report;
use clap::Args;
use jetloop_proto::pb;
use jetloop_proto::pb::calibration_service_client::CalibrationServiceClient;
use std::path::PathBuf;

/// `jetloop calibrate`.
#[derive(Debug, Args)]
pub struct CalibrateCmd {
    /// Calibrator recording (.wav, .csv, or raw binary) in its recorded units: volts, or the
    /// converter's counts (no calibration to pascals: that is what this command finds).
    file: PathBuf,
    /// File kind (default: from the extension; anything else is raw).
    #[arg(long, value_enum)]
    input_kind: Option<InputKind>,
    /// Sample rate in Hz (required for raw, and for CSV without a time column; WAV files carry
    /// their own, and a value given for a WAV file must match its header).
    #[arg(long)]
    sample_rate_hz: Option<f64>,
    /// Raw sample encoding (default f32; given for a WAV file, it must match the header).
    #[arg(long, value_enum)]
    raw_format: Option<RawFormat>,
    /// Channels in a raw file (default 1; given for a WAV file, it must match the header).
    #[arg(long)]
    channels: Option<u32>,
    /// Channel layout of a raw file (default interleaved; WAV files are interleaved).
    #[arg(long, value_enum)]
    layout: Option<LayoutArg>,
    /// Sound pressure level the calibrator states, dB re 20 uPa (94 or 114 are usual).
    #[arg(long)]
    level_db: f64,
    /// Frequency the calibrator states, Hz (1000 or 250 are usual).
    #[arg(long)]
    frequency_hz: f64,
    /// Volts per sample unit, one for every channel or one per channel, comma-separated (1 for
    /// samples in volts; e.g. 0.000305176 for a +-10 V 16-bit converter). Without it only pascals
    /// per unit is found, and written as pa_per_unit.
    #[arg(long, value_delimiter = ',')]
    volts_per_unit: Vec<f64>,
    /// Channel names, comma-separated, in channel order (written into the calibration file;
    /// default: the recording's names, else "channel N").
    #[arg(long, value_delimiter = ',')]
    names: Vec<String>,
    /// Largest accepted |measured - stated| / stated frequency before a warning (server
    /// default 0.01).
    #[arg(long)]
    frequency_tolerance_fraction: Option<f64>,
    /// Highest harmonic order in the THD (server default 10).
    #[arg(long)]
    max_harmonic_order: Option<u32>,
    /// Write the calibration file here (TOML, one `[[channel]]` per microphone), ready for
    /// --calibration-file.
    #[arg(short = 'o', long)]
    output: Option<PathBuf>,
}

impl CalibrateCmd {
    /// The recording arguments as the shared recording group reads them; the samples are read
    /// as they are (a unit factor), and the factor is dropped again in [`CalibrateCmd::request`].
    fn input(&self) -> InputArgs {
        InputArgs {
            file: self.file.clone(),
            input_kind: self.input_kind,
            sample_rate_hz: self.sample_rate_hz,
            delimiter: None,
            decimal_comma: false,
            time_column: None,
            no_time_column: false,
            raw_format: self.raw_format,
            channels: self.channels,
            layout: self.layout,
            pa_per_unit: None,
            in_pascals: true,
            sensitivity_v_per_pa: None,
            volts_per_unit: None,
            calibration_file: None,
            tdms: Default::default(),
        }
    }

    /// The CalibratorSensitivity request for `samples` (the recording read): the samples in
    /// their own units, the stated level and frequency, volts per unit and names.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the names do not match the channels.
    pub(crate) fn request(&self, samples: pb::Samples) -> Result<pb::CalibratorSensitivityRequest, Failure> {
        let mut samples = pb::Samples { calibration: None, channel_calibrations: Vec::new(), ..samples };
        if !self.names.is_empty() {
            let channels = samples.channel_count.max(1) as usize;
            if self.names.len() != channels {
                return Err(Failure::Usage(format!(
                    "--names gives {} names for the {channels} channels of {}",
                    self.names.len(),
                    self.file.display()
                )));
            }
            samples.channel_names = self.names.clone();
        }
        Ok(pb::CalibratorSensitivityRequest {
            samples: Some(samples),
            stated_level_db: self.level_db,
            stated_frequency_hz: self.frequency_hz,
            volts_per_unit: self.volts_per_unit.clone(),
            frequency_tolerance_fraction: self.frequency_tolerance_fraction,
            max_harmonic_order: self.max_harmonic_order,
        })
    }
}

/// Runs `calibrate`.
impl Run for CalibrateCmd {
    async fn run(self, ctx: &Ctx) -> Result<Report, Failure> {
        let ch = ctx.channel().await?;
        let request = self.request(self.input().read()?)?;
        let s = spinner("uploading and reading the calibrator tone on the server");
        let r = CalibrationServiceClient::new(ch)
            .max_encoding_message_size(256 * 1024 * 1024)
            .calibrator_sensitivity(request)
            .await;
        s.finish_and_clear();
        let r = r?.into_inner();
        if let Some(path) = &self.output {
            std::fs::write(path, calibration_toml(&r, &self.file, (self.level_db, self.frequency_hz)))
                .map_err(|e| {
                    Failure::Usage(format!("{}: cannot write the calibration file: {e}", path.display()))
                })?;
            eprintln!("wrote {}", path.display());
        }
        Ok(calibration_report(&r, &self.file))
    }
}

#[cfg(test)]
mod tests {
    //! Command line -> CalibratorSensitivity request, without a server.

    use super::*;

    fn cmd(line: &str) -> CalibrateCmd {
        let crate::Command::Calibrate(a) = crate::tests::command(line) else { panic!("not calibrate") };
        a
    }

    #[test]
    fn the_stated_calibrator_volts_and_names_reach_the_request_without_a_calibration() {
        let a = cmd("calibrate cal.bin --sample-rate-hz 48000 --channels 2 --raw-format i16 --level-db 114 \
                     --frequency-hz 250 --volts-per-unit 0.000305176 --names left,right -o cal.toml");
        assert_eq!(a.output, Some(PathBuf::from("cal.toml")));
        let given = pb::Samples {
            channel_count: 2,
            calibration: Some(pb::Calibration { scale: Some(pb::calibration::Scale::InPascals(true)) }),
            ..Default::default()
        };
        let r = a.request(given.clone()).expect("request");
        let s = r.samples.expect("samples");
        assert_eq!((s.calibration, s.channel_names), (None, vec!["left".to_string(), "right".to_string()]));
        assert_eq!((r.stated_level_db, r.stated_frequency_hz), (114.0, 250.0));
        assert_eq!(r.volts_per_unit, vec![0.000305176]);
        assert_eq!((r.frequency_tolerance_fraction, r.max_harmonic_order), (None, None));
        let input = a.input();
        assert!(input.in_pascals && input.calibration_file.is_none());
        assert_eq!(input.sample_format(), pb::SampleFormat::I16Le);
        // Three names for two channels: refused, naming both counts.
        let e = cmd("calibrate cal.bin --level-db 94 --frequency-hz 1000 --names a,b,c")
            .request(given)
            .unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("3 names for the 2 channels")), "{e:?}");
    }
}
