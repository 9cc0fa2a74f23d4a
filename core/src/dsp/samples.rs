//! Calibrated microphone samples in the byte layouts a DAQ writes, read where they lie.
//!
//! Bytes are little-endian f32, f64, i16 or i32, interleaved (frame by frame) or planar
//! (channel after channel). Nothing is converted up front: a [`Recording`] keeps the bytes it
//! was given (shared, not copied) and a [`ChannelView`] decodes any run of one channel's
//! samples, times the calibration factor to pascals, straight into a caller's buffer. The Welch
//! loop reads each segment this way into a per-worker buffer, so a request of many megabytes
//! never needs a second, wider copy of itself, and no memory is allocated per sample.
//!
//! Finiteness is checked while the samples are read for analysis (see
//! [`crate::dsp::welch`]), and [`SampleMoments`] (count, mean, sum of squared deviations)
//! are gathered in the same pass.

use bytes::Bytes;

/// Sample encodings.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Format {
    /// IEEE 754 binary32, little-endian.
    F32,
    /// IEEE 754 binary64, little-endian.
    F64,
    /// Signed 16-bit integer, little-endian.
    I16,
    /// Signed 32-bit integer, little-endian.
    I32,
}

impl Format {
    /// Bytes per sample.
    pub fn width(self) -> usize {
        match self {
            Format::I16 => 2,
            Format::F32 | Format::I32 => 4,
            Format::F64 => 8,
        }
    }
}

/// How channels are arranged.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Layout {
    /// Sample 0 of every channel, then sample 1 of every channel, ...
    Interleaved,
    /// All samples of channel 0, then of channel 1, ...
    Planar,
}

/// Why samples cannot be read.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum DecodeError {
    /// Byte count not a whole number of frames.
    #[error("{bytes} bytes are not a whole number of {channels}-channel frames of {width}-byte samples")]
    Ragged {
        /// Bytes given.
        bytes: usize,
        /// Channels.
        channels: usize,
        /// Bytes per sample.
        width: usize,
    },
    /// Per-channel calibrations not one per channel.
    #[error("{given} channel calibrations for {channels} channels: give one per channel")]
    Calibrations {
        /// Calibrations given.
        given: usize,
        /// Channels.
        channels: usize,
    },
}

#[derive(Debug, Clone)]
enum Storage {
    /// Blocks of raw bytes in arrival order, each a whole number of samples, with the index
    /// (counted in samples of all channels) at which each block starts.
    Blocks {
        blocks: Vec<Bytes>,
        starts: Vec<usize>,
        total: usize,
        format: Format,
    },
    Values(Vec<f64>),
}

/// Samples of one or more channels recorded together, kept as received.
#[derive(Debug, Clone)]
pub struct Recording {
    storage: Storage,
    layout: Layout,
    channels: usize,
    per_channel: usize,
    scale_pa: f64,
    /// Pascals per unit of each channel when the channels differ (a ring of microphones,
    /// each with its own sensitivity); empty: `scale_pa` for every channel.
    channel_scales_pa: Vec<f64>,
    /// First frame still held: frames before it were analysed and let go
    /// ([`Recording::release_before`]); 0 for a recording kept whole.
    held_from: usize,
    /// Samples at full scale, per channel, among the frames let go.
    released_clipped: Vec<usize>,
}

impl Recording {
    /// Raw little-endian `bytes` of `channels` channels; `scale_pa` is pascals per unit.
    ///
    /// # Errors
    /// [`DecodeError::Ragged`] when the bytes are not whole frames.
    pub fn from_bytes(
        bytes: Bytes,
        format: Format,
        layout: Layout,
        channels: usize,
        scale_pa: f64,
    ) -> Result<Self, DecodeError> {
        let w = format.width();
        // A frame wider than memory (an absurd channel count) cannot be whole either.
        match w.checked_mul(channels) {
            Some(frame) if frame > 0 && bytes.len() % frame == 0 => {}
            _ => return Err(DecodeError::Ragged { bytes: bytes.len(), channels, width: w }),
        }
        let per_channel = bytes.len() / (w * channels);
        let total = bytes.len() / w;
        let (blocks, starts) =
            if bytes.is_empty() { (Vec::new(), Vec::new()) } else { (vec![bytes], vec![0]) };
        let storage = Storage::Blocks { blocks, starts, total, format };
        Ok(Self::with_storage(storage, layout, channels, per_channel, scale_pa))
    }

