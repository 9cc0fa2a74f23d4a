//! WAV recordings: RIFF/WAVE, RF64 and BW64 (64-bit sizes in a `ds64` chunk), with PCM 8-bit
//! (unsigned), 16-, 24- and 32-bit, IEEE float 32- and 64-bit, plain or WAVE_FORMAT_EXTENSIBLE
//! `fmt ` chunks.
//!
//! The chunk walk is written here rather than taken from a crate: `hound` reads neither RF64
//! nor BW64, and the crates that do (e.g. `bwavfile`) stop with an error on a data chunk cut
//! short or left with a streaming writer's placeholder size, give no byte offsets, and hand
//! out frames one at a time. What a lab needs is the byte range of the samples (streamed to
//! the server from disk a block at a time, converted only for 8- and 24-bit files), read
//! whatever a recorder left behind with a warning, and refused with the byte offset and what
//! was expected: about 200 lines of chunk walking, tested against files written by
//! scipy.io.wavfile and soundfile (libsndfile) in tests/python/test_wav_reading.py.
//!
//! Layouts followed: the RIFF WAVE `fmt `/`data` chunks and WAVEFORMATEXTENSIBLE (Microsoft
//! multimedia registration), EBU Tech 3306 (RF64) and ITU-R BS.2088 (BW64), whose `ds64`
//! chunk holds the 64-bit RIFF size, data size and sample count, then a table of other
//! chunks' 64-bit sizes.

use super::disk::DiskRecording;
use super::disk::Encoding;
use crate::failure::Failure;
use jetloop_proto::pb;
use std::io::Read;
use std::io::Seek;
use std::io::SeekFrom;
use std::path::Path;

/// The tail (bytes 2..16) of the KSDATAFORMAT_SUBTYPE GUIDs of PCM and IEEE float in a
/// WAVE_FORMAT_EXTENSIBLE header; bytes 0..2 hold the format tag (1 or 3).
const SUBTYPE_TAIL: [u8; 14] = [0, 0, 0, 0, 0x10, 0, 0x80, 0, 0, 0xAA, 0, 0x38, 0x9B, 0x71];

/// Format tags of the `fmt ` chunk.
const TAG_PCM: u16 = 1;
/// IEEE float.
const TAG_FLOAT: u16 = 3;
/// WAVE_FORMAT_EXTENSIBLE: the real tag is in the subformat GUID.
const TAG_EXTENSIBLE: u16 = 0xFFFE;

/// A data size a streaming writer leaves when it never comes back to fill it in.
fn is_placeholder(size: u64, wide: bool) -> bool {
    size == 0 || size == u64::from(u32::MAX) || (wide && size == u64::MAX)
}

/// What a `ds64` chunk says: the data chunk's 64-bit size, and other chunks' sizes by id.
type Ds64 = (u64, Vec<([u8; 4], u64)>);

/// The `fmt ` chunk, checked.
struct Fmt {
    /// Channels.
    channels: u16,
    /// Frames per second.
    sample_rate: u32,
    /// How each sample is stored.
    encoding: Encoding,
}

/// A reader with its file's name and length, for messages that name both.
struct Walk<'a, R> {
    /// The bytes.
    r: R,
    /// The file, in messages.
    path: &'a Path,
    /// Bytes in the file.
    len: u64,
}

impl<R: Read + Seek> Walk<'_, R> {
    /// An error at byte `at`: what was found and what was expected.
    fn bad(&self, at: u64, what: String) -> Failure {
        Failure::Usage(format!("{}: byte {at}: {what}", self.path.display()))
    }

    /// `n` bytes at byte `at`, or an error saying that `what` was expected there.
    fn bytes(&mut self, at: u64, n: usize, what: &str) -> Result<Vec<u8>, Failure> {
        if at.saturating_add(n as u64) > self.len {
            return Err(
                self.bad(at, format!("the file ends at byte {}, expected {what} ({n} bytes)", self.len))
            );
        }
        let mut b = vec![0u8; n];
        self.r
            .seek(SeekFrom::Start(at))
            .and_then(|_| self.r.read_exact(&mut b))
            .map_err(|e| self.bad(at, format!("cannot read {what}: {e}")))?;
        Ok(b)
    }
}

/// Little-endian integers in a byte slice (the caller checked its length).
fn u16_at(b: &[u8], i: usize) -> u16 {
    u16::from_le_bytes([b[i], b[i + 1]])
}
/// Little-endian u32 at `i`.
fn u32_at(b: &[u8], i: usize) -> u32 {
    u32::from_le_bytes([b[i], b[i + 1], b[i + 2], b[i + 3]])
}
/// Little-endian u64 at `i`.
fn u64_at(b: &[u8], i: usize) -> u64 {
    u64::from(u32_at(b, i)) | (u64::from(u32_at(b, i + 4)) << 32)
}

