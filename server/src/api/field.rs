//! The one way the API edge reads an optional numeric field: [`Fields::read`] checks a given
//! value against the domain [`Setting`]'s bounds, or applies the setting's default and records
//! it in the answer's `provenance.defaults_applied`, in one call, so a default can be neither
//! written twice nor applied unrecorded.
//!
//! The defaults themselves live on the domain option types as [`Setting`] constants (e.g.
//! `ToneConfig::THRESHOLD_DB`), with the reason for each; the proto comments that document
//! them are compared with those constants by this module's tests.

use super::error::Check;
use super::provenance::Defaults;
use crate::physics::Setting;

/// Reads the optional fields of one message at `path` (e.g. `tones`), collecting range errors
/// in a [`Check`] and applied defaults in a [`Defaults`].
#[derive(Debug)]
pub struct Fields<'a> {
    check: &'a mut Check,
    defaults: &'a mut Defaults,
    path: &'a str,
}

impl<'a> Fields<'a> {
    /// Fields of the message at `path` ("" for the request itself).
    pub fn new(check: &'a mut Check, defaults: &'a mut Defaults, path: &'a str) -> Self {
        Self { check, defaults, path }
    }

    /// The given value when it lies in `setting`'s bounds (else a violation naming
    /// `path.name`, the value and the allowed range is recorded and `None` returned), or the
    /// setting's default, recorded as applied, when the field is unset.
    pub fn read(&mut self, given: Option<f64>, setting: &Setting) -> Option<f64> {
        match given {
            Some(v) => self.check.range(self.path, setting.check(v)),
            None => {
                self.record(setting);
                Some(setting.default)
            }
        }
    }

    /// [`Fields::read`] where the default depends on the request (e.g. the reservoir
    /// temperature of an unheated jet is the ambient temperature given): `value` is applied and
    /// recorded with the setting's reason.
    pub fn read_or(&mut self, given: Option<f64>, setting: &Setting, value: f64) -> Option<f64> {
        match given {
            Some(v) => self.check.range(self.path, setting.check(v)),
            None => {
                self.record(&Setting { default: value, ..*setting });
                Some(value)
            }
        }
    }

    /// [`Fields::read`] for an integer field (counts, orders, lengths in bins).
    pub fn read_count(&mut self, given: Option<u32>, setting: &Setting) -> Option<usize> {
        self.read(given.map(f64::from), setting).map(|v| v as usize)
    }

    /// Records that `setting`'s default was applied (a caller that resolves an unset field
    /// itself, e.g. from another field, still records it here).
    pub fn record(&mut self, setting: &Setting) {
        let field = if self.path.is_empty() {
            setting.name.to_string()
        } else {
            format!("{}.{}", self.path, setting.name)
        };
        self.defaults.note(&field, &setting.default_text(), setting.reason);
    }

    /// Records a default that is not a number (an enum choice) at `path.name`.
    pub fn record_choice(&mut self, name: &str, value: &str, reason: &str) {
        let field = if self.path.is_empty() { name.to_string() } else { format!("{}.{name}", self.path) };
        self.defaults.note(&field, value, reason);
    }

    /// The range errors collected so far, for conversions that continue with other fields.
    pub fn check(&mut self) -> &mut Check {
        self.check
    }
}

#[cfg(test)]
mod tests {
    //! The proto files document every option's allowed range ("Allowed [a, b]") and default
    //! ("Unset: v") in comments, for clients that never read this code. These tests read those
    //! comments and compare them with the [`Setting`] constants the server applies, so the two
    //! cannot drift apart.

    use super::*;
    use crate::dsp::tones::ToneConfig;
    use crate::dsp::welch::WelchConfig;
    use crate::physics::cells::CellOptions;
    use crate::physics::guided::ClosureOptions;
    use crate::physics::staging::FitDefaults;
    use crate::physics::{gas, jet};
    use std::collections::HashMap;

    /// The proto sources, read at compile time.
    const PROTOS: [(&str, &str); 7] = [
        ("calibration.proto", include_str!("../../../proto/jetloop/v1/calibration.proto")),
        ("common.proto", include_str!("../../../proto/jetloop/v1/common.proto")),
        ("gas_dynamics.proto", include_str!("../../../proto/jetloop/v1/gas_dynamics.proto")),
        ("shock_cells.proto", include_str!("../../../proto/jetloop/v1/shock_cells.proto")),
        ("spectrum.proto", include_str!("../../../proto/jetloop/v1/spectrum.proto")),
        ("staging.proto", include_str!("../../../proto/jetloop/v1/staging.proto")),
        ("tones.proto", include_str!("../../../proto/jetloop/v1/tones.proto")),
    ];

