//! Thin gRPC handlers: convert, compute, convert back. One file per service.

pub mod gas_dynamics;
pub mod info;
pub mod shock_cells;
pub mod spectrum;
pub mod staging;
pub mod tones;
