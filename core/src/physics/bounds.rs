//! Allowed ranges of physical inputs, defined once and reported verbatim in error messages.

use std::fmt;

/// A closed, open or half-open interval of allowed values with the unit they are given in.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bounds {
    /// Lower end of the interval.
    pub min: f64,
    /// Whether `min` itself is allowed.
    pub min_inclusive: bool,
    /// Upper end of the interval.
    pub max: f64,
    /// Whether `max` itself is allowed.
    pub max_inclusive: bool,
    /// Unit the values are given in ("" for dimensionless quantities).
    pub unit: &'static str,
}

impl Bounds {
    /// `(min, max]`: the usual range of a strictly positive quantity.
    pub const fn open_closed(min: f64, max: f64, unit: &'static str) -> Self {
        Self { min, min_inclusive: false, max, max_inclusive: true, unit }
    }

    /// `[min, max]`.
    pub const fn closed(min: f64, max: f64, unit: &'static str) -> Self {
        Self { min, min_inclusive: true, max, max_inclusive: true, unit }
    }

    /// `[min, max)`.
    pub const fn closed_open(min: f64, max: f64, unit: &'static str) -> Self {
        Self { min, min_inclusive: true, max, max_inclusive: false, unit }
    }

    /// True when `v` is finite and inside the interval (NaN and infinities are never inside).
    pub fn contains(&self, v: f64) -> bool {
        if !v.is_finite() {
            return false;
        }
        let lo = if self.min_inclusive { v >= self.min } else { v > self.min };
        let hi = if self.max_inclusive { v <= self.max } else { v < self.max };
        lo && hi
    }

    /// Checks `v`, naming the quantity in the error.
    ///
    /// # Errors
    /// [`RangeError`] when `v` is NaN, infinite or outside the interval.
    pub fn check(&self, quantity: &'static str, v: f64) -> Result<f64, RangeError> {
        if self.contains(v) {
            Ok(v)
        } else {
            Err(RangeError::new(quantity, v, self.to_string()))
        }
    }
}

impl fmt::Display for Bounds {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let l = if self.min_inclusive { '[' } else { '(' };
        let r = if self.max_inclusive { ']' } else { ')' };
        write!(f, "{l}{}, {}{r}", self.min, self.max)?;
        if !self.unit.is_empty() {
            write!(f, " {}", self.unit)?;
        }
        Ok(())
    }
}

/// An optional input: its name as the API spells it (the last part of the field path), its
/// allowed range, the value used when a caller leaves it unset, and why that value. Domain
/// option types hold one constant of this type per option: it is the only place the default
/// is written, and the API edge reads every optional field through it (checking the range and
/// recording the default in the answer's provenance in one step).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Setting {
    /// Name of the input as the API spells it, e.g. `threshold_db`.
    pub name: &'static str,
    /// Allowed values, with their unit.
    pub bounds: Bounds,
    /// Value used when the input is not given, in the unit of `bounds`.
    pub default: f64,
    /// Why that default (a source, a convention, or what it is enough for).
    pub reason: &'static str,
    /// The allowed range in words for error messages, when the bounds alone do not say it
    /// well (e.g. "(1, 5/3]: ..."); `None`: the bounds as an interval.
    pub allowed: Option<&'static str>,
}

impl Setting {
    /// A setting; `default` must lie inside `bounds` (checked by the tests of each user).
    pub const fn new(name: &'static str, bounds: Bounds, default: f64, reason: &'static str) -> Self {
        Self { name, bounds, default, reason, allowed: None }
    }

    /// The same setting with its allowed range explained in words in error messages.
    pub const fn explained(self, allowed: &'static str) -> Self {
        Self { allowed: Some(allowed), ..self }
    }

    /// Checks a given value against the bounds, naming the setting in the error.
    ///
    /// # Errors
    /// [`RangeError`] when `v` is NaN, infinite or outside the bounds.
    pub fn check(&self, v: f64) -> Result<f64, RangeError> {
        match self.allowed {
            Some(words) if !self.bounds.contains(v) => Err(RangeError::new(self.name, v, words)),
            _ => self.bounds.check(self.name, v),
        }
    }

    /// The default with its unit, as it is reported (e.g. `6` or `0.5 s`).
    pub fn default_text(&self) -> String {
        if self.bounds.unit.is_empty() {
            format!("{}", self.default)
        } else {
            format!("{} {}", self.default, self.bounds.unit)
        }
    }
}

/// A physical input outside its allowed range. `quantity` is the name of the input as the API
/// spells it (the last part of the field path), so the API layer can prefix the path.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{quantity} = {value} is outside the allowed range {allowed}")]
pub struct RangeError {
    /// Name of the offending input, e.g. `gamma`.
    pub quantity: &'static str,
    /// The value that was given.
    pub value: f64,
    /// The allowed range in words, with its unit.
    pub allowed: String,
}

impl RangeError {
    /// A new range error.
    pub fn new(quantity: &'static str, value: f64, allowed: impl Into<String>) -> Self {
        Self { quantity, value, allowed: allowed.into() }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn intervals_reject_nan_inf_and_respect_ends() {
        let b = Bounds::open_closed(1.0, 5.0, "");
        assert!(!b.contains(f64::NAN));
        assert!(!b.contains(f64::INFINITY));
        assert!(!b.contains(1.0));
        assert!(b.contains(5.0));
        assert_eq!(b.to_string(), "(1, 5]");
        let e = Bounds::closed(0.0, 1.0, "K").check("t", -1.0).unwrap_err();
        assert_eq!(e.allowed, "[0, 1] K");
    }
}
