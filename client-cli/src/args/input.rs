//! The recording argument group: file, format, layout, sample rate and calibration, turned
//! into the `Samples` of a request (the file itself is decoded by [`crate::readers`]).

use crate::csv_input::CsvOptions;
use crate::csv_input::TimeColumn;
use crate::failure::Failure;
use crate::readers;
use crate::readers::disk::DiskRecording;
use crate::readers::disk::Encoding;
use crate::readers::read_with_progress;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use std::path::PathBuf;

/// File kinds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum InputKind {
    /// WAV: RIFF, RF64 or BW64; PCM 8 (unsigned), 16, 24, 32-bit or IEEE float 32/64-bit,
    /// plain or WAVE_FORMAT_EXTENSIBLE headers.
    Wav,
    /// Text, one column per channel, optional header row of names, optional time column.
    Csv,
    /// Raw little-endian samples (give --raw-format, --channels, --layout).
    Raw,
    /// NI TDMS: the channels of one group (see --tdms-group, --tdms-channels), with their own
    /// sample rate and scaling.
    Tdms,
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
    /// Recording to analyse (.wav, .csv, .tdms, or raw binary).
    pub file: PathBuf,
    /// File kind (default: from the extension; anything else is raw).
    #[arg(long, value_enum)]
    pub input_kind: Option<InputKind>,
    /// Sample rate in Hz (required for raw, and for CSV without a time column; WAV and TDMS
    /// files carry their own, and a value given for a WAV file must match its header). With a
    /// CSV time column it must agree with the rate the column gives.
    #[arg(long)]
    pub sample_rate_hz: Option<f64>,
    /// CSV column separator: `,` (comma), `;` (semicolon) or `tab`. Default: detected from the
    /// header and first rows (one separator per file).
    #[arg(long, value_parser = parse_delimiter, value_name = ",|;|tab")]
    pub delimiter: Option<u8>,
    /// CSV numbers are written with a decimal comma (0,25 for 0.25), as European exports do;
    /// a cell with a decimal point is then refused. Default: detected, one decimal mark per
    /// file.
    #[arg(long)]
    pub decimal_comma: bool,
    /// CSV time column, by header name or 1-based position, in seconds unless its header
    /// gives a unit (`time [ms]`, `t_us`): left out of the channels, and the sample rate in Hz
    /// is derived from it after checking the rows are uniformly spaced. Default: a header
    /// column named time, t, time_s, `time [s]`, `Time (s)`, zeit, temps, tiempo or tempo.
    #[arg(long, value_name = "NAME|INDEX", conflicts_with = "no_time_column")]
    pub time_column: Option<String>,
    /// CSV: no time column; every column is a channel (give --sample-rate-hz).
    #[arg(long)]
    pub no_time_column: bool,
    /// Raw sample encoding (default f32; given for a WAV file, it must match the header).
    #[arg(long, value_enum)]
    pub raw_format: Option<RawFormat>,
    /// Channels in a raw file (default 1; given for a WAV file, it must match the header).
    #[arg(long)]
    pub channels: Option<u32>,
    /// Channel layout of a raw file (default interleaved; WAV files are interleaved).
    #[arg(long, value_enum)]
    pub layout: Option<LayoutArg>,
    /// Pascals per sample unit (WAV: per count for integer files, per full-scale unit for
    /// float files). One calibration is required: this, the microphone chain, or --in-pascals.
    #[arg(long, conflicts_with_all = ["sensitivity_v_per_pa", "in_pascals", "calibration_file"])]
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
    /// One calibration per channel (a ring or array of microphones, each with its own
    /// sensitivity): a TOML file with one `[[channel]]` table per channel, in channel order, each
    /// giving pa_per_unit, or sensitivity_v_per_pa and volts_per_unit, and optionally a name,
    /// the microphone's response_curve (CSV frequency_hz,correction_db, relative to the
    /// calibration file; added to that channel's levels after any --response-curve) and its
    /// azimuth_deg on a ring (used by --cross when --azimuths-deg is not given). Replaces
    /// --pa-per-unit, --sensitivity-v-per-pa and --in-pascals.
    #[arg(long, conflicts_with_all = ["sensitivity_v_per_pa", "in_pascals"])]
    pub calibration_file: Option<PathBuf>,
    /// Group and channels of a TDMS file.
    #[command(flatten)]
    pub tdms: crate::args::tdms::TdmsArgs,
}

