//! Recordings read from disk a block at a time: where the samples sit in the file (a byte
//! range found by the WAV header parser or given for a raw file), how each sample is encoded
//! there, and how blocks of frames become the interleaved little-endian bytes a request
//! carries. The client's memory stays a few blocks, whatever the file's length.

use crate::failure::Failure;
use jetloop_proto::pb;
use std::io::Read;
use std::io::Seek;
use std::io::SeekFrom;
use std::path::Path;
use std::path::PathBuf;

/// How one sample is stored in the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Encoding {
    /// Integer PCM of `bytes` bytes (1: unsigned with 128 as zero, as WAV stores 8-bit
    /// samples; 2, 3, 4: signed two's complement), shifted right by `shift` bits to drop the
    /// unused low bits of a container wider than its valid bits (WAVE_FORMAT_EXTENSIBLE).
    Pcm {
        /// Bytes per sample in the file: 1, 2, 3 or 4.
        bytes: u8,
        /// Unused low bits (container bits minus valid bits), 0 for most files.
        shift: u8,
    },
    /// IEEE 754 float of `bytes` bytes (4 or 8).
    Float {
        /// Bytes per sample in the file: 4 or 8.
        bytes: u8,
    },
}

impl Encoding {
    /// Bytes per sample in the file.
    pub(crate) fn file_bytes(self) -> usize {
        match self {
            Encoding::Pcm { bytes, .. } | Encoding::Float { bytes } => usize::from(bytes),
        }
    }

    /// The sample format sent to the server: 8- and 16-bit integers as i16 (counts kept), 24-
    /// and 32-bit integers as i32 (counts kept), floats as they are.
    pub(crate) fn wire(self) -> pb::SampleFormat {
        match self {
            Encoding::Pcm { bytes: 1 | 2, .. } => pb::SampleFormat::I16Le,
            Encoding::Pcm { .. } => pb::SampleFormat::I32Le,
            Encoding::Float { bytes: 8 } => pb::SampleFormat::F64Le,
            Encoding::Float { .. } => pb::SampleFormat::F32Le,
        }
    }

    /// Bytes per sample on the wire.
    pub(crate) fn wire_bytes(self) -> usize {
        wire_width(self.wire())
    }

    /// A short name for people: "PCM 24-bit", "IEEE float 32-bit".
    pub(crate) fn describe(self) -> String {
        match self {
            Encoding::Pcm { bytes: 1, .. } => "PCM 8-bit unsigned".into(),
            Encoding::Pcm { bytes, shift: 0 } => format!("PCM {}-bit", 8 * bytes),
            Encoding::Pcm { bytes, shift } => {
                format!("PCM {}-bit valid in a {}-bit container", 8 * bytes - shift, 8 * bytes)
            }
            Encoding::Float { bytes } => format!("IEEE float {}-bit", 8 * bytes),
        }
    }

    /// True when the file's bytes are already the wire format (16- and 32-bit integers with
    /// no unused bits, floats).
    pub(crate) fn is_wire(self) -> bool {
        matches!(self, Encoding::Pcm { bytes: 2 | 4, shift: 0 } | Encoding::Float { .. })
    }

    /// Appends the samples of `src` (whole samples of this encoding) to `out` in the wire
    /// format, little-endian.
    pub(crate) fn convert(self, src: &[u8], out: &mut Vec<u8>) {
        let w = self.file_bytes();
        match self {
            Encoding::Pcm { bytes: 2, shift: 0 }
            | Encoding::Pcm { bytes: 4, shift: 0 }
            | Encoding::Float { .. } => out.extend_from_slice(src),
            Encoding::Pcm { bytes: 1, .. } => {
                for &b in src {
                    out.extend_from_slice(&(i16::from(b) - 128).to_le_bytes());
                }
            }
            Encoding::Pcm { bytes: 2, shift } => {
                for s in src.chunks_exact(w) {
                    out.extend_from_slice(&(i16::from_le_bytes([s[0], s[1]]) >> shift).to_le_bytes());
                }
            }
            Encoding::Pcm { bytes: 3, shift } => {
                for s in src.chunks_exact(w) {
                    // Sign-extended: the three bytes go to the top of an i32, then back down.
                    let v = i32::from_le_bytes([0, s[0], s[1], s[2]]) >> (8 + shift);
                    out.extend_from_slice(&v.to_le_bytes());
                }
            }
            Encoding::Pcm { shift, .. } => {
                for s in src.chunks_exact(w) {
                    let v = i32::from_le_bytes([s[0], s[1], s[2], s[3]]) >> shift;
                    out.extend_from_slice(&v.to_le_bytes());
                }
            }
        }
    }
}

