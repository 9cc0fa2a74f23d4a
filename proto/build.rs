//! Generates the jetloop.v1 client and server code with a pure-Rust protobuf compiler (protox),
//! so a fresh machine needs no system `protoc`. Every `.proto` file under `jetloop/v1/` is
//! compiled.

use prost::Message;
use std::{env, fs, path::PathBuf};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    println!("cargo:rerun-if-changed=jetloop/v1");
    let mut protos: Vec<String> = fs::read_dir("jetloop/v1")?
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "proto"))
        .map(|p| p.to_string_lossy().into_owned())
        .collect();
    protos.sort();
    for p in &protos {
        println!("cargo:rerun-if-changed={p}");
    }
    let fds = protox::compile(&protos, ["."])?;
    let out = PathBuf::from(env::var("OUT_DIR")?);
    fs::write(out.join("jetloop_v1_descriptor.bin"), fds.encode_to_vec())?;
    // Raw sample bytes arrive as `Bytes`: prost then takes a slice of tonic's receive buffer
    // instead of copying megabytes of samples.
    tonic_prost_build::configure()
        .build_client(true)
        .build_server(true)
        .bytes(".jetloop.v1.RawSamples.data")
        .bytes(".jetloop.v1.SampleBlock.frames")
        .bytes(".jetloop.v1.CrossSpectraBlock.frames")
        .bytes(".jetloop.v1.RampBlock.frames")
        .bytes(".jetloop.v1.TrackRequest.frames")
        .compile_fds(fds)?;
    Ok(())
}
