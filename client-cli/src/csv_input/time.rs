//! The time column of a CSV recording: which header names a time, its unit, and the check
//! that its rows are sampled uniformly, giving the sample rate in Hz.
//!
//! Tolerance (one number for every check): twice the resolution the time stamps are printed
//! with (each printed stamp is off by up to half of it, a step between two stamps by up to a
//! whole one, the grid anchored at the first row by another) plus 1 % of a sample period,
//! and never more than 0.45 of a period.
//! Timing errors under 1 % of a sample move a tone's phase by at most 2 pi x 0.01 x f / fs,
//! 1.8 degrees at the Nyquist frequency, and change no level; a missing, repeated or
//! out-of-order sample is a whole period off and always refused. The resolution is the one
//! most stamps are printed with (the median over the cells: 1e-6 s for `0.000020`). The rate is the mean step
//! from the first to the last row, not the median step: with stamps printed to 1 us at
//! 51.2 kHz the steps are 19 or 20 us and their median gives 50 kHz, 2.3 % off, while the
//! mean step is off by at most one printed digit over the whole file.

use super::split_unit;
use super::CsvOptions;
use super::TimeInfo;
use crate::failure::Failure;
use std::path::Path;

/// Timing error allowed beside the printed resolution, in sample periods.
pub(crate) const TIME_JITTER_SAMPLES: f64 = 0.01;
/// The tolerance never reaches half a sample period: a missing or repeated sample is always
/// refused, however coarsely the stamps are printed.
const MOST_SAMPLES: f64 = 0.45;

/// Header names (without unit, case-insensitive) taken for a time column.
const TIME_NAMES: [&str; 8] = ["time", "t", "zeit", "temps", "tiempo", "tempo", "tijd", "tid"];

/// Unit suffixes of a time header (`time_s`, `t_ms`) with their seconds per unit.
const TIME_SUFFIXES: [(&str, f64); 6] =
    [("_s", 1.0), ("_sec", 1.0), ("_ms", 1e-3), ("_us", 1e-6), ("_ns", 1e-9), ("_min", 60.0)];

/// A time in s with 6 significant digits and no trailing zeros (`1e-4`, `2.5e-5`, `0e0`).
fn sig(x: f64) -> String {
    let s = format!("{x:.5e}");
    match s.split_once('e') {
        Some((m, e)) if m.contains('.') => format!("{}e{e}", m.trim_end_matches('0').trim_end_matches('.')),
        _ => s,
    }
}

/// Seconds per unit of a time unit written in a header (`s`, `ms`, `us`, `µs`, `ns`, `min`).
fn seconds_per(unit: &str) -> Option<f64> {
    match unit.trim().to_lowercase().as_str() {
        "s" | "sec" | "secs" | "second" | "seconds" | "sek" => Some(1.0),
        "ms" => Some(1e-3),
        "us" | "µs" | "μs" => Some(1e-6),
        "ns" => Some(1e-9),
        "min" => Some(60.0),
        _ => None,
    }
}

/// A header's name without its unit, lower case, and its unit (written in brackets, after a
/// slash, or as a suffix such as `_s`).
fn name_and_unit(header: &str) -> (String, Option<String>) {
    let (name, unit) = split_unit(header);
    let name = name.to_lowercase();
    if let Some(u) = unit {
        return (name, Some(u.to_string()));
    }
    for (suffix, _) in TIME_SUFFIXES {
        if let Some(base) = name.strip_suffix(suffix).filter(|b| !b.is_empty()) {
            return (base.to_string(), Some(suffix[1..].to_string()));
        }
    }
    (name, None)
}

/// Whether a header names a time column: time, t, zeit, temps, tiempo, tempo, tijd or tid,
/// with or without a unit (`time_s`, `time [s]`, `Time (s)`, `Zeit/ms`).
pub(crate) fn is_time_name(header: &str) -> bool {
    TIME_NAMES.contains(&name_and_unit(header).0.trim())
}

/// The resolution a number is printed with, in its own unit: 1e-6 for `0.000020`, 1e-11
/// for `1.953125e-05`, 1 for `12`.
pub(crate) fn resolution(cell: &str) -> f64 {
    let c = cell.trim();
    let (mantissa, exponent) = match c.find(['e', 'E']) {
        Some(i) => (&c[..i], c[i + 1..].parse::<i32>().unwrap_or(0)),
        None => (c, 0),
    };
    let decimals = mantissa.find(['.', ',']).map_or(0, |i| mantissa.len() - i - 1);
    10f64.powi(exponent - decimals.min(400) as i32)
}

/// A uniform time column: its mean step and the tolerance it was checked with, in s.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct StepFit {
    /// Mean step from the first to the last row, in s.
    pub step_s: f64,
    /// The tolerance in s (see the module documentation).
    pub tolerance_s: f64,
}

/// Why a time column is not uniform; indices count data rows from 0.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum TimeFault {
    /// The stamps do not increase: the step before row `index` is `step_s`.
    NotIncreasing { index: usize, step_s: f64 },
    /// The step before row `index` is `step_s`, the usual (median) step `median_s`.
    Step { index: usize, step_s: f64, median_s: f64, tolerance_s: f64 },
    /// Row `index` is `off_s` from the uniform grid of the mean step.
    Drift { index: usize, off_s: f64, step_s: f64, tolerance_s: f64 },
}

