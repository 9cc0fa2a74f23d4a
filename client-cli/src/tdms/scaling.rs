//! What a channel's properties say about its samples: the sample rate (`wf_increment`), the
//! unit (`unit_string`, `NI_UnitDescription`) and the scaling from raw values to engineering
//! units (`NI_Number_Of_Scales`, `NI_Scaling_Status`, `NI_Scale[n]_Scale_Type` and, for linear
//! scales, `NI_Scale[n]_Linear_Slope`, `_Y_Intercept` and `_Input_Source`).
//!
//! The scaling is looked for on the channel, then its group, then the file (root) object; the
//! first whose scales are present and not marked `NI_Scaling_Status` = "scaled" applies. The
//! applied scale is the last one (index `NI_Number_Of_Scales` - 1); each scale takes its input
//! from the scale its `_Input_Source` names, or from the raw values (`0xFFFFFFFF`, or no such
//! property). Linear scales chain into one `slope * raw + intercept`.

use super::Object;
use super::Value;

/// A linear map from raw values to engineering units: `slope * raw + intercept`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Linear {
    /// Engineering units per raw unit.
    pub slope: f64,
    /// Engineering units at a raw value of zero.
    pub intercept: f64,
}

impl Linear {
    /// The scaled value of `raw`.
    pub fn apply(&self, raw: f64) -> f64 {
        raw * self.slope + self.intercept
    }
}

/// Input source value meaning "the raw values".
const RAW_INPUT: i64 = 0xFFFF_FFFF;

/// The scaling of a channel (`channel`, its `group` and the `root` object's properties).
///
/// # Errors
/// A sentence naming the property for scales other than linear, a missing slope or intercept,
/// or input sources that loop.
pub(crate) fn linear(
    channel: &Object,
    group: Option<&Object>,
    root: Option<&Object>,
) -> Result<Option<Linear>, String> {
    for o in std::iter::once(channel).chain(group).chain(root) {
        let n = match o.property("NI_Number_Of_Scales") {
            Some(v) => {
                let n = v.as_f64().filter(|n| *n >= 0.0 && n.fract() == 0.0 && *n <= 1024.0).ok_or_else(
                    || {
                        format!(
                            "{}: NI_Number_Of_Scales is {v}, expected a whole number from 0 to 1024",
                            o.path
                        )
                    },
                )?;
                n as usize
            }
            None => highest_scale(o).map_or(0, |i| i + 1),
        };
        if n == 0 {
            continue;
        }
        if o.property("NI_Scaling_Status").and_then(Value::as_text) == Some("scaled") {
            continue; // stored already scaled
        }
        return chain(o, n - 1, n, n).map(Some);
    }
    Ok(None)
}

/// The highest `n` of the `NI_Scale[n]_Scale_Type` properties of `o`.
fn highest_scale(o: &Object) -> Option<usize> {
    o.properties
        .iter()
        .filter_map(|(k, _)| k.strip_prefix("NI_Scale[")?.strip_suffix("]_Scale_Type")?.parse::<usize>().ok())
        .max()
}

/// Scale `i` of `o`: (slope, intercept, input source).
fn scale(o: &Object, i: usize) -> Result<(f64, f64, i64), String> {
    let key = |s: &str| format!("NI_Scale[{i}]_{s}");
    let kind = o.property(&key("Scale_Type")).ok_or_else(|| {
        format!(
            "{}: {} is missing (a DAQmx scaler), which this reader does not apply: expected \"Linear\"",
            o.path,
            key("Scale_Type")
        )
    })?;
    if kind.as_text() != Some("Linear") {
        return Err(format!(
            "{}: {} is {kind:?}; only \"Linear\" scales are applied (save the channel scaled instead)",
            o.path,
            key("Scale_Type")
        ));
    }
    let number = |s: &str| {
        let k = key(s);
        o.property(&k)
            .and_then(Value::as_f64)
            .filter(|v| v.is_finite())
            .ok_or_else(|| format!("{}: {k} is missing or not a finite number", o.path))
    };
    let source = match o.property(&key("Linear_Input_Source")) {
        None => RAW_INPUT,
        Some(v) => match v.as_f64() {
            Some(s) if s == -1.0 || s == RAW_INPUT as f64 => RAW_INPUT,
            Some(s) if s >= 0.0 && s.fract() == 0.0 => s as i64,
            _ => {
                return Err(format!(
                    "{}: {} is {v}, expected a scale index",
                    o.path,
                    key("Linear_Input_Source")
                ))
            }
        },
    };
    Ok((number("Linear_Slope")?, number("Linear_Y_Intercept")?, source))
}

/// Scale `i` of the `n` scales of `o` composed with the scales it takes its input from (at
/// most `depth` more); only the scales on that chain are read.
fn chain(o: &Object, i: usize, n: usize, depth: usize) -> Result<Linear, String> {
    let (slope, intercept, source) = scale(o, i)?;
    let input = if source == RAW_INPUT {
        Linear { slope: 1.0, intercept: 0.0 }
    } else if depth == 0 || source as usize >= n {
        return Err(format!(
            "{}: NI_Scale[{i}]_Linear_Input_Source is {source}: expected the index of another scale \
             (0..{n}) or 0xFFFFFFFF (raw), without loops",
            o.path
        ));
    } else {
        chain(o, source as usize, n, depth - 1)?
    };
    Ok(Linear { slope: slope * input.slope, intercept: slope * input.intercept + intercept })
}

/// The sample rate in Hz from `wf_increment` (seconds between samples), None without one.
pub(crate) fn sample_rate_hz(o: &Object) -> Result<Option<f64>, String> {
    match o.property("wf_increment") {
        None => Ok(None),
        Some(v) => match v.as_f64() {
            Some(dt) if dt > 0.0 && dt.is_finite() && (1.0 / dt).is_finite() => Ok(Some(1.0 / dt)),
            _ => Err(format!("{}: wf_increment is {v}, expected a positive number of seconds", o.path)),
        },
    }
}

/// The unit of the samples: `unit_string`, else `NI_UnitDescription`.
pub(crate) fn unit(o: &Object) -> Option<String> {
    ["unit_string", "NI_UnitDescription"]
        .iter()
        .find_map(|k| o.property(k).and_then(Value::as_text))
        .map(|u| u.trim().to_string())
        .filter(|u| !u.is_empty())
}