    /// How the proto comment states the default.
    enum Unset {
        /// As the setting's default value.
        Value,
        /// In words (the default is a sentinel the server resolves, e.g. "the main-lobe
        /// half-width" for 0).
        Words(&'static str),
    }

    /// Every setting read through [`Fields`], with the proto field (`Message.field`) it reads.
    fn registry() -> Vec<(&'static str, Setting, Unset)> {
        vec![
            ("ToneOptions.threshold_db", ToneConfig::THRESHOLD_DB, Unset::Value),
            (
                "ToneOptions.min_separation_hz",
                ToneConfig::MIN_SEPARATION_HZ,
                Unset::Words("main-lobe half-width"),
            ),
            ("ToneOptions.floor_window_bins", ToneConfig::FLOOR_WINDOW_BINS, Unset::Value),
            ("ToneOptions.max_tones", ToneConfig::MAX_TONES, Unset::Value),
            ("ToneOptions.harmonic_tolerance_bins", ToneConfig::HARMONIC_TOLERANCE_BINS, Unset::Value),
            ("ToneOptions.max_harmonic_order", ToneConfig::MAX_HARMONIC_ORDER, Unset::Value),
            ("WelchOptions.overlap_fraction", WelchConfig::OVERLAP_FRACTION, Unset::Value),
            ("FitOptions.jump_fraction", FitDefaults::JUMP_FRACTION, Unset::Value),
            ("FitOptions.max_loop_order", FitDefaults::MAX_LOOP_ORDER, Unset::Value),
            ("FitOptions.convection_ratio_min", FitDefaults::CONVECTION_RATIO_MIN, Unset::Value),
            ("FitOptions.convection_ratio_max", FitDefaults::CONVECTION_RATIO_MAX, Unset::Value),
            ("FitOptions.source_cells_min", FitDefaults::SOURCE_CELLS_MIN, Unset::Value),
            ("FitOptions.source_cells_max", FitDefaults::SOURCE_CELLS_MAX, Unset::Value),
            ("FitOptions.reflector_path_factor", FitDefaults::REFLECTOR_PATH_FACTOR, Unset::Value),
            (
                "FitOptions.default_relative_uncertainty",
                FitDefaults::DEFAULT_RELATIVE_UNCERTAINTY,
                Unset::Value,
            ),
            ("GuidedModeOptions.convection_ratio", ClosureOptions::CONVECTION_RATIO, Unset::Value),
            ("GuidedModeOptions.spacing_factor", ClosureOptions::SPACING_FACTOR, Unset::Value),
            ("GuidedModesRequest.curve_points", ClosureOptions::CURVE_POINTS, Unset::Value),
            (
                "StageLabelOptions.band_tolerance_fraction",
                ClosureOptions::BAND_TOLERANCE_FRACTION,
                Unset::Value,
            ),
            (
                "StageLabelSettings.band_tolerance_fraction",
                ClosureOptions::BAND_TOLERANCE_FRACTION,
                Unset::Value,
            ),
            ("CellOptions.spacing_factor", CellOptions::SPACING_FACTOR, Unset::Value),
            ("CellOptions.shock_count", CellOptions::SHOCK_COUNT, Unset::Value),
            ("FeedbackLoop.max_loop_order", crate::physics::tones::MAX_LOOP_ORDER, Unset::Value),
            ("ScreechOptions.harmonics", crate::physics::screech::HARMONICS, Unset::Value),
            ("GuidedModeOptions.cell_modes", ClosureOptions::CELL_MODES, Unset::Value),
            ("Gas.gamma", gas::JET_GAMMA, Unset::Value),
            ("Gas.gas_constant_j_per_kg_k", gas::JET_GAS_CONSTANT, Unset::Value),
            ("Gas.gamma", gas::AMBIENT_GAMMA, Unset::Value),
            ("Gas.gas_constant_j_per_kg_k", gas::AMBIENT_GAS_CONSTANT, Unset::Value),
            ("IsentropicRatiosRequest.gamma", gas::JET_GAMMA, Unset::Value),
            ("NormalShockRequest.gamma", gas::JET_GAMMA, Unset::Value),
            ("VortexSheetJet.gamma", gas::JET_GAMMA, Unset::Value),
            ("JetConditions.ideal_expansion_tolerance", jet::IDEAL_EXPANSION_TOLERANCE, Unset::Value),
            ("OperatingPoint.ambient_temperature_k", jet::AMBIENT_TEMPERATURE, Unset::Value),
            ("OperatingPoint.ambient_pressure_pa", jet::AMBIENT_PRESSURE, Unset::Value),
            (
                "OperatingPoint.total_temperature_k",
                jet::TOTAL_TEMPERATURE,
                Unset::Words("ambient temperature"),
            ),
            ("FullyExpandedJet.ambient_temperature_k", jet::AMBIENT_TEMPERATURE, Unset::Value),
            (
                "FullyExpandedJet.total_temperature_k",
                jet::TOTAL_TEMPERATURE,
                Unset::Words("ambient temperature"),
            ),
            ("RectangularNozzle.design_mach_number", jet::DESIGN_MACH_NUMBER, Unset::Value),
            ("PlanarNozzle.design_mach_number", jet::DESIGN_MACH_NUMBER, Unset::Value),
            ("AnalyseRampRequest.frame_duration_s", crate::dsp::ramp::FRAME_DURATION, Unset::Value),
            ("ControlChannel.ambient_pressure_pa", crate::dsp::ramp::AMBIENT_PRESSURE, Unset::Value),
            ("TrackConfig.jump_fraction", crate::dsp::track::JUMP_FRACTION, Unset::Value),
            ("Atmosphere.pressure_pa", crate::dsp::corrections::ATMOSPHERE_PRESSURE, Unset::Value),
            (
                "CalibratorSensitivityRequest.frequency_tolerance_fraction",
                crate::dsp::calibrator::CalibratorConfig::FREQUENCY_TOLERANCE_FRACTION,
                Unset::Value,
            ),
            (
                "CalibratorSensitivityRequest.max_harmonic_order",
                crate::dsp::calibrator::CalibratorConfig::MAX_HARMONIC_ORDER,
                Unset::Value,
            ),
        ]
    }

