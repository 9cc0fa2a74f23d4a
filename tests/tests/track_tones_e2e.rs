//! End to end over a real socket: SpectrumService.TrackTones, the live tracking stream: a
//! tone that jumps gives one jump event at its time; configuration and frame faults end the
//! stream with the field named.

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::fixtures::track_config;
use jetloop_tests::samples::track_frames;
use jetloop_tests::signals::{f32_le, sine, Lcg};
use jetloop_tests::{assert_field, stream_error, TestServer};
use std::f64::consts::PI;
use tonic::Code;

fn config(fs: f64) -> pb::TrackRequest {
    let mut r = track_config(fs, 2048, 0.1);
    if let Some(pb::track_request::Item::Config(c)) = &mut r.item {
        if let Some(a) = &mut c.analysis {
            a.tones = Some(pb::ToneOptions { threshold_db: Some(10.0), ..Default::default() });
        }
    }
    r
}

fn frames(x: &[f64]) -> pb::TrackRequest {
    track_frames(f32_le(x))
}

#[tokio::test]
async fn a_live_stream_reports_one_jump_at_its_time() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    // Synthetic: 2000 Hz for 3 s, then 2300 Hz, seeded LCG noise at -40 dB.
    let fs = 25_600.0;
    let n = (5.0 * fs) as usize;
    let mut rng = Lcg::new(7);
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let r = rng.centered();
            let t = i as f64 / fs;
            (2.0 * PI * if t < 3.0 { 2000.0 } else { 2300.0 } * t).sin() + 0.02 * r
        })
        .collect();
    let mut msgs = vec![config(fs)];
    msgs.extend(x.chunks(1280).map(frames)); // 50 ms blocks
    let mut updates = c.track_tones(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    let mut jumps = Vec::new();
    let mut count = 0;
    while let Some(u) = updates.message().await.unwrap() {
        count += 1;
        jumps.extend(u.events.into_iter().filter(|e| e.kind == pb::TrackEventKind::Jumped as i32));
    }
    assert!(count > 40, "{count} updates");
    assert_eq!(jumps.len(), 1, "{jumps:?}");
    let j = &jumps[0];
    assert!((j.stream_time_s - 3.0).abs() <= 0.1, "{j:?}");
    let bin = fs / 2048.0;
    assert!(
        (j.from_frequency_hz.unwrap() - 2000.0).abs() < bin && (j.frequency_hz - 2300.0).abs() < bin,
        "{j:?}"
    );
}

#[tokio::test]
async fn stream_faults_end_the_stream_with_the_field_named() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 25_600.0;
    let tone = sine(4096, fs, 1000.0, 1.0);
    // Configuration missing: frames first.
    let e = c.track_tones(tokio_stream::iter(vec![frames(&tone)])).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "config");
    // Bad configuration: the field is named.
    let mut bad = config(fs);
    if let Some(pb::track_request::Item::Config(cfg)) = bad.item.as_mut() {
        cfg.jump_fraction = Some(2.0);
    }
    let e = c.track_tones(tokio_stream::iter(vec![bad])).await.unwrap_err();
    assert_field(&e, Code::InvalidArgument, "config.jump_fraction");
    // Configuration sent twice, and half a frame: the stream ends with the field named.
    let cases = [
        (vec![config(fs), frames(&tone), config(fs)], "config"),
        (vec![config(fs), track_frames(vec![0u8; 6])], "frames"),
    ];
    for (msgs, field) in cases {
        let mut s = c.track_tones(tokio_stream::iter(msgs)).await.unwrap().into_inner();
        let e = stream_error(&mut s)
            .await
            .unwrap_or_else(|| panic!("the stream ended without an error for {field}"));
        assert_field(&e, Code::InvalidArgument, field);
    }
}

/// Bytes the server holds against its sample budget (ServerInfo).
async fn held(ch: &tonic::transport::Channel) -> u64 {
    let mut info = pb::info_service_client::InfoServiceClient::new(ch.clone());
    info.server_info(pb::ServerInfoRequest {}).await.expect("server info").into_inner().sample_bytes_held
}

/// Waits up to `within` for the held bytes to reach `want`; returns the last value read.
async fn held_reaches(ch: &tonic::transport::Channel, want: u64, within: std::time::Duration) -> u64 {
    let until = tokio::time::Instant::now() + within;
    loop {
        let h = held(ch).await;
        if h == want || tokio::time::Instant::now() >= until {
            return h;
        }
        tokio::time::sleep(std::time::Duration::from_millis(10)).await;
    }
}

/// A tone at 3 kHz with a little noise, `n` frames at `fs`.
fn tone(n: usize, fs: f64) -> Vec<f64> {
    (0..n).map(|i| (2.0 * PI * 3000.0 * i as f64 / fs).sin() + 1e-3 * ((i * 7919) % 101) as f64).collect()
}

