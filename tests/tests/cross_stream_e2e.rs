//! End to end over a real socket: CrossSpectraStream (a ring's samples sent in blocks) gives the
//! answer of one CrossSpectra request, a stream longer than any request may be gives the
//! azimuthal mode of a short piece of the same signal while the server holds a few blocks,
//! the per-call limit applies to the wait for each block, and bad streams name their field.

use bytes::Bytes;
use jetloop_proto::pb::{
    self, info_service_client::InfoServiceClient, spectrum_service_client::SpectrumServiceClient,
};
use jetloop_tests::samples::{pascals_per_unit, raw, ring_positions, welch_segment};
use jetloop_tests::signals::XorShift;
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use tonic::Code;

const FS: f64 = 51_200.0;

/// The first message of a cross-channel block stream.
fn opening(request: pb::CrossSpectraRequest) -> pb::CrossSpectraBlock {
    pb::CrossSpectraBlock { request: Some(request), ..Default::default() }
}

/// A later message with `frames`.
fn block(frames: impl Into<Bytes>) -> pb::CrossSpectraBlock {
    pb::CrossSpectraBlock { frames: frames.into(), ..Default::default() }
}

/// Phase difference a - b wrapped to (-180, 180] degrees.
fn wrap_deg(d: f64) -> f64 {
    let r = (d + 180.0).rem_euclid(360.0) - 180.0;
    if r == -180.0 {
        180.0
    } else {
        r
    }
}

/// `m` microphones at azimuths 2 pi j / m, a 3 kHz pattern cos(omega t - theta_j) of 10 Pa
/// spinning towards increasing azimuth (order +1) on a seeded noise floor, interleaved f32.
fn spinning_ring_f32(m: usize, frames: usize) -> Vec<u8> {
    let mut rng = XorShift::new(0x51_7cc1_b727_220a);
    let mut out = Vec::with_capacity(frames * m * 4);
    for i in 0..frames {
        let t = i as f64 / FS;
        for j in 0..m {
            let th = 2.0 * PI * j as f64 / m as f64;
            let v = 10.0 * (2.0 * PI * 3000.0 * t - th).cos() + 2.0 * rng.centered();
            out.extend_from_slice(&(v as f32).to_le_bytes());
        }
    }
    out
}

fn ring_question(m: usize, first: Vec<u8>) -> pb::CrossSpectraRequest {
    pb::CrossSpectraRequest {
        samples: Some(raw(first, pb::SampleFormat::F32Le, FS, m as u32, Some(pascals_per_unit(0.5)))),
        welch: Some(welch_segment(4096)),
        positions: ring_positions(m),
        spectra_max_points: Some(600),
        ..Default::default()
    }
}

