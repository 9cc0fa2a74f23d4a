//! End to end over a real socket: a block stream longer than any request may be
//! (ExtractTonesStream has no length limit) gives the tones of a short piece of the same
//! stationary signal, while the server holds a few blocks, not the recording (its own test
//! binary, so nothing else runs beside it).

use bytes::Bytes;
use jetloop_proto::pb::{
    self, info_service_client::InfoServiceClient, spectrum_service_client::SpectrumServiceClient,
};
use jetloop_tests::samples::{frames_block, opening_block, pascals_per_unit, raw, welch_segment};
use jetloop_tests::signals::XorShift;
use jetloop_tests::TestServer;
use std::f64::consts::PI;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;

const FS: f64 = 51_200.0;
/// Frames of one block: one second, so the 3 kHz and 7.5 kHz tones close whole cycles in it
/// and blocks repeated back to back are one continuous stationary signal.
const BLOCK_FRAMES: usize = 51_200;
const CHANNELS: usize = 2;
/// Pascals per count (a 16-bit DAQ at 100 Pa full scale).
const PA_PER_COUNT: f64 = 100.0 / 32_768.0;

/// One second of two int16 channels: a 3 kHz tone of 20 Pa amplitude (channel 0) and 10 Pa
/// (channel 1), a 7.5 kHz tone of 4 Pa on both, and a noise floor.
fn second_of_int16() -> Bytes {
    let mut rng = XorShift::new(0x2545_f491_4f6c_dd1d);
    let mut out = Vec::with_capacity(BLOCK_FRAMES * CHANNELS * 2);
    for i in 0..BLOCK_FRAMES {
        let t = i as f64 / FS;
        for c in 0..CHANNELS {
            let pa = (20.0 / (c as f64 + 1.0)) * (2.0 * PI * 3000.0 * t).sin()
                + 4.0 * (2.0 * PI * 7500.0 * t + 0.4).sin()
                + 1.5 * rng.centered();
            let counts = (pa / PA_PER_COUNT).round().clamp(-32_768.0, 32_767.0) as i16;
            out.extend_from_slice(&counts.to_le_bytes());
        }
    }
    Bytes::from(out)
}