    /// The comment above each field, by `Message.field` (nested messages by their own name),
    /// with the file it is in.
    fn field_comments() -> HashMap<String, (String, &'static str)> {
        let mut out = HashMap::new();
        for (file, text) in PROTOS {
            let mut messages: Vec<String> = Vec::new();
            let mut comment = String::new();
            for line in text.lines().map(str::trim) {
                if let Some(c) = line.strip_prefix("//") {
                    comment.push_str(c.trim());
                    comment.push(' ');
                    continue;
                }
                let words: Vec<&str> = line.split_whitespace().collect();
                match words.as_slice() {
                    ["message", name, "{", ..] => messages.push((*name).to_string()),
                    ["oneof", _, "{", ..] | ["enum", _, "{", ..] => messages.push(String::new()),
                    ["}", ..] => {
                        messages.pop();
                    }
                    _ => {
                        // `[optional|repeated] type name = n;`
                        if let Some(eq) = words.iter().position(|w| *w == "=") {
                            let owner = messages.iter().rev().find(|m| !m.is_empty());
                            if let (Some(owner), true) = (owner, eq >= 2) {
                                out.insert(format!("{owner}.{}", words[eq - 1]), (comment.clone(), file));
                            }
                        }
                    }
                }
                comment.clear();
            }
        }
        out
    }

    /// The first number in `s` (an optional sign, digits, a fraction, an exponent).
    fn number(s: &str) -> Option<f64> {
        let s = s.trim_start();
        let end = s
            .char_indices()
            .take_while(|&(i, c)| {
                c.is_ascii_digit()
                    || c == '.'
                    || ((c == '-' || c == '+') && (i == 0 || s[..i].ends_with(['e', 'E'])))
                    || ((c == 'e' || c == 'E') && i > 0)
            })
            .last()
            .map(|(i, c)| i + c.len_utf8())?;
        // A sentence's full stop after the number is not part of it.
        let n: f64 = s[..end].trim_end_matches('.').parse().ok()?;
        // A fraction such as 5/3.
        match s[end..].strip_prefix('/').and_then(number) {
            Some(d)
                if s[end..].starts_with('/') && s[end + 1..].starts_with(|c: char| c.is_ascii_digit()) =>
            {
                Some(n / d)
            }
            _ => Some(n),
        }
    }