/// `--delimiter`: `,` or comma, `;` or semicolon, `tab` (or a tab character).
fn parse_delimiter(text: &str) -> Result<u8, String> {
    match text {
        "," | "comma" => Ok(b','),
        ";" | "semicolon" => Ok(b';'),
        "tab" | "\t" | "\\t" => Ok(b'\t'),
        other => Err(format!("'{other}' is not a CSV delimiter: give ',', ';' or tab")),
    }
}

/// The file encoding a --raw-format names.
fn raw_encoding(f: RawFormat) -> Encoding {
    match f {
        RawFormat::F32 => Encoding::Float { bytes: 4 },
        RawFormat::F64 => Encoding::Float { bytes: 8 },
        RawFormat::I16 => Encoding::Pcm { bytes: 2, shift: 0 },
        RawFormat::I32 => Encoding::Pcm { bytes: 4, shift: 0 },
    }
}

/// A recording opened by [`InputArgs::open`]: the `Samples` of a request with its rate,
/// channels, calibration(s) and names, and where the samples are: on disk (WAV, raw; then
/// `samples` carries no sample bytes yet) or already in `samples` (CSV).
#[derive(Debug)]
pub(crate) struct Recording {
    /// The request's samples: complete for CSV, without sample bytes for a file on disk.
    pub samples: pb::Samples,
    /// The file's samples on disk, for WAV and raw files.
    pub disk: Option<DiskRecording>,
    /// Per-channel response curves from the calibration file (empty: none given).
    pub channel_curves: Vec<Vec<pb::ResponseCurve>>,
    /// Per-channel ring azimuths in degrees from the calibration file (empty: not given for
    /// every channel).
    pub azimuths_deg: Vec<f64>,
}

impl Recording {
    /// A recording of `samples` (and the file on disk), nothing per channel from a
    /// calibration file yet.
    pub(crate) fn of(samples: pb::Samples, disk: Option<DiskRecording>) -> Self {
        Self { samples, disk, channel_curves: Vec::new(), azimuths_deg: Vec::new() }
    }

    /// Samples of all channels together.
    pub(crate) fn sample_count(&self) -> u64 {
        match (&self.disk, &self.samples.data) {
            (Some(d), _) => d.sample_count(),
            (None, Some(pb::samples::Data::Values(v))) => v.values.len() as u64,
            (None, Some(pb::samples::Data::Raw(r))) => {
                let w = readers::disk::wire_width(r.format()) as u64;
                r.data.len() as u64 / w.max(1)
            }
            (None, None) => 0,
        }
    }

    /// The whole recording as one `Samples` message (a disk file is read here).
    ///
    /// # Errors
    /// [`Failure::Usage`] when the file cannot be read.
    pub(crate) fn into_samples(self) -> Result<pb::Samples, Failure> {
        let mut samples = self.samples;
        if let Some(d) = &self.disk {
            samples.data = Some(pb::samples::Data::Raw(pb::RawSamples {
                data: d.read_all()?,
                format: d.encoding.wire() as i32,
            }));
        }
        Ok(samples)
    }
}

pub(crate) use super::calibration_file::read_calibration_file;

