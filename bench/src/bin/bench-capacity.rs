//! Capacity load generator: drives a gRPC server with unary calls from many concurrent
//! clients over loopback and prints throughput and latency percentiles as one JSON line.
//!
//! Usage:
//! `bench-capacity ADDR CALL [--connections N] [--in-flight M] [--seconds S] [--rate R]`
//! - CALL: `physics` (IsentropicRatios at M = 2: answered by jetloop, by the bare tonic echo
//!   `bench-echo-server` and by the Python grpcio server `bench/python_grpc_server.py` alike)
//!   or `tones` (ExtractTones on 8192 f32 samples at 51.2 kHz; jetloop only).
//! - Closed loop (default): N connections x M calls in flight, each call sent when the last
//!   returned; throughput is the maximum the pair sustains.
//! - Open loop (`--rate R`): calls sent at R per second whatever the answers (latency counted
//!   from each call's scheduled time, so a stall is not hidden).
//!
//! `bench/capacity.py` runs it against the three servers side by side.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient,
    spectrum_service_client::SpectrumServiceClient,
};
use std::sync::atomic::{AtomicBool, Ordering::Relaxed};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

fn flag<T: std::str::FromStr>(name: &str, default: T) -> T {
    let args: Vec<String> = std::env::args().collect();
    args.iter()
        .position(|a| a == name)
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

#[derive(Clone)]
enum Call {
    Physics(GasDynamicsServiceClient<tonic::transport::Channel>),
    Tones(SpectrumServiceClient<tonic::transport::Channel>, Box<pb::ExtractTonesRequest>),
}

impl Call {
    async fn once(&mut self) -> Result<(), tonic::Status> {
        match self {
            Call::Physics(c) => c
                .isentropic_ratios(pb::IsentropicRatiosRequest {
                    given: Some(pb::isentropic_ratios_request::Given::MachNumber(2.0)),
                    ..Default::default()
                })
                .await
                .map(|_| ()),
            Call::Tones(c, r) => c.extract_tones((**r).clone()).await.map(|_| ()),
        }
    }
}

/// 8192 f32 samples of a unit 4.1 kHz tone at 51.2 kHz, one channel in pascals.
fn tones_request() -> pb::ExtractTonesRequest {
    let fs = 51_200.0;
    let data = jetloop_tests::signals::f32_le(&jetloop_tests::sine(8192, fs, 4100.0, 1.0));
    jetloop_tests::tones_request(jetloop_tests::f32_pascals(data, fs, 0))
}

fn percentile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let k = ((p / 100.0) * (sorted.len() - 1) as f64).round() as usize;
    sorted[k.min(sorted.len() - 1)]
}

#[tokio::main]
async fn main() {
    let addr = std::env::args().nth(1).unwrap_or_else(|| {
        eprintln!("usage: bench-capacity ADDR physics|tones [--connections N] [--in-flight M] [--seconds S] [--rate R]");
        std::process::exit(2)
    });
    let what = std::env::args().nth(2).unwrap_or_else(|| "physics".into());
    let connections: usize = flag("--connections", 4);
    let in_flight: usize = flag("--in-flight", 16);
    let seconds: f64 = flag("--seconds", 5.0);
    let rate: f64 = flag("--rate", 0.0);
    // The client's HTTP/2 receive windows, bytes (stream; the connection gets 16 times it);
    // unset: tonic's defaults.
    let window: Option<u32> = std::env::args().any(|a| a == "--window").then(|| flag("--window", 1 << 20));
    let mut calls = Vec::new();
    for _ in 0..connections {
        let ch = tonic::transport::Endpoint::from_shared(format!("http://{addr}"))
            .expect("address")
            .tcp_nodelay(true)
            .initial_stream_window_size(window)
            .initial_connection_window_size(window.map(|w| w.saturating_mul(16)))
            .connect()
            .await
            .expect("connect");
        calls.push(match what.as_str() {
            "tones" => Call::Tones(SpectrumServiceClient::new(ch), Box::new(tones_request())),
            _ => Call::Physics(GasDynamicsServiceClient::new(ch)),
        });
    }
    // Warm up: a second of calls on every connection.
    let warm_end = Instant::now() + Duration::from_millis(500);
    for c in &mut calls {
        while Instant::now() < warm_end {
            let _ = c.once().await;
        }
    }
    let latencies = Arc::new(Mutex::new(Vec::<f64>::with_capacity(1 << 20)));
    let errors = Arc::new(std::sync::atomic::AtomicU64::new(0));
    let stop = Arc::new(AtomicBool::new(false));
    let started = Instant::now();
    let mut tasks = Vec::new();
    if rate > 0.0 {
        // Open loop: calls go out at the offered rate whatever the answers, each its own task.
        // The timer ticks every millisecond, so the calls due in a tick go out together and
        // each call's latency counts from when it went out (the ticker's own lag of up to a
        // tick is the generator's, not the server's).
        let interval = Duration::from_secs_f64(1.0 / rate);
        let total = (rate * seconds) as u64;
        for i in 0..total {
            let due = started + interval.mul_f64(i as f64);
            if due > Instant::now() {
                tokio::time::sleep_until(due.into()).await;
            }
            let mut c = calls[i as usize % calls.len()].clone();
            let (lat, err) = (latencies.clone(), errors.clone());
            tasks.push(tokio::spawn(async move {
                let at = Instant::now();
                let r = c.once().await;
                let l = at.elapsed().as_secs_f64();
                if r.is_err() {
                    err.fetch_add(1, Relaxed);
                }
                if let Ok(mut v) = lat.lock() {
                    v.push(l);
                }
            }));
        }
    } else {
        for c in &calls {
            for _ in 0..in_flight {
                let (mut c, lat, err, stop) = (c.clone(), latencies.clone(), errors.clone(), stop.clone());
                tasks.push(tokio::spawn(async move {
                    let mut mine = Vec::with_capacity(1 << 16);
                    while !stop.load(Relaxed) {
                        let t = Instant::now();
                        if let Err(e) = c.once().await {
                            if err.fetch_add(1, Relaxed) == 0 {
                                eprintln!("first error: {e:?}");
                            }
                        }
                        mine.push(t.elapsed().as_secs_f64());
                    }
                    if let Ok(mut v) = lat.lock() {
                        v.extend(mine);
                    }
                }));
            }
        }
        tokio::time::sleep(Duration::from_secs_f64(seconds)).await;
        stop.store(true, Relaxed);
    }
    for t in tasks {
        let _ = t.await;
    }
    let elapsed = started.elapsed().as_secs_f64();
    let mut v = latencies.lock().map(|v| v.clone()).unwrap_or_default();
    v.sort_by(f64::total_cmp);
    let us = |p: f64| percentile(&v, p) * 1e6;
    println!(
        "{{\"call\":\"{what}\",\"mode\":\"{}\",\"connections\":{connections},\"in_flight\":{},\"calls\":{},\"errors\":{},\"seconds\":{elapsed:.3},\"calls_per_s\":{:.1},\"p50_us\":{:.1},\"p90_us\":{:.1},\"p99_us\":{:.1},\"max_us\":{:.1}}}",
        if rate > 0.0 { "open" } else { "closed" },
        if rate > 0.0 { 0 } else { connections * in_flight },
        v.len(),
        errors.load(Relaxed),
        v.len() as f64 / elapsed,
        us(50.0),
        us(90.0),
        us(99.0),
        us(100.0)
    );
}
