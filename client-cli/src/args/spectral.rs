//! Argument groups of the spectral commands: Welch options, level corrections (response
//! curve, distance, air absorption) and microphone positions on a ring.

use crate::failure::Failure;
use crate::readers::read_curve;
use clap::Args;
use clap::ValueEnum;
use jetloop_proto::pb;
use std::path::PathBuf;

/// Windows on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum WindowArg {
    /// Hann (default).
    Hann,
    /// Hamming.
    Hamming,
    /// 4-term Blackman-Harris.
    BlackmanHarris,
    /// 5-term flat-top.
    FlatTop,
}

/// Welch options.
#[derive(Debug, Args)]
pub struct WelchArgs {
    /// Window (server default Hann).
    #[arg(long, value_enum)]
    pub(crate) window: Option<WindowArg>,
    /// Segment length in samples.
    #[arg(long, conflicts_with = "resolution_hz")]
    pub(crate) segment: Option<u32>,
    /// Wanted frequency resolution in Hz (the segment is the next power of two).
    #[arg(long)]
    pub(crate) resolution_hz: Option<f64>,
    /// Overlap fraction (server default 0.5).
    #[arg(long)]
    pub(crate) overlap: Option<f64>,
}

impl WelchArgs {
    /// The Welch options message; options not given are left for the server to choose.
    pub fn options(&self) -> pb::WelchOptions {
        use pb::welch_options::Segment;
        pb::WelchOptions {
            window: match self.window {
                None => pb::WindowKind::Unspecified,
                Some(WindowArg::Hann) => pb::WindowKind::Hann,
                Some(WindowArg::Hamming) => pb::WindowKind::Hamming,
                Some(WindowArg::BlackmanHarris) => pb::WindowKind::BlackmanHarris,
                Some(WindowArg::FlatTop) => pb::WindowKind::FlatTop,
            } as i32,
            segment: match (self.segment, self.resolution_hz) {
                (Some(n), _) => Some(Segment::SegmentLength(n)),
                (None, Some(r)) => Some(Segment::ResolutionHz(r)),
                _ => None,
            },
            overlap_fraction: self.overlap,
            detrend: 0,
        }
    }
}

/// Level corrections: microphone response curves, distance and atmospheric absorption.
#[derive(Debug, Args)]
pub struct CorrectionArgs {
    /// A response correction curve applied to every channel (free-field or pressure response,
    /// protective grid, ...): CSV with a header row and columns frequency_hz,correction_db; the
    /// correction is added to the measured level. Repeat for several curves (they add up).
    #[arg(long)]
    pub(crate) response_curve: Vec<PathBuf>,
    /// Microphone distance from the source in m: one value for every channel, or one per
    /// channel, comma separated (with --reference-distance-m).
    #[arg(long, value_delimiter = ',', requires = "reference_distance_m")]
    pub(crate) mic_distance_m: Vec<f64>,
    /// Correct levels to this distance in m by spherical spreading 20 log10(r / r_ref).
    #[arg(long, requires = "mic_distance_m")]
    pub(crate) reference_distance_m: Option<f64>,
    /// Also correct for atmospheric absorption (ISO 9613-1) over r - r_ref: air temperature
    /// in K (with --relative-humidity-percent).
    #[arg(long, requires_all = ["relative_humidity_percent", "reference_distance_m"])]
    pub(crate) air_temperature_k: Option<f64>,
    /// Relative humidity in percent, for the absorption.
    #[arg(long, requires = "air_temperature_k")]
    pub(crate) relative_humidity_percent: Option<f64>,
    /// Atmospheric pressure in Pa, for the absorption (server default 101325).
    #[arg(long, requires = "air_temperature_k")]
    pub(crate) air_pressure_pa: Option<f64>,
}

impl CorrectionArgs {
    /// The corrections message (one channel correction per --mic-distance-m value, each
    /// with every response curve), or none when no option was given.
    ///
    /// # Errors
    /// [`Failure::Usage`] when a response curve file cannot be read.
    pub fn corrections(&self) -> Result<Option<pb::LevelCorrections>, Failure> {
        if self.response_curve.is_empty() && self.reference_distance_m.is_none() {
            return Ok(None);
        }
        let curves = self.response_curve.iter().map(|p| read_curve(p)).collect::<Result<Vec<_>, _>>()?;
        let distances: Vec<Option<f64>> = if self.mic_distance_m.is_empty() {
            vec![None]
        } else {
            self.mic_distance_m.iter().map(|d| Some(*d)).collect()
        };
        Ok(Some(pb::LevelCorrections {
            channels: distances
                .into_iter()
                .map(|distance_m| pb::ChannelCorrection { curves: curves.clone(), distance_m })
                .collect(),
            reference_distance_m: self.reference_distance_m,
            atmosphere: self.air_temperature_k.map(|t| pb::Atmosphere {
                temperature_k: t,
                relative_humidity_percent: self.relative_humidity_percent.unwrap_or_default(),
                pressure_pa: self.air_pressure_pa,
            }),
        }))
    }
}