    /// A recording of `storage` with one calibration for every channel, held whole.
    fn with_storage(
        storage: Storage,
        layout: Layout,
        channels: usize,
        per_channel: usize,
        scale_pa: f64,
    ) -> Self {
        Self {
            storage,
            layout,
            channels,
            per_channel,
            scale_pa,
            channel_scales_pa: Vec::new(),
            held_from: 0,
            released_clipped: Vec::new(),
        }
    }

    /// An interleaved recording that will grow block by block (see [`Recording::push_block`]).
    pub fn stream(format: Format, channels: usize, scale_pa: f64) -> Self {
        let storage = Storage::Blocks { blocks: Vec::new(), starts: Vec::new(), total: 0, format };
        Self::with_storage(storage, Layout::Interleaved, channels.max(1), 0, scale_pa)
    }

    /// Appends a block of whole interleaved frames (kept, not copied).
    ///
    /// # Errors
    /// [`DecodeError::Ragged`] when the block is not whole frames, or the recording holds
    /// packed values or planar channels.
    pub fn push_block(&mut self, block: Bytes) -> Result<(), DecodeError> {
        let channels = self.channels;
        match &mut self.storage {
            Storage::Blocks { blocks, starts, total, format } if self.layout == Layout::Interleaved => {
                let w = format.width();
                if w.checked_mul(channels).is_none_or(|frame| block.len() % frame != 0) {
                    return Err(DecodeError::Ragged { bytes: block.len(), channels, width: w });
                }
                if block.is_empty() {
                    return Ok(());
                }
                starts.push(*total);
                *total += block.len() / w;
                blocks.push(block);
                self.per_channel = *total / channels;
                Ok(())
            }
            _ => Err(DecodeError::Ragged { bytes: block.len(), channels, width: 0 }),
        }
    }

    /// Packed values of `channels` channels; `scale_pa` is pascals per unit.
    ///
    /// # Errors
    /// [`DecodeError::Ragged`] when the count is not a multiple of the channel count.
    pub fn from_values(
        values: Vec<f64>,
        layout: Layout,
        channels: usize,
        scale_pa: f64,
    ) -> Result<Self, DecodeError> {
        if channels == 0 || values.len() % channels != 0 {
            return Err(DecodeError::Ragged { bytes: values.len() * 8, channels, width: 8 });
        }
        let per_channel = values.len() / channels;
        Ok(Self::with_storage(Storage::Values(values), layout, channels, per_channel, scale_pa))
    }

    /// The same recording with one factor per channel, pascals per unit, in channel order
    /// (each microphone's own calibration); `scales` must hold one entry per channel.
    ///
    /// # Errors
    /// [`DecodeError::Calibrations`] when the count differs from the channel count.
    pub fn with_channel_scales(mut self, scales: Vec<f64>) -> Result<Self, DecodeError> {
        if scales.len() != self.channels {
            return Err(DecodeError::Calibrations { given: scales.len(), channels: self.channels });
        }
        self.channel_scales_pa = scales;
        Ok(self)
    }

    /// Pascals per unit of channel `c`.
    pub fn scale_of(&self, c: usize) -> f64 {
        self.channel_scales_pa.get(c).copied().unwrap_or(self.scale_pa)
    }

    /// Number of channels.
    pub fn channel_count(&self) -> usize {
        self.channels
    }

    /// Samples per channel.
    pub fn len(&self) -> usize {
        self.per_channel
    }

