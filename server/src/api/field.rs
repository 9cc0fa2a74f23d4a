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