/// A four-character code as text for messages.
fn fourcc(b: &[u8]) -> String {
    b.iter().map(|&c| if c.is_ascii_graphic() || c == b' ' { char::from(c) } else { '?' }).collect()
}

/// Checks the `fmt ` chunk body `b` found at byte `at` (its first byte).
fn parse_fmt<R: Read + Seek>(w: &Walk<'_, R>, at: u64, b: &[u8]) -> Result<Fmt, Failure> {
    let tag = u16_at(b, 0);
    let channels = u16_at(b, 2);
    let sample_rate = u32_at(b, 4);
    let block_align = u16_at(b, 12);
    let bits = u16_at(b, 14);
    if channels == 0 {
        return Err(w.bad(at + 2, "0 channels in the fmt chunk, expected 1 or more".into()));
    }
    if sample_rate == 0 {
        return Err(w.bad(at + 4, "sample rate 0 Hz in the fmt chunk, expected a positive rate".into()));
    }
    let (kind, valid) = match tag {
        TAG_PCM | TAG_FLOAT => (tag, bits),
        TAG_EXTENSIBLE => {
            if b.len() < 40 || u16_at(b, 16) < 22 {
                return Err(w.bad(
                    at + 16,
                    format!(
                        "WAVE_FORMAT_EXTENSIBLE fmt chunk of {} bytes, expected 40 (22 extension bytes)",
                        b.len()
                    ),
                ));
            }
            let sub = u16_at(b, 24);
            if b[26..40] != SUBTYPE_TAIL || !(sub == TAG_PCM || sub == TAG_FLOAT) {
                let guid: String = b[24..40].iter().map(|x| format!("{x:02x}")).collect();
                return Err(w.bad(
                    at + 24,
                    format!("subformat GUID {guid}, expected PCM (01000000-0000-1000-8000-00aa00389b71) or IEEE float (03000000-...)"),
                ));
            }
            let valid = u16_at(b, 18);
            (sub, if valid == 0 { bits } else { valid })
        }
        other => {
            return Err(w.bad(
                at,
                format!(
                "format tag {other:#06x} (compressed or unknown), expected 0x0001 PCM, 0x0003 IEEE float or \
                     0xfffe WAVE_FORMAT_EXTENSIBLE"
            ),
            ))
        }
    };
    let encoding = match (kind, bits) {
        (TAG_PCM, 8 | 16 | 24 | 32) if valid <= bits && valid > 0 => {
            // Only multi-byte containers carry unused low bits; an 8-bit file is counted as is.
            let shift = if bits == 8 { 0 } else { (bits - valid) as u8 };
            Encoding::Pcm { bytes: (bits / 8) as u8, shift }
        }
        (TAG_FLOAT, 32 | 64) => Encoding::Float { bytes: (bits / 8) as u8 },
        (TAG_PCM, _) => {
            return Err(w.bad(
                at + 14,
                format!("{bits}-bit PCM with {valid} valid bits, expected 8, 16, 24 or 32 bits per sample"),
            ))
        }
        _ => return Err(w.bad(at + 14, format!("{bits}-bit IEEE float, expected 32 or 64 bits per sample"))),
    };
    let expected = u32::from(channels) * u32::from(bits / 8);
    if u32::from(block_align) != expected {
        return Err(w.bad(
            at + 12,
            format!(
                "block align {block_align} bytes, expected {expected} ({channels} channels x {bits} bits)"
            ),
        ));
    }
    Ok(Fmt { channels, sample_rate, encoding })
}

