//! One-third-octave band levels (IEC 61260-1:2014, base ten), overall level and A-weighting
//! (IEC 61672-1:2013), integrated from a one-sided PSD.

use super::spl_db;
use super::welch::Psd;

/// Lowest band index x: exact centre 1000 * 10^(x/10) = 19.95 Hz (nominal 20 Hz).
pub const LOWEST_BAND: i32 = -17;
/// Highest band index: 100 kHz.
pub const HIGHEST_BAND: i32 = 20;

/// Exact mid-band frequency of one-third-octave band x (base ten): 1000 * 10^(x/10) Hz.
pub fn exact_centre(x: i32) -> f64 {
    1000.0 * 10f64.powf(f64::from(x) / 10.0)
}

/// Band edges fm * 10^(-+1/20), Hz.
pub fn edges(x: i32) -> (f64, f64) {
    let fm = exact_centre(x);
    (fm * 10f64.powf(-0.05), fm * 10f64.powf(0.05))
}

/// Nominal mid-band frequency (IEC 61260-1, Annex E), Hz.
pub fn nominal_centre(x: i32) -> f64 {
    const DECADE: [f64; 10] = [10.0, 12.5, 16.0, 20.0, 25.0, 31.5, 40.0, 50.0, 63.0, 80.0];
    let i = (x + 20).rem_euclid(10) as usize;
    let decade = (x + 20).div_euclid(10); // x = -20 -> 10 Hz
    DECADE[i] * 10f64.powi(decade)
}

/// A-weighting in dB at `f` Hz (IEC 61672-1:2013, eq. E.6 with the exact pole frequencies),
/// normalized to 0 dB at 1 kHz.
pub fn a_weighting_db(f: f64) -> f64 {
    const F1: f64 = 20.598_997;
    const F2: f64 = 107.652_65;
    const F3: f64 = 737.862_23;
    const F4: f64 = 12_194.217;
    let ra = |f: f64| {
        let f2 = f * f;
        F4 * F4 * f2 * f2 / ((f2 + F1 * F1) * ((f2 + F2 * F2) * (f2 + F3 * F3)).sqrt() * (f2 + F4 * F4))
    };
    20.0 * (ra(f) / ra(1000.0)).log10()
}

/// One band.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    /// Band index x.
    pub index: i32,
    /// Nominal centre, Hz.
    pub nominal_hz: f64,
    /// Exact centre, Hz.
    pub exact_hz: f64,
    /// Lower edge, Hz.
    pub lower_hz: f64,
    /// Upper edge, Hz.
    pub upper_hz: f64,
    /// Mean square in the band, Pa^2.
    pub mean_square_pa2: f64,
    /// Band level, dB re 20 uPa.
    pub level_db: f64,
    /// A-weighted band level (weighting at the exact centre), dB.
    pub a_weighted_level_db: f64,
    /// True when the band spans at least two PSD bins.
    pub resolved: bool,
}

/// Band levels and overall levels.
#[derive(Debug, Clone, PartialEq)]
pub struct BandLevels {
    /// Bands from 20 Hz to the highest one whose centre is at most the requested maximum and
    /// whose upper edge is at most Nyquist.
    pub bands: Vec<Band>,
    /// Overall level of the whole PSD (DC bin excluded), dB.
    pub overall_db: f64,
    /// Mean square of the whole PSD (DC excluded), Pa^2.
    pub overall_mean_square_pa2: f64,
    /// A-weighted overall level, dB(A).
    pub a_weighted_overall_db: f64,
    /// Level of the frequency span the bands cover, dB (equals the energy sum of the bands).
    pub band_span_db: f64,
    /// Level outside the bands' span, dB (below the lowest and above the highest band).
    pub outside_span_db: f64,
}

/// Integrates `psd` over [lo, hi] Hz; each bin k covers [(k - 1/2) df, (k + 1/2) df].
fn integrate(psd: &Psd, lo: f64, hi: f64) -> f64 {
    let df = psd.resolution_hz();
    let k0 = ((lo / df) - 0.5).floor().max(0.0) as usize;
    let k1 = (((hi / df) + 0.5).ceil() as usize).min(psd.density.len() - 1);
    (k0..=k1)
        .map(|k| {
            let a = ((k as f64 - 0.5) * df).max(0.0);
            let b = (k as f64 + 0.5) * df;
            let overlap = (b.min(hi) - a.max(lo)).max(0.0);
            psd.density[k] * overlap
        })
        .sum()
}

