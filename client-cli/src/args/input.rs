//! The recording argument group: file, format, layout, sample rate and calibration, turned
//! into the `Samples` of a request.

use crate::failure::Failure;
use crate::readers::csv_rows;
use crate::readers::read_with_progress;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use std::path::PathBuf;

/// File kinds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum InputKind {
    /// RIFF WAVE (16/24/32-bit integer or 32-bit float).
    Wav,
    /// Text, one column per channel, optional header row of names.
    Csv,
    /// Raw little-endian samples (give --raw-format, --channels, --layout).
    Raw,
}

/// Raw sample encodings.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum RawFormat {
    /// 32-bit float.
    F32,
    /// 64-bit float.
    F64,
    /// 16-bit signed integer.
    I16,
    /// 32-bit signed integer.
    I32,
}

/// Channel arrangement of raw files.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LayoutArg {
    /// Frame by frame.
    Interleaved,
    /// Channel by channel.
    Planar,
}

/// Where the samples come from and how to turn them into pascals.
#[derive(Debug, Args)]
pub struct InputArgs {
    /// Recording to analyse (.wav, .csv, or raw binary).
    pub file: PathBuf,
    /// File kind (default: from the extension; anything else is raw).
    #[arg(long, value_enum)]
    pub input_kind: Option<InputKind>,
    /// Sample rate in Hz (required for CSV and raw; WAV files carry their own).
    #[arg(long)]
    pub sample_rate_hz: Option<f64>,
    /// Raw sample encoding.
    #[arg(long, value_enum, default_value = "f32")]
    pub raw_format: RawFormat,
    /// Channels in a raw file.
    #[arg(long, default_value_t = 1)]
    pub channels: u32,
    /// Channel layout of a raw file.
    #[arg(long, value_enum, default_value = "interleaved")]
    pub layout: LayoutArg,
    /// Pascals per sample unit (WAV: per count for integer files, per full-scale unit for
    /// float files). One calibration is required: this, the microphone chain, or --in-pascals.
    #[arg(long, conflicts_with_all = ["sensitivity_v_per_pa", "in_pascals"])]
    pub pa_per_unit: Option<f64>,
    /// The samples are already in pascals (1 Pa per unit): say so explicitly, nothing is assumed.
    #[arg(long, conflicts_with = "sensitivity_v_per_pa")]
    pub in_pascals: bool,
    /// Microphone sensitivity in V/Pa (with --volts-per-unit).
    #[arg(long, requires = "volts_per_unit")]
    pub sensitivity_v_per_pa: Option<f64>,
    /// DAQ volts per sample unit (with --sensitivity-v-per-pa).
    #[arg(long, requires = "sensitivity_v_per_pa")]
    pub volts_per_unit: Option<f64>,
}

impl InputArgs {
    pub(crate) fn kind(&self) -> InputKind {
        self.input_kind.unwrap_or_else(|| {
            match self.file.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() {
                Some("wav") => InputKind::Wav,
                Some("csv") | Some("txt") => InputKind::Csv,
                _ => InputKind::Raw,
            }
        })
    }

    /// The calibration the flags give; every input needs one (a recording's units are never
    /// guessed: an uncalibrated file read as pascals gives levels tens of dB off).
    pub(crate) fn calibration(&self) -> Result<pb::Calibration, Failure> {
        use pb::calibration::Scale;
        let scale = match (self.pa_per_unit, self.sensitivity_v_per_pa, self.volts_per_unit, self.in_pascals)
        {
            (Some(k), _, _, _) => Scale::PascalsPerUnit(k),
            (None, Some(s), Some(v), _) => {
                Scale::Microphone(pb::MicrophoneChain { sensitivity_v_per_pa: s, volts_per_unit: v })
            }
            (None, _, _, true) => Scale::InPascals(true),
            _ => {
                return Err(Failure::Usage(format!(
                    "{}: no calibration given; give --pa-per-unit, or --sensitivity-v-per-pa and \
                     --volts-per-unit, or --in-pascals if the samples are already pascals",
                    self.file.display()
                )))
            }
        };
        Ok(pb::Calibration { scale: Some(scale) })
    }

