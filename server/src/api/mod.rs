//! The edge between the wire and the domain: proto messages are validated and converted into
//! domain types in one step (`TryFrom`), and domain errors are mapped to `tonic::Status`.
//!
//! Nothing below this module sees a proto message; nothing above it sees an unchecked number.

pub mod error;
pub mod field;
pub mod gas;
pub mod guided;
pub mod jet_input;
pub mod provenance;
pub mod spectrum;
pub mod staging;
pub mod tones;

pub use error::{ApiError, Check, FieldViolation};
