//! Benchmark: the live tracking stream (TrackTones) over loopback gRPC with 16 channels at
//! 204.8 kHz (f32, invented ring data), cross-spectra against channel 0 and the azimuthal mode
//! in every update.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-track [-- SECONDS]`.
//! 1. As fast as possible: stream seconds per wall-clock second (target: at least 20x real time).
//! 2. At real-time pace (50 ms blocks sent at their own time): update latency, from the moment
//!    the block that completes an update is sent to the moment the update arrives (target:
//!    under 50 ms), median and maximum.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::samples::{
    pascals_per_unit, raw, ring_positions, track_frames, track_start, welch_segment,
};
use jetloop_tests::{ring_f32, stats, TestServer};
use std::time::{Duration, Instant};

const CHANNELS: usize = 16;
const FS: f64 = 204_800.0;
const BLOCK_S: f64 = 0.05;

fn config(update_s: f64) -> pb::TrackRequest {
    let samples = raw(Vec::new(), pb::SampleFormat::F32Le, FS, CHANNELS as u32, Some(pascals_per_unit(1.0)));
    track_start(pb::TrackConfig {
        analysis: Some(pb::ExtractTonesRequest {
            samples: Some(samples),
            welch: Some(welch_segment(8192)),
            ..Default::default()
        }),
        window_s: None,
        update_interval_s: Some(update_s),
        jump_fraction: None,
        reference_channel: Some(0),
        positions: ring_positions(CHANNELS),
    })
}

/// `seconds` of a spinning m = 1 tone at 5 kHz on the ring plus a pseudo-random floor, as
/// blocks of interleaved f32 frames.
fn blocks(seconds: f64) -> Vec<Vec<u8>> {
    let n = (seconds * FS) as usize;
    let per = (BLOCK_S * FS) as usize;
    let bytes = ring_f32(CHANNELS, n, FS, 99);
    bytes.chunks(per * CHANNELS * 4).map(<[u8]>::to_vec).collect()
}

#[tokio::main]
async fn main() {
    let seconds: f64 = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(10.0);
    let data = blocks(seconds);
    let server = TestServer::start().await;
    let ch = server.channel().await;

    // 1. As fast as possible.
    let mut c = SpectrumServiceClient::new(ch.clone());
    let mut msgs = vec![config(BLOCK_S)];
    msgs.extend(data.iter().map(|b| track_frames(b.clone())));
    let started = Instant::now();
    let mut updates = c.track_tones(tokio_stream::iter(msgs)).await.expect("stream").into_inner();
    let (mut count, mut m1) = (0usize, 0usize);
    while let Some(u) = updates.message().await.expect("update") {
        count += 1;
        if u.strongest_cross.and_then(|x| x.modes).is_some_and(|m| m.dominant_order == 1) {
            m1 += 1;
        }
    }
    let wall = started.elapsed().as_secs_f64();
    println!(
        "as fast as possible: {seconds} s of {CHANNELS} ch x {FS} Hz in {wall:.3} s = {:.1}x real time \
         ({count} updates, {m1} with m = 1 found)",
        seconds / wall
    );

    // 2. Real-time pace: latency from sending the completing block to the update.
    let mut c = SpectrumServiceClient::new(ch);
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::TrackRequest>(4);
    let sent_at = std::sync::Arc::new(std::sync::Mutex::new(Vec::<Instant>::new()));
    let log = sent_at.clone();
    let pace = Duration::from_secs_f64(BLOCK_S);
    let feed = data.clone();
    tokio::spawn(async move {
        if tx.send(config(BLOCK_S)).await.is_err() {
            return;
        }
        let start = tokio::time::Instant::now();
        for (i, b) in feed.into_iter().enumerate() {
            tokio::time::sleep_until(start + pace * i as u32).await;
            log.lock().expect("log").push(Instant::now());
            if tx.send(track_frames(b)).await.is_err() {
                return;
            }
        }
    });
    let mut updates =
        c.track_tones(tokio_stream::wrappers::ReceiverStream::new(rx)).await.expect("stream").into_inner();
    let mut latency = Vec::new();
    while let Some(u) = updates.message().await.expect("update") {
        let arrived = Instant::now();
        // The block that completed this update: the one holding its window's end.
        let block = ((u.stream_time_s / BLOCK_S).ceil() as usize).saturating_sub(1);
        if let Some(t) = sent_at.lock().expect("log").get(block) {
            latency.push(arrived.duration_since(*t).as_secs_f64() * 1e3);
        }
    }
    let (med, min, max) = stats(latency.clone());
    println!(
        "real-time pace: update latency median {med:.1} ms, min {min:.1} ms, max {max:.1} ms over {} updates",
        latency.len()
    );
    server.stop().await;
}
