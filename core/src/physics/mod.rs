//! Pure physics: perfect-gas relations, nozzles and the fully expanded jet.
//!
//! Nothing here knows about gRPC: inputs are plain numbers in SI units checked by the
//! constructors, outputs are plain structs. The API layer converts proto messages into these
//! types and back.

pub mod bessel;
pub mod bounds;
pub mod cells;
pub mod chi2;
pub mod gas;
pub mod guided;
pub mod jet;
pub mod lsq;
pub mod models;
mod roots;
pub mod screech;
pub mod staging;
pub mod tones;

pub use bounds::{Bounds, RangeError, Setting};