#[tokio::test]
async fn blocks_give_the_answer_of_one_request() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let (m, frames) = (8, 100_003);
    let bytes = spinning_ring_f32(m, frames);
    let fb = m * 4;
    let whole = c.cross_spectra(ring_question(m, bytes.clone())).await.unwrap().into_inner();

    // The first message carries 1000 frames, then blocks of uneven sizes (some shorter than a
    // segment, one empty), as a DAQ might deliver them.
    let mut msgs = vec![opening(ring_question(m, bytes[..1000 * fb].to_vec()))];
    let mut at = 1000;
    for (i, len) in [7usize, 2048, 30_000, 1, 12_345].iter().cycle().enumerate() {
        if at == frames {
            break;
        }
        let end = (at + len).min(frames);
        msgs.push(block(bytes[at * fb..end * fb].to_vec()));
        at = end;
        if i == 2 {
            msgs.push(block(Vec::new()));
        }
    }
    let streamed = c.cross_spectra_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();

    // The same estimate summed in another order: equal to rounding.
    assert_eq!(streamed.analysis, whole.analysis);
    assert_eq!(streamed.reference_channel, whole.reference_channel);
    assert_eq!(streamed.tones.len(), whole.tones.len());
    for (a, b) in streamed.tones.iter().zip(&whole.tones) {
        assert!((a.frequency_hz - b.frequency_hz).abs() < 1e-9 && (a.level_db - b.level_db).abs() < 1e-9);
        assert_eq!(a.channels.len(), b.channels.len());
        for (x, y) in a.channels.iter().zip(&b.channels) {
            assert_eq!(x.channel, y.channel);
            assert!(wrap_deg(x.phase_deg - y.phase_deg).abs() < 1e-7, "{x:?} {y:?}");
            assert!(
                (x.coherence - y.coherence).abs() < 1e-9
                    && (x.relative_level_db - y.relative_level_db).abs() < 1e-9
            );
        }
        let (ma, mb) = (a.modes.as_ref().unwrap(), b.modes.as_ref().unwrap());
        assert_eq!((ma.dominant_order, ma.pattern), (mb.dominant_order, mb.pattern));
        assert!(
            (ma.spin_ratio - mb.spin_ratio).abs() < 1e-9
                && (ma.dominant_share - mb.dominant_share).abs() < 1e-9
        );
        for (x, y) in ma.orders.iter().zip(&mb.orders) {
            assert_eq!(x.order, y.order);
            assert!((x.energy - y.energy).abs() <= 1e-9 * y.energy.max(1e-30), "{x:?} {y:?}");
        }
    }
    assert_eq!(streamed.spectra.len(), m - 1);
    for (a, b) in streamed.spectra.iter().zip(&whole.spectra) {
        assert_eq!((a.channel, &a.frequency_hz), (b.channel, &b.frequency_hz));
        let peak = b.magnitude_pa2_per_hz.iter().copied().fold(0.0, f64::max);
        for k in 0..a.frequency_hz.len() {
            assert!((a.magnitude_pa2_per_hz[k] - b.magnitude_pa2_per_hz[k]).abs() <= 1e-9 * peak);
            assert!((a.coherence[k] - b.coherence[k]).abs() < 1e-6, "bin {k}");
        }
    }

    // Closed form (the cross-spectrum convention of scipy.signal.csd, conj(X_ref) X_j: the
    // Fourier coefficient of cos(omega t - theta_j) at +omega is proportional to
    // exp(-i theta_j)): channel j is at -360 j / 8 degrees, and the pattern spins towards
    // increasing azimuth with order 1.
    let t = &streamed.tones[0];
    assert!((t.frequency_hz - 3000.0).abs() < 1.0, "{}", t.frequency_hz);
    for ch in &t.channels {
        let want = -360.0 * f64::from(ch.channel) / m as f64;
        assert!(
            wrap_deg(ch.phase_deg - want).abs() < 1.0,
            "channel {}: {} vs {want}",
            ch.channel,
            ch.phase_deg
        );
    }
    let modes = t.modes.as_ref().unwrap();
    assert_eq!((modes.dominant_order, modes.pattern), (1, pb::AzimuthalPattern::SpinningIncreasing as i32));
    server.stop().await;
}

/// Frames of one block: one second, so the 3 kHz tone closes whole cycles in it and blocks
/// repeated back to back are one continuous stationary signal.
const BLOCK_FRAMES: usize = 51_200;
/// Four microphones on a ring, at 0, 90, 180 and 270 degrees.
const RING: usize = 4;
/// Pascals per count (a 16-bit DAQ at 100 Pa full scale).
const PA_PER_COUNT: f64 = 100.0 / 32_768.0;

/// One second of four int16 channels: a 3 kHz pattern 20 cos(omega t - theta_j) Pa spinning
/// towards increasing azimuth (azimuthal order m = 1), and an independent noise floor on each.
fn second_of_ring() -> Bytes {
    let mut rng = XorShift::new(0x2545_f491_4f6c_dd1d);
    let mut out = Vec::with_capacity(BLOCK_FRAMES * RING * 2);
    for i in 0..BLOCK_FRAMES {
        let t = i as f64 / FS;
        for j in 0..RING {
            let th = 2.0 * PI * j as f64 / RING as f64;
            let pa = 20.0 * (2.0 * PI * 3000.0 * t - th).cos() + 1.5 * rng.centered();
            let counts = (pa / PA_PER_COUNT).round().clamp(-32_768.0, 32_767.0) as i16;
            out.extend_from_slice(&counts.to_le_bytes());
        }
    }
    Bytes::from(out)
}