impl InputArgs {
    /// The file kind: --input-kind, else from the extension (.wav; .csv or .txt; .tdms;
    /// anything else is raw).
    pub(crate) fn kind(&self) -> InputKind {
        self.input_kind.unwrap_or_else(|| {
            match self.file.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() {
                Some("wav") => InputKind::Wav,
                Some("csv") | Some("txt") => InputKind::Csv,
                Some("tdms") => InputKind::Tdms,
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
                     --volts-per-unit, or --in-pascals if the samples are already pascals, or \
                     --calibration-file with one calibration per channel",
                    self.file.display()
                )))
            }
        };
        Ok(pb::Calibration { scale: Some(scale) })
    }

    /// Reads the file into a `Samples` message, with a progress bar on a terminal.
    ///
    /// # Errors
    /// [`Failure::Usage`] without a calibration, for a file that cannot be read, CSV or raw
    /// without --sample-rate-hz, a flag the WAV header contradicts, or content its reader
    /// refuses.
    pub fn read(&self) -> Result<pb::Samples, Failure> {
        self.open()?.into_samples()
    }

    /// Opens the recording: a WAV or raw file's header and length only (its samples stay on
    /// disk until read or streamed), a CSV file whole; with the calibration(s) and channel
    /// names the flags give. Warnings about the file (cut short, placeholder sizes) are
    /// printed on standard error.
    ///
    /// # Errors
    /// As [`InputArgs::read`], before any sample is read.
    pub(crate) fn open(&self) -> Result<Recording, Failure> {
        let per_channel = self.calibration_file.as_deref().map(read_calibration_file).transpose()?;
        // With a calibration file the common calibration is replaced below, per channel.
        let mut rec = if self.kind() == InputKind::Tdms {
            // TDMS files carry units per channel: the calibration flags apply to the channels
            // whose unit needs them (see args/tdms.rs).
            let given = self.calibration().ok();
            let samples = crate::args::tdms::read(
                &self.file,
                &self.tdms,
                self.sample_rate_hz,
                given,
                per_channel.is_some(),
            )?;
            Recording::of(samples, None)
        } else {
            let calibration =
                if per_channel.is_some() { pb::Calibration::default() } else { self.calibration()? };
            let rec = self.open_uncalibrated(calibration)?;
            for w in rec.disk.iter().flat_map(|d| &d.warnings) {
                eprintln!("warning: {w}");
            }
            rec
        };
        if let (Some(per_channel), Some(path)) = (per_channel, &self.calibration_file) {
            let samples = &mut rec.samples;
            let channels = samples.channel_count.max(1) as usize;
            if per_channel.len() != channels {
                return Err(Failure::Usage(format!(
                    "{}: {} [[channel]] entries for the {channels} channels of {}: give one per channel",
                    path.display(),
                    per_channel.len(),
                    self.file.display()
                )));
            }
            let named = per_channel.iter().all(|c| !c.name.is_empty());
            if per_channel.iter().any(|c| c.curve.is_some()) {
                rec.channel_curves = per_channel.iter().map(|c| c.curve.iter().cloned().collect()).collect();
            }
            if per_channel.iter().all(|c| c.azimuth_deg.is_some()) {
                rec.azimuths_deg = per_channel.iter().filter_map(|c| c.azimuth_deg).collect();
            }
            let (cals, names): (Vec<_>, Vec<_>) =
                per_channel.into_iter().map(|c| (c.calibration, c.name)).unzip();
            samples.calibration = None;
            samples.channel_calibrations = cals;
            if samples.channel_names.is_empty() && named {
                samples.channel_names = names;
            }
        }
        Ok(rec)
    }

    /// True when any calibration flag or file is given.
    pub(crate) fn calibrated(&self) -> bool {
        self.pa_per_unit.is_some()
            || self.sensitivity_v_per_pa.is_some()
            || self.in_pascals
            || self.calibration_file.is_some()
    }

    /// Opens the file by its kind with `calibration` for every channel (see
    /// [`InputArgs::open`]), without printing its warnings.
    pub(crate) fn open_uncalibrated(&self, calibration: pb::Calibration) -> Result<Recording, Failure> {
        let disk = match self.kind() {
            InputKind::Csv => {
                let bytes = read_with_progress(&self.file)?;
                let read = readers::csv(&self.file, &bytes, &self.csv_options(), calibration)?;
                eprintln!("{}", read.summary(&self.file));
                return Ok(Recording::of(read.samples, None));
            }
            // TDMS files are opened by args/tdms.rs (only the channels asked are read).
            InputKind::Tdms => {
                let samples = crate::args::tdms::read(
                    &self.file,
                    &self.tdms,
                    self.sample_rate_hz,
                    Some(calibration),
                    false,
                )?;
                return Ok(Recording::of(samples, None));
            }
            InputKind::Wav => {
                let d = readers::wav::open(&self.file)?;
                self.agree_with_header(&d)?;
                d
            }
            InputKind::Raw => readers::raw::open(
                &self.file,
                self.rate("raw")?,
                self.sample_format(),
                self.channels.unwrap_or(1),
                self.channel_layout(),
            )?,
        };
        Ok(Recording::of(disk.samples_with(bytes::Bytes::new(), calibration), Some(disk)))
    }

    /// Refuses a flag that contradicts the WAV header `d`, naming both values.
    fn agree_with_header(&self, d: &DiskRecording) -> Result<(), Failure> {
        let refuse = |flag: String, header: String| {
            Err(Failure::Usage(format!(
                "{}: {flag} contradicts the WAV header, which gives {header}: leave the flag out or correct it",
                self.file.display()
            )))
        };
        if let Some(fs) = self.sample_rate_hz.filter(|fs| *fs != d.sample_rate_hz) {
            return refuse(format!("--sample-rate-hz {fs}"), format!("{} Hz", d.sample_rate_hz));
        }
        if let Some(c) = self.channels.filter(|c| *c != d.channels) {
            return refuse(format!("--channels {c}"), format!("{} channels", d.channels));
        }
        if let Some(f) = self.raw_format.filter(|f| raw_encoding(*f) != d.encoding) {
            let name = f.to_possible_value().map(|v| v.get_name().to_string()).unwrap_or_default();
            return refuse(format!("--raw-format {name}"), d.encoding.describe());
        }
        if self.layout == Some(LayoutArg::Planar) {
            return refuse("--layout planar".into(), "interleaved frames (as every WAV file)".into());
        }
        Ok(())
    }

    /// How to read a CSV recording: the CSV flags and --sample-rate-hz.
    pub(crate) fn csv_options(&self) -> CsvOptions {
        let time_column = match (&self.time_column, self.no_time_column) {
            (_, true) => TimeColumn::None,
            (Some(t), false) => TimeColumn::parse(t),
            (None, false) => TimeColumn::Auto,
        };
        CsvOptions {
            delimiter: self.delimiter,
            decimal_comma: self.decimal_comma,
            time_column,
            sample_rate_hz: self.sample_rate_hz,
        }
    }

    /// The sample rate a `what` (CSV or raw) file needs from --sample-rate-hz, in Hz.
    pub(crate) fn rate(&self, what: &str) -> Result<f64, Failure> {
        self.sample_rate_hz.ok_or_else(|| Failure::Usage(format!("{what} files need --sample-rate-hz")))
    }

    /// The encoding of a raw file.
    pub(crate) fn sample_format(&self) -> pb::SampleFormat {
        match self.raw_format.unwrap_or(RawFormat::F32) {
            RawFormat::F32 => pb::SampleFormat::F32Le,
            RawFormat::F64 => pb::SampleFormat::F64Le,
            RawFormat::I16 => pb::SampleFormat::I16Le,
            RawFormat::I32 => pb::SampleFormat::I32Le,
        }
    }

    /// The channel layout of a raw file.
    pub(crate) fn channel_layout(&self) -> pb::ChannelLayout {
        match self.layout.unwrap_or(LayoutArg::Interleaved) {
            LayoutArg::Interleaved => pb::ChannelLayout::Interleaved,
            LayoutArg::Planar => pb::ChannelLayout::Planar,
        }
    }
}

