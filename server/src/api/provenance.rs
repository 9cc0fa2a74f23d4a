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

/// Defaults applied while converting one request.
#[derive(Debug, Clone, PartialEq, Eq, core::default::Default)]
pub struct Defaults(pub Vec<Default>);

impl Defaults {
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
pub fn provenance_owned(models: &[Model], defaults: Defaults, notes: Vec<String>) -> pb::Provenance {
    pb::Provenance {
        server_version: SERVER_VERSION.to_string(),
        models: models.iter().map(model).collect(),
        defaults_applied: defaults
            .0
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
