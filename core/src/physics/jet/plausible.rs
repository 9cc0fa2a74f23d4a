//! Values a request may hold but a laboratory rarely means: a nozzle metres wide (millimetres
//! typed as metres), an ambient temperature of 15 K (Celsius typed as kelvin), an ambient
//! pressure of 101 Pa (kilopascals typed as pascals). Each gives a caution sentence naming the
//! field, the value and the likely meaning; none refuses, since every such value is physically
//! possible (a full-scale launcher nozzle, a cryogenic or altitude facility).

/// Largest nozzle exit or jet size, m, before a caution: laboratory rigs use nozzles of
/// millimetres to a few hundred millimetres and full-scale engines about a metre (common
/// practice), so a larger size is most often millimetres typed as metres.
pub const LARGEST_USUAL_LENGTH_M: f64 = 1.0;

/// Ambient temperatures, K, outside which a caution is given: outdoor and laboratory air lies
/// well inside 150-400 K (common practice); 15 "K" is usually 15 degrees Celsius.
pub const USUAL_AMBIENT_TEMPERATURE_K: (f64, f64) = (150.0, 400.0);

/// Reservoir (total) temperatures, K, below which a caution is given: cold jets run near room
/// temperature and heated jets above it (common practice); below 150 K the value is usually
/// degrees Celsius.
pub const COLDEST_USUAL_TOTAL_TEMPERATURE_K: f64 = 150.0;

/// Ambient pressures, Pa, outside which a caution is given: sea level is 101,325 Pa (ISA) and
/// laboratories from sea level to high altitude lie within 10-200 kPa (common practice);
/// 101.3 "Pa" is usually kilopascals.
pub const USUAL_AMBIENT_PRESSURE_PA: (f64, f64) = (10_000.0, 200_000.0);

/// A caution for a nozzle or jet length `m` (metres) given at `field`, when it is above
/// [`LARGEST_USUAL_LENGTH_M`].
pub fn length_caution(field: &str, m: f64) -> Option<String> {
    (m > LARGEST_USUAL_LENGTH_M).then(|| {
        format!(
            "caution: {field} = {m} m is larger than any laboratory or engine nozzle ({LARGEST_USUAL_LENGTH_M} m); \
             did you mean millimetres ({} m)? Frequencies scale with 1/length, so every frequency here would \
             then be 1000 times too low",
            m / 1000.0
        )
    })
}

/// A caution for an ambient temperature `k` (kelvin) given at `field`, outside
/// [`USUAL_AMBIENT_TEMPERATURE_K`].
pub fn ambient_temperature_caution(field: &str, k: f64) -> Option<String> {
    let (lo, hi) = USUAL_AMBIENT_TEMPERATURE_K;
    (k < lo || k > hi).then(|| {
        let hint = if k < lo {
            format!("; did you mean {k} degrees Celsius ({:.2} K)?", k + 273.15)
        } else {
            String::new()
        };
        format!(
            "caution: {field} = {k} K is outside the ambient temperatures laboratories see ({lo}-{hi} K){hint} \
             The ambient sound speed, and so every frequency and Mach number scaled with it, follows this value"
        )
    })
}

/// A caution for a reservoir temperature `k` (kelvin) given at `field`, below
/// [`COLDEST_USUAL_TOTAL_TEMPERATURE_K`].
pub fn total_temperature_caution(field: &str, k: f64) -> Option<String> {
    (k < COLDEST_USUAL_TOTAL_TEMPERATURE_K).then(|| {
        format!(
            "caution: {field} = {k} K is colder than any usual jet reservoir ({COLDEST_USUAL_TOTAL_TEMPERATURE_K} K); \
             did you mean {k} degrees Celsius ({:.2} K)?",
            k + 273.15
        )
    })
}

/// A caution for an ambient pressure `pa` (pascals) given at `field`, outside
/// [`USUAL_AMBIENT_PRESSURE_PA`].
pub fn ambient_pressure_caution(field: &str, pa: f64) -> Option<String> {
    let (lo, hi) = USUAL_AMBIENT_PRESSURE_PA;
    (pa < lo || pa > hi).then(|| {
        let hint = if pa < lo && pa * 1000.0 >= lo && pa * 1000.0 <= hi {
            format!("; did you mean kilopascals ({} Pa)?", pa * 1000.0)
        } else if pa < lo && pa * 100.0 >= lo && pa * 100.0 <= hi {
            format!("; did you mean hectopascals or millibar ({} Pa)?", pa * 100.0)
        } else {
            String::new()
        };
        format!(
            "caution: {field} = {pa} Pa is outside the ambient pressures laboratories see ({lo}-{hi} Pa){hint}"
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_one_inch_jet_at_sea_level_draws_no_caution() {
        // ISA sea level (101,325 Pa, 288.15 K) and a 25.4 mm nozzle: nominal values.
        assert!(length_caution("d", 0.0254).is_none());
        assert!(ambient_temperature_caution("t", 288.15).is_none());
        assert!(total_temperature_caution("t0", 288.15).is_none());
        assert!(ambient_pressure_caution("p", 101_325.0).is_none());
    }

    #[test]
    fn slipped_units_name_the_field_and_the_likely_meaning() {
        let c = length_caution("nozzle.exit_diameter_m", 25.4).unwrap();
        assert!(c.contains("nozzle.exit_diameter_m = 25.4 m") && c.contains("millimetres (0.0254 m)"), "{c}");
        let c = ambient_temperature_caution("ambient_temperature_k", 15.0).unwrap();
        assert!(c.contains("15 degrees Celsius (288.15 K)"), "{c}");
        assert!(ambient_temperature_caution("ambient_temperature_k", 500.0).unwrap().contains("500 K"));
        let c = total_temperature_caution("total_temperature_k", 20.0).unwrap();
        assert!(c.contains("293.15 K"), "{c}");
        let c = ambient_pressure_caution("ambient_pressure_pa", 101.325).unwrap();
        assert!(c.contains("kilopascals (101325 Pa)"), "{c}");
        let c = ambient_pressure_caution("ambient_pressure_pa", 1013.25).unwrap();
        assert!(c.contains("millibar (101325 Pa)"), "{c}");
    }
}
