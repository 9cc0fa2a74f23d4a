//! Raw little-endian binary recordings.

use jetloop_proto::pb;

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

#[cfg(test)]
mod tests {
    //! Raw bytes -> messages, without a server.

    use super::*;

    fn cal() -> pb::Calibration {
        pb::Calibration { scale: Some(pb::calibration::Scale::PascalsPerUnit(2000.0)) }
    }

    #[test]
    fn raw_bytes_are_sent_as_they_are_with_their_format_and_layout() {
        let s = raw(vec![0; 16], 102_400.0, pb::SampleFormat::I16Le, 4, pb::ChannelLayout::Planar, cal());
        assert_eq!((s.sample_rate_hz, s.channel_count), (102_400.0, 4));
        assert_eq!(s.layout, pb::ChannelLayout::Planar as i32);
        let Some(pb::samples::Data::Raw(r)) = s.data else { panic!("{:?}", s.data) };
        assert_eq!((r.format, r.data.len()), (pb::SampleFormat::I16Le as i32, 16));
    }
}
