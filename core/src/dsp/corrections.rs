//! Microphone and propagation corrections applied to a PSD before tones and bands are read:
//! response curves (free-field or pressure response, protective grid: frequency against dB,
//! interpolated linearly in log frequency), spherical spreading to a reference distance and
//! atmospheric absorption over the path difference after ISO 9613-1:1993.
//!
//! A correction in dB is added to the measured level: corrected = measured + correction(f).

use super::welch::Psd;

/// Atmospheric pressure of the absorption path when unset: the ISO 9613-1 reference.
pub const ATMOSPHERE_PRESSURE: crate::physics::Setting = crate::physics::Setting::new(
    "pressure_pa",
    crate::physics::Bounds::closed(50_000.0, 120_000.0, "Pa"),
    101_325.0,
    "ISO 9613-1 reference pressure",
);

/// A correction curve: frequency (Hz, strictly increasing, > 0) against correction (dB).
#[derive(Debug, Clone, PartialEq)]
pub struct ResponseCurve {
    /// Name shown in the answer (e.g. "free-field", "grid").
    pub name: String,
    /// Frequencies, Hz, strictly increasing and positive.
    pub frequencies_hz: Vec<f64>,
    /// Corrections, dB, one per frequency.
    pub corrections_db: Vec<f64>,
}

impl ResponseCurve {
    /// The correction at `f_hz`, dB: linear in log frequency between points, the end values
    /// held outside the table (the second value is true there).
    pub fn at(&self, f_hz: f64) -> (f64, bool) {
        let (fs, cs) = (&self.frequencies_hz, &self.corrections_db);
        let (first, last) = (fs[0], fs[fs.len() - 1]);
        if f_hz <= first {
            return (cs[0], f_hz < first);
        }
        if f_hz >= last {
            return (cs[cs.len() - 1], f_hz > last);
        }
        let i = fs.partition_point(|&x| x <= f_hz) - 1;
        let t = (f_hz / fs[i]).ln() / (fs[i + 1] / fs[i]).ln();
        (cs[i] + t * (cs[i + 1] - cs[i]), false)
    }
}

/// Air for the absorption of ISO 9613-1.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Atmosphere {
    /// Air temperature, K.
    pub temperature_k: f64,
    /// Relative humidity, percent.
    pub relative_humidity_percent: f64,
    /// Atmospheric pressure, Pa.
    pub pressure_pa: f64,
}

impl Atmosphere {
    /// Pure-tone attenuation coefficient alpha in dB/m at `f_hz` (ISO 9613-1:1993, eqs. 3 to 5
    /// and Annex B for the molar concentration of water vapour).
    pub fn absorption_db_per_m(&self, f_hz: f64) -> f64 {
        const PR: f64 = 101_325.0; // reference pressure, Pa
        const T0: f64 = 293.15; // reference temperature, K
        const T01: f64 = 273.16; // triple-point isotherm temperature, K
        let t = self.temperature_k;
        let pa_pr = self.pressure_pa / PR;
        let c = -6.8346 * (T01 / t).powf(1.261) + 4.6151;
        let psat_pr = 10f64.powf(c);
        let h = self.relative_humidity_percent * psat_pr / pa_pr;
        let fro = pa_pr * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h));
        let tr = t / T0;
        let frn = pa_pr * tr.powf(-0.5) * (9.0 + 280.0 * h * (-4.170 * (tr.powf(-1.0 / 3.0) - 1.0)).exp());
        let f2 = f_hz * f_hz;
        8.686
            * f2
            * (1.84e-11 / pa_pr * tr.sqrt()
                + tr.powf(-2.5)
                    * (0.01275 * (-2239.1 / t).exp() / (fro + f2 / fro)
                        + 0.1068 * (-3352.0 / t).exp() / (frn + f2 / frn)))
    }
}

/// Level correction from the measured distance to a reference distance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DistanceCorrection {
    /// Microphone distance from the source, m.
    pub measured_m: f64,
    /// Distance the levels are corrected to, m.
    pub reference_m: f64,
    /// Air for absorption over the path difference; none: spreading only.
    pub atmosphere: Option<Atmosphere>,
}

impl DistanceCorrection {
    /// Spherical spreading 20 log10(r / r_ref), dB (inverse-square law for a point source in
    /// the far field).
    pub fn spreading_db(&self) -> f64 {
        20.0 * (self.measured_m / self.reference_m).log10()
    }

    /// The correction at `f_hz`, dB: spreading plus alpha(f) (r - r_ref).
    pub fn at(&self, f_hz: f64) -> f64 {
        self.spreading_db()
            + self
                .atmosphere
                .map_or(0.0, |a| a.absorption_db_per_m(f_hz) * (self.measured_m - self.reference_m))
    }
}

/// Everything applied to one channel.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ChannelCorrection {
    /// Response curves, added together.
    pub curves: Vec<ResponseCurve>,
    /// Distance correction.
    pub distance: Option<DistanceCorrection>,
}

/// What applying a correction did, for the answer.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Applied {
    /// One sentence per correction.
    pub notes: Vec<String>,
    /// Sentences about bins outside a curve's table (end values held there).
    pub warnings: Vec<String>,
}