    /// True when there are no samples.
    pub fn is_empty(&self) -> bool {
        self.per_channel == 0
    }

    /// Drops every sample, keeping the format, channels and calibration.
    pub fn clear(&mut self) {
        match &mut self.storage {
            Storage::Blocks { blocks, starts, total, .. } => {
                blocks.clear();
                starts.clear();
                *total = 0;
            }
            Storage::Values(v) => v.clear(),
        }
        self.per_channel = 0;
    }

    /// Samples of channel `c` at or within one count of full scale, with the full scale in
    /// pascals; `None` for float and packed data, which have no full scale.
    pub fn clipped(&self, c: usize) -> Option<(usize, f64)> {
        let counts = match &self.storage {
            Storage::Blocks { format: Format::I16, .. } => 32_767.0,
            Storage::Blocks { format: Format::I32, .. } => 2_147_483_647.0,
            _ => return None,
        };
        let k = self.scale_of(c).abs();
        let limit = (counts - 1.0) * k;
        let view = self.channel(c);
        let mut buf = vec![0.0; 65_536];
        let (mut at, mut n) = (self.held_from, self.released_clipped.get(c).copied().unwrap_or(0));
        while at < view.len() {
            let got = view.read(at, &mut buf);
            n += buf[..got].iter().filter(|x| x.abs() >= limit).count();
            at += got;
        }
        Some((n, counts * k))
    }

    /// First frame still held (0 unless frames were let go by [`Recording::release_before`]):
    /// views must not be read before it.
    pub fn held_from(&self) -> usize {
        self.held_from
    }

    /// Bytes of samples held now.
    pub fn held_bytes(&self) -> usize {
        match &self.storage {
            Storage::Blocks { blocks, .. } => blocks.iter().map(Bytes::len).sum(),
            Storage::Values(v) => v.len() * 8,
        }
    }

    /// Lets go of every whole block of a growing interleaved recording that lies entirely
    /// before frame `frame` (an analysis that has taken those frames in needs them no more),
    /// so a block stream of any length holds only what its analysis still reads. Samples at
    /// full scale among them are counted first, so [`Recording::clipped`] still covers the
    /// whole recording. Returns the bytes let go; 0 for packed values or planar channels,
    /// which are kept whole.
    pub fn release_before(&mut self, frame: usize) -> usize {
        if self.layout != Layout::Interleaved {
            return 0;
        }
        let channels = self.channels;
        let limit = frame.min(self.per_channel).saturating_mul(channels);
        let Storage::Blocks { blocks, starts, total, format } = &self.storage else {
            return 0;
        };
        // Blocks wholly before `limit`: block b ends where b + 1 starts (or at the total).
        let mut drop_n = 0;
        while drop_n < blocks.len() {
            let end = starts.get(drop_n + 1).copied().unwrap_or(*total);
            if end > limit {
                break;
            }
            drop_n += 1;
        }
        if drop_n == 0 {
            return 0;
        }
        let new_from = starts.get(drop_n).copied().unwrap_or(*total) / channels;
        let format = *format;
        if matches!(format, Format::I16 | Format::I32) {
            if self.released_clipped.len() != channels {
                self.released_clipped = vec![0; channels];
            }
            for c in 0..channels {
                let view = self.channel(c).range(self.held_from, new_from - self.held_from);
                let k = self.scale_of(c).abs();
                let full = if format == Format::I16 { 32_767.0 } else { 2_147_483_647.0 };
                let limit_pa = (full - 1.0) * k;
                let mut buf = vec![0.0; 65_536.min(view.len().max(1))];
                let mut at = 0;
                let mut n = 0;
                while at < view.len() {
                    let got = view.read(at, &mut buf);
                    n += buf[..got].iter().filter(|x| x.abs() >= limit_pa).count();
                    at += got;
                }
                self.released_clipped[c] += n;
            }
        }
        let Storage::Blocks { blocks, starts, .. } = &mut self.storage else {
            return 0;
        };
        let freed: usize = blocks.drain(..drop_n).map(|b| b.len()).sum();
        starts.drain(..drop_n);
        self.held_from = new_from;
        freed
    }

