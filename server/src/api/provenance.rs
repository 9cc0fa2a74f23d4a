//! Provenance attached to every response.

use crate::physics::models::Model;
use jetloop_proto::pb;

/// Version of this server (from Cargo).
pub const SERVER_VERSION: &str = env!("CARGO_PKG_VERSION");

/// A default applied to a field the request left unset.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Default {
    /// Field path.
    pub field: String,
    /// Value applied, with unit.
    pub value: String,
    /// Why.
    pub reason: String,
}

/// Defaults applied while converting one request (`.0`), and cautions about values given
/// that a laboratory rarely means (`.1`, e.g. millimetres typed as metres), which the answer's
/// provenance notes carry.
#[derive(Debug, Clone, PartialEq, Eq, core::default::Default)]
pub struct Defaults(pub Vec<Default>, pub Vec<String>);

impl Defaults {
    /// Records a caution sentence (once).
    pub fn caution(&mut self, text: Option<String>) {
        if let Some(t) = text {
            if !self.1.contains(&t) {
                self.1.push(t);
            }
        }
    }

    /// Takes in what `other` recorded: its defaults and its cautions.
    pub fn absorb(&mut self, other: &Defaults) {
        self.0.extend(other.0.iter().cloned());
        for c in &other.1 {
            self.caution(Some(c.clone()));
        }
    }

    /// Records a default that is not a number (an enum choice). Numeric defaults are read
    /// through [`crate::api::field::Fields`], which records them.
    pub fn note(&mut self, field: &str, value: &str, reason: &str) {
        self.0.push(Default { field: field.into(), value: value.into(), reason: reason.into() });
    }
}

/// Builds the provenance message.
pub fn provenance(models: &[Model], defaults: &Defaults, notes: Vec<String>) -> pb::Provenance {
    provenance_owned(models, defaults.clone(), notes)
}

/// [`provenance`] taking the defaults, whose texts then move into the message instead of
/// being copied (the physics calls answered most often use this).
pub fn provenance_owned(models: &[Model], defaults: Defaults, mut notes: Vec<String>) -> pb::Provenance {
    let Defaults(applied, cautions) = defaults;
    for c in cautions {
        if !notes.contains(&c) {
            notes.push(c);
        }
    }
    pb::Provenance {
        server_version: SERVER_VERSION.to_string(),
        models: models.iter().map(model).collect(),
        defaults_applied: applied
            .into_iter()
            .map(|d| pb::AppliedDefault { field: d.field, value: d.value, reason: d.reason })
            .collect(),
        notes,
    }
}

/// One model as a proto message.
pub fn model(m: &Model) -> pb::ModelReference {
    pb::ModelReference { name: m.name.to_string(), reference: m.reference.to_string() }
}