    /// Reads the file into a `Samples` message, with a progress bar on a terminal.
    pub fn read(&self) -> Result<pb::Samples, Failure> {
        self.calibration()?;
        let bytes = read_with_progress(&self.file)?;
        match self.kind() {
            InputKind::Wav => self.wav(&bytes),
            InputKind::Csv => self.csv(&bytes),
            InputKind::Raw => self.raw(bytes),
        }
    }

    pub(crate) fn rate(&self, what: &str) -> Result<f64, Failure> {
        self.sample_rate_hz.ok_or_else(|| Failure::Usage(format!("{what} files need --sample-rate-hz")))
    }

    pub(crate) fn wav(&self, bytes: &[u8]) -> Result<pb::Samples, Failure> {
        let bad = |e: hound::Error| {
            Failure::Usage(format!("{}: not a readable WAV file: {e}", self.file.display()))
        };
        let mut r = hound::WavReader::new(std::io::Cursor::new(bytes)).map_err(bad)?;
        let spec = r.spec();
        let (data, format) = match (spec.sample_format, spec.bits_per_sample) {
            (hound::SampleFormat::Float, 32) => {
                let mut out = Vec::with_capacity(r.len() as usize * 4);
                for s in r.samples::<f32>() {
                    out.extend_from_slice(&s.map_err(bad)?.to_le_bytes());
                }
                (out, pb::SampleFormat::F32Le)
            }
            (hound::SampleFormat::Int, 16) => {
                let mut out = Vec::with_capacity(r.len() as usize * 2);
                for s in r.samples::<i16>() {
                    out.extend_from_slice(&s.map_err(bad)?.to_le_bytes());
                }
                (out, pb::SampleFormat::I16Le)
            }
            (hound::SampleFormat::Int, 24 | 32) => {
                let mut out = Vec::with_capacity(r.len() as usize * 4);
                for s in r.samples::<i32>() {
                    out.extend_from_slice(&s.map_err(bad)?.to_le_bytes());
                }
                (out, pb::SampleFormat::I32Le)
            }
            (f, b) => {
                return Err(Failure::Usage(format!(
                "{}: {b}-bit {f:?} WAV samples are not supported (use 16/24/32-bit integer or 32-bit float)",
                self.file.display()
            )))
            }
        };
        Ok(pb::Samples {
            sample_rate_hz: f64::from(spec.sample_rate),
            channel_count: u32::from(spec.channels),
            layout: pb::ChannelLayout::Interleaved as i32,
            data: Some(pb::samples::Data::Raw(pb::RawSamples { data: data.into(), format: format as i32 })),
            calibration: Some(self.calibration()?),
            channel_names: Vec::new(),
        })
    }

    pub(crate) fn csv(&self, bytes: &[u8]) -> Result<pb::Samples, Failure> {
        let fs = self.rate("CSV")?;
        let text = std::str::from_utf8(bytes)
            .map_err(|_| Failure::Usage(format!("{}: CSV files must be UTF-8 text", self.file.display())))?;
        let mut names = Vec::new();
        let mut columns: Vec<Vec<f64>> = Vec::new();
        for (i, cells) in csv_rows(text) {
            if columns.is_empty() && names.is_empty() && cells.iter().any(|c| c.parse::<f64>().is_err()) {
                names = cells.iter().map(|c| c.to_string()).collect();
                continue;
            }
            if columns.is_empty() {
                columns = vec![Vec::new(); cells.len()];
            }
            if cells.len() != columns.len() {
                return Err(Failure::Usage(format!(
                    "{} line {}: {} columns, expected {}",
                    self.file.display(),
                    i + 1,
                    cells.len(),
                    columns.len()
                )));
            }
            for (col, c) in columns.iter_mut().zip(&cells) {
                col.push(c.parse::<f64>().map_err(|_| {
                    Failure::Usage(format!("{} line {}: '{c}' is not a number", self.file.display(), i + 1))
                })?);
            }
        }
        let channels = columns.len() as u32;
        if !names.is_empty() && names.len() != columns.len() {
            names.clear();
        }
        Ok(pb::Samples {
            sample_rate_hz: fs,
            channel_count: channels.max(1),
            layout: pb::ChannelLayout::Planar as i32,
            data: Some(pb::samples::Data::Values(pb::SampleValues { values: columns.concat() })),
            calibration: Some(self.calibration()?),
            channel_names: names,
        })
    }

