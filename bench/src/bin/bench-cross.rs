//! Benchmark: cross-channel analysis against the single-channel analysis of the same samples,
//! over loopback gRPC.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-cross [-- REPEATS]`. Eight
//! channels of 2^21 f32 samples each (raw interleaved bytes, 204.8 kHz, invented ring data):
//! server compute time of ExtractTones (a PSD and tones per channel) and of CrossSpectra
//! (cross-spectra of seven channels against the first, tones, phase, coherence and the
//! azimuthal mode); target: CrossSpectra within 1.5x ExtractTones.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::samples::{ring_positions, welch_segment};
use jetloop_tests::{f32_pascals, ring_f32, stats, TestServer};

#[tokio::main]
async fn main() {
    let repeats: usize = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(10);
    let (m, n, fs) = (8usize, 1usize << 21, 204_800.0);
    // A spinning m = 1 tone at 5 kHz on a ring plus a deterministic pseudo-random floor.
    let bytes = ring_f32(m, n, fs, 12345);
    let samples = f32_pascals(bytes, fs, m as u32);
    let welch = welch_segment(8192);
    // 64 MiB of samples in one message: above the default request limit.
    let server = TestServer::start_with(jetloop_server::config::Limits {
        max_request_bytes: 128 << 20,
        ..Default::default()
    })
    .await;
    let mut c = SpectrumServiceClient::new(server.channel().await)
        .max_decoding_message_size(256 << 20)
        .max_encoding_message_size(256 << 20);
    let positions = ring_positions(m);
    let (mut single, mut cross) = (Vec::new(), Vec::new());
    for _ in 0..repeats + 1 {
        let r = c
            .extract_tones(pb::ExtractTonesRequest {
                samples: Some(samples.clone()),
                welch: Some(welch),
                ..Default::default()
            })
            .await
            .expect("tones")
            .into_inner();
        single.push(r.compute_time_s * 1e3);
        let x = c
            .cross_spectra(pb::CrossSpectraRequest {
                samples: Some(samples.clone()),
                welch: Some(welch),
                positions: positions.clone(),
                ..Default::default()
            })
            .await
            .expect("cross")
            .into_inner();
        assert_eq!(x.tones[0].modes.as_ref().map(|d| d.dominant_order), Some(1));
        cross.push(x.compute_time_s * 1e3);
    }
    let (s_med, s_min, s_max) = stats(single.split_off(1));
    let (x_med, x_min, x_max) = stats(cross.split_off(1));
    println!("8 channels x 2^21 f32 samples, segment 8192, {repeats} repeats, server compute time");
    println!(
        "  ExtractTones (PSD + tones per channel): median {s_med:.1} ms, min {s_min:.1}, max {s_max:.1}"
    );
    println!(
        "  CrossSpectra (7 cross-spectra + modes): median {x_med:.1} ms, min {x_min:.1}, max {x_max:.1}"
    );
    println!("  ratio of medians {:.2} (target at most 1.5)", x_med / s_med);
    server.stop().await;
}