/// Walks the chunks of the WAV file `path` (read through `r`, `len` bytes long) up to its
/// `data` chunk: where the samples are, how they are stored, and warnings for a data chunk
/// cut short or left with a placeholder size (then the whole frames up to the end of the file
/// are read).
///
/// # Errors
/// [`Failure::Usage`] naming the file, the byte offset and what was expected there: not a
/// RIFF/RF64/BW64 WAVE file, a missing or unsupported `fmt ` chunk, a missing `ds64` or
/// `data` chunk, a chunk running past the end of the file before the data.
pub(crate) fn parse<R: Read + Seek>(path: &Path, r: R, len: u64) -> Result<DiskRecording, Failure> {
    let mut w = Walk { r, path, len };
    let head = w.bytes(0, 12, "a RIFF, RF64 or BW64 header")?;
    let container = match &head[0..4] {
        b"RIFF" => "RIFF",
        b"RF64" => "RF64",
        b"BW64" => "BW64",
        b"RIFX" => return Err(w.bad(0, "\"RIFX\" (big-endian WAV), expected little-endian \"RIFF\"".into())),
        other => {
            return Err(w.bad(
                0,
                format!("\"{}\", expected \"RIFF\", \"RF64\" or \"BW64\" (a WAV file)", fourcc(other)),
            ))
        }
    };
    if &head[8..12] != b"WAVE" {
        return Err(w.bad(8, format!("\"{}\", expected \"WAVE\"", fourcc(&head[8..12]))));
    }
    let wide = container != "RIFF";
    let mut ds64: Option<Ds64> = None;
    let mut fmt: Option<Fmt> = None;
    let mut at = 12u64;
    loop {
        if at + 8 > len {
            let what = if fmt.is_none() { "a fmt chunk" } else { "a data chunk" };
            return Err(w.bad(at, format!("the file ends at byte {len}, expected {what}")));
        }
        let h = w.bytes(at, 8, "a chunk header")?;
        let id: [u8; 4] = [h[0], h[1], h[2], h[3]];
        let size32 = u32_at(&h, 4);
        // In RF64/BW64 a size of 0xFFFFFFFF means "look in ds64".
        let size = match (&ds64, size32) {
            (Some((data, table)), u32::MAX) => {
                if &id == b"data" {
                    *data
                } else {
                    table.iter().find(|(t, _)| *t == id).map(|(_, s)| *s).ok_or_else(|| {
                        w.bad(
                            at + 4,
                            format!(
                                "chunk \"{}\" of size 0xFFFFFFFF with no ds64 entry, expected its size",
                                fourcc(&id)
                            ),
                        )
                    })?
                }
            }
            _ => u64::from(size32),
        };
        let body = at + 8;
        match &id {
            b"ds64" => {
                if size < 28 {
                    return Err(w.bad(at + 4, format!("ds64 chunk of {size} bytes, expected at least 28")));
                }
                let b = w.bytes(body, size.min(28 + 12 * 1024) as usize, "the ds64 chunk")?;
                let entries = (u32_at(&b, 24) as usize).min((b.len() - 28) / 12);
                let table = (0..entries)
                    .map(|k| {
                        let e = &b[28 + 12 * k..40 + 12 * k];
                        ([e[0], e[1], e[2], e[3]], u64_at(e, 4))
                    })
                    .collect();
                ds64 = Some((u64_at(&b, 8), table));
            }
            b"fmt " => {
                if size < 16 {
                    return Err(w.bad(at + 4, format!("fmt chunk of {size} bytes, expected 16 or more")));
                }
                let b = w.bytes(body, size.min(40) as usize, "the fmt chunk")?;
                fmt = Some(parse_fmt(&w, body, &b)?);
            }
            b"data" => {
                if wide && ds64.is_none() {
                    return Err(w.bad(
                        12,
                        format!("no ds64 chunk before the data chunk, expected one in a {container} file"),
                    ));
                }
                let Some(f) = fmt else {
                    return Err(w.bad(at, "data chunk before any fmt chunk, expected fmt first".into()));
                };
                return Ok(data_range(path, container, f, body, size, len, wide));
            }
            _ => {}
        }
        // Chunks are padded to an even length; unknown chunks (LIST, bext, fact, ...) skipped.
        let next = body.saturating_add(size).saturating_add(size & 1);
        if next > len && fmt.is_none() {
            return Err(w.bad(
                at,
                format!("chunk \"{}\" declares {size} bytes, past the end of the file at byte {len}; expected a fmt chunk", fourcc(&id)),
            ));
        }
        at = next;
    }
}

