//! File readers: recordings (WAV, CSV, raw little-endian binary) into `Samples` messages,
//! response-correction curves and measured sweeps (CSV), and the delimited-text rows they
//! share. Which reader runs, with which sample rate and calibration, is decided by the
//! recording arguments ([`crate::args::input`]).

use crate::failure::Failure;
use indicatif::ProgressBar;
use indicatif::ProgressStyle;
use jetloop_proto::pb;
use std::io::Read;
use std::path::Path;
use std::path::PathBuf;

/// The bytes of the file at `path`, with a progress bar on a terminal.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be opened or read.
pub(crate) fn read_with_progress(path: &Path) -> Result<Vec<u8>, Failure> {
    let mut f = std::fs::File::open(path)
        .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", path.display())))?;
    let len = f.metadata().map(|m| m.len()).unwrap_or(0);
    let bar = ProgressBar::new(len);
    bar.set_style(
        ProgressStyle::with_template("reading {msg} {bar:30} {bytes}/{total_bytes}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    bar.set_message(path.display().to_string());
    let mut out = Vec::with_capacity(len as usize);
    let mut buf = vec![0u8; 1 << 20];
    loop {
        let n =
            f.read(&mut buf).map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
        if n == 0 {
            break;
        }
        out.extend_from_slice(&buf[..n]);
        bar.inc(n as u64);
    }
    bar.finish_and_clear();
    Ok(out)
}

/// The rows of a delimited text file: (line index from 0, trimmed cells), skipping blank
/// lines and `#` comments; one delimiter (comma, semicolon or tab) for the whole file, quoted
/// cells unquoted ([`crate::csv_input::rows`]).
pub fn csv_rows(text: &str) -> Vec<(usize, Vec<String>)> {
    crate::csv_input::rows(text)
}

/// A WAV file's `bytes` (16/24/32-bit integer or 32-bit float samples, interleaved) as raw
/// samples at the file's own sample rate; `path` names the file in messages.
///
/// # Errors
/// [`Failure::Usage`] for a file that is not WAV or has another sample format.
pub(crate) fn wav(path: &Path, bytes: &[u8], calibration: pb::Calibration) -> Result<pb::Samples, Failure> {
    let bad = |e: hound::Error| Failure::Usage(format!("{}: not a readable WAV file: {e}", path.display()));
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
                path.display()
            )))
        }
    };
    Ok(pb::Samples {
        sample_rate_hz: f64::from(spec.sample_rate),
        channel_count: u32::from(spec.channels),
        layout: pb::ChannelLayout::Interleaved as i32,
        data: Some(pb::samples::Data::Raw(pb::RawSamples { data: data.into(), format: format as i32 })),
        calibration: Some(calibration),
        channel_names: Vec::new(),
        channel_calibrations: Vec::new(),
    })
}

/// A CSV recording's `bytes` (one column per channel, an optional header row of names, an
/// optional time column) read with `options` ([`crate::csv_input::read`]); `path` names the
/// file in messages.
///
/// # Errors
/// [`Failure::Usage`] naming the row and column of what cannot be read.
pub(crate) fn csv(
    path: &Path,
    bytes: &[u8],
    options: &crate::csv_input::CsvOptions,
    calibration: pb::Calibration,
) -> Result<crate::csv_input::CsvRecording, Failure> {
    crate::csv_input::read(path, bytes, options, calibration)
}

/// Raw little-endian samples as they are: `channels` channels of `format` in `layout`, at
/// `sample_rate_hz` (Hz).
pub(crate) fn raw(
    bytes: Vec<u8>,
    sample_rate_hz: f64,
    format: pb::SampleFormat,
    channels: u32,
    layout: pb::ChannelLayout,
    calibration: pb::Calibration,
) -> pb::Samples {
    pb::Samples {
        sample_rate_hz,
        channel_count: channels,
        layout: layout as i32,
        data: Some(pb::samples::Data::Raw(pb::RawSamples { data: bytes.into(), format: format as i32 })),
        calibration: Some(calibration),
        channel_names: Vec::new(),
        channel_calibrations: Vec::new(),
    }
}

