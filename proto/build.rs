//! Generates the jetloop.v1 client and server code with a pure-Rust protobuf compiler (protox),
//! so a fresh machine needs no system `protoc`.

use prost::Message;
use std::{env, fs, path::PathBuf};

const PROTOS: &[&str] =
    &["jetloop/v1/common.proto", "jetloop/v1/gas_dynamics.proto", "jetloop/v1/info.proto"];

fn main() -> Result<(), Box<dyn std::error::Error>> {
    for p in PROTOS {
        println!("cargo:rerun-if-changed={p}");
    }
    let fds = protox::compile(PROTOS, ["."])?;
    let out = PathBuf::from(env::var("OUT_DIR")?);
    fs::write(out.join("jetloop_v1_descriptor.bin"), fds.encode_to_vec())?;
    tonic_prost_build::configure().build_client(true).build_server(true).compile_fds(fds)?;
    Ok(())
}
