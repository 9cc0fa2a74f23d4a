//! Benchmark: spectral analysis of 2^21 f32 samples at 204.8 kHz (Hann 8192, 50 % overlap,
//! tones + bands): the Welch PSD alone in-process, and ExtractTones end to end over loopback
//! gRPC with a Rust client. `bench/spectrum_vs_scipy.py` compares with SciPy from Python.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-spectrum [-- REPEATS]`.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, samples::Data, spectrum_service_client::SpectrumServiceClient};
use jetloop_server::dsp::welch::{welch, Detrend, WelchConfig};
use jetloop_server::dsp::window::Window;
use jetloop_tests::samples::{f32_pascals, frames_block, opening_block, welch_segment};
use jetloop_tests::signals::XorShift;
use jetloop_tests::{median, TestServer};
use std::time::Instant;

#[tokio::main]
async fn main() {
    let repeats: usize = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(20);
    let (fs, n) = (204_800.0, 1usize << 21);
    let mut rng = XorShift::new(1);
    let x: Vec<f32> = (0..n)
        .map(|i| {
            let noise = rng.centered();
            let t = i as f64 / fs;
            (10.0 * noise + 300.0 * (2.0 * std::f64::consts::PI * 5230.0 * t).sin()) as f32
        })
        .collect();
    let xf: Vec<f64> = x.iter().map(|v| f64::from(*v)).collect();
    let cfg = WelchConfig { window: Window::Hann, nperseg: 8192, noverlap: 4096, detrend: Detrend::Mean };
    let mut t_welch = Vec::new();
    for _ in 0..repeats {
        let t = Instant::now();
        let p = welch(&xf, fs, cfg).expect("welch");
        t_welch.push(t.elapsed().as_secs_f64() * 1e3);
        assert_eq!(p.segments, 511);
    }
    let bytes: Vec<u8> = x.iter().flat_map(|v| v.to_le_bytes()).collect();
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await).max_encoding_message_size(64 << 20);
    let req = pb::ExtractTonesRequest {
        samples: Some(f32_pascals(bytes, fs, 0)),
        welch: Some(welch_segment(8192)),
        include_band_levels: true,
        ..Default::default()
    };
    let (mut rtt, mut comp) = (Vec::new(), Vec::new());
    for i in 0..repeats + 2 {
        let t = Instant::now();
        let r = c.extract_tones(req.clone()).await.expect("extract").into_inner();
        if i >= 2 {
            rtt.push(t.elapsed().as_secs_f64() * 1e3);
            comp.push(r.compute_time_s * 1e3);
        }
    }
    // The same samples in blocks of 512 KiB (ExtractTonesStream), built before timing.
    let mut head = req.clone();
    if let Some(Data::Raw(r)) = head.samples.as_mut().and_then(|s| s.data.as_mut()) {
        r.data = Default::default();
    }
    let raw = match req.samples.as_ref().and_then(|s| s.data.as_ref()) {
        Some(Data::Raw(r)) => r.data.clone(),
        _ => Default::default(),
    };
    let mut msgs = vec![opening_block(head)];
    for a in (0..raw.len()).step_by(512 * 1024) {
        msgs.push(frames_block(raw.slice(a..(a + 512 * 1024).min(raw.len()))));
    }
    let (mut st, mut tail) = (Vec::new(), Vec::new());
    for i in 0..repeats + 2 {
        let t = Instant::now();
        let r = c.extract_tones_stream(tokio_stream::iter(msgs.clone())).await.expect("stream").into_inner();
        if i >= 2 {
            st.push(t.elapsed().as_secs_f64() * 1e3);
            tail.push(r.compute_time_s * 1e3);
        }
    }
    // Transport alone: the same 8 MB with a sample rate the server rejects right after decoding.
    let mut bad = req.clone();
    if let Some(s) = bad.samples.as_mut() {
        s.sample_rate_hz = 0.0;
    }
    let mut tr = Vec::new();
    for _ in 0..repeats {
        let t = Instant::now();
        let _ = c.extract_tones(bad.clone()).await;
        tr.push(t.elapsed().as_secs_f64() * 1e3);
    }
    server.stop().await;
    let m = n as f64 / 1e6;
    println!("  8 MB request rejected after upload (transport only): {:7.2} ms", median(tr));
    let (w, r, c) = (median(t_welch), median(rtt), median(comp));
    println!("2^21 f32 samples at 204.8 kHz, Hann 8192, 50 % overlap, {repeats} repeats (medians), {} rayon threads", rayon_threads());
    println!("  Welch PSD in-process:                    {w:7.2} ms ({:.2} ms per million samples)", w / m);
    println!("  ExtractTones + bands, server compute:    {c:7.2} ms ({:.2} ms per million samples)", c / m);
    println!("  ExtractTones + bands, Rust client RTT:   {r:7.2} ms ({:.2} ms per million samples)", r / m);
    let (st, tail) = (median(st), median(tail));
    println!("  ExtractTonesStream, 512 KiB blocks:      {st:7.2} ms ({:.2} ms per million samples)", st / m);
    println!("    of which after the last block:         {tail:7.2} ms");
}

fn rayon_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}