    pub(crate) fn raw(&self, bytes: Vec<u8>) -> Result<pb::Samples, Failure> {
        let fs = self.rate("raw")?;
        let format = match self.raw_format {
            RawFormat::F32 => pb::SampleFormat::F32Le,
            RawFormat::F64 => pb::SampleFormat::F64Le,
            RawFormat::I16 => pb::SampleFormat::I16Le,
            RawFormat::I32 => pb::SampleFormat::I32Le,
        };
        Ok(pb::Samples {
            sample_rate_hz: fs,
            channel_count: self.channels,
            layout: match self.layout {
                LayoutArg::Interleaved => pb::ChannelLayout::Interleaved,
                LayoutArg::Planar => pb::ChannelLayout::Planar,
            } as i32,
            data: Some(pb::samples::Data::Raw(pb::RawSamples { data: bytes.into(), format: format as i32 })),
            calibration: Some(self.calibration()?),
            channel_names: Vec::new(),
        })
    }
}

#[cfg(test)]
mod tests {
    //! Recording arguments -> `Samples`, without a server.

    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct Input {
        #[command(flatten)]
        input: InputArgs,
    }

    fn parse(args: &str) -> InputArgs {
        Input::try_parse_from(std::iter::once("t").chain(args.split_whitespace())).expect("parses").input
    }

    #[test]
    fn every_calibration_form_and_none_refused() {
        use pb::calibration::Scale;
        assert_eq!(
            parse("x.wav --pa-per-unit 2000").calibration().expect("cal").scale,
            Some(Scale::PascalsPerUnit(2000.0))
        );
        assert_eq!(
            parse("x.wav --sensitivity-v-per-pa 0.0036 --volts-per-unit 0.0003")
                .calibration()
                .expect("cal")
                .scale,
            Some(Scale::Microphone(pb::MicrophoneChain {
                sensitivity_v_per_pa: 0.0036,
                volts_per_unit: 0.0003
            }))
        );
        assert_eq!(
            parse("x.csv --in-pascals").calibration().expect("cal").scale,
            Some(Scale::InPascals(true))
        );
        let e = parse("x.wav").calibration().unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("no calibration")), "{e:?}");
    }

    #[test]
    fn the_kind_comes_from_the_extension_unless_given() {
        assert!(matches!(parse("a.WAV --in-pascals").kind(), InputKind::Wav));
        assert!(matches!(parse("a.txt --in-pascals").kind(), InputKind::Csv));
        assert!(matches!(parse("a.bin --in-pascals").kind(), InputKind::Raw));
        assert!(matches!(parse("a.bin --in-pascals --input-kind csv").kind(), InputKind::Csv));
    }

    #[test]
    fn a_two_column_csv_becomes_two_named_channels_one_after_the_other() {
        let dir = std::env::temp_dir().join(format!("jetloop-csv-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let f = dir.join("mics.csv");
        std::fs::write(&f, "p1_pa,p2_pa\n0.5,-1\n1.5,2\n").expect("write");
        let s =
            parse(&format!("{} --sample-rate-hz 51200 --in-pascals", f.display())).read().expect("samples");
        assert_eq!((s.sample_rate_hz, s.channel_count), (51_200.0, 2));
        assert_eq!(s.layout, pb::ChannelLayout::Planar as i32);
        assert_eq!(s.channel_names, vec!["p1_pa".to_string(), "p2_pa".to_string()]);
        let Some(pb::samples::Data::Values(v)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!(v.values, vec![0.5, 1.5, -1.0, 2.0], "column by column");
        let e = parse(&format!("{} --in-pascals", f.display())).read().unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("--sample-rate-hz")), "{e:?}");
        let _ = std::fs::remove_dir_all(dir);
    }
}