impl ChannelCorrection {
    /// True when nothing is to be applied.
    pub fn is_empty(&self) -> bool {
        self.curves.is_empty() && self.distance.is_none()
    }

    /// The total correction at `f_hz`, dB, and whether a curve was held outside its table.
    pub fn at(&self, f_hz: f64) -> (f64, bool) {
        let mut outside = false;
        let mut db = self.distance.map_or(0.0, |d| d.at(f_hz));
        for c in &self.curves {
            let (v, o) = c.at(f_hz);
            db += v;
            outside |= o;
        }
        (db, outside)
    }

    /// Multiplies the PSD by 10^(correction/10) at every bin (the DC bin takes the lowest
    /// frequency's correction) and says what was done.
    pub fn apply(&self, psd: &mut Psd) -> Applied {
        let mut out = Applied::default();
        if self.is_empty() {
            return out;
        }
        let df = psd.resolution_hz();
        let top = df * (psd.density.len() - 1) as f64;
        for c in &self.curves {
            let (lo, hi) = (c.frequencies_hz[0], c.frequencies_hz[c.frequencies_hz.len() - 1]);
            let (min, max) =
                c.corrections_db.iter().fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v), b.max(v)));
            out.notes.push(format!(
                "{} response correction: {min:+.2} to {max:+.2} dB over {lo} to {hi} Hz",
                c.name
            ));
            if df < lo || top > hi {
                out.warnings.push(format!(
                    "the {} correction covers {lo} to {hi} Hz but the spectrum runs from {df} to {top} Hz: its end \
                     values are held outside the table",
                    c.name
                ));
            }
        }
        if let Some(d) = self.distance {
            let absorption = match d.atmosphere {
                Some(a) => format!(
                    ", with ISO 9613-1 absorption over {:.3} m ({:.3} dB at 1 kHz, {:.3} dB at 10 kHz; {} K, {} % RH, {} Pa)",
                    d.measured_m - d.reference_m,
                    a.absorption_db_per_m(1000.0) * (d.measured_m - d.reference_m),
                    a.absorption_db_per_m(10_000.0) * (d.measured_m - d.reference_m),
                    a.temperature_k,
                    a.relative_humidity_percent,
                    a.pressure_pa
                ),
                None => String::new(),
            };
            out.notes.push(format!(
                "levels corrected from {} m to {} m: spherical spreading {:+.3} dB{absorption}",
                d.measured_m,
                d.reference_m,
                d.spreading_db()
            ));
        }
        for (k, v) in psd.density.iter_mut().enumerate() {
            let f = (k as f64 * df).max(df);
            *v *= 10f64.powf(self.at(f).0 / 10.0);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn air(t_c: f64, rh: f64) -> Atmosphere {
        Atmosphere { temperature_k: 273.15 + t_c, relative_humidity_percent: rh, pressure_pa: 101_325.0 }
    }

    #[test]
    fn absorption_matches_the_iso_9613_tables() {
        // ISO 9613-2:1996 Table 2 (atmospheric attenuation coefficients computed with
        // ISO 9613-1, dB/km, 101.325 kPa), octave-band centres; values recalled from memory,
        // printed there to about 3 significant figures, so a 3 % tolerance (0.05 dB/km for the
        // smallest).
        let cases = [
            (10.0, 70.0, [(500.0, 1.9), (1000.0, 3.7), (2000.0, 9.7), (4000.0, 32.8), (8000.0, 117.0)]),
            (20.0, 70.0, [(500.0, 2.8), (1000.0, 5.0), (2000.0, 9.0), (4000.0, 22.9), (8000.0, 76.6)]),
            (30.0, 70.0, [(500.0, 3.1), (1000.0, 7.4), (2000.0, 12.7), (4000.0, 23.1), (8000.0, 59.3)]),
        ];
        for (t, rh, rows) in cases {
            for (f, db_per_km) in rows {
                let got = 1000.0 * air(t, rh).absorption_db_per_m(f);
                assert!(
                    (got - db_per_km).abs() <= (0.03 * db_per_km).max(0.05),
                    "{t} C {rh} % {f} Hz: {got} dB/km vs table {db_per_km}"
                );
            }
        }
    }

    #[test]
    fn curves_interpolate_in_log_frequency_and_hold_their_ends() {
        let c = ResponseCurve {
            name: "free-field".into(),
            frequencies_hz: vec![1000.0, 10_000.0, 100_000.0],
            corrections_db: vec![0.0, 1.0, 5.0],
        };
        assert_eq!(c.at(1000.0), (0.0, false));
        assert!((c.at(1000.0 * 10f64.sqrt()).0 - 0.5).abs() < 1e-12);
        assert!((c.at(10_000.0 * 10f64.sqrt()).0 - 3.0).abs() < 1e-12);
        assert_eq!(c.at(500.0), (0.0, true));
        assert_eq!(c.at(200_000.0), (5.0, true));
    }

    #[test]
    fn spreading_is_the_inverse_square_law() {
        // 20 log10(2) = 6.0206 dB per doubling of distance (inverse-square law).
        let d = DistanceCorrection { measured_m: 2.0, reference_m: 1.0, atmosphere: None };
        assert!((d.at(5000.0) - 6.020_599_913_279_624).abs() < 1e-12);
    }
}
