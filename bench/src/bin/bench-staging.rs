//! Benchmark: FitStages on reflector and pressure sweeps over loopback gRPC, with the server
//! compute time from each response, for 1,000 points in 6 stages and how it scales with the
//! number of points and n_max.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-staging`.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, staging_service_client::StagingServiceClient};
use jetloop_tests::fixtures::{nozzle_only, point, pressure_sweep_points as pressure_points, round};
use jetloop_tests::{median, TestServer};

fn reflector_points(m: usize) -> Vec<pb::MeasuredTone> {
    let a = (1.4f64 * 287.05 * 288.15).sqrt();
    (0..m)
        .map(|k| {
            let n = 2 + (6 * k / m) as u32;
            let d = 0.05 * (k % (m / 6).max(1)) as f64 / (m / 6).max(1) as f64;
            point(d, f64::from(n) / (2.5e-4 + 2.0 * d / a))
        })
        .collect()
}

#[tokio::main]
async fn main() {
    let server = TestServer::start().await;
    let mut c = StagingServiceClient::new(server.channel().await).max_decoding_message_size(256 << 20);
    let jet = nozzle_only(round(0.0254));
    println!("FitStages server compute time (median of 15), 6 stages");
    println!("  {:>22} {:>8} {:>6} {:>12}", "sweep", "points", "n_max", "time [ms]");
    for (label, m, nmax) in [
        ("pressure, N searched", 1000, 10),
        ("pressure, N searched", 1000, 20),
        ("pressure, N searched", 1000, 50),
        ("pressure, N searched", 10_000, 10),
        ("pressure, N searched", 100_000, 10),
        ("pressure, N = 4 given", 1000, 10),
        ("reflector", 1000, 10),
        ("reflector", 100_000, 10),
    ] {
        let reflector = label == "reflector";
        let req = pb::FitStagesRequest {
            control: if reflector {
                pb::ControlVariable::ReflectorDistanceM
            } else {
                pb::ControlVariable::NozzlePressureRatio
            } as i32,
            points: if reflector { reflector_points(m) } else { pressure_points(m) },
            jet: (!reflector).then_some(jet),
            options: Some(pb::FitOptions {
                max_loop_order: Some(nmax),
                source_cells: label.contains("given").then_some(4),
                ..Default::default()
            }),
            stage_labels: None,
        };
        let mut t = Vec::new();
        let mut stages = 0;
        for _ in 0..15 {
            let r = c.fit_stages(req.clone()).await.expect("fit").into_inner();
            stages = r.stages.len();
            t.push(r.compute_time_s * 1e3);
        }
        println!("  {label:>22} {m:>8} {nmax:>6} {:>12.3}   ({stages} stages found)", median(t));
    }
    server.stop().await;
}
