//! Welch settings from the request, and Welch errors as API errors.

use super::*;
use crate::api::field::Fields;

/// Kind of the precondition failure for a recording shorter than one Welch segment.
pub const RECORDING_TOO_SHORT: &str = "RECORDING_TOO_SHORT";

/// The API error for a Welch error about the samples at `field`. Segment and overlap choices
/// have already been checked in the conversion, so only a recording too short for one segment
/// and a non-finite sample remain reachable; every variant is mapped by name.
pub(super) fn welch_error(e: WelchError, field: &str) -> ApiError {
    let description = e.to_string();
    match e {
        WelchError::TooShort { .. } => {
            ApiError::Precondition(PreconditionViolation::new(RECORDING_TOO_SHORT, field, description))
        }
        WelchError::NotFinite { .. } => ApiError::Invalid(vec![FieldViolation {
            field: field.into(),
            description: format!("{field}: {description}"),
        }]),
        WelchError::Stopped => ApiError::Stopped(crate::cancel::Stopped),
        WelchError::SegmentLength(_) | WelchError::Overlap { .. } => {
            ApiError::Invalid(vec![FieldViolation {
                field: "welch".into(),
                description: format!("welch: {description}"),
            }])
        }
    }
}

/// Welch settings before the data length is known.
pub(super) fn welch_config(
    check: &mut Check,
    defaults: &mut Defaults,
    o: Option<pb::WelchOptions>,
    fs: f64,
    samples: usize,
) -> Option<WelchConfig> {
    use pb::welch_options::Segment;
    let pb::WelchOptions { window, segment, overlap_fraction, detrend } = o.unwrap_or_default();
    let window = match pb::WindowKind::try_from(window) {
        Ok(pb::WindowKind::Unspecified) => {
            defaults.note("welch.window", "Hann", "the usual window for tone analysis");
            Some(Window::Hann)
        }
        Ok(pb::WindowKind::Hann) => Some(Window::Hann),
        Ok(pb::WindowKind::Hamming) => Some(Window::Hamming),
        Ok(pb::WindowKind::BlackmanHarris) => Some(Window::BlackmanHarris),
        Ok(pb::WindowKind::FlatTop) => Some(Window::FlatTop),
        Err(_) => {
            check
                .other("welch.window", format!("welch.window = {window} is not a WindowKind value (0 to 4)"));
            None
        }
    };
    let detrend = match pb::DetrendKind::try_from(detrend) {
        Ok(pb::DetrendKind::Unspecified) => {
            let (d, why) = WelchConfig::DETREND;
            defaults.note("welch.detrend", d.name(), why);
            Some(d)
        }
        Ok(pb::DetrendKind::Mean) => Some(Detrend::Mean),
        Ok(pb::DetrendKind::None) => Some(Detrend::None),
        Err(_) => {
            check.other(
                "welch.detrend",
                format!("welch.detrend = {detrend} is not a DetrendKind value (0 to 2)"),
            );
            None
        }
    };
    let span = if samples == usize::MAX {
        format!("[{MIN_SEGMENT}, {MAX_SEGMENT}] samples")
    } else {
        format!("[{MIN_SEGMENT}, {}] samples (the data has {samples} per channel)", MAX_SEGMENT.min(samples))
    };
    let nperseg = match segment {
        Some(Segment::SegmentLength(n)) => {
            let n = n as usize;
            if !(MIN_SEGMENT..=MAX_SEGMENT).contains(&n) || n > samples {
                check.other(
                    "welch.segment_length",
                    format!("welch.segment_length = {n} is outside the allowed range {span}"),
                );
                None
            } else {
                Some(n)
            }
        }
        Some(Segment::ResolutionHz(r)) => {
            match check.range("welch", Bounds::open_closed(0.0, fs, "Hz").check("resolution_hz", r)) {
                None => None,
                Some(r) => match segment_for_resolution(fs, r) {
                    Some(n) if n <= samples => Some(n),
                    n => {
                        let need = n.map_or(format!("more than {MAX_SEGMENT}"), |n| n.to_string());
                        check.other(
                            "welch.resolution_hz",
                            format!(
                                "welch.resolution_hz = {r} needs segments of {need} samples, outside \
                                 the allowed range {span}"
                            ),
                        );
                        None
                    }
                },
            }
        }
        None => {
            if samples < MIN_SEGMENT {
                check.other(
                    "samples",
                    format!(
                        "samples: {samples} samples per channel are too few for one segment of {MIN_SEGMENT}"
                    ),
                );
                None
            } else {
                let n = default_segment(fs, samples);
                defaults.note(
                    "welch.segment_length",
                    &n.to_string(),
                    "power of two giving at most 10 Hz resolution, and at least 4 segments' worth of data",
                );
                Some(n)
            }
        }
    };
    let overlap =
        Fields::new(check, defaults, "welch").read(overlap_fraction, &WelchConfig::OVERLAP_FRACTION);
    match (window, detrend, nperseg, overlap) {
        (Some(window), Some(detrend), Some(nperseg), Some(f)) => {
            let noverlap = ((f * nperseg as f64).round() as usize).min(nperseg - 1);
            Some(WelchConfig { window, nperseg, noverlap, detrend })
        }
        _ => None,
    }
}

/// The request enum of a window.
pub(super) fn window_kind(w: Window) -> pb::WindowKind {
    match w {
        Window::Hann => pb::WindowKind::Hann,
        Window::Hamming => pb::WindowKind::Hamming,
        Window::BlackmanHarris => pb::WindowKind::BlackmanHarris,
        Window::FlatTop => pb::WindowKind::FlatTop,
    }
}
