//! Benchmark: guided-jet-mode screech maps and single predictions, over loopback gRPC.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-guided [-- REPEATS]`. Prints the
//! server compute time of a 100-point Mj sweep with 4 guided modes (bands and closure tones;
//! target < 100 ms) and the round trip of a single PredictScreech with the guided model
//! (target < 2 ms), median, min and max, so the figures need no timed test.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, sweep_screech_request::Values, tone_service_client::ToneServiceClient};
use jetloop_tests::{stats, TestServer};
use std::time::Instant;

#[tokio::main(flavor = "current_thread")]
async fn main() {
    let repeats: usize = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(20);
    let server = TestServer::start().await;
    let mut client = ToneServiceClient::new(server.channel().await);
    let options = pb::ScreechOptions {
        cells: Some(pb::CellOptions { spacing_factor: Some(0.8), ..Default::default() }),
        guided_modes: Some(pb::GuidedModeOptions::default()),
        ..Default::default()
    };
    let sweep = pb::SweepScreechRequest {
        jet: Some(jetloop_tests::fixtures::inch_nozzle(3.0)),
        variable: pb::SweepVariable::FullyExpandedMachNumber as i32,
        values: Some(Values::Range(pb::SweepRange { start: 1.05, stop: 2.0, count: 100 })),
        options: Some(options.clone()),
    };
    let single = pb::PredictScreechRequest {
        jet: Some(jetloop_tests::fixtures::inch_nozzle(3.0)),
        options: Some(options),
    };
    let (mut sweep_ms, mut single_ms) = (Vec::new(), Vec::new());
    for _ in 0..repeats + 2 {
        let r = client.sweep_screech(sweep.clone()).await.expect("sweep").into_inner();
        assert!(r.points.iter().all(|p| p.guided_modes.len() == 4));
        sweep_ms.push(r.compute_time_s * 1e3);
        let t = Instant::now();
        let r = client.predict_screech(single.clone()).await.expect("screech").into_inner();
        single_ms.push(t.elapsed().as_secs_f64() * 1e3);
        assert_eq!(r.guided_modes.len(), 4);
    }
    let (s_med, s_min, s_max) = stats(sweep_ms.split_off(2));
    let (p_med, p_min, p_max) = stats(single_ms.split_off(2));
    println!("guided-mode screech map: 100 Mj values x 4 modes (bands, closures for 2 cell modes), {repeats} repeats");
    println!(
        "  server compute time: median {s_med:.2} ms, min {s_min:.2} ms, max {s_max:.2} ms (target < 100 ms)"
    );
    println!("single PredictScreech with the guided model (4 modes), client round trip over loopback");
    println!("  median {p_med:.3} ms, min {p_min:.3} ms, max {p_max:.3} ms (target < 2 ms)");
    server.stop().await;
}
