//! Benchmark: a screech sweep of 10,000 operating points with every model, over loopback gRPC.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-sweep [-- REPEATS]`. Prints the
//! server compute time reported in each response and the client round-trip time (median, min,
//! max), so the figure can be compared with the 20 ms target without a timed test.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, sweep_screech_request::Values, tone_service_client::ToneServiceClient};
use jetloop_tests::{stats, TestServer};
use std::time::Instant;

#[tokio::main]
async fn main() {
    let repeats: usize = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(20);
    let server = TestServer::start().await;
    let mut client =
        ToneServiceClient::new(server.channel().await).max_decoding_message_size(64 * 1024 * 1024);
    let request = pb::SweepScreechRequest {
        jet: Some(jetloop_tests::fixtures::inch_nozzle(3.0)),
        variable: pb::SweepVariable::NozzlePressureRatio as i32,
        values: Some(Values::Range(pb::SweepRange { start: 2.0, stop: 8.0, count: 10_000 })),
        options: Some(pb::ScreechOptions {
            r#loop: Some(pb::FeedbackLoop { max_loop_order: Some(4), ..Default::default() }),
            harmonics: Some(3),
            ..Default::default()
        }),
    };
    let (mut server_ms, mut rtt_ms) = (Vec::new(), Vec::new());
    let mut bytes = 0;
    for _ in 0..repeats + 2 {
        let t = Instant::now();
        let r = client.sweep_screech(request.clone()).await.expect("sweep").into_inner();
        let rtt = t.elapsed().as_secs_f64() * 1e3;
        assert_eq!(r.points.len(), 10_000);
        bytes = prost::Message::encoded_len(&r);
        server_ms.push(r.compute_time_s * 1e3);
        rtt_ms.push(rtt);
    }
    // The first two calls warm up connections and caches.
    let (s_med, s_min, s_max) = stats(server_ms.split_off(2));
    let (r_med, r_min, r_max) = stats(rtt_ms.split_off(2));
    println!("sweep of 10000 NPR points (Powell, Tam 1986, loop n = 1..4), {repeats} repeats");
    println!(
        "  server compute time: median {s_med:.3} ms, min {s_min:.3} ms, max {s_max:.3} ms (target < 20 ms)"
    );
    println!("  client round trip:   median {r_med:.3} ms, min {r_min:.3} ms, max {r_max:.3} ms");
    println!("  response size: {:.2} MB", bytes as f64 / 1e6);
    server.stop().await;
}