/// Bytes per sample of a wire format (0 for an unspecified one).
pub(crate) fn wire_width(f: pb::SampleFormat) -> usize {
    match f {
        pb::SampleFormat::I16Le => 2,
        pb::SampleFormat::F32Le | pb::SampleFormat::I32Le => 4,
        pb::SampleFormat::F64Le => 8,
        pb::SampleFormat::Unspecified => 0,
    }
}

/// Wire bytes of format `f` as numbers in the file's units (counts, or full-scale units).
pub(crate) fn wire_values(f: pb::SampleFormat, bytes: &[u8]) -> Vec<f64> {
    match f {
        pb::SampleFormat::I16Le => {
            bytes.chunks_exact(2).map(|s| f64::from(i16::from_le_bytes([s[0], s[1]]))).collect()
        }
        pb::SampleFormat::I32Le => {
            bytes.chunks_exact(4).map(|s| f64::from(i32::from_le_bytes([s[0], s[1], s[2], s[3]]))).collect()
        }
        pb::SampleFormat::F32Le => {
            bytes.chunks_exact(4).map(|s| f64::from(f32::from_le_bytes([s[0], s[1], s[2], s[3]]))).collect()
        }
        pb::SampleFormat::F64Le => bytes
            .chunks_exact(8)
            .map(|s| f64::from_le_bytes([s[0], s[1], s[2], s[3], s[4], s[5], s[6], s[7]]))
            .collect(),
        pb::SampleFormat::Unspecified => Vec::new(),
    }
}

/// A recording's samples in a file: a byte range of whole frames, their encoding and layout.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct DiskRecording {
    /// The file.
    pub path: PathBuf,
    /// What the file is, for people: "WAV (RIFF)", "WAV (RF64)", "raw".
    pub container: String,
    /// Byte offset of the first sample in the file.
    pub data_offset: u64,
    /// Frames (samples per channel) that will be read.
    pub frames: u64,
    /// Channels.
    pub channels: u32,
    /// Sample rate in Hz.
    pub sample_rate_hz: f64,
    /// How each sample is stored.
    pub encoding: Encoding,
    /// Interleaved (frame by frame) or planar (channel by channel) in the file; blocks are
    /// always sent interleaved.
    pub layout: pb::ChannelLayout,
    /// What was odd about the file and how it was read (truncation, placeholder sizes), one
    /// sentence each with the numbers.
    pub warnings: Vec<String>,
}

impl DiskRecording {
    /// Samples of all channels together.
    pub(crate) fn sample_count(&self) -> u64 {
        self.frames.saturating_mul(u64::from(self.channels))
    }

    /// Bytes of one interleaved frame on the wire.
    pub(crate) fn wire_frame_bytes(&self) -> usize {
        self.encoding.wire_bytes() * self.channels as usize
    }

    /// Bytes of one frame in the file.
    fn file_frame_bytes(&self) -> usize {
        self.encoding.file_bytes() * self.channels as usize
    }

    /// Opens the file for reading blocks.
    ///
    /// # Errors
    /// [`Failure::Usage`] naming the file when it cannot be opened.
    pub(crate) fn open(&self) -> Result<BlockReader, Failure> {
        let file = std::fs::File::open(&self.path)
            .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", self.path.display())))?;
        Ok(BlockReader { rec: self.clone(), file, next_frame: 0, buf: Vec::new() })
    }

