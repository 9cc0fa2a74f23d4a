//! Recording messages shared by the end-to-end tests and the benchmarks: samples (values or raw
//! bytes) with their calibration, Welch options, the messages of a block stream
//! (ExtractTonesStream) and of a tracking stream (TrackTones), and microphone rings.

use bytes::Bytes;
use jetloop_proto::pb;

/// The explicit "samples already in pascals" calibration (the API assumes no unit).
pub fn in_pascals() -> Option<pb::Calibration> {
    Some(pb::Calibration { scale: Some(pb::calibration::Scale::InPascals(true)) })
}

/// A calibration of `k` pascals per unit of the samples (a microphone's sensitivity, counts or
/// volts to pascals).
pub fn pascals_per_unit(k: f64) -> pb::Calibration {
    pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(k)) }
}

/// Samples sent as values already in pascals: one channel of `values` at `fs` Hz (more
/// channels: `values` interleaved frame by frame and `channels` set on the result).
pub fn pascals(values: Vec<f64>, fs: f64) -> pb::Samples {
    pb::Samples {
        sample_rate_hz: fs,
        data: Some(pb::samples::Data::Values(pb::SampleValues { values })),
        calibration: in_pascals(),
        ..Default::default()
    }
}

/// Samples sent as raw little-endian bytes `data` in `format`, `channels` interleaved channels
/// (0: unset, one channel) at `fs` Hz, read through `calibration` (none: unset).
pub fn raw(
    data: impl Into<Bytes>,
    format: pb::SampleFormat,
    fs: f64,
    channels: u32,
    calibration: Option<pb::Calibration>,
) -> pb::Samples {
    pb::Samples {
        sample_rate_hz: fs,
        channel_count: channels,
        data: Some(pb::samples::Data::Raw(pb::RawSamples { data: data.into(), format: format as i32 })),
        calibration,
        ..Default::default()
    }
}

/// Samples sent as raw little-endian f32 `frames` of `channels` channels at `fs` Hz, already in
/// pascals (a DAQ's native float dump).
pub fn f32_pascals(frames: impl Into<Bytes>, fs: f64, channels: u32) -> pb::Samples {
    raw(frames, pb::SampleFormat::F32Le, fs, channels, in_pascals())
}

/// An ExtractTones request for `samples` with every option left to the server.
pub fn tones_request(samples: pb::Samples) -> pb::ExtractTonesRequest {
    pb::ExtractTonesRequest { samples: Some(samples), ..Default::default() }
}

/// Welch options with segments of `length` samples, every other setting left to the server.
pub fn welch_segment(length: u32) -> pb::WelchOptions {
    pb::WelchOptions {
        segment: Some(pb::welch_options::Segment::SegmentLength(length)),
        ..Default::default()
    }
}

/// The first message of a block stream (ExtractTonesStream): the question, with the first
/// frames (if any) in its samples.
pub fn opening_block(request: pb::ExtractTonesRequest) -> pb::SampleBlock {
    pb::SampleBlock { request: Some(request), ..Default::default() }
}

/// A later message of a block stream: raw `frames` in the opening message's format.
pub fn frames_block(frames: impl Into<Bytes>) -> pb::SampleBlock {
    pb::SampleBlock { frames: frames.into(), ..Default::default() }
}

/// The first message of a tracking stream (TrackTones): its configuration.
pub fn track_start(config: pb::TrackConfig) -> pb::TrackRequest {
    pb::TrackRequest { item: Some(pb::track_request::Item::Config(config)) }
}

/// A later message of a tracking stream: raw `frames` in the configuration's format.
pub fn track_frames(frames: impl Into<Bytes>) -> pb::TrackRequest {
    pb::TrackRequest { item: Some(pb::track_request::Item::Frames(frames.into())) }
}

/// `m` microphones equally spaced on a ring, microphone j at azimuth 360 j / m degrees; polar
/// angle and distance unset.
pub fn ring_positions(m: usize) -> Vec<pb::MicrophonePosition> {
    (0..m)
        .map(|j| pb::MicrophonePosition {
            azimuth_deg: 360.0 * j as f64 / m as f64,
            polar_angle_deg: None,
            distance_m: None,
        })
        .collect()
}

/// The messages of a block stream sent as a DAQ acquires them: `first`, then `count - 1`
/// copies of `later`, one every `pause` (a recording streamed at its pace).
pub fn paced<M: Clone + Send + 'static>(
    first: M,
    later: M,
    count: usize,
    pause: std::time::Duration,
) -> impl tokio_stream::Stream<Item = M> + Send + 'static {
    let rest =
        tokio_stream::StreamExt::throttle(tokio_stream::iter((1..count).map(move |_| later.clone())), pause);
    tokio_stream::StreamExt::chain(tokio_stream::iter([first]), rest)
}
