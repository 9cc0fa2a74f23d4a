//! The edge between the wire and the domain: proto messages are validated and converted into
//! domain types in one step (`TryFrom`), and domain errors are mapped to `tonic::Status`.
//!
//! Nothing below this module sees a proto message; nothing above it sees an unchecked number.

pub mod calibration;
pub mod cells;
pub mod conditions;
pub mod error;
pub mod field;
pub mod gas;
pub mod guided;
pub mod jet_input;
pub mod provenance;
pub mod spectrum;
pub mod stage_labels;
pub mod staging;
pub mod sweep;
pub mod tones;

pub use error::{ApiError, Check, FieldViolation};

/// The three steps of every RPC at the API edge, named the same everywhere:
///
/// 1. `XQuery::try_from(pb::XRequest)`: validate and convert, every default recorded
///    ([`field::Fields`]);
/// 2. `query.compute(&cancel)`: compute with the pure core (`jetloop-core`), checking
///    `cancel` between units of work where the work is long;
/// 3. `x_message(...)`: build the response message from the query and the domain result
///    (functions named `*_message` in each module).
///
/// Services do 1 and 2 and nothing else.
pub trait Compute: Sized {
    /// The response message.
    type Response;

    /// Computes the answer and builds its response message.
    ///
    /// # Errors
    /// [`ApiError`] for results outside a model's range, and [`ApiError::Stopped`]-like errors
    /// when `cancel` was set (mapped to statuses in one place, [`error`]).
    fn compute(self, cancel: &crate::cancel::Cancel) -> Result<Self::Response, ApiError>;
}
