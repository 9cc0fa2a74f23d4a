//! SpectrumService: samples, Welch and tone options converted to domain types in one step,
//! and the per-channel analysis turned into responses.
//!
//! - `samples`: sample bytes or values, layout, rate and calibration -> [`SampleSet`];
//! - `welch`: segment, window, overlap and detrend -> `WelchConfig`, and Welch errors;
//! - `tones`: tone options and [`ToneQuery`], the per-channel answer;
//! - `bands`: [`BandQuery`] and the band answer;
//! - `stream`: [`ToneStream`], a block stream analysed as it arrives.

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
mod samples;
mod stream;
mod tones;
mod welch;

use bands::band_summary;
pub use bands::{bands_response, BandQuery};
use samples::sample_set_for;
pub use samples::{sample_set, SampleSet};
pub use stream::ToneStream;
use tones::{analysis, caution, tone_query, tones_answer, SPECTRUM_MODELS};
pub use tones::{tones_response, ToneQuery};
pub use welch::RECORDING_TOO_SHORT;
use welch::{welch_config, welch_error};
