//! WAV recordings.

use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::Path;

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

#[cfg(test)]
mod tests {
    //! WAV bytes -> messages, without a server.

    use super::*;

    fn cal() -> pb::Calibration {
        pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(2000.0)) }
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
}