/// Reads a response curve CSV (header row, then frequency_hz,correction_db); the curve is
/// named after the file.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be read or a line is not two numbers.
pub(crate) fn read_curve(path: &std::path::Path) -> Result<pb::ResponseCurve, Failure> {
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

/// The sweep direction a CSV cell names: up/increasing/+/inc, down/decreasing/-/dec, or
/// empty (unknown); `None` for anything else.
pub(crate) fn direction(s: &str) -> Option<pb::SweepDirection> {
    match s.trim().to_ascii_lowercase().as_str() {
        "up" | "increasing" | "+" | "inc" => Some(pb::SweepDirection::Increasing),
        "down" | "decreasing" | "-" | "dec" => Some(pb::SweepDirection::Decreasing),
        "" => Some(pb::SweepDirection::Unspecified),
        _ => None,
    }
}

/// The points of a measured sweep: CSV of x, frequency_hz [, level_db [, direction]] in
/// acquisition order (a header row is skipped).
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be read, or a line after the first point has no
/// numbers for x and frequency or an unknown direction (the line is named).
pub(crate) fn read_points(path: &PathBuf) -> Result<Vec<pb::MeasuredTone>, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| Failure::Usage(format!("cannot read {}: {e}", path.display())))?;
    let mut out = Vec::new();
    for (i, cells) in csv_rows(&text) {
        let (Ok(x), Ok(f)) =
            (cells[0].parse::<f64>(), cells.get(1).map_or("", String::as_str).parse::<f64>())
        else {
            if out.is_empty() {
                continue; // header
            }
            return Err(Failure::Usage(format!(
                "{} line {}: x and frequency must be numbers",
                path.display(),
                i + 1
            )));
        };
        let level_db = cells.get(2).and_then(|c| c.parse::<f64>().ok());
        let dir = match cells.get(3) {
            None => pb::SweepDirection::Unspecified,
            Some(c) => direction(c).ok_or_else(|| {
                Failure::Usage(format!("{} line {}: direction '{c}' is not up/down", path.display(), i + 1))
            })?,
        };
        out.push(pb::MeasuredTone {
            x,
            frequency_hz: f,
            level_db,
            frequency_uncertainty_hz: None,
            direction: dir as i32,
            acquisition_index: Some(out.len() as u64),
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    //! Files -> messages, without a server.

    use super::*;

    fn cal() -> pb::Calibration {
        pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(2000.0)) }
    }

    /// A fresh folder for one test's files.
    fn folder(name: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("jetloop-readers-{name}-{}", std::process::id()));
        std::fs::create_dir_all(&dir).expect("dir");
        dir
    }

    #[test]
    fn a_response_curve_file_is_read_with_its_header_and_a_bad_line_is_named() {
        let dir = folder("curve");
        let good = dir.join("quarter-inch.csv");
        std::fs::write(&good, "frequency_hz,correction_db\n1000,0.1\n10000,1.5\n").expect("write");
        let c = read_curve(&good).expect("curve");
        assert_eq!(
            (c.name.as_str(), c.frequencies_hz, c.corrections_db),
            ("quarter-inch", vec![1000.0, 10000.0], vec![0.1, 1.5])
        );
        let bad = dir.join("bad.csv");
        std::fs::write(&bad, "frequency_hz,correction_db\n1000,0.1\n2000\n").expect("write");
        let e = read_curve(&bad).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("line 3")), "{e:?}");
        let _ = std::fs::remove_dir_all(dir);
    }

    #[test]
    fn a_16_bit_stereo_wav_keeps_its_rate_channels_and_counts() {
        let mut bytes = std::io::Cursor::new(Vec::new());
        let spec = hound::WavSpec {
            channels: 2,
            sample_rate: 48_000,
            bits_per_sample: 16,
            sample_format: hound::SampleFormat::Int,
        };
        let mut w = hound::WavWriter::new(&mut bytes, spec).expect("writer");
        for s in [1i16, -2, 300, -400] {
            w.write_sample(s).expect("sample");
        }
        w.finalize().expect("finalize");
        let s = wav(Path::new("x.wav"), bytes.get_ref(), cal()).expect("samples");
        assert_eq!((s.sample_rate_hz, s.channel_count), (48_000.0, 2));
        assert_eq!(s.layout, pb::ChannelLayout::Interleaved as i32);
        assert_eq!(s.calibration, Some(cal()));
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!(r.format, pb::SampleFormat::I16Le as i32);
        assert_eq!(r.data.as_ref(), [1, 0, 254, 255, 44, 1, 112, 254]);
        let e = wav(Path::new("x.wav"), b"not a wav", cal()).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("x.wav: not a readable WAV")), "{e:?}");
    }

    #[test]
    fn raw_bytes_are_sent_as_they_are_with_their_format_and_layout() {
        let s = raw(vec![0; 16], 102_400.0, pb::SampleFormat::I16Le, 4, pb::ChannelLayout::Planar, cal());
        assert_eq!((s.sample_rate_hz, s.channel_count), (102_400.0, 4));
        assert_eq!(s.layout, pb::ChannelLayout::Planar as i32);
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!((r.format, r.data.len()), (pb::SampleFormat::I16Le as i32, 16));
    }

    #[test]
    fn sweep_points_keep_their_order_level_and_direction_after_a_header() {
        let dir = folder("points");
        let f = dir.join("sweep.csv");
        std::fs::write(
            &f,
            "npr,frequency_hz,level_db,direction\n3.0,5230,131.5,up\n3.1,5100,,down\n3.2,4900\n",
        )
        .expect("write");
        let p = read_points(&f).expect("points");
        assert_eq!(p.len(), 3);
        assert_eq!((p[0].x, p[0].frequency_hz, p[0].level_db), (3.0, 5230.0, Some(131.5)));
        assert_eq!(p[0].direction, pb::SweepDirection::Increasing as i32);
        assert_eq!((p[1].level_db, p[1].direction), (None, pb::SweepDirection::Decreasing as i32));
        assert_eq!(
            (p[2].direction, p[2].acquisition_index),
            (pb::SweepDirection::Unspecified as i32, Some(2))
        );
        std::fs::write(&f, "3.0,5230,130,sideways\n").expect("write");
        let e = read_points(&f).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("line 1: direction 'sideways'")), "{e:?}");
        assert_eq!(direction(" DEC "), Some(pb::SweepDirection::Decreasing));
        let _ = std::fs::remove_dir_all(dir);
    }
}