#[cfg(test)]
pub(crate) mod tests {
    //! Recording arguments -> `Samples`, without a server.

    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct Input {
        #[command(flatten)]
        input: InputArgs,
    }

    /// The recording arguments of a command line `args` (split at spaces), for tests here and
    /// in the other argument modules.
    pub(crate) fn parse(args: &str) -> InputArgs {
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

    #[test]
    fn a_raw_planar_file_keeps_its_encoding_and_channels_and_is_sent_interleaved() {
        let dir = std::env::temp_dir().join(format!("jetloop-raw-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let f = dir.join("daq.bin");
        std::fs::write(&f, [1u8, 0, 2, 0, 3, 0, 4, 0]).expect("write");
        let args = format!(
            "{} --raw-format i16 --channels 2 --layout planar --sample-rate-hz 102400 --pa-per-unit 0.0847",
            f.display()
        );
        let s = parse(&args).read().expect("samples");
        assert_eq!((s.sample_rate_hz, s.channel_count), (102_400.0, 2));
        // Read channel by channel from the file, sent frame by frame: [1 2 | 3 4] -> 1 3 2 4.
        assert_eq!(s.layout, pb::ChannelLayout::Interleaved as i32);
        assert_eq!(s.calibration.and_then(|c| c.scale), Some(pb::calibration::Scale::PascalsPerUnit(0.0847)));
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!(r.format, pb::SampleFormat::I16Le as i32);
        assert_eq!(r.data.as_ref(), [1u8, 0, 3, 0, 2, 0, 4, 0]);
        let e = parse(&format!("{} --in-pascals", f.display())).read().unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m == "raw files need --sample-rate-hz"), "{e:?}");
        let _ = std::fs::remove_dir_all(dir);
    }

    #[test]
    fn flags_that_contradict_a_wav_header_are_refused_naming_both_values() {
        let dir = std::env::temp_dir().join(format!("jetloop-wavflags-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let f = dir.join("mono.wav");
        // Written by hound (outside this reader): 16-bit mono at 48 kHz.
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: 48_000,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let mut w = hound::WavWriter::create(&f, spec).expect("writer");
        w.write_sample(7i16).expect("sample");
        w.finalize().expect("finalize");
        let run = |flags: &str| parse(&format!("{} --in-pascals {flags}", f.display())).read();
        assert!(
            run("--sample-rate-hz 48000 --channels 1 --raw-format i16").is_ok(),
            "agreeing flags are fine"
        );
        for (flags, both) in [
            ("--sample-rate-hz 51200", ["--sample-rate-hz 51200", "48000 Hz"]),
            ("--channels 2", ["--channels 2", "1 channels"]),
            ("--raw-format f32", ["--raw-format f32", "PCM 16-bit"]),
            ("--layout planar", ["--layout planar", "interleaved"]),
        ] {
            let e = run(flags).unwrap_err();
            assert!(
                matches!(e, Failure::Usage(ref m) if both.iter().all(|b| m.contains(b))),
                "{flags}: {e:?}"
            );
        }
        let _ = std::fs::remove_dir_all(dir);
    }

    #[test]
    fn a_calibration_file_gives_each_channel_its_own_factor_and_name() {
        use pb::calibration::Scale;
        let dir = std::env::temp_dir().join(format!("jetloop-cal-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        let cal = dir.join("ring.toml");
        std::fs::write(
            &cal,
            "[[channel]]\nname = \"mic 0 deg\"\npa_per_unit = 0.001\n\n[[channel]]\nname = \"mic 90 deg\"\n\
             sensitivity_v_per_pa = 0.0036\nvolts_per_unit = 0.0003\n",
        )
        .expect("write");
        let rec = dir.join("two.csv");
        std::fs::write(&rec, "0.5,-1\n1.5,2\n").expect("write");
        let s =
            parse(&format!("{} --sample-rate-hz 51200 --calibration-file {}", rec.display(), cal.display()))
                .read()
                .expect("samples");
        assert_eq!(s.calibration, None, "one calibration per channel replaces the common one");
        assert_eq!(
            s.channel_calibrations.iter().map(|c| c.scale).collect::<Vec<_>>(),
            vec![
                Some(Scale::PascalsPerUnit(0.001)),
                Some(Scale::Microphone(pb::MicrophoneChain {
                    sensitivity_v_per_pa: 0.0036,
                    volts_per_unit: 0.0003
                }))
            ]
        );
        assert_eq!(s.channel_names, vec!["mic 0 deg".to_string(), "mic 90 deg".to_string()]);
        // One entry for two channels: refused, naming both counts.
        std::fs::write(&cal, "[[channel]]\npa_per_unit = 0.001\n").expect("write");
        let e =
            parse(&format!("{} --sample-rate-hz 51200 --calibration-file {}", rec.display(), cal.display()))
                .read()
                .unwrap_err();
        assert!(
            matches!(e, Failure::Usage(ref m) if m.contains("1 [[channel]] entries for the 2 channels")),
            "{e:?}"
        );
        // An entry with both forms, and an unknown key, are named.
        std::fs::write(
            &cal,
            "[[channel]]\npa_per_unit = 0.001\nsensitivity_v_per_pa = 0.004\nvolts_per_unit = 1\n",
        )
        .expect("write");
        let e = read_calibration_file(&cal).unwrap_err();
        assert!(
            matches!(e, Failure::Usage(ref m) if m.contains("channel entry 0") && m.contains("not both")),
            "{e:?}"
        );
        std::fs::write(&cal, "[[channel]]\nsensitivity_mv_per_pa = 3.6\n").expect("write");
        let e = read_calibration_file(&cal).unwrap_err();
        assert!(
            matches!(e, Failure::Usage(ref m) if m.contains("unknown key sensitivity_mv_per_pa")),
            "{e:?}"
        );
        let _ = std::fs::remove_dir_all(dir);
    }
}