    /// A view of channel `c` (clamped to the last channel).
    pub fn channel(&self, c: usize) -> ChannelView<'_> {
        let c = c.min(self.channels.saturating_sub(1));
        let (first, stride) = match self.layout {
            Layout::Interleaved => (c, self.channels),
            Layout::Planar => (c * self.per_channel, 1),
        };
        let src = match &self.storage {
            Storage::Blocks { blocks, starts, format, .. } => {
                Source::Blocks { blocks, starts, format: *format }
            }
            Storage::Values(v) => Source::Values(v),
        };
        ChannelView { src, first, stride, len: self.per_channel, scale: self.scale_of(c) }
    }
}

#[derive(Debug, Clone, Copy)]
enum Source<'a> {
    Blocks { blocks: &'a [Bytes], starts: &'a [usize], format: Format },
    Values(&'a [f64]),
}

/// One channel of a [`Recording`] (or of a plain slice of pascals), read on demand.
#[derive(Debug, Clone, Copy)]
pub struct ChannelView<'a> {
    src: Source<'a>,
    /// Index of this channel's sample 0, in samples.
    first: usize,
    /// Distance between consecutive samples of this channel, in samples.
    stride: usize,
    len: usize,
    scale: f64,
}

impl<'a> ChannelView<'a> {
    /// A view of samples already in pascals.
    pub fn of_pascals(x: &'a [f64]) -> Self {
        Self { src: Source::Values(x), first: 0, stride: 1, len: x.len(), scale: 1.0 }
    }

    /// Samples in the channel.
    pub fn len(&self) -> usize {
        self.len
    }

    /// The `len` samples from `start` (clamped to the channel).
    pub fn range(self, start: usize, len: usize) -> Self {
        let start = start.min(self.len);
        Self { first: self.first + start * self.stride, len: len.min(self.len - start), ..self }
    }

    /// The same samples in their recorded units (the calibration left out).
    pub fn unscaled(self) -> Self {
        Self { scale: 1.0, ..self }
    }

    /// True when the channel has no samples.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Writes samples `start..start + out.len()` in pascals into `out`. A request past the end
    /// fills only what exists; the number written is returned.
    pub fn read(&self, start: usize, out: &mut [f64]) -> usize {
        let n = out.len().min(self.len.saturating_sub(start));
        let out = &mut out[..n];
        let (k, s) = (self.scale, self.stride);
        let i0 = self.first + start * s;
        match self.src {
            Source::Values(v) if s == 1 => {
                for (o, x) in out.iter_mut().zip(&v[i0..i0 + n]) {
                    *o = x * k;
                }
            }
            Source::Values(v) => {
                for (o, x) in out.iter_mut().zip(v[i0..].iter().step_by(s)) {
                    *o = x * k;
                }
            }
            Source::Blocks { blocks, starts, format } => {
                // Block by block: a run may cross from one block into the next.
                let (mut i, mut done) = (i0, 0);
                let mut b = starts.partition_point(|&st| st <= i).saturating_sub(1);
                while done < n && b < blocks.len() {
                    let bytes = &blocks[b][..];
                    let end = starts.get(b + 1).copied().unwrap_or(starts[b] + bytes.len() / format.width());
                    let local = i - starts[b];
                    let here = (end - i).div_ceil(s).min(n - done);
                    let o = &mut out[done..done + here];
                    match format {
                        Format::F32 => fill::<4>(o, bytes, local, s, k, |b| f64::from(f32::from_le_bytes(b))),
                        Format::F64 => fill::<8>(o, bytes, local, s, k, f64::from_le_bytes),
                        Format::I16 => fill::<2>(o, bytes, local, s, k, |b| f64::from(i16::from_le_bytes(b))),
                        Format::I32 => fill::<4>(o, bytes, local, s, k, |b| f64::from(i32::from_le_bytes(b))),
                    }
                    done += here;
                    i += here * s;
                    b += 1;
                }
            }
        }
        n
    }