    /// The interval after "Allowed" in `comment`: (lower bracket, lower end, upper end, upper
    /// bracket), an end `None` where the comment names another field (e.g. "(min, 1.5]").
    fn allowed(comment: &str) -> Option<(char, Option<f64>, Option<f64>, char)> {
        let rest = &comment[comment.find("Allowed ")? + "Allowed ".len()..];
        let open = rest.chars().next().filter(|c| *c == '[' || *c == '(')?;
        let close_at = rest.find([']', ')'])?;
        let inner = &rest[1..close_at];
        let (lo, hi) = inner.split_once(',')?;
        let close = rest[close_at..].chars().next()?;
        Some((open, number(lo), number(hi), close))
    }

    #[test]
    fn proto_comments_state_the_bounds_and_defaults_the_code_applies() {
        let comments = field_comments();
        let mut wrong = Vec::new();
        for (field, setting, unset) in registry() {
            let Some((comment, file)) = comments.get(field) else {
                wrong.push(format!("{field}: no such field in the proto files"));
                continue;
            };
            let field_name = field.rsplit('.').next().unwrap_or_default();
            if setting.name != field_name {
                wrong.push(format!("{field}: the setting is named {}", setting.name));
            }
            let b = setting.bounds;
            match allowed(comment) {
                None => wrong.push(format!("{file} {field}: no \"Allowed [a, b]\" in: {comment}")),
                Some((open, lo, hi, close)) => {
                    if (open == '[') != b.min_inclusive || lo.is_some_and(|v| v != b.min) {
                        wrong.push(format!("{file} {field}: comment says {open}{lo:?}, code {b}"));
                    }
                    if (close == ']') != b.max_inclusive || hi.is_some_and(|v| v != b.max) {
                        wrong.push(format!("{file} {field}: comment says {hi:?}{close}, code {b}"));
                    }
                }
            }
            let Some(at) = comment.find("Unset") else {
                wrong.push(format!("{file} {field}: no \"Unset: ...\" in: {comment}"));
                continue;
            };
            let stated = comment[at..].split_once(':').map(|x| x.1).unwrap_or_default();
            match unset {
                Unset::Value => {
                    if number(stated) != Some(setting.default) {
                        wrong.push(format!(
                            "{file} {field}: comment says Unset:{stated} but the code applies {}",
                            setting.default_text()
                        ));
                    }
                }
                Unset::Words(words) => {
                    if !stated.contains(words) {
                        wrong.push(format!("{file} {field}: comment should say \"{words}\": {stated}"));
                    }
                }
            }
            if !b.contains(setting.default) && !matches!(unset, Unset::Words(_)) {
                wrong.push(format!("{field}: the default {} lies outside {b}", setting.default));
            }
        }
        assert!(wrong.is_empty(), "proto comments and code disagree:\n{}", wrong.join("\n"));
    }

    #[test]
    fn the_comment_reader_finds_intervals_and_numbers() {
        assert_eq!(allowed("x. Allowed [0, 1e6]. Unset: 2."), Some(('[', Some(0.0), Some(1e6), ']')));
        assert_eq!(allowed("Allowed (min, 1.5]."), Some(('(', None, Some(1.5), ']')));
        assert_eq!(number(" 0.05."), Some(0.05));
        assert_eq!(number(" -2.5e-3 Pa"), Some(-2.5e-3));
        assert_eq!(number(" the main-lobe half-width"), None);
        assert_eq!(number("5/3]"), Some(5.0 / 3.0));
        // A comment whose range disagrees with the code is reported (the check can fail).
        let comments = field_comments();
        assert!(comments["ToneOptions.threshold_db"].0.contains("Allowed [0, 100]"));
    }

    #[test]
    fn a_read_field_is_checked_or_its_default_recorded() {
        let mut check = Check::new();
        let mut defaults = Defaults::default();
        let mut f = Fields::new(&mut check, &mut defaults, "tones");
        assert_eq!(f.read(None, &ToneConfig::THRESHOLD_DB), Some(6.0));
        assert_eq!(f.read(Some(12.0), &ToneConfig::THRESHOLD_DB), Some(12.0));
        assert_eq!(f.read(Some(-1.0), &ToneConfig::THRESHOLD_DB), None);
        assert_eq!(defaults.0.len(), 1);
        assert_eq!(defaults.0[0].field, "tones.threshold_db");
        assert_eq!(defaults.0[0].value, "6 dB");
        assert!(!check.is_clean());
    }
}
