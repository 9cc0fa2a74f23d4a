//! Level corrections (microphone response curves, distance, atmospheric absorption): the
//! proto message validated into one [`ChannelCorrection`] per channel.

use super::*;
use crate::dsp::corrections::{Atmosphere, ChannelCorrection, DistanceCorrection, ResponseCurve};

/// Allowed curve frequency, Hz.
const CURVE_HZ: Bounds = Bounds::open_closed(0.0, 1e7, "Hz");
/// Allowed correction, dB.
const CURVE_DB: Bounds = Bounds::closed(-60.0, 60.0, "dB");
/// Allowed distances, m.
const DISTANCE: Bounds = Bounds::open_closed(0.0, 1e4, "m");
/// Allowed air temperature, K (-50 to +60 C).
const AIR_T: Bounds = Bounds::closed(223.15, 333.15, "K");
/// Allowed relative humidity, percent.
const RH: Bounds = Bounds::closed(0.0, 100.0, "%");
/// Most curves per channel.
const MAX_CURVES: usize = 8;
/// Most points per curve.
const MAX_POINTS: usize = 4096;
/// Longest curve name, characters.
const MAX_NAME: usize = 64;

fn curve(check: &mut Check, p: &str, c: pb::ResponseCurve) -> Option<ResponseCurve> {
    let pb::ResponseCurve { name, frequencies_hz, corrections_db } = c;
    let before = check.count();
    if name.chars().count() > MAX_NAME {
        check.other(format!("{p}.name"), format!("{p}.name has more than {MAX_NAME} characters"));
    }
    let n = frequencies_hz.len();
    if n == 0 || n > MAX_POINTS || corrections_db.len() != n {
        check.other(
            format!("{p}.frequencies_hz"),
            format!(
                "{p} has {n} frequencies and {} corrections: give 1 to {MAX_POINTS} of each, as many of one as of \
                 the other",
                corrections_db.len()
            ),
        );
        return None;
    }
    for (i, (&f, &db)) in frequencies_hz.iter().zip(&corrections_db).enumerate() {
        check.range(&format!("{p}.frequencies_hz[{i}]"), CURVE_HZ.check("", f));
        check.range(&format!("{p}.corrections_db[{i}]"), CURVE_DB.check("", db));
        if i > 0 && f.partial_cmp(&frequencies_hz[i - 1]) != Some(std::cmp::Ordering::Greater) {
            check.other(
                format!("{p}.frequencies_hz[{i}]"),
                format!(
                    "{p}.frequencies_hz[{i}] = {f} is not above the previous one: frequencies must increase"
                ),
            );
        }
    }
    let name = if name.is_empty() { "unnamed".to_string() } else { name };
    (check.count() == before).then_some(ResponseCurve { name, frequencies_hz, corrections_db })
}

/// One correction per channel (`channels` of them), or an empty list when `c` asks for
/// nothing.
pub(super) fn level_corrections(
    check: &mut Check,
    defaults: &mut Defaults,
    c: Option<pb::LevelCorrections>,
    channels: usize,
) -> Vec<ChannelCorrection> {
    let Some(pb::LevelCorrections { channels: given, reference_distance_m, atmosphere }) = c else {
        return Vec::new();
    };
    let p = "corrections";
    if given.len() != 1 && given.len() != channels {
        check.other(
            format!("{p}.channels"),
            format!(
                "{p}.channels has {} entries for {channels} channels: give one per channel, or one for all",
                given.len()
            ),
        );
        return Vec::new();
    }
    let reference =
        reference_distance_m.and_then(|r| check.range(p, DISTANCE.check("reference_distance_m", r)));
    let air = match atmosphere {
        None => None,
        Some(_) if reference_distance_m.is_none() => {
            check.other(
                format!("{p}.atmosphere"),
                format!("{p}.atmosphere applies over the path to reference_distance_m: set that too"),
            );
            None
        }
        Some(pb::Atmosphere { temperature_k, relative_humidity_percent, pressure_pa }) => {
            let a = format!("{p}.atmosphere");
            let t = check.range(&a, AIR_T.check("temperature_k", temperature_k));
            let rh = check.range(&a, RH.check("relative_humidity_percent", relative_humidity_percent));
            let pa = crate::api::field::Fields::new(check, defaults, &a)
                .read(pressure_pa, &crate::dsp::corrections::ATMOSPHERE_PRESSURE);
            match (t, rh, pa) {
                (Some(temperature_k), Some(relative_humidity_percent), Some(pressure_pa)) => {
                    Some(Atmosphere { temperature_k, relative_humidity_percent, pressure_pa })
                }
                _ => None,
            }
        }
    };
    let mut out = Vec::with_capacity(given.len());
    for (i, ch) in given.into_iter().enumerate() {
        let q = format!("{p}.channels[{i}]");
        if ch.curves.len() > MAX_CURVES {
            check.other(
                format!("{q}.curves"),
                format!("{q}.curves has {} curves; at most {MAX_CURVES}", ch.curves.len()),
            );
            continue;
        }
        let curves: Vec<ResponseCurve> = ch
            .curves
            .into_iter()
            .enumerate()
            .filter_map(|(k, c)| curve(check, &format!("{q}.curves[{k}]"), c))
            .collect();
        let distance = match (ch.distance_m, reference_distance_m) {
            (Some(d), Some(_)) => check.range(&q, DISTANCE.check("distance_m", d)).and_then(|measured_m| {
                reference.map(|reference_m| DistanceCorrection { measured_m, reference_m, atmosphere: air })
            }),
            (None, Some(_)) => {
                check.missing(
                    format!("{q}.distance_m"),
                    "the microphone distance, to correct to reference_distance_m",
                );
                None
            }
            (Some(_), None) => {
                check.other(
                    format!("{q}.distance_m"),
                    format!("{q}.distance_m is used only with {p}.reference_distance_m: set that too"),
                );
                None
            }
            (None, None) => None,
        };
        out.push(ChannelCorrection { curves, distance });
    }
    if out.len() == 1 && channels > 1 {
        out = vec![out[0].clone(); channels];
    }
    out
}

/// The models behind `c`, for the provenance.
pub(super) fn correction_models(c: &[ChannelCorrection]) -> Vec<Model> {
    let mut m = Vec::new();
    if c.iter().any(|c| !c.is_empty()) {
        m.push(models::LEVEL_CORRECTIONS);
    }
    if c.iter().any(|c| c.distance.is_some_and(|d| d.atmosphere.is_some())) {
        m.push(models::ATMOSPHERIC_ABSORPTION);
    }
    m
}