    /// The whole channel in pascals (for tests and small inputs).
    pub fn to_vec(&self) -> Vec<f64> {
        let mut v = vec![0.0; self.len];
        self.read(0, &mut v);
        v
    }
}

/// One monomorphized loop per sample width; contiguous runs go through `chunks_exact`, which
/// the compiler vectorizes.
fn fill<const W: usize>(
    out: &mut [f64],
    bytes: &[u8],
    first: usize,
    stride: usize,
    scale: f64,
    conv: impl Fn([u8; W]) -> f64,
) {
    let at = |c: &[u8]| {
        let mut a = [0u8; W];
        a.copy_from_slice(&c[..W]);
        a
    };
    let b0 = first * W;
    let n = out.len();
    if stride == 1 {
        for (o, c) in out.iter_mut().zip(bytes[b0..b0 + n * W].chunks_exact(W)) {
            *o = conv(at(c)) * scale;
        }
    } else {
        for (o, c) in out.iter_mut().zip(bytes[b0..].chunks(stride * W)) {
            *o = conv(at(c)) * scale;
        }
    }
}

/// Count, mean and sum of squared deviations of a run of samples, mergeable across runs (Chan,
/// Golub & LeVeque 1979), so parallel workers can each describe their share.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SampleMoments {
    /// Samples.
    pub count: usize,
    /// Mean, Pa.
    pub mean: f64,
    /// Sum of squared deviations from the mean, Pa^2.
    pub m2: f64,
}

impl SampleMoments {
    /// Moments of `x` (two passes over a run that is already in cache).
    pub fn of(x: &[f64]) -> Self {
        if x.is_empty() {
            return Self::default();
        }
        let mean = sum(x) / x.len() as f64;
        let m2 = sum_sq_dev(x, mean);
        Self { count: x.len(), mean, m2 }
    }

    /// Moments of the union of two runs.
    pub fn merge(self, o: Self) -> Self {
        if self.count == 0 {
            return o;
        }
        if o.count == 0 {
            return self;
        }
        let n = (self.count + o.count) as f64;
        let d = o.mean - self.mean;
        Self {
            count: self.count + o.count,
            mean: self.mean + d * o.count as f64 / n,
            m2: self.m2 + o.m2 + d * d * self.count as f64 * o.count as f64 / n,
        }
    }

    /// Root-mean-square about the mean (the AC rms), Pa.
    pub fn rms_about_mean(&self) -> f64 {
        if self.count == 0 {
            0.0
        } else {
            (self.m2 / self.count as f64).sqrt()
        }
    }
}

/// Sum with eight independent accumulators (vectorizes; rounding error like pairwise summation
/// of depth 3 plus a sequential sum of length n/8).
pub fn sum(x: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let chunks = x.chunks_exact(8);
    let tail: f64 = chunks.remainder().iter().sum();
    for c in chunks {
        for (a, v) in acc.iter_mut().zip(c) {
            *a += v;
        }
    }
    ((acc[0] + acc[4]) + (acc[1] + acc[5])) + ((acc[2] + acc[6]) + (acc[3] + acc[7])) + tail
}

fn sum_sq_dev(x: &[f64], mean: f64) -> f64 {
    let mut acc = [0.0f64; 8];
    let chunks = x.chunks_exact(8);
    let tail: f64 = chunks.remainder().iter().map(|v| (v - mean) * (v - mean)).sum();
    for c in chunks {
        for (a, v) in acc.iter_mut().zip(c) {
            *a += (v - mean) * (v - mean);
        }
    }
    acc.iter().sum::<f64>() + tail
}

