//! jetloop server: the API edge that validates proto messages into domain types, thin gRPC
//! services, the runtime they share with the tower layers, the transport, and the assembly.
//!
//! Layering (arrows point down only):
//! `server -> {layers, transport, service, metrics} -> runtime -> api -> jetloop-core`.
//! The computation (`physics`, `dsp`, `cancel`) is the `jetloop-core` crate, which depends on
//! no RPC, protobuf or async runtime.
#![forbid(unsafe_code)]

// The computation lives in `jetloop-core`; re-exported so `crate::physics::...` paths in the
// API edge and services read as before.
pub use jetloop_core::{cancel, dsp, physics};

pub mod api;
pub mod config;
pub mod layers;
pub mod metrics;
pub mod runtime;
pub mod server;
pub mod service;
pub mod transport;
