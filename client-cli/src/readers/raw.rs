//! Raw little-endian binary recordings: no header, so the sample rate, encoding, channel
//! count and layout come from the command line.

use super::disk::file_len;
use super::disk::DiskRecording;
use super::disk::Encoding;
use crate::failure::Failure;
use jetloop_proto::pb;
use std::path::Path;

/// The raw file at `path` as a recording on disk: `channels` channels of `format` in
/// `layout` at `sample_rate_hz` (Hz). An interleaved file whose length is not a whole number
/// of frames is read up to its last whole frame, with a warning.
///
/// # Errors
/// [`Failure::Usage`] when the file cannot be opened, `channels` is 0, or a planar file's
/// length is not a whole number of frames (the channels' boundaries would be unknown).
pub(crate) fn open(
    path: &Path,
    sample_rate_hz: f64,
    format: pb::SampleFormat,
    channels: u32,
    layout: pb::ChannelLayout,
) -> Result<DiskRecording, Failure> {
    let len = file_len(path)?;
    if channels == 0 {
        return Err(Failure::Usage(format!("{}: --channels 0, expected 1 or more", path.display())));
    }
    let encoding = match format {
        pb::SampleFormat::I16Le => Encoding::Pcm { bytes: 2, shift: 0 },
        pb::SampleFormat::I32Le => Encoding::Pcm { bytes: 4, shift: 0 },
        pb::SampleFormat::F64Le => Encoding::Float { bytes: 8 },
        pb::SampleFormat::F32Le | pb::SampleFormat::Unspecified => Encoding::Float { bytes: 4 },
    };
    let frame = (encoding.file_bytes() as u64) * u64::from(channels);
    let mut warnings = Vec::new();
    if len % frame != 0 {
        if layout == pb::ChannelLayout::Planar && channels > 1 {
            return Err(Failure::Usage(format!(
                "{}: {len} bytes, not a whole number of {frame}-byte frames ({channels} channels of {} bytes): \
                 expected a planar file of equal channel runs",
                path.display(),
                encoding.file_bytes()
            )));
        }
        warnings.push(format!(
            "{}: {len} bytes, not a whole number of {frame}-byte frames: {} frames read, the last {} bytes left out",
            path.display(),
            len / frame,
            len % frame
        ));
    }
    Ok(DiskRecording {
        path: path.to_path_buf(),
        container: "raw".into(),
        data_offset: 0,
        frames: len / frame,
        channels,
        sample_rate_hz,
        encoding,
        layout,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    //! Raw bytes -> messages, without a server.

    use super::*;

    #[test]
    fn a_raw_file_is_whole_frames_and_a_ragged_planar_file_is_refused() {
        let path = std::env::temp_dir().join(format!("jetloop-raw-open-{}.bin", std::process::id()));
        std::fs::write(&path, [0u8; 13]).expect("write");
        // 13 bytes of 2 x i16 frames: 3 frames, 1 byte left out, said in a warning.
        let r =
            open(&path, 1000.0, pb::SampleFormat::I16Le, 2, pb::ChannelLayout::Interleaved).expect("open");
        assert_eq!((r.frames, r.sample_count()), (3, 6));
        assert!(r.warnings[0].contains("13 bytes, not a whole number of 4-byte frames"), "{:?}", r.warnings);
        let e = open(&path, 1000.0, pb::SampleFormat::I16Le, 2, pb::ChannelLayout::Planar).unwrap_err();
        assert!(matches!(e, Failure::Usage(ref m) if m.contains("13 bytes")), "{e:?}");
        let _ = std::fs::remove_file(path);
    }
}