/// Index and value of the first non-finite sample of `x`, if any. The common all-finite case
/// is one vectorized pass.
pub fn first_non_finite(x: &[f64]) -> Option<(usize, f64)> {
    if x.iter().fold(true, |ok, v| ok & v.is_finite()) {
        return None;
    }
    x.iter().enumerate().find(|(_, v)| !v.is_finite()).map(|(i, v)| (i, *v))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interleaved_and_planar_i16_read_alike() {
        let frames: [[i16; 2]; 3] = [[1, -1], [2, -2], [3, -3]];
        let inter: Vec<u8> = frames.iter().flatten().flat_map(|v| v.to_le_bytes()).collect();
        let planar: Vec<u8> =
            (0..2).flat_map(|c| frames.iter().map(move |f| f[c])).flat_map(|v| v.to_le_bytes()).collect();
        let a = Recording::from_bytes(inter.into(), Format::I16, Layout::Interleaved, 2, 0.5).unwrap();
        let b = Recording::from_bytes(planar.into(), Format::I16, Layout::Planar, 2, 0.5).unwrap();
        for c in 0..2 {
            assert_eq!(a.channel(c).to_vec(), b.channel(c).to_vec());
        }
        assert_eq!(a.channel(1).to_vec(), vec![-0.5, -1.0, -1.5]);
        // A run from the middle, and a run past the end.
        let mut out = [0.0; 4];
        assert_eq!(a.channel(1).read(1, &mut out), 2);
        assert_eq!(out[..2], [-1.0, -1.5]);
    }

    #[test]
    fn every_format_reads_its_values() {
        let v = [-2.5f64, 0.0, 1.25, 100.0];
        let cases: [(Format, Vec<u8>); 4] = [
            (Format::F32, v.iter().flat_map(|x| (*x as f32).to_le_bytes()).collect()),
            (Format::F64, v.iter().flat_map(|x| x.to_le_bytes()).collect()),
            (Format::I16, [-2i16, 0, 1, 100].iter().flat_map(|x| x.to_le_bytes()).collect()),
            (Format::I32, [-2i32, 0, 1, 100].iter().flat_map(|x| x.to_le_bytes()).collect()),
        ];
        for (f, b) in cases {
            let r = Recording::from_bytes(b.into(), f, Layout::Interleaved, 1, 2.0).unwrap();
            let got = r.channel(0).to_vec();
            let want: Vec<f64> = match f {
                Format::F32 | Format::F64 => v.iter().map(|x| x * 2.0).collect(),
                _ => vec![-4.0, 0.0, 2.0, 200.0],
            };
            assert_eq!(got, want, "{f:?}");
        }
        let r = Recording::from_values(vec![1.0, 10.0, 2.0, 20.0], Layout::Interleaved, 2, 3.0).unwrap();
        assert_eq!(r.channel(1).to_vec(), vec![30.0, 60.0]);
    }

    #[test]
    fn blocks_of_frames_read_like_one_buffer() {
        // Three channels of i32, sent in blocks of 1, 4 and 2 frames.
        let frames: Vec<[i32; 3]> = (0..7).map(|i| [i, 100 + i, -i]).collect();
        let bytes: Vec<u8> = frames.iter().flatten().flat_map(|v| v.to_le_bytes()).collect();
        let whole =
            Recording::from_bytes(bytes.clone().into(), Format::I32, Layout::Interleaved, 3, 1.0).unwrap();
        let mut grown = Recording::stream(Format::I32, 3, 1.0);
        for (a, b) in [(0, 1), (1, 5), (5, 7)] {
            grown.push_block(Bytes::copy_from_slice(&bytes[a * 12..b * 12])).unwrap();
        }
        assert_eq!(grown.len(), 7);
        for c in 0..3 {
            assert_eq!(grown.channel(c).to_vec(), whole.channel(c).to_vec());
            let mut out = [0.0; 3];
            grown.channel(c).read(3, &mut out);
            assert_eq!(out.to_vec(), whole.channel(c).to_vec()[3..6].to_vec());
        }
        assert!(grown.push_block(Bytes::from_static(&[0u8; 8])).is_err(), "not a whole frame");
    }

    #[test]
    fn blocks_let_go_leave_the_rest_readable_and_their_clipping_counted() {
        // Two channels of i16 in blocks of 2, 3 and 2 frames; channel 0 at full scale in
        // frames 1 and 5 (one in a block let go, one kept).
        let frames: Vec<[i16; 2]> =
            (0..7).map(|i| [if i == 1 || i == 5 { i16::MAX } else { i as i16 }, -(i as i16)]).collect();
        let bytes: Vec<u8> = frames.iter().flatten().flat_map(|v| v.to_le_bytes()).collect();
        let mut grown = Recording::stream(Format::I16, 2, 0.5);
        for (a, b) in [(0, 2), (2, 5), (5, 7)] {
            grown.push_block(Bytes::copy_from_slice(&bytes[a * 4..b * 4])).unwrap();
        }
        let before = grown.clipped(0);
        assert_eq!(grown.release_before(1), 0, "the first block ends after frame 1");
        assert_eq!(grown.release_before(4), 8, "the first block (2 frames x 2 channels x 2 bytes)");
        assert_eq!((grown.held_from(), grown.held_bytes(), grown.len()), (2, 20, 7));
        assert_eq!(grown.clipped(0), before);
        assert_eq!(before.map(|(n, _)| n), Some(2));
        let mut out = [0.0; 5];
        assert_eq!(grown.channel(1).read(2, &mut out), 5);
        assert_eq!(out, [-1.0, -1.5, -2.0, -2.5, -3.0]);
        assert_eq!(grown.release_before(7), 20);
        assert_eq!((grown.held_from(), grown.held_bytes()), (7, 0));
        assert_eq!(grown.clipped(0), before);
        grown.push_block(Bytes::copy_from_slice(&bytes[..4])).unwrap();
        assert_eq!(grown.len(), 8);
        let mut one = [0.0; 1];
        grown.channel(0).read(7, &mut one);
        assert_eq!(one, [0.0]);
    }

    #[test]
    fn ragged_input_and_non_finite_samples_are_named() {
        assert!(matches!(
            Recording::from_bytes(Bytes::from_static(&[0u8; 7]), Format::F32, Layout::Interleaved, 1, 1.0),
            Err(DecodeError::Ragged { .. })
        ));
        let e = Recording::from_values(vec![1.0, 2.0, 3.0], Layout::Interleaved, 2, 1.0).unwrap_err();
        assert!(matches!(e, DecodeError::Ragged { .. }));
        let x = [1.0, 2.0, f64::NAN, f64::INFINITY];
        assert_eq!(first_non_finite(&x).map(|p| p.0), Some(2));
        assert_eq!(first_non_finite(&x[..2]), None);
    }

    #[test]
    fn merged_moments_equal_moments_of_the_whole() {
        let x: Vec<f64> = (0..1001).map(|i| 1e3 + ((i * 37) % 101) as f64 * 0.01).collect();
        let whole = SampleMoments::of(&x);
        let parts = SampleMoments::of(&x[..333])
            .merge(SampleMoments::of(&x[333..800]))
            .merge(SampleMoments::of(&x[800..]));
        assert_eq!(parts.count, whole.count);
        assert!((parts.mean - whole.mean).abs() < 1e-12);
        assert!((parts.m2 / whole.m2 - 1.0).abs() < 1e-12);
        // Direct two-pass definition.
        let m = x.iter().sum::<f64>() / x.len() as f64;
        let rms = (x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / x.len() as f64).sqrt();
        assert!((whole.rms_about_mean() / rms - 1.0).abs() < 1e-12);
        assert!((sum(&x) / x.iter().sum::<f64>() - 1.0).abs() < 1e-15);
    }
}
