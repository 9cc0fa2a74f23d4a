//! jetloop computation core: perfect-gas relations, the fully expanded jet, shock cells,
//! screech and stage models, guided jet modes, and the spectral analysis of calibrated
//! microphone recordings.
//!
//! This crate is pure by construction: it depends on no RPC framework, no protobuf runtime
//! and no async runtime (CI checks `cargo tree -p jetloop-core`). Inputs are plain numbers
//! in SI units checked by constructors; outputs are plain structs. Long computations take a
//! [`cancel::Cancel`] flag and check it between units of work.
#![forbid(unsafe_code)]

pub mod cancel;
pub mod dsp;
pub mod physics;
#[cfg(test)]
mod test_rng;