fn int16_question(first: Bytes) -> pb::CrossSpectraRequest {
    pb::CrossSpectraRequest {
        samples: Some(raw(
            first,
            pb::SampleFormat::I16Le,
            FS,
            RING as u32,
            Some(pascals_per_unit(PA_PER_COUNT)),
        )),
        welch: Some(welch_segment(4096)),
        positions: ring_positions(RING),
        ..Default::default()
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_stream_past_any_request_limit_gives_the_mode_of_a_short_piece() {
    // 2^26 + 2^20 samples in all (over twice the unary limit) stream through while the server
    // holds a few blocks.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut info = InfoServiceClient::new(ch.clone());
    let limit = info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().limits.unwrap();
    let limit = limit.max_request_samples;
    let block = second_of_ring();
    let blocks = ((1u64 << 26) + (1 << 20)).div_ceil((BLOCK_FRAMES * RING) as u64) as usize;
    let total = (blocks * BLOCK_FRAMES * RING) as u64;
    assert!(total > 2 * limit, "{total} samples against a limit of {limit}");

    // The reference: 8 s of the same signal in one request.
    let short: Vec<u8> = (0..8).flat_map(|_| block.iter().copied()).collect();
    let mut c = SpectrumServiceClient::new(ch.clone()).max_encoding_message_size(64 << 20);
    let piece = c.cross_spectra(int16_question(Bytes::from(short))).await.unwrap().into_inner();

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
    let first = opening(int16_question(block.clone()));
    let msgs = std::iter::once(first).chain((1..blocks).map(move |_| self::block(block.clone())));
    let long = c.cross_spectra_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    done.store(true, Ordering::Relaxed);
    watcher.await.unwrap();

    // Held: the feed (4 blocks) plus the recording's tail (under two blocks) and the block
    // being read, each 409,600 bytes; the whole stream was 136 MB.
    let peak = peak.load(Ordering::Relaxed);
    assert!(peak <= 8 * 409_600 + 4096, "the server held {peak} bytes at once");

    let (la, pa) = (long.analysis.as_ref().unwrap(), piece.analysis.as_ref().unwrap());
    assert_eq!(la.frequency_resolution_hz, pa.frequency_resolution_hz);
    assert_eq!(u64::from(la.averages), (total / RING as u64 - 2048) / 2048);
    let (a, b) = (&long.tones[0], &piece.tones[0]);
    assert!((a.frequency_hz - 3000.0).abs() < la.frequency_resolution_hz, "{}", a.frequency_hz);
    assert!((a.frequency_hz - b.frequency_hz).abs() < 0.05 * la.frequency_resolution_hz);
    assert_eq!(a.channels.len(), RING - 1);
    for (x, y) in a.channels.iter().zip(&b.channels) {
        // Closed form from the ring geometry: microphone j at theta_j = 90 j degrees sees the
        // order-1 pattern at -theta_j relative to microphone 0 (conj(X_ref) X_j convention of
        // scipy.signal.csd): -90, 180 and 90 degrees, in 90-degree steps.
        let want = -90.0 * f64::from(x.channel);
        assert!(wrap_deg(x.phase_deg - want).abs() < 0.5, "channel {}: {} vs {want}", x.channel, x.phase_deg);
        assert!(wrap_deg(x.phase_deg - y.phase_deg).abs() < 0.1, "{x:?} vs {y:?}");
        // 20 Pa tone against a noise floor far below it in one bin: fully coherent.
        assert!(x.coherence > 0.99 && (x.coherence - y.coherence).abs() < 1e-3, "{x:?} vs {y:?}");
    }
    let (ma, mb) = (a.modes.as_ref().unwrap(), b.modes.as_ref().unwrap());
    let spinning = pb::AzimuthalPattern::SpinningIncreasing as i32;
    assert_eq!((ma.dominant_order, ma.pattern), (1, spinning), "{ma:?}");
    assert_eq!((mb.dominant_order, mb.pattern), (1, spinning), "{mb:?}");
    assert!(ma.spin_ratio > 0.99 && (ma.spin_ratio - mb.spin_ratio).abs() < 1e-3, "{ma:?} vs {mb:?}");
    assert!((ma.dominant_share - mb.dominant_share).abs() < 1e-3, "{ma:?} vs {mb:?}");
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_steady_cross_stream_outlasts_the_call_limit_and_a_stalled_one_ends_at_it() {
    // The per-call limit (1 s here) applies to the wait for each block: a recording streamed
    // as it is acquired, a block every 250 ms for 2.5 s, is answered; a stream whose client
    // stops sending for longer than the limit ends with DEADLINE_EXCEEDED.
    let server = TestServer::start_with(jetloop_server::config::Limits {
        request_timeout: std::time::Duration::from_secs(1),
        ..Default::default()
    })
    .await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let one = second_of_ring();
    let paced = |pause_ms: u64, count: usize| {
        let (first, later) = (opening(int16_question(one.clone())), block(one.clone()));
        jetloop_tests::samples::paced(first, later, count, std::time::Duration::from_millis(pause_ms))
    };
    let started = std::time::Instant::now();
    let answer = c.cross_spectra_stream(paced(250, 11)).await.unwrap().into_inner();
    assert!(started.elapsed() > std::time::Duration::from_secs(2), "{:?}", started.elapsed());
    assert_eq!(answer.tones[0].channels.len(), RING - 1);
    let e = c.cross_spectra_stream(paced(1600, 3)).await.unwrap_err();
    assert_eq!(e.code(), Code::DeadlineExceeded, "{e:?}");
    assert!(e.message().contains("no block for 1 s"), "{}", e.message());
    server.stop().await;
}

#[tokio::test]
async fn bad_cross_streams_name_the_field() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let good = spinning_ring_f32(3, 20_000);
    let first = || opening(ring_question(3, Vec::new()));
    let with = |f: &dyn Fn(&mut pb::CrossSpectraRequest)| {
        let mut q = ring_question(3, Vec::new());
        f(&mut q);
        opening(q)
    };
    let mut nan = good.clone();
    // Channel 2 of frame 15000.
    nan[(15_000 * 3 + 2) * 4..(15_000 * 3 + 3) * 4].copy_from_slice(&f32::NAN.to_le_bytes());
    let cases: Vec<(Vec<pb::CrossSpectraBlock>, Code, &str)> = vec![
        (vec![block(good.clone())], Code::InvalidArgument, "request"),
        (vec![first(), block(good.clone()), first()], Code::InvalidArgument, "request"),
        (
            vec![first(), pb::CrossSpectraBlock { expected_frames: Some(5), ..block(good.clone()) }],
            Code::InvalidArgument,
            "expected_frames",
        ),
        (
            vec![with(&|q| q.samples.as_mut().unwrap().channel_count = 1), block(good.clone())],
            Code::InvalidArgument,
            "request.samples.channel_count",
        ),
        (
            vec![with(&|q| q.positions.truncate(2)), block(good.clone())],
            Code::InvalidArgument,
            "request.positions",
        ),
        (
            vec![with(&|q| q.reference_channel = Some(3)), block(good.clone())],
            Code::InvalidArgument,
            "request.reference_channel",
        ),
        (
            vec![
                with(&|q| q.samples.as_mut().unwrap().layout = pb::ChannelLayout::Planar as i32),
                block(good.clone()),
            ],
            Code::InvalidArgument,
            "request.samples.layout",
        ),
        // Half a frame (one f32 of three channels).
        (vec![first(), block(good.clone()), block(good[..4].to_vec())], Code::InvalidArgument, "frames"),
        // A NaN in the third channel, in a later block.
        (
            vec![first(), block(nan[..120_000].to_vec()), block(nan[120_000..].to_vec())],
            Code::InvalidArgument,
            "frames",
        ),
    ];
    for (msgs, code, field) in cases {
        let e = c.cross_spectra_stream(tokio_stream::iter(msgs)).await.unwrap_err();
        assert_field(&e, code, field);
    }
    // A NaN names the sample.
    let e = c.cross_spectra_stream(tokio_stream::iter(vec![first(), block(nan)])).await.unwrap_err();
    assert!(e.message().contains("sample 15000"), "{}", e.message());
    // Too short for one segment of 4096: FAILED_PRECONDITION naming both lengths.
    let e = c
        .cross_spectra_stream(tokio_stream::iter(vec![first(), block(good[..1200].to_vec())]))
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition, "{e:?}");
    assert!(e.message().contains("4096") && e.message().contains("100"), "{}", e.message());
    // An empty stream.
    let e = c.cross_spectra_stream(tokio_stream::iter(Vec::new())).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "request");
    server.stop().await;
}