fn question(first: Bytes) -> pb::ExtractTonesRequest {
    pb::ExtractTonesRequest {
        samples: Some(raw(
            first,
            pb::SampleFormat::I16Le,
            FS,
            CHANNELS as u32,
            Some(pascals_per_unit(PA_PER_COUNT)),
        )),
        welch: Some(welch_segment(4096)),
        include_band_levels: true,
        ..Default::default()
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_stream_past_any_request_limit_gives_the_tones_of_a_short_piece() {
    // Before: a stream was refused with RESOURCE_EXHAUSTED past 2^25 samples in all, and the
    // server kept every block until the end. Now 2^26 + 2^20 samples (over twice the unary
    // limit) stream through while the server holds a few blocks.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut info = InfoServiceClient::new(ch.clone());
    let limit = info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().limits.unwrap();
    let limit = limit.max_request_samples;
    assert_eq!(limit, 1 << 25);
    let block = second_of_int16();
    let blocks = ((1u64 << 26) + (1 << 20)).div_ceil((BLOCK_FRAMES * CHANNELS) as u64) as usize;
    let total = (blocks * BLOCK_FRAMES * CHANNELS) as u64;
    assert!(total > 2 * limit);

    // The reference: 8 s of the same signal in one request.
    let short: Vec<u8> = (0..8).flat_map(|_| block.iter().copied()).collect();
    let mut c = SpectrumServiceClient::new(ch.clone()).max_encoding_message_size(64 << 20);
    let piece = c.extract_tones(question(Bytes::from(short))).await.unwrap().into_inner();

    // While the stream runs, the sample bytes the server holds are sampled through ServerInfo.
    let peak = Arc::new(AtomicU64::new(0));
    let done = Arc::new(std::sync::atomic::AtomicBool::new(false));
    let watcher = {
        let (peak, done, mut info) = (peak.clone(), done.clone(), info.clone());
        tokio::spawn(async move {
            while !done.load(Ordering::Relaxed) {
                let held =
                    info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().sample_bytes_held;
                peak.fetch_max(held, Ordering::Relaxed);
                tokio::time::sleep(std::time::Duration::from_millis(5)).await;
            }
        })
    };
    let msgs = std::iter::once(opening_block(question(block.clone())))
        .chain((1..blocks).map(move |_| frames_block(block.clone())));
    let long = c.extract_tones_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    done.store(true, Ordering::Relaxed);
    watcher.await.unwrap();

    // Held: the feed (4 blocks) plus the recording's tail (under two blocks) and the block
    // being read, each 204,800 bytes; the whole stream was 134 MB.
    let peak = peak.load(Ordering::Relaxed);
    assert!(peak <= 8 * 204_800 + 4096, "the server held {peak} bytes at once");

    for (c, (a, b)) in long.channels.iter().zip(&piece.channels).enumerate() {
        let (aa, ba) = (a.analysis.as_ref().unwrap(), b.analysis.as_ref().unwrap());
        assert_eq!(aa.frequency_resolution_hz, ba.frequency_resolution_hz);
        assert!(aa.averages > 100 * ba.averages / 8, "{} vs {}", aa.averages, ba.averages);
        // The same stationary signal: the same tones at the same levels. Closed form for the
        // 3 kHz tone: amplitude A Pa -> 20 log10(A / sqrt 2 / 20 uPa) dB.
        for f in [3000.0, 7500.0] {
            let find = |r: &pb::ChannelSpectrum| {
                r.tones
                    .iter()
                    .find(|t| (t.frequency_hz - f).abs() < 2.0 * aa.frequency_resolution_hz)
                    .cloned()
            };
            let (x, y) = (find(a).expect("tone in the stream"), find(b).expect("tone in the piece"));
            assert!((x.frequency_hz - y.frequency_hz).abs() < 0.05 * aa.frequency_resolution_hz);
            assert!((x.level_db - y.level_db).abs() < 0.05, "{f} Hz: {} vs {}", x.level_db, y.level_db);
            let amplitude = if f == 3000.0 { 20.0 / (c as f64 + 1.0) } else { 4.0 };
            let closed = 20.0 * (amplitude / 2f64.sqrt() / 20e-6).log10();
            assert!((x.level_db - closed).abs() < 0.1, "{f} Hz: {} vs closed form {closed}", x.level_db);
        }
        assert!((a.rms_pa / b.rms_pa - 1.0).abs() < 1e-3, "{} vs {}", a.rms_pa, b.rms_pa);
        let (ab, bb) = (a.bands.as_ref().unwrap(), b.bands.as_ref().unwrap());
        assert!((ab.overall_level_db - bb.overall_level_db).abs() < 0.01);
    }
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_steady_stream_outlasts_the_call_limit_and_a_stalled_one_ends_at_it() {
    // The per-call limit (1 s here) applies to the wait for each block: a recording streamed
    // as it is acquired, a block every 250 ms for 2.5 s, is answered; a stream whose client
    // stops sending for longer than the limit ends with DEADLINE_EXCEEDED.
    let server = TestServer::start_with(jetloop_server::config::Limits {
        request_timeout: std::time::Duration::from_secs(1),
        ..Default::default()
    })
    .await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let block = second_of_int16();
    let paced = |pause_ms: u64, count: usize| {
        let (first, later) = (opening_block(question(block.clone())), frames_block(block.clone()));
        jetloop_tests::samples::paced(first, later, count, std::time::Duration::from_millis(pause_ms))
    };
    let started = std::time::Instant::now();
    let answer = c.extract_tones_stream(paced(250, 11)).await.unwrap().into_inner();
    assert!(started.elapsed() > std::time::Duration::from_secs(2), "{:?}", started.elapsed());
    assert_eq!(answer.channels.len(), CHANNELS);
    let e = c.extract_tones_stream(paced(1600, 3)).await.unwrap_err();
    assert_eq!(e.code(), tonic::Code::DeadlineExceeded, "{e:?}");
    assert!(e.message().contains("no block for 1 s"), "{}", e.message());
    server.stop().await;
}
