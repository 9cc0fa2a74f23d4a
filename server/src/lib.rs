//! jetloop server library: pure physics and signal processing, the API edge that validates
//! proto messages into domain types, thin gRPC services, and the server assembly.
//!
//! Layering (arrows point down only): `service -> api -> {physics, dsp}`; `physics` and `dsp`
//! never import tonic, prost or tokio.
#![forbid(unsafe_code)]

pub mod admission;
pub mod api;
pub mod cancel;
pub mod config;
pub mod connections;
pub mod dsp;
pub mod metrics;
pub mod physics;
pub mod server;
pub mod service;
#[cfg(test)]
mod test_rng;