/// Band levels for bands whose exact centre is at most `max_centre_hz` (at most 100 kHz) and
/// whose upper edge is at most the Nyquist frequency.
pub fn band_levels(psd: &Psd, max_centre_hz: f64) -> BandLevels {
    let nyquist = psd.fs / 2.0;
    let df = psd.resolution_hz();
    let bands: Vec<Band> = (LOWEST_BAND..=HIGHEST_BAND)
        .filter(|&x| exact_centre(x) <= max_centre_hz * (1.0 + 1e-9) && edges(x).1 <= nyquist * (1.0 + 1e-12))
        .map(|x| {
            let (lo, hi) = edges(x);
            let ms = integrate(psd, lo, hi);
            let fm = exact_centre(x);
            Band {
                index: x,
                nominal_hz: nominal_centre(x),
                exact_hz: fm,
                lower_hz: lo,
                upper_hz: hi,
                mean_square_pa2: ms,
                level_db: spl_db(ms),
                a_weighted_level_db: spl_db(ms) + a_weighting_db(fm),
                resolved: hi - lo >= 2.0 * df,
            }
        })
        .collect();
    let overall: f64 = psd.density.iter().skip(1).sum::<f64>() * df;
    let a_weighted: f64 = psd
        .density
        .iter()
        .enumerate()
        .skip(1)
        .map(|(k, d)| d * 10f64.powf(a_weighting_db(k as f64 * df) / 10.0))
        .sum::<f64>()
        * df;
    let span: f64 = bands.iter().map(|b| b.mean_square_pa2).sum();
    BandLevels {
        bands,
        overall_db: spl_db(overall),
        overall_mean_square_pa2: overall,
        a_weighted_overall_db: spl_db(a_weighted),
        band_span_db: spl_db(span),
        outside_span_db: spl_db((overall - span).max(0.0)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::welch::{tests::noise, welch, Detrend, WelchConfig};
    use crate::dsp::window::Window;

    #[test]
    fn a_weighting_matches_iec_61672_table() {
        // IEC 61672-1:2013, Table 3 (values to 0.1 dB at the exact base-ten mid-band
        // frequencies of the nominal 50 Hz ... 20 kHz bands).
        for (x, a) in [
            (-13, -30.2),
            (-10, -19.1),
            (-3, -3.2),
            (0, 0.0),
            (3, 1.2),
            (6, 1.0),
            (9, -1.1),
            (10, -2.5),
            (13, -9.3),
        ] {
            let f = exact_centre(x);
            assert!((a_weighting_db(f) - a).abs() < 0.05 + 1e-9, "{f} Hz: {}", a_weighting_db(f));
        }
        assert!(a_weighting_db(1000.0).abs() < 1e-12);
    }

    #[test]
    fn band_centres_follow_iec_61260() {
        // IEC 61260-1:2014 eq. (1), base ten: fm = 1000 * 10^(x/10); nominal labels Annex E.
        assert!((exact_centre(0) - 1000.0).abs() < 1e-12);
        assert!((exact_centre(1) - 1_258.925_411_794_167).abs() < 1e-9);
        assert!((exact_centre(-10) - 100.0).abs() < 1e-12);
        let labels: Vec<f64> = (-17..=-10).map(nominal_centre).collect();
        assert_eq!(labels, vec![20.0, 25.0, 31.5, 40.0, 50.0, 63.0, 80.0, 100.0]);
        assert_eq!(nominal_centre(5), 3150.0);
        assert_eq!(nominal_centre(20), 100_000.0);
        let (lo, hi) = edges(0);
        assert!((hi / lo - 10f64.powf(0.1)).abs() < 1e-12);
    }

    #[test]
    fn band_levels_sum_to_the_overall_level_for_broadband_noise() {
        // Parseval: with fs chosen so the bands span 0 to Nyquist (the 20 kHz band's upper edge
        // at Nyquist), white noise of variance s^2 gives band levels whose energy sum is the
        // time-domain level within 0.05 dB.
        let top = edges(13).1;
        let fs = 2.0 * top;
        let x = noise(1 << 20, 21, 1.5);
        let ms: f64 = x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64;
        let psd = welch(
            &x,
            fs,
            WelchConfig { window: Window::Hann, nperseg: 4096, noverlap: 2048, detrend: Detrend::Mean },
        )
        .unwrap();
        let b = band_levels(&psd, 100_000.0);
        assert_eq!(b.bands.last().unwrap().nominal_hz, 20_000.0);
        assert!((b.band_span_db - spl_db(ms)).abs() < 0.05, "{} vs {}", b.band_span_db, spl_db(ms));
        assert!((b.overall_db - spl_db(ms)).abs() < 0.05);
        let sum: f64 = b.bands.iter().map(|x| 10f64.powf(x.level_db / 10.0)).sum();
        assert!((10.0 * sum.log10() - b.band_span_db).abs() < 1e-9);
    }
}