#[tokio::test]
async fn a_cancelled_stream_frees_its_windows_at_once() {
    // The session's windows (one per channel, window_s x rate frames of f64) are held against
    // the sample budget while the stream lives; cancelling the stream gives them back.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let mut c = SpectrumServiceClient::new(ch.clone());
    let fs = 25_600.0;
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::TrackRequest>(4);
    let feeder = tx.clone();
    tokio::spawn(async move {
        let _ = feeder.send(config(fs)).await;
        for b in tone(fs as usize, fs).chunks(2560) {
            if feeder.send(frames(b)).await.is_err() {
                return;
            }
        }
    });
    let mut updates =
        c.track_tones(tokio_stream::wrappers::ReceiverStream::new(rx)).await.unwrap().into_inner();
    let first = updates.message().await.unwrap().expect("an update");
    assert!(!first.channels.is_empty());
    // Default window: 8 segments of 2048 frames at 50 % overlap (9216 frames): |X|^2 of 8
    // segments (1025 bins of 8 bytes; one channel, no cross terms) and one segment of pending
    // f64 samples.
    let during = held(&ch).await;
    // The budget counts whole KiB.
    assert_eq!(during, u64::div_ceil(8 * 1025 * 8 + 2048 * 8, 1024) * 1024, "bytes held during the stream");
    // Cancel: drop the response stream and the request sender.
    drop(updates);
    drop(tx);
    let after = held_reaches(&ch, 0, std::time::Duration::from_secs(2)).await;
    assert_eq!(after, 0, "bytes still held 2 s after the stream was cancelled");
    server.stop().await;
}

#[tokio::test]
async fn a_client_that_stops_reading_is_held_back() {
    // The client reads through a 64 KiB HTTP/2 stream window, sends through a one-message buffer and
    // never reads an update: once the server's bounded update queue and the client's window
    // are full, the server stops reading, its receive window fills and the client's sending
    // stalls. The count of messages the transport took stops growing, and the server holds
    // no more than the session's windows.
    let server = TestServer::start().await;
    let ch = server.channel().await;
    let small = tonic::transport::Endpoint::from_shared(server.url())
        .unwrap()
        .initial_stream_window_size(64 * 1024)
        .connect()
        .await
        .unwrap();
    let mut c = SpectrumServiceClient::new(small);
    let fs = 25_600.0;
    let block = tone(256, fs); // 10 ms of frames, one update each (update interval 10 ms)
    let mut cfg = config(fs);
    if let Some(pb::track_request::Item::Config(k)) = cfg.item.as_mut() {
        k.update_interval_s = Some(0.01);
        // Short segments: cheap updates, so the queues fill quickly.
        if let Some(w) = k.analysis.as_mut().and_then(|a| a.welch.as_mut()) {
            w.segment = Some(pb::welch_options::Segment::SegmentLength(256));
        }
    }
    let sent = std::sync::Arc::new(std::sync::atomic::AtomicU64::new(0));
    let counter = sent.clone();
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::TrackRequest>(1);
    let feeder = tokio::spawn(async move {
        if tx.send(cfg).await.is_err() {
            return;
        }
        loop {
            if tx.send(frames(&block)).await.is_err() {
                return;
            }
            counter.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
        }
    });
    let updates = c.track_tones(tokio_stream::wrappers::ReceiverStream::new(rx)).await.unwrap().into_inner();
    // Wait (up to 60 s) for a second in which nothing more was taken.
    let load = || sent.load(std::sync::atomic::Ordering::SeqCst);
    let mut last = load();
    let mut stalled = false;
    for _ in 0..60 {
        tokio::time::sleep(std::time::Duration::from_secs(1)).await;
        let now = load();
        if now == last {
            stalled = true;
            break;
        }
        last = now;
    }
    assert!(stalled, "the client kept sending while nobody read: {last} blocks taken");
    let held_a = held(&ch).await;
    tokio::time::sleep(std::time::Duration::from_secs(1)).await;
    assert_eq!(load(), last, "sending resumed without a reader");
    // At most the server's 16 MiB receive window of 1 KiB blocks, plus the updates the
    // queue and the client's 64 KiB window hold.
    assert!(last < 20_000, "{last} blocks absorbed before the stall");
    let held_b = held(&ch).await;
    assert_eq!(held_a, held_b);
    assert_eq!(
        held_b,
        u64::div_ceil(8 * 129 * 8 + 256 * 8, 1024) * 1024,
        "bytes held (whole KiB): |X|^2 of one window's 8 segments and one segment"
    );
    // Such a client holds its stream (one window, the queue and the HTTP/2 windows) until it
    // reads, its connection closes or the stream's time limit passes; dropping only the
    // response stream does not cancel the call while the client's own sending is stalled on
    // the server's full window (the client library never resets it).
    drop(updates);
    feeder.abort();
    // No graceful stop: it would wait for that stream; the runtime's end stops the server.
    drop(server);
}

