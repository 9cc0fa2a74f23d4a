//! Allowed ranges of the spectral-analysis inputs, defined once and reported verbatim in
//! error messages.

use crate::physics::Bounds;

/// Allowed sample rate, Hz.
pub const SAMPLE_RATE: Bounds = Bounds::open_closed(0.0, 1e8, "Hz");
/// Allowed calibration factor, Pa per unit.
pub const SCALE: Bounds = Bounds::open_closed(0.0, 1e9, "Pa per unit");
/// Allowed microphone sensitivity, V/Pa.
pub const SENSITIVITY: Bounds = Bounds::open_closed(0.0, 100.0, "V/Pa");
/// Allowed digitiser scale, V per unit.
pub const VOLTS: Bounds = Bounds::open_closed(0.0, 1e6, "V per unit");
/// Allowed Welch overlap fraction.
pub const OVERLAP: Bounds = Bounds::closed(0.0, 0.95, "");
/// Allowed tone threshold above the floor, dB.
pub const THRESHOLD: Bounds = Bounds::closed(0.0, 100.0, "dB");
/// Allowed minimum tone separation, Hz.
pub const SEPARATION: Bounds = Bounds::closed(0.0, 1e6, "Hz");
/// Allowed width of the running-median floor, bins.
pub const FLOOR_BINS: Bounds = Bounds::closed(3.0, 4097.0, "bins");
/// Allowed most tones per channel.
pub const MAX_TONES: Bounds = Bounds::closed(1.0, 1000.0, "");
/// Allowed harmonic-family tolerance, bins.
pub const HARM_TOL: Bounds = Bounds::closed(0.1, 20.0, "bins");
/// Allowed highest harmonic order.
pub const HARM_ORDER: Bounds = Bounds::closed(2.0, 50.0, "");
/// Allowed predicted tone frequency, Hz.
pub const PREDICTED: Bounds = Bounds::open_closed(0.0, 1e7, "Hz");
/// Allowed relative tolerance of a prediction match.
pub const MATCH_TOL: Bounds = Bounds::open_closed(0.0, 1.0, "");
/// Allowed highest one-third-octave band centre, Hz.
pub const BAND_MAX: Bounds = Bounds::closed(20.0, 100_000.0, "Hz");
/// Allowed number of PSD points returned.
pub const PSD_POINTS: Bounds = Bounds::closed(16.0, 1_048_577.0, "");
