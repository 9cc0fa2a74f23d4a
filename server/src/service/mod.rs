//! Thin gRPC handlers: convert, compute, convert back. One file per service.

pub mod gas_dynamics;
pub mod info;