    /// Every sample as interleaved wire bytes, with a progress bar on a terminal.
    ///
    /// # Errors
    /// [`Failure::Usage`] when the file cannot be read (the byte offset is named).
    pub(crate) fn read_all(&self) -> Result<bytes::Bytes, Failure> {
        let mut r = self.open()?;
        let frames = usize::try_from(self.frames).unwrap_or(usize::MAX);
        let mut data = Vec::with_capacity(frames.saturating_mul(self.wire_frame_bytes()));
        let file_frame = self.file_frame_bytes() as u64;
        let bar = crate::render::progress::bytes_bar("reading", &self.path, self.frames * file_frame);
        while let Some(block) = r.next_block(1 << 16)? {
            bar.inc(block.len() as u64 / self.wire_frame_bytes() as u64 * file_frame);
            data.extend_from_slice(&block);
        }
        bar.finish_and_clear();
        Ok(data.into())
    }

    /// A `Samples` message of this recording's rate, channels and wire format holding `data`
    /// (interleaved), with `calibration`.
    pub(crate) fn samples_with(&self, data: bytes::Bytes, calibration: pb::Calibration) -> pb::Samples {
        pb::Samples {
            sample_rate_hz: self.sample_rate_hz,
            channel_count: self.channels,
            layout: pb::ChannelLayout::Interleaved as i32,
            data: Some(pb::samples::Data::Raw(pb::RawSamples { data, format: self.encoding.wire() as i32 })),
            calibration: Some(calibration),
            channel_names: Vec::new(),
            channel_calibrations: Vec::new(),
        }
    }
}

/// Reads a [`DiskRecording`] a block of frames at a time, as interleaved wire bytes.
#[derive(Debug)]
pub(crate) struct BlockReader {
    /// The recording.
    rec: DiskRecording,
    /// The open file.
    file: std::fs::File,
    /// The first frame of the next block.
    next_frame: u64,
    /// File bytes of one block (reused).
    buf: Vec<u8>,
}

impl BlockReader {
    /// The next block of at most `frames` frames as interleaved wire bytes; `None` after the
    /// last frame.
    ///
    /// # Errors
    /// [`Failure::Usage`] naming the file and the byte offset when a read fails or the file
    /// ended early (it was cut while being read).
    pub(crate) fn next_block(&mut self, frames: u64) -> Result<Option<Vec<u8>>, Failure> {
        let n = frames.max(1).min(self.rec.frames - self.next_frame);
        if n == 0 {
            return Ok(None);
        }
        let (w, ch) = (self.rec.encoding.file_bytes() as u64, u64::from(self.rec.channels));
        let mut out = Vec::with_capacity(n as usize * self.rec.wire_frame_bytes());
        if self.rec.layout == pb::ChannelLayout::Planar && ch > 1 {
            // One run of `n` samples per channel, interleaved here.
            let mut runs = Vec::with_capacity(ch as usize);
            for c in 0..ch {
                let at = self.rec.data_offset + (c * self.rec.frames + self.next_frame) * w;
                self.read_at(at, (n * w) as usize)?;
                let mut wire = Vec::with_capacity(n as usize * self.rec.encoding.wire_bytes());
                self.rec.encoding.convert(&self.buf, &mut wire);
                runs.push(wire);
            }
            let ww = self.rec.encoding.wire_bytes();
            for k in 0..n as usize {
                for run in &runs {
                    out.extend_from_slice(&run[k * ww..(k + 1) * ww]);
                }
            }
        } else if self.rec.encoding.is_wire() {
            // Stored as sent: read straight into the block, no copy.
            let at = self.rec.data_offset + self.next_frame * w * ch;
            std::mem::swap(&mut self.buf, &mut out);
            let read = self.read_at(at, (n * w * ch) as usize);
            std::mem::swap(&mut self.buf, &mut out);
            read?;
        } else {
            let at = self.rec.data_offset + self.next_frame * w * ch;
            self.read_at(at, (n * w * ch) as usize)?;
            self.rec.encoding.convert(&self.buf, &mut out);
        }
        self.next_frame += n;
        Ok(Some(out))
    }

