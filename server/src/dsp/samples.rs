//! Decoding of calibrated microphone samples from the byte layouts a DAQ writes.
//!
//! Bytes are little-endian f32, f64, i16 or i32, interleaved (frame by frame) or planar
//! (channel after channel). Decoding writes straight into one preallocated buffer per channel
//! (no allocation per sample) and multiplies by the calibration factor to pascals.

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

/// Why samples could not be decoded.
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
    /// A sample is NaN or infinite.
    #[error("sample {index} of channel {channel} is not a finite number ({value})")]
    NotFinite {
        /// Channel index.
        channel: usize,
        /// Sample index within the channel.
        index: usize,
        /// The value.
        value: f64,
    },
}

/// Samples of every channel in pascals, one vector per channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Channels {
    /// Per-channel samples, Pa.
    pub data: Vec<Vec<f64>>,
}

impl Channels {
    /// Samples per channel.
    pub fn len(&self) -> usize {
        self.data.first().map_or(0, Vec::len)
    }

    /// True when there are no samples.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

fn check_finite(data: &[Vec<f64>]) -> Result<(), DecodeError> {
    for (c, ch) in data.iter().enumerate() {
        if let Some((i, v)) = ch.iter().enumerate().find(|(_, v)| !v.is_finite()) {
            return Err(DecodeError::NotFinite { channel: c, index: i, value: *v });
        }
    }
    Ok(())
}

/// Decodes `bytes` of `channels` channels and multiplies by `scale_pa` (pascals per unit).
///
/// # Errors
/// [`DecodeError`] for a ragged byte count or a non-finite sample.
pub fn decode_bytes(
    bytes: &[u8],
    format: Format,
    layout: Layout,
    channels: usize,
    scale_pa: f64,
) -> Result<Channels, DecodeError> {
    let w = format.width();
    let frame = w * channels;
    if channels == 0 || bytes.len() % frame != 0 {
        return Err(DecodeError::Ragged { bytes: bytes.len(), channels, width: w });
    }
    let n = bytes.len() / frame;
    if n == 0 {
        return Ok(Channels { data: vec![Vec::new(); channels] });
    }
    let data: Vec<Vec<f64>> = match format {
        Format::F32 => split(
            bytes,
            layout,
            channels,
            n,
            4,
            |b| f64::from(f32::from_le_bytes([b[0], b[1], b[2], b[3]])),
            scale_pa,
        ),
        Format::F64 => split(
            bytes,
            layout,
            channels,
            n,
            8,
            |b| f64::from_le_bytes([b[0], b[1], b[2], b[3], b[4], b[5], b[6], b[7]]),
            scale_pa,
        ),
        Format::I16 => {
            split(bytes, layout, channels, n, 2, |b| f64::from(i16::from_le_bytes([b[0], b[1]])), scale_pa)
        }
        Format::I32 => split(
            bytes,
            layout,
            channels,
            n,
            4,
            |b| f64::from(i32::from_le_bytes([b[0], b[1], b[2], b[3]])),
            scale_pa,
        ),
    };
    check_finite(&data)?;
    Ok(Channels { data })
}

/// One monomorphized decoding loop per format: each channel is filled with `extend` over exact
/// chunks, which the compiler vectorizes.
fn split(
    bytes: &[u8],
    layout: Layout,
    channels: usize,
    n: usize,
    w: usize,
    read: impl Fn(&[u8]) -> f64 + Copy,
    scale: f64,
) -> Vec<Vec<f64>> {
    match layout {
        Layout::Planar => {
            bytes.chunks_exact(n * w).map(|b| b.chunks_exact(w).map(|s| read(s) * scale).collect()).collect()
        }
        Layout::Interleaved if channels == 1 => {
            vec![bytes.chunks_exact(w).map(|s| read(s) * scale).collect()]
        }
        Layout::Interleaved => (0..channels)
            .map(|c| bytes.chunks_exact(w * channels).map(|f| read(&f[c * w..c * w + w]) * scale).collect())
            .collect(),
    }
}

/// Splits packed values of `channels` channels and multiplies by `scale_pa`.
///
/// # Errors
/// [`DecodeError`] for a ragged count or a non-finite sample.
pub fn decode_values(
    values: &[f64],
    layout: Layout,
    channels: usize,
    scale_pa: f64,
) -> Result<Channels, DecodeError> {
    if channels == 0 || values.len() % channels != 0 {
        return Err(DecodeError::Ragged { bytes: values.len() * 8, channels, width: 8 });
    }
    let n = values.len() / channels;
    let data: Vec<Vec<f64>> = match layout {
        Layout::Interleaved => (0..channels)
            .map(|c| values.iter().skip(c).step_by(channels).map(|v| v * scale_pa).collect())
            .collect(),
        Layout::Planar => {
            values.chunks_exact(n.max(1)).map(|b| b.iter().map(|v| v * scale_pa).collect()).collect()
        }
    };
    check_finite(&data)?;
    Ok(Channels { data })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interleaved_and_planar_i16_decode_alike() {
        let frames: [[i16; 2]; 3] = [[1, -1], [2, -2], [3, -3]];
        let inter: Vec<u8> = frames.iter().flatten().flat_map(|v| v.to_le_bytes()).collect();
        let planar: Vec<u8> =
            (0..2).flat_map(|c| frames.iter().map(move |f| f[c])).flat_map(|v| v.to_le_bytes()).collect();
        let a = decode_bytes(&inter, Format::I16, Layout::Interleaved, 2, 0.5).unwrap();
        let b = decode_bytes(&planar, Format::I16, Layout::Planar, 2, 0.5).unwrap();
        assert_eq!(a, b);
        assert_eq!(a.data[1], vec![-0.5, -1.0, -1.5]);
    }

    #[test]
    fn bad_bytes_are_named() {
        assert!(matches!(
            decode_bytes(&[0u8; 7], Format::F32, Layout::Interleaved, 1, 1.0),
            Err(DecodeError::Ragged { .. })
        ));
        let nan: Vec<u8> = [1.0f32, f32::NAN].iter().flat_map(|v| v.to_le_bytes()).collect();
        assert!(matches!(
            decode_bytes(&nan, Format::F32, Layout::Interleaved, 1, 1.0),
            Err(DecodeError::NotFinite { channel: 0, index: 1, .. })
        ));
        let e = decode_values(&[1.0, 2.0, 3.0], Layout::Interleaved, 2, 1.0).unwrap_err();
        assert!(matches!(e, DecodeError::Ragged { .. }));
    }
}