/// The recording the data chunk at `body` (declared `declared` bytes) holds, with warnings
/// for a placeholder size or a file cut short.
fn data_range(
    path: &Path,
    container: &str,
    f: Fmt,
    body: u64,
    declared: u64,
    len: u64,
    wide: bool,
) -> DiskRecording {
    let frame = (f.encoding.file_bytes() * usize::from(f.channels)) as u64;
    let present = len.saturating_sub(body);
    let mut warnings = Vec::new();
    let used = if is_placeholder(declared, wide) && present > 0 {
        let frames = present / frame;
        warnings.push(format!(
            "{}: the data chunk at byte {} declares {declared} bytes, a placeholder a streaming writer leaves: read to the \
             end of the file, {present} bytes present, {frames} frames read",
            path.display(),
            body - 8
        ));
        present
    } else if declared > present {
        let frames = present / frame;
        warnings.push(format!(
            "{}: the data chunk at byte {} declares {declared} bytes but only {present} bytes are in the file (cut short): \
             {frames} frames read",
            path.display(),
            body - 8
        ));
        present
    } else {
        declared
    };
    if used % frame != 0 && warnings.is_empty() {
        warnings.push(format!(
            "{}: the data chunk at byte {} holds {used} bytes, not a whole number of {frame}-byte frames: the last {} bytes \
             were left out",
            path.display(),
            body - 8,
            used % frame
        ));
    }
    DiskRecording {
        path: path.to_path_buf(),
        container: format!("WAV ({container})"),
        data_offset: body,
        frames: used / frame,
        channels: u32::from(f.channels),
        sample_rate_hz: f64::from(f.sample_rate),
        encoding: f.encoding,
        layout: pb::ChannelLayout::Interleaved,
        warnings,
    }
}

/// Opens the WAV file at `path` and walks its header (see [`parse`]); the samples stay on
/// disk.
///
/// # Errors
/// As [`parse`], and when the file cannot be opened.
pub(crate) fn open(path: &Path) -> Result<DiskRecording, Failure> {
    let file = std::fs::File::open(path)
        .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", path.display())))?;
    let len = file
        .metadata()
        .map(|m| m.len())
        .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", path.display())))?;
    parse(path, std::io::BufReader::new(file), len)
}

/// A WAV file's `bytes` as raw interleaved samples at the file's own sample rate (8- and
/// 16-bit as i16 counts, 24- and 32-bit integers as i32 counts, floats as they are); `path`
/// names the file in messages (the reader of the tests, on bytes in memory). Warnings are
/// printed on standard error.
///
/// # Errors
/// As [`parse`].
#[cfg(test)]
pub(crate) fn wav(path: &Path, bytes: &[u8], calibration: pb::Calibration) -> Result<pb::Samples, Failure> {
    let rec = parse(path, std::io::Cursor::new(bytes), bytes.len() as u64)?;
    for w in &rec.warnings {
        eprintln!("warning: {w}");
    }
    let start = rec.data_offset as usize;
    let end = start + rec.frames as usize * rec.encoding.file_bytes() * rec.channels as usize;
    let mut data = Vec::with_capacity(rec.frames as usize * rec.wire_frame_bytes());
    rec.encoding.convert(&bytes[start..end], &mut data);
    Ok(rec.samples_with(data.into(), calibration))
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
        assert!(
            matches!(e, Failure::Usage(ref m) if m.contains("x.wav: byte 0: the file ends at byte 9")),
            "{e:?}"
        );
        let e = wav(Path::new("x.wav"), b"OggS\0\0\0\0WAVEfmt ", cal()).unwrap_err();
        assert!(
            matches!(e, Failure::Usage(ref m) if m.contains("byte 0: \"OggS\", expected \"RIFF\"")),
            "{e:?}"
        );
    }

    #[test]
    fn a_24_bit_wav_cut_short_reads_its_whole_frames_and_says_so() {
        // Written by hound (a reference writer outside this parser): 24-bit mono.
        let mut bytes = std::io::Cursor::new(Vec::new());
        let spec = hound::WavSpec {
            channels: 1,
            sample_rate: 8000,
            bits_per_sample: 24,
            sample_format: hound::SampleFormat::Int,
        };
        let mut w = hound::WavWriter::new(&mut bytes, spec).expect("writer");
        let written = [-8_388_608i32, 8_388_607, 5, -5];
        for s in written {
            w.write_sample(s).expect("sample");
        }
        w.finalize().expect("finalize");
        let mut b = bytes.into_inner();
        b.truncate(b.len() - 4); // 12 data bytes declared, 8 present: 2 whole frames.
        let rec = parse(Path::new("cut.wav"), std::io::Cursor::new(&b), b.len() as u64).expect("parse");
        assert_eq!((rec.frames, rec.encoding), (2, Encoding::Pcm { bytes: 3, shift: 0 }));
        assert!(
            rec.warnings[0].contains("declares 12 bytes but only 8 bytes")
                && rec.warnings[0].contains("2 frames read"),
            "{:?}",
            rec.warnings
        );
        let s = wav(Path::new("cut.wav"), &b, cal()).expect("samples");
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!(
            super::super::disk::wire_values(pb::SampleFormat::I32Le, &r.data),
            vec![-8_388_608.0, 8_388_607.0]
        );
    }
}