#[tokio::test]
async fn a_live_stream_outlives_the_call_limit_and_ends_at_its_own() {
    // Call limit 1 s, stream limit 3 s: a stream paced at real time runs past 1 s and ends
    // near 3 s with DEADLINE_EXCEEDED naming the limit.
    let limits = jetloop_server::config::Limits {
        request_timeout: std::time::Duration::from_secs(1),
        stream_timeout: std::time::Duration::from_secs(3),
        ..Default::default()
    };
    let server = TestServer::start_with(limits).await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 25_600.0;
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::TrackRequest>(4);
    tokio::spawn(async move {
        if tx.send(config(fs)).await.is_err() {
            return;
        }
        let block = tone(2560, fs); // 100 ms
        for _ in 0..100 {
            if tx.send(frames(&block)).await.is_err() {
                return;
            }
            tokio::time::sleep(std::time::Duration::from_millis(100)).await;
        }
    });
    let started = tokio::time::Instant::now();
    let mut updates =
        c.track_tones(tokio_stream::wrappers::ReceiverStream::new(rx)).await.unwrap().into_inner();
    let mut last_update = None;
    let end = loop {
        match updates.message().await {
            Ok(Some(_)) => last_update = Some(started.elapsed()),
            Ok(None) => panic!("the stream ended without a status"),
            Err(e) => break e,
        }
    };
    let ended = started.elapsed();
    assert_eq!(end.code(), Code::DeadlineExceeded, "{end:?}");
    assert!(end.message().contains("3 s"), "{}", end.message());
    assert!(last_update.is_some_and(|t| t > std::time::Duration::from_millis(1500)), "{last_update:?}");
    assert!(
        ended >= std::time::Duration::from_millis(2900) && ended < std::time::Duration::from_secs(5),
        "{ended:?}"
    );
    server.stop().await;
}

#[tokio::test]
async fn a_ring_stream_reports_its_mode_live() {
    // Eight microphones at 45 degree steps, a tone cos(omega t - m theta_j) with m = 1 (spins
    // towards increasing azimuth, the convention of dsp::cross), then from 2 s a standing
    // m = 2 pattern cos(2 theta_j) cos(omega t) at another frequency: the updates carry the
    // mode of the strongest tone, spinning m = 1 before and standing m = 2 after.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let fs = 25_600.0;
    let m_ch = 8;
    let theta: Vec<f64> = (0..m_ch).map(|j| j as f64 * PI / 4.0).collect();
    let n = (4.0 * fs) as usize;
    let mut rng = Lcg::new(11);
    let mut x = Vec::with_capacity(n * m_ch);
    for i in 0..n {
        let t = i as f64 / fs;
        for th in &theta {
            let r = rng.centered();
            let v = if t < 2.0 {
                (2.0 * PI * 2000.0 * t - th).cos()
            } else {
                (2.0 * th).cos() * (2.0 * PI * 2600.0 * t).cos()
            };
            x.push(v + 0.05 * r);
        }
    }
    let mut cfg = config(fs);
    if let Some(pb::track_request::Item::Config(k)) = cfg.item.as_mut() {
        k.update_interval_s = Some(0.25);
        k.positions = theta
            .iter()
            .map(|th| pb::MicrophonePosition {
                azimuth_deg: th.to_degrees(),
                polar_angle_deg: None,
                distance_m: None,
            })
            .collect();
        if let Some(smp) = k.analysis.as_mut().and_then(|a| a.samples.as_mut()) {
            smp.channel_count = m_ch as u32;
        }
    }
    let mut msgs = vec![cfg];
    msgs.extend(x.chunks(1280 * m_ch).map(frames));
    let mut updates = c.track_tones(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    let (mut before, mut after) = (0, 0);
    while let Some(u) = updates.message().await.unwrap() {
        let Some(cross) = u.strongest_cross.clone() else { continue };
        let modes = cross.modes.expect("a ring with positions gives modes");
        // Windows wholly before or after the change (window 4.5 x 2048 frames = 0.36 s).
        if u.stream_time_s < 2.0 {
            assert_eq!(modes.dominant_order, 1, "t = {}: {modes:?}", u.stream_time_s);
            assert_eq!(modes.pattern, pb::AzimuthalPattern::SpinningIncreasing as i32);
            assert!((cross.frequency_hz - 2000.0).abs() < 12.5);
            before += 1;
        } else if u.stream_time_s > 2.4 {
            assert_eq!(modes.dominant_order, 2, "t = {}: {modes:?}", u.stream_time_s);
            assert_eq!(modes.pattern, pb::AzimuthalPattern::Standing as i32);
            assert!((cross.frequency_hz - 2600.0).abs() < 12.5);
            after += 1;
        }
    }
    assert!(before >= 5 && after >= 5, "{before} / {after} updates");
    server.stop().await;
}
