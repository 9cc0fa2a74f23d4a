//! A compiled gRPC client for `bench/spectrum_vs_scipy.py`, standing for a DAQ program: it
//! loads little-endian f32 samples from a file once, then for each line on stdin (`unary` or
//! `stream`) runs one tone extraction with bands and prints `elapsed_ms server_ms tone_hz...`.
//! The script interleaves these calls with SciPy calls in its own process, so both are
//! timed side by side in one run.
//!
//! Usage: `bench-client ADDR SAMPLES.f32 SAMPLE_RATE_HZ SEGMENT BLOCK_BYTES`
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::samples::{f32_pascals, frames_block, opening_block, welch_segment};
use std::io::BufRead;
use std::time::Instant;

fn arg<T: std::str::FromStr>(i: usize, what: &str) -> T {
    std::env::args().nth(i).and_then(|s| s.parse().ok()).unwrap_or_else(|| {
        eprintln!("usage: bench-client ADDR SAMPLES.f32 SAMPLE_RATE_HZ SEGMENT BLOCK_BYTES ({what} missing)");
        std::process::exit(2)
    })
}

#[tokio::main(flavor = "current_thread")]
async fn main() {
    let addr: String = arg(1, "ADDR");
    let path: String = arg(2, "SAMPLES.f32");
    let fs: f64 = arg(3, "SAMPLE_RATE_HZ");
    let segment: u32 = arg(4, "SEGMENT");
    let block: usize = arg(5, "BLOCK_BYTES");
    let data = bytes::Bytes::from(std::fs::read(&path).expect("read the samples file"));
    let channel = tonic::transport::Endpoint::from_shared(format!("http://{addr}"))
        .expect("address")
        .tcp_nodelay(true)
        .initial_stream_window_size(16 << 20)
        .initial_connection_window_size(32 << 20)
        .connect()
        .await
        .expect("connect");
    let mut c = SpectrumServiceClient::new(channel).max_encoding_message_size(256 << 20);
    let question = |data: bytes::Bytes| pb::ExtractTonesRequest {
        samples: Some(f32_pascals(data, fs, 0)),
        welch: Some(welch_segment(segment)),
        include_band_levels: true,
        ..Default::default()
    };
    // Built once, as the caller's sample array is; cloning shares the bytes.
    let unary = question(data.clone());
    let mut blocks = vec![opening_block(question(bytes::Bytes::new()))];
    let step = (block / 4).max(1) * 4;
    for a in (0..data.len()).step_by(step) {
        blocks.push(frames_block(data.slice(a..(a + step).min(data.len()))));
    }
    for line in std::io::stdin().lock().lines() {
        let Ok(line) = line else { break };
        let t = Instant::now();
        let r = match line.trim() {
            "unary" => c.extract_tones(unary.clone()).await,
            "stream" => c.extract_tones_stream(tokio_stream::iter(blocks.clone())).await,
            other => {
                eprintln!("unknown command {other:?}: use unary or stream");
                continue;
            }
        };
        let ms = t.elapsed().as_secs_f64() * 1e3;
        match r {
            Ok(r) => {
                let r = r.into_inner();
                let tones: Vec<String> = r
                    .channels
                    .first()
                    .map(|c| c.tones.iter().map(|t| format!("{:.6}", t.frequency_hz)).collect())
                    .unwrap_or_default();
                println!("{ms:.4} {:.4} {}", r.compute_time_s * 1e3, tones.join(" "));
            }
            Err(e) => println!("error {}", e.message().replace('\n', " ")),
        }
    }
}