/// `corrections` with each channel's own response curve (a calibration file's
/// `response_curve`) added after the curves common to all channels; unchanged when no channel
/// has one. The distance of each channel is kept.
pub(crate) fn with_channel_curves(
    corrections: Option<pb::LevelCorrections>,
    curves: &[Vec<pb::ResponseCurve>],
) -> Option<pb::LevelCorrections> {
    if curves.is_empty() {
        return corrections;
    }
    let mut c = corrections.unwrap_or_default();
    let base = std::mem::take(&mut c.channels);
    c.channels = curves
        .iter()
        .enumerate()
        .map(|(k, own)| {
            // One common correction applies to every channel; otherwise each has its own.
            let common = base.get(k).or(base.first()).cloned().unwrap_or_default();
            pb::ChannelCorrection {
                curves: common.curves.into_iter().chain(own.iter().cloned()).collect(),
                distance_m: common.distance_m,
            }
        })
        .collect();
    Some(c)
}

/// Microphone positions from azimuths alone (degrees); polar angle and distance unset.
pub(crate) fn positions(azimuths_deg: &[f64]) -> Vec<pb::MicrophonePosition> {
    azimuths_deg
        .iter()
        .map(|&azimuth_deg| pb::MicrophonePosition { azimuth_deg, polar_angle_deg: None, distance_m: None })
        .collect()
}

#[cfg(test)]
mod tests {
    //! Arguments -> request parts, without a server.

    use super::*;
    use clap::Parser;

    #[derive(Debug, Parser)]
    struct Spectral {
        #[command(flatten)]
        welch: WelchArgs,
        #[command(flatten)]
        corrections: CorrectionArgs,
    }

    fn parse(args: &str) -> Spectral {
        Spectral::try_parse_from(std::iter::once("t").chain(args.split_whitespace())).expect("parses")
    }

    #[test]
    fn welch_flags_set_window_segment_and_overlap_and_unset_ones_stay_unset() {
        let o = parse("--window flat-top --segment 8192 --overlap 0.75").welch.options();
        assert_eq!(o.window, pb::WindowKind::FlatTop as i32);
        assert_eq!(o.segment, Some(pb::welch_options::Segment::SegmentLength(8192)));
        assert_eq!(o.overlap_fraction, Some(0.75));
        let o = parse("--resolution-hz 5").welch.options();
        assert_eq!(o.window, pb::WindowKind::Unspecified as i32, "the server chooses (and records) it");
        assert_eq!(o.segment, Some(pb::welch_options::Segment::ResolutionHz(5.0)));
        assert_eq!(o.overlap_fraction, None);
    }

    #[test]
    fn each_channel_curve_follows_the_common_ones() {
        let curve = |f: f64| pb::ResponseCurve {
            frequencies_hz: vec![f],
            corrections_db: vec![1.0],
            ..Default::default()
        };
        assert_eq!(with_channel_curves(None, &[]), None);
        let common = pb::LevelCorrections {
            channels: vec![pb::ChannelCorrection { curves: vec![curve(1.0)], distance_m: Some(2.0) }],
            reference_distance_m: Some(1.0),
            atmosphere: None,
        };
        let c =
            with_channel_curves(Some(common), &[vec![curve(2.0)], vec![], vec![curve(3.0)]]).expect("some");
        assert_eq!(c.channels.len(), 3);
        assert_eq!(c.channels[0].curves, vec![curve(1.0), curve(2.0)]);
        assert_eq!(c.channels[1].curves, vec![curve(1.0)]);
        assert_eq!(c.channels[2].curves, vec![curve(1.0), curve(3.0)]);
        assert!(
            c.channels.iter().all(|ch| ch.distance_m == Some(2.0)) && c.reference_distance_m == Some(1.0)
        );
        let c = with_channel_curves(None, &[vec![curve(2.0)], vec![]]).expect("some");
        assert_eq!((c.channels[0].curves.len(), c.channels[1].curves.len()), (1, 0));
    }

    #[test]
    fn distances_per_channel_and_absorption_make_one_correction_per_channel() {
        let c = parse("--mic-distance-m 2,2.5 --reference-distance-m 1 --air-temperature-k 293.15 --relative-humidity-percent 50")
            .corrections
            .corrections()
            .expect("corrections")
            .expect("some");
        assert_eq!(c.channels.iter().map(|x| x.distance_m).collect::<Vec<_>>(), vec![Some(2.0), Some(2.5)]);
        assert_eq!(c.reference_distance_m, Some(1.0));
        let a = c.atmosphere.expect("atmosphere");
        assert_eq!((a.temperature_k, a.relative_humidity_percent, a.pressure_pa), (293.15, 50.0, None));
        assert!(parse("").corrections.corrections().expect("none").is_none());
    }

    #[test]
    fn azimuths_become_positions_with_nothing_else_assumed() {
        let p = positions(&[0.0, 45.0]);
        assert_eq!(p.len(), 2);
        assert_eq!(p[1].azimuth_deg, 45.0);
        assert!(p[1].polar_angle_deg.is_none() && p[1].distance_m.is_none());
    }
}
