//! Pure physics: perfect-gas relations, nozzles and the fully expanded jet.
//!
//! Nothing here knows about gRPC: inputs are plain numbers in SI units checked by the
//! constructors, outputs are plain structs. The API layer converts proto messages into these
//! types and back.

pub mod bessel;
pub mod bounds;
pub mod cells;
pub mod gas;
pub mod jet;
pub mod models;
pub mod tones;
mod roots;

pub use bounds::{Bounds, RangeError};
