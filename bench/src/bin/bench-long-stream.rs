//! Benchmark: a recording of any length through the block stream. Streams SECONDS of 16
//! int16 channels at 204.8 kHz (synthesised as it goes, never stored) to ExtractTonesStream on
//! an in-process server over loopback, in blocks of 0.1 s, and prints every tenth of the way
//! the stream time sent, the speed against real time, the process's resident memory and the
//! sample bytes the server says it holds. A flat RSS column is the point: the server keeps one
//! Welch segment per channel and a few blocks, not the recording.
//!
//! Run with `cargo run --release -p jetloop-bench --bin bench-long-stream [-- SECONDS]`
//! (default 3600: one hour, 23.6 GB of samples).
#![forbid(unsafe_code)]

use bytes::Bytes;
use jetloop_proto::pb::{
    self, info_service_client::InfoServiceClient, spectrum_service_client::SpectrumServiceClient,
};
use jetloop_tests::hostile::memory;
use jetloop_tests::samples::{frames_block, opening_block, pascals_per_unit, raw, welch_segment};
use jetloop_tests::signals::XorShift;
use jetloop_tests::TestServer;
use std::f64::consts::PI;
use std::time::Instant;

const FS: f64 = 204_800.0;
const CHANNELS: usize = 16;
/// 0.1 s per block: every tone below closes whole cycles in it, so blocks follow each other
/// without a seam.
const BLOCK_FRAMES: usize = 20_480;
/// Distinct blocks cycled through (different noise in each).
const DISTINCT: usize = 8;

fn blocks() -> Vec<Bytes> {
    let mut rng = XorShift::new(7);
    (0..DISTINCT)
        .map(|_| {
            let mut out = Vec::with_capacity(BLOCK_FRAMES * CHANNELS * 2);
            for i in 0..BLOCK_FRAMES {
                let t = i as f64 / FS;
                for c in 0..CHANNELS {
                    let v = 4000.0 * (2.0 * PI * 6000.0 * t + c as f64 * 0.39).sin()
                        + 900.0 * (2.0 * PI * 12_000.0 * t).sin()
                        + 800.0 * rng.centered();
                    out.extend_from_slice(&(v as i16).to_le_bytes());
                }
            }
            Bytes::from(out)
        })
        .collect()
}

#[tokio::main]
async fn main() {
    let seconds: f64 = std::env::args().nth(1).and_then(|s| s.parse().ok()).unwrap_or(3600.0);
    let count = (seconds * 10.0).round().max(2.0) as usize;
    let data = blocks();
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut info = InfoServiceClient::new(ch.clone());
    let mut c = SpectrumServiceClient::new(ch);
    let question = pb::ExtractTonesRequest {
        samples: Some(raw(
            Vec::new(),
            pb::SampleFormat::I16Le,
            FS,
            CHANNELS as u32,
            Some(pascals_per_unit(0.01)),
        )),
        welch: Some(welch_segment(8192)),
        include_band_levels: true,
        ..Default::default()
    };
    let (rss0, hwm0) = memory().map_or((0, 0), |(hwm, rss)| (rss, hwm));
    println!(
        "streaming {seconds} s of {CHANNELS} channels x {FS} Hz int16 ({:.1} GB) in blocks of 0.1 s",
        count as f64 * (BLOCK_FRAMES * CHANNELS * 2) as f64 / 1e9
    );
    println!(
        "process RSS before: {:.1} MiB (peak {:.1} MiB)",
        rss0 as f64 / 1048576.0,
        hwm0 as f64 / 1048576.0
    );
    println!("{:>10} {:>10} {:>10} {:>12}", "stream s", "x real", "RSS MiB", "held KiB");
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::SampleBlock>(4);
    let call =
        tokio::spawn(
            async move { c.extract_tones_stream(tokio_stream::wrappers::ReceiverStream::new(rx)).await },
        );
    let started = Instant::now();
    tx.send(opening_block(question)).await.expect("send");
    let mut rss_max = 0u64;
    for i in 0..count {
        if tx.send(frames_block(data[i % DISTINCT].clone())).await.is_err() {
            break;
        }
        if (i + 1) % (count / 10).max(1) == 0 {
            let rss = memory().map_or(0, |(_, now)| now);
            rss_max = rss_max.max(rss);
            let held = info
                .server_info(pb::ServerInfoRequest {})
                .await
                .expect("info")
                .into_inner()
                .sample_bytes_held;
            let sent = (i + 1) as f64 / 10.0;
            println!(
                "{sent:>10.1} {:>10.1} {:>10.1} {:>12}",
                sent / started.elapsed().as_secs_f64(),
                rss as f64 / 1048576.0,
                held / 1024
            );
        }
    }
    drop(tx);
    let answer = call.await.expect("join").expect("stream answered").into_inner();
    let wall = started.elapsed().as_secs_f64();
    let ch0 = &answer.channels[0];
    let top = ch0.tones.iter().max_by(|a, b| a.level_db.total_cmp(&b.level_db)).expect("a tone");
    println!(
        "done: {seconds} s of recording in {wall:.1} s ({:.1}x real time, {:.0} Msamples/s); \
         {} averages per channel; strongest tone {:.1} Hz at {:.1} dB",
        seconds / wall,
        seconds * FS * CHANNELS as f64 / wall / 1e6,
        ch0.analysis.as_ref().map_or(0, |a| a.averages),
        top.frequency_hz,
        top.level_db
    );
    let (hwm, rss) = memory().unwrap_or((0, 0));
    println!(
        "process RSS: before {:.1} MiB, largest sampled during the stream {:.1} MiB, after {:.1} MiB; peak (VmHWM) {:.1} MiB",
        rss0 as f64 / 1048576.0,
        rss_max as f64 / 1048576.0,
        rss as f64 / 1048576.0,
        hwm as f64 / 1048576.0
    );
    server.stop().await;
}