/// Checks that time stamps `t_s` (s, two or more) printed with resolution `resolution_s` (s)
/// are uniform: every step within the tolerance of the median step, every stamp within the
/// tolerance of the grid from the first row with the mean step.
///
/// # Errors
/// The first [`TimeFault`] found.
pub(crate) fn uniform_step(t_s: &[f64], resolution_s: f64) -> Result<StepFit, TimeFault> {
    let steps: Vec<f64> = t_s.windows(2).map(|w| w[1] - w[0]).collect();
    let mut sorted = steps.clone();
    sorted.sort_by(f64::total_cmp);
    let median = match sorted.len() {
        0 => return Err(TimeFault::NotIncreasing { index: 0, step_s: 0.0 }),
        n if n % 2 == 1 => sorted[n / 2],
        n => 0.5 * (sorted[n / 2 - 1] + sorted[n / 2]),
    };
    // The stamps are finite numbers (the reader refuses others).
    if median <= 0.0 {
        let i = steps.iter().position(|s| *s <= 0.0).unwrap_or(0);
        return Err(TimeFault::NotIncreasing { index: i + 1, step_s: steps[i] });
    }
    let n = t_s.len();
    let step_s = (t_s[n - 1] - t_s[0]) / (n - 1) as f64;
    let tolerance_s = (2.0 * resolution_s + TIME_JITTER_SAMPLES * step_s).min(MOST_SAMPLES * step_s);
    if let Some(i) = steps.iter().position(|s| (s - median).abs() > tolerance_s) {
        return Err(TimeFault::Step { index: i + 1, step_s: steps[i], median_s: median, tolerance_s });
    }
    let off = |i: usize| t_s[i] - (t_s[0] + i as f64 * step_s);
    if let Some(i) = (0..n).find(|&i| off(i).abs() > tolerance_s) {
        return Err(TimeFault::Drift { index: i, off_s: off(i), step_s, tolerance_s });
    }
    Ok(StepFit { step_s, tolerance_s })
}

/// The time column `col` (0-based) of a recording at `path`: `values` in the column's unit,
/// `lines` the file row of each, `resolutions` the printed resolution of each cell; checked
/// for uniform sampling and against `--sample-rate-hz` in `options`.
///
/// # Errors
/// [`Failure::Usage`] naming the file, the column and the first row that is off, or both
/// sample rates when they disagree.
pub(super) fn check(
    path: &Path,
    options: &CsvOptions,
    col: usize,
    names: Option<&[String]>,
    values: &[f64],
    lines: &[u64],
    resolutions: &[f64],
) -> Result<TimeInfo, Failure> {
    let file = path.display();
    let name = names.and_then(|n| n.get(col)).cloned().unwrap_or_default();
    let what = format!("time column {} ({}, '{name}')", col + 1, super::column_letters(col + 1));
    let seconds_per_unit = match name_and_unit(&name).1 {
        None => 1.0,
        Some(u) => seconds_per(&u).ok_or_else(|| {
            Failure::Usage(format!("{file}: {what}: unit '{u}' is not a time unit (s, ms, us, ns, min)"))
        })?,
    };
    let mut info = TimeInfo { column: col + 1, name, seconds_per_unit, rate_hz: None, tolerance_s: 0.0 };
    if values.len() < 2 {
        return Ok(info);
    }
    let t_s: Vec<f64> = values.iter().map(|v| v * seconds_per_unit).collect();
    let mut res: Vec<f64> = resolutions.to_vec();
    res.sort_by(f64::total_cmp);
    // The resolution most stamps are printed with: a shortest-form writer prints 0.0 for
    // the first stamp, exact but with one decimal only.
    let q = res.get(res.len() / 2).copied().unwrap_or(0.0) * seconds_per_unit;
    let row = |i: usize| lines.get(i).copied().unwrap_or(0);
    let uniform = "give --no-time-column and --sample-rate-hz to read the rows as uniform anyway";
    let fit = uniform_step(&t_s, q).map_err(|f| {
        Failure::Usage(match f {
            TimeFault::NotIncreasing { index, step_s } => format!(
                "{file}: {what} does not increase: row {} is {} s after the row before; {uniform}",
                row(index),
                sig(step_s)
            ),
            TimeFault::Step { index, step_s, median_s, tolerance_s } => format!(
                "{file}: {what} is not uniform: row {} is {} s after the row before, the usual \
                 step is {} s (tolerance {} s; a missing, repeated or out-of-order sample?); {uniform}",
                row(index),
                sig(step_s),
                sig(median_s),
                sig(tolerance_s)
            ),
            TimeFault::Drift { index, off_s, step_s, tolerance_s } => format!(
                "{file}: {what} is not uniform: row {} is {} s off the grid of one step of {} s \
                 from the first row (tolerance {} s); {uniform}",
                row(index),
                sig(off_s),
                sig(step_s),
                sig(tolerance_s)
            ),
        })
    })?;
    let derived = 1.0 / fit.step_s;
    if let Some(given) = options.sample_rate_hz {
        let steps = (t_s.len() - 1) as f64;
        let over_file_s = steps * (1.0 / given - fit.step_s);
        if over_file_s.is_nan() || over_file_s.abs() > fit.tolerance_s {
            return Err(Failure::Usage(format!(
                "{file}: --sample-rate-hz {given} disagrees with the {what}, which gives {derived} Hz \
                 (rows {} to {}): over the file the two differ by {} s, more than the tolerance \
                 {} s; give one of them (or --no-time-column)",
                row(0),
                row(t_s.len() - 1),
                sig(over_file_s.abs()),
                sig(fit.tolerance_s)
            )));
        }
    }
    info.rate_hz = Some(derived);
    info.tolerance_s = fit.tolerance_s;
    Ok(info)
}
