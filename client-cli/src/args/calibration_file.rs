//! The calibration file of `--calibration-file`: one `[[channel]]` table per microphone, in
//! channel order, with its calibration, name, response curve and ring azimuth.

use crate::failure::Failure;
use jetloop_proto::pb;

/// One channel's entry in a calibration file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ChannelCalibration {
    /// Its calibration.
    pub calibration: pb::Calibration,
    /// Its name ("" when not given).
    pub name: String,
    /// Its microphone's response curve (`response_curve`, a CSV file of frequency_hz and
    /// correction_db, read relative to the calibration file's folder).
    pub curve: Option<pb::ResponseCurve>,
    /// Its azimuth on a ring, degrees (`azimuth_deg`).
    pub azimuth_deg: Option<f64>,
}

/// Reads a calibration file (`--calibration-file`): one `[[channel]]` table per channel.
///
/// # Errors
/// [`Failure::Usage`] naming the file and the channel entry for anything it cannot use.
pub(crate) fn read_calibration_file(path: &std::path::Path) -> Result<Vec<ChannelCalibration>, Failure> {
    use pb::calibration::Scale;
    let bad = |what: String| Failure::Usage(format!("{}: {what}", path.display()));
    let text = std::fs::read_to_string(path).map_err(|e| bad(format!("cannot read it: {e}")))?;
    let doc: toml::Table = text.parse().map_err(|e: toml::de::Error| bad(e.to_string()))?;
    let Some(toml::Value::Array(channels)) = doc.get("channel") else {
        return Err(bad("no [[channel]] tables: give one per channel, in channel order".into()));
    };
    channels
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let entry = format!("channel entry {} ([[channel]] number {})", i, i + 1);
            let t = c.as_table().ok_or_else(|| bad(format!("{entry} is not a table")))?;
            let num = |key: &str| match t.get(key) {
                None => Ok(None),
                Some(v) => v
                    .as_float()
                    .or_else(|| v.as_integer().map(|n| n as f64))
                    .map(Some)
                    .ok_or_else(|| bad(format!("{entry}: {key} must be a number"))),
            };
            const KEYS: [&str; 6] = [
                "name",
                "pa_per_unit",
                "sensitivity_v_per_pa",
                "volts_per_unit",
                "response_curve",
                "azimuth_deg",
            ];
            if let Some(k) = t.keys().find(|k| !KEYS.contains(&k.as_str())) {
                return Err(bad(format!("{entry}: unknown key {k} (known: {})", KEYS.join(", "))));
            }
            let scale = match (num("pa_per_unit")?, num("sensitivity_v_per_pa")?, num("volts_per_unit")?) {
                (Some(k), None, None) => Scale::PascalsPerUnit(k),
                (None, Some(s), Some(v)) => {
                    Scale::Microphone(pb::MicrophoneChain { sensitivity_v_per_pa: s, volts_per_unit: v })
                }
                _ => {
                    return Err(bad(format!(
                        "{entry}: give pa_per_unit, or sensitivity_v_per_pa and volts_per_unit (not both)"
                    )))
                }
            };
            let name = match t.get("name") {
                None => String::new(),
                Some(v) => v
                    .as_str()
                    .map(str::to_string)
                    .ok_or_else(|| bad(format!("{entry}: name must be text")))?,
            };
            let curve = match t.get("response_curve") {
                None => None,
                Some(v) => {
                    let rel = v
                        .as_str()
                        .ok_or_else(|| bad(format!("{entry}: response_curve must be a file name")))?;
                    let file = path.parent().unwrap_or(std::path::Path::new(".")).join(rel);
                    Some(crate::readers::read_curve(&file).map_err(|e| {
                        bad(format!("{entry}: response_curve: {}", crate::failure::failure_text(&e)))
                    })?)
                }
            };
            let azimuth_deg = num("azimuth_deg")?;
            if let Some(a) = azimuth_deg.filter(|a| !a.is_finite() || a.abs() > 360.0) {
                return Err(bad(format!("{entry}: azimuth_deg = {a} is outside [-360, 360] degrees")));
            }
            Ok(ChannelCalibration {
                calibration: pb::Calibration { scale: Some(scale) },
                name,
                curve,
                azimuth_deg,
            })
        })
        .collect()
}
