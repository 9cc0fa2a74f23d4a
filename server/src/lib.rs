//! jetloop server library: pure physics and signal processing, the API edge that validates
//! proto messages into domain types, thin gRPC services, and the server assembly.
//!
//! Layering (arrows point down only): `service -> api -> {physics, dsp}`; `physics` and `dsp`
//! never import tonic, prost or tokio.
#![forbid(unsafe_code)]

// The computation lives in `jetloop-core`; re-exported so `crate::physics::...` paths in the
// API edge and services read as before.
pub use jetloop_core::{cancel, dsp, physics};

pub mod admission;
pub mod api;
pub mod config;
pub mod connections;
pub mod metrics;
pub mod server;
pub mod service;