    /// Reads `len` bytes at byte `at` into the block buffer.
    fn read_at(&mut self, at: u64, len: usize) -> Result<(), Failure> {
        let path = self.rec.path.clone();
        let fail = |e: std::io::Error| {
            Failure::Usage(format!("{}: byte {at}: cannot read {len} bytes: {e}", path.display()))
        };
        self.buf.resize(len, 0);
        self.file.seek(SeekFrom::Start(at)).map_err(fail)?;
        self.file.read_exact(&mut self.buf).map_err(fail)
    }
}

/// The length of the file at `path` in bytes.
///
/// # Errors
/// [`Failure::Usage`] naming the file when it cannot be opened.
pub(crate) fn file_len(path: &Path) -> Result<u64, Failure> {
    std::fs::metadata(path)
        .map(|m| m.len())
        .map_err(|e| Failure::Usage(format!("cannot open {}: {e}", path.display())))
}

#[cfg(test)]
mod tests {
    //! Encodings -> wire bytes, and blocks read from a file, without a server.

    use super::*;

    #[test]
    fn each_encoding_keeps_its_counts_on_the_wire() {
        let mut out = Vec::new();
        // 8-bit WAV: unsigned with 128 as zero (the WAVE format's convention).
        Encoding::Pcm { bytes: 1, shift: 0 }.convert(&[0, 128, 255], &mut out);
        assert_eq!(wire_values(pb::SampleFormat::I16Le, &out), vec![-128.0, 0.0, 127.0]);
        out.clear();
        // 24-bit two's complement: 0x800000 is the most negative, 0x7FFFFF the largest.
        Encoding::Pcm { bytes: 3, shift: 0 }
            .convert(&[0, 0, 0x80, 0xFF, 0xFF, 0x7F, 0xFF, 0xFF, 0xFF], &mut out);
        assert_eq!(wire_values(pb::SampleFormat::I32Le, &out), vec![-8_388_608.0, 8_388_607.0, -1.0]);
        out.clear();
        // 24 valid bits left-justified in 32: the low byte is dropped.
        Encoding::Pcm { bytes: 4, shift: 8 }.convert(&(-5i32 << 8).to_le_bytes(), &mut out);
        assert_eq!(wire_values(pb::SampleFormat::I32Le, &out), vec![-5.0]);
    }

    #[test]
    fn planar_blocks_come_out_interleaved_and_the_last_block_is_short() {
        let path = std::env::temp_dir().join(format!("jetloop-disk-planar-{}.bin", std::process::id()));
        // Two channels of three i16 samples, channel by channel, after a 4-byte header.
        let body: Vec<u8> = [0i16, 1, 2, 10, 11, 12].iter().flat_map(|v| v.to_le_bytes()).collect();
        std::fs::write(&path, [&[9u8; 4][..], &body].concat()).expect("write");
        let rec = DiskRecording {
            path: path.clone(),
            container: "raw".into(),
            data_offset: 4,
            frames: 3,
            channels: 2,
            sample_rate_hz: 1.0,
            encoding: Encoding::Pcm { bytes: 2, shift: 0 },
            layout: pb::ChannelLayout::Planar,
            warnings: Vec::new(),
        };
        let mut r = rec.open().expect("open");
        let a = r.next_block(2).expect("read").expect("block");
        let b = r.next_block(2).expect("read").expect("block");
        assert!(r.next_block(2).expect("read").is_none());
        assert_eq!(wire_values(pb::SampleFormat::I16Le, &a), vec![0.0, 10.0, 1.0, 11.0]);
        assert_eq!(wire_values(pb::SampleFormat::I16Le, &b), vec![2.0, 12.0]);
        let _ = std::fs::remove_file(path);
    }
}
