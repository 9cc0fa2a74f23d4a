//! SpectrumService: samples, Welch and tone options converted to domain types in one step,
//! and the per-channel analysis turned into responses.
//!
//! - `samples`: sample bytes or values, layout, rate and calibration -> [`SampleSet`];
//! - `welch`: segment, window, overlap and detrend -> `WelchConfig`, and Welch errors;
//! - `tones`: tone options and [`ToneQuery`], the per-channel answer;
//! - `bands`: [`BandQuery`] and the band answer;
//! - `stream`: [`BlockAnalysis`] and [`ToneStream`], a block stream analysed as it arrives;
//! - `cross`, `cross_stream`: [`CrossQuery`] and [`CrossStream`], the cross-channel answer
//!   for one request or a block stream.

use super::error::{ApiError, Check, FieldViolation, PreconditionViolation};
use super::provenance::{provenance, Defaults};
use crate::dsp::bands::{band_levels, BandLevels};
use crate::dsp::samples::{ChannelView, DecodeError, Format, Layout, Recording};
use crate::dsp::tones::{find_tones, match_prediction, ToneConfig, ToneSet};
use crate::dsp::welch::{
    default_segment, segment_for_resolution, Detrend, Psd, WelchAccumulator, WelchConfig, WelchError,
    MAX_SEGMENT, MIN_SEGMENT,
};
use crate::dsp::window::Window;
use crate::dsp::{spl_db, CAUTION_LEVEL_DB};
use crate::physics::bounds::Bounds;
use crate::physics::models::{self, Model};
use jetloop_proto::pb;

/// Most samples in one request, all channels together (2^25).
pub const MAX_TOTAL_SAMPLES: usize = 1 << 25;
/// Most channels in one request.
pub const MAX_CHANNELS: u32 = 64;

use crate::dsp::limits::*;

mod bands;
mod corrections;
mod cross;
mod cross_stream;
mod ramp;
mod ramp_stream;
mod samples;
mod stream;
mod tones;
mod track;
mod welch;

use bands::band_summary;
pub use bands::BandQuery;
use corrections::level_corrections;
pub use cross::CrossQuery;
pub use cross_stream::CrossStream;
pub use ramp::RampQuery;
pub use ramp_stream::RampStream;
pub use samples::{held_bytes, sample_set, sample_width, values_in, SampleSet};
use samples::{sample_set_for, samples_and_known};
pub use stream::{BlockAnalysis, ToneStream};
pub use tones::ToneQuery;
use tones::{analysis, caution, tone_query, tones_message, SPECTRUM_MODELS};
pub use track::TrackSession;
pub use welch::RECORDING_TOO_SHORT;
use welch::{welch_config, welch_error};

#[cfg(test)]
mod tests {
    use super::*;
    use crate::api::error::FieldViolation;

    /// A request of `n` packed values of a 1 kHz sine at 51.2 kHz, in pascals.
    fn request(n: usize, welch: Option<pb::WelchOptions>) -> pb::ExtractTonesRequest {
        let values =
            (0..n).map(|i| (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / 51_200.0).sin()).collect();
        pb::ExtractTonesRequest {
            samples: Some(pb::Samples {
                sample_rate_hz: 51_200.0,
                channel_count: 1,
                data: Some(pb::samples::Data::Values(pb::SampleValues { values })),
                calibration: Some(pb::Calibration {
                    scale: Some(pb::calibration::Scale::PascalsPerUnit(1.0)),
                }),
                ..Default::default()
            }),
            welch,
            ..Default::default()
        }
    }

    fn fields(e: ApiError) -> Vec<String> {
        match e {
            ApiError::Invalid(v) => v.into_iter().map(|FieldViolation { field, .. }| field).collect(),
            other => panic!("expected INVALID_ARGUMENT, got {other:?}"),
        }
    }

    #[test]
    fn a_tiny_resolution_is_an_argument_error_not_a_wrapped_segment() {
        // Regression: fs / resolution overflowed a power-of-two computation.
        let w = |r| {
            Some(pb::WelchOptions {
                segment: Some(pb::welch_options::Segment::ResolutionHz(r)),
                ..Default::default()
            })
        };
        let e = ToneQuery::try_from(request(100_000, w(1e-300))).unwrap_err();
        assert_eq!(fields(e), ["welch.resolution_hz"]);
        // 51200 / 25 = 2048 samples: accepted.
        assert!(ToneQuery::try_from(request(100_000, w(25.0))).is_ok());
    }

    #[test]
    fn default_welch_settings_are_recorded_and_bad_enums_named() {
        let q = ToneQuery::try_from(request(100_000, None)).unwrap();
        let recorded: Vec<&str> = q.defaults.0.iter().map(|d| d.field.as_str()).collect();
        for f in ["welch.window", "welch.segment_length", "welch.overlap_fraction"] {
            assert!(recorded.contains(&f), "{f} in {recorded:?}");
        }
        let bad = Some(pb::WelchOptions { window: 99, detrend: 7, ..Default::default() });
        let e = ToneQuery::try_from(request(100_000, bad)).unwrap_err();
        assert_eq!(fields(e), ["welch.window", "welch.detrend"]);
    }

    #[test]
    fn too_few_samples_for_one_segment_name_the_samples() {
        let e = ToneQuery::try_from(request(10, None)).unwrap_err();
        assert_eq!(fields(e), ["samples"]);
    }
}
