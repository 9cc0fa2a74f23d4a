//! Pure signal processing for calibrated microphone data: sample decoding, Welch PSD, tone
//! extraction, one-third-octave bands and A-weighting.
//!
//! Nothing here knows about gRPC. Levels are in dB re 20 uPa (ISO 1683), spectral densities
//! in Pa^2/Hz, frequencies in Hz.

pub mod bands;
pub mod calibrator;
pub mod corrections;
pub mod cross;
pub mod limits;
pub mod ramp;
pub mod samples;
pub mod tones;
pub mod track;
pub mod welch;
pub mod window;

/// Reference sound pressure, 20 uPa (ISO 1683; ANSI S1.1).
pub const P_REF_PA: f64 = 20e-6;

/// Sound pressure level in dB re 20 uPa of a mean-square pressure in Pa^2.
pub fn spl_db(mean_square_pa2: f64) -> f64 {
    10.0 * (mean_square_pa2 / (P_REF_PA * P_REF_PA)).log10()
}

/// Level at or above which responses carry a hearing-damage caution, dB re 20 uPa.
pub const CAUTION_LEVEL_DB: f64 = 140.0;

#[cfg(test)]
mod tests {
    #[test]
    fn one_pascal_rms_is_93_98_db() {
        // 20 log10(1 / 20e-6) = 93.979 dB (closed form; 94 dB calibrators, IEC 60942 practice).
        assert!((super::spl_db(1.0) - 93.979_400_086_720_38).abs() < 1e-12);
    }
}
