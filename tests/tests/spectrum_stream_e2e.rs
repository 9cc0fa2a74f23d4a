//! End to end over a real socket: ExtractTonesStream (samples sent in blocks) gives the answer
//! of one ExtractTones request, and bad streams are refused with the field named.

use jetloop_proto::pb::{self, samples::Data, spectrum_service_client::SpectrumServiceClient};
use jetloop_server::config::Limits;
use jetloop_tests::samples::{frames_block, opening_block, pascals_per_unit, raw, welch_segment};
use jetloop_tests::signals::XorShift;
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use tonic::Code;

const FS: f64 = 51_200.0;

/// Two microphones: a 3 kHz tone with its second harmonic on a deterministic noise floor,
/// interleaved f32 frames.
fn two_channel_frames(frames: usize) -> Vec<u8> {
    let mut rng = XorShift::new(0x9e37_79b9_7f4a_7c15);
    let mut out = Vec::with_capacity(frames * 8);
    for i in 0..frames {
        let t = i as f64 / FS;
        for c in 0..2 {
            let noise = rng.centered();
            let v = (c as f64 + 1.0) * 20.0 * (2.0 * PI * 3000.0 * t).sin()
                + 5.0 * (2.0 * PI * 6000.0 * t + 0.3).sin()
                + 2.0 * noise;
            out.extend_from_slice(&(v as f32).to_le_bytes());
        }
    }
    out
}

/// Two channels of f32 at 0.5 Pa per unit, the first frames (if any) in the request.
fn question(first_frames: Vec<u8>) -> pb::ExtractTonesRequest {
    pb::ExtractTonesRequest {
        samples: Some(raw(first_frames, pb::SampleFormat::F32Le, FS, 2, Some(pascals_per_unit(0.5)))),
        welch: Some(welch_segment(4096)),
        include_band_levels: true,
        psd_output: Some(pb::PsdOutputOptions { include: true, max_points: None }),
        ..Default::default()
    }
}

/// A later message of the stream with a copy of `frames`.
fn block(frames: &[u8]) -> pb::SampleBlock {
    frames_block(frames.to_vec())
}

#[tokio::test]
async fn blocks_give_the_answer_of_one_request() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let bytes = two_channel_frames(100_003);
    let whole = c.extract_tones(question(bytes.clone())).await.unwrap().into_inner();

    // The first message carries 1000 frames, then blocks of uneven sizes (some shorter than a
    // segment), as a DAQ might deliver them.
    let mut msgs = vec![opening_block(question(bytes[..8000].to_vec()))];
    let mut at = 1000;
    for (i, len) in [7usize, 2048, 30_000, 1, 12_345].iter().cycle().enumerate() {
        if at == 100_003 {
            break;
        }
        let end = (at + len).min(100_003);
        msgs.push(block(&bytes[at * 8..end * 8]));
        at = end;
        if i == 2 {
            msgs.push(block(&[]));
        }
    }
    let streamed = c.extract_tones_stream(tokio_stream::iter(msgs)).await.unwrap().into_inner();
    assert_eq!(streamed.channels.len(), 2);
    for (a, b) in streamed.channels.iter().zip(&whole.channels) {
        let (pa, pb_) = (a.psd.as_ref().unwrap(), b.psd.as_ref().unwrap());
        assert_eq!(pa.density_pa2_per_hz.len(), pb_.density_pa2_per_hz.len());
        for (x, y) in pa.density_pa2_per_hz.iter().zip(&pb_.density_pa2_per_hz) {
            assert!((x / y - 1.0).abs() < 1e-12, "{x} {y}");
        }
        assert_eq!(a.analysis, b.analysis);
        assert!((a.rms_pa / b.rms_pa - 1.0).abs() < 1e-12);
        assert_eq!(a.tones.len(), b.tones.len());
        for (x, y) in a.tones.iter().zip(&b.tones) {
            assert!((x.frequency_hz - y.frequency_hz).abs() < 1e-9 && (x.level_db - y.level_db).abs() < 1e-9);
        }
        assert_eq!(a.families, b.families);
        let (ba, bb) = (a.bands.as_ref().unwrap(), b.bands.as_ref().unwrap());
        assert!((ba.overall_level_db - bb.overall_level_db).abs() < 1e-9);
    }
    // The tones are where they were put: 3 kHz and its harmonic, one family.
    let ch = &streamed.channels[1];
    let f0 = ch.families[0].fundamental_hz;
    assert!((f0 - 3000.0).abs() < 0.5, "{f0}");
    server.stop().await;
}

#[tokio::test]
async fn bad_streams_name_the_field() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let good = two_channel_frames(20_000);
    let first = || opening_block(question(Vec::new()));
    let with_samples = |f: &dyn Fn(&mut pb::Samples)| {
        let mut q = question(Vec::new());
        if let Some(s) = q.samples.as_mut() {
            f(s);
        }
        opening_block(q)
    };
    let mut nan = good.clone();
    nan[15_000 * 8 + 4..15_000 * 8 + 8].copy_from_slice(&f32::NAN.to_le_bytes());
    let cases: Vec<(Vec<pb::SampleBlock>, Code, &str)> = vec![
        (vec![block(&good)], Code::InvalidArgument, "request"),
        (
            vec![with_samples(&|s| s.sample_rate_hz = 0.0), block(&good)],
            Code::InvalidArgument,
            "request.samples.sample_rate_hz",
        ),
        (
            vec![with_samples(&|s| s.data = Some(Data::Values(pb::SampleValues { values: vec![0.0; 64] })))],
            Code::InvalidArgument,
            "request.samples.values",
        ),
        (
            vec![with_samples(&|s| s.layout = pb::ChannelLayout::Planar as i32), block(&good)],
            Code::InvalidArgument,
            "request.samples.layout",
        ),
        (vec![first(), block(&good), first()], Code::InvalidArgument, "request"),
        (
            vec![first(), pb::SampleBlock { expected_frames: Some(5), ..block(&good) }],
            Code::InvalidArgument,
            "expected_frames",
        ),
        // Half a frame (one f32 of two channels).
        (vec![first(), block(&good), block(&good[..4])], Code::InvalidArgument, "frames"),
        // A NaN in the second channel, in a later block.
        (vec![first(), block(&nan[..80_000]), block(&nan[80_000..])], Code::InvalidArgument, "frames"),
    ];
    for (msgs, code, field) in cases {
        let e = c.extract_tones_stream(tokio_stream::iter(msgs)).await.unwrap_err();
        assert_field(&e, code, field);
    }
    // A NaN names the channel and the sample.
    let e = c.extract_tones_stream(tokio_stream::iter(vec![first(), block(&nan)])).await.unwrap_err();
    assert!(e.message().contains("channel 1") && e.message().contains("sample 15000"), "{}", e.message());
    // Too short for one segment of 4096: FAILED_PRECONDITION naming both lengths.
    let e = c.extract_tones_stream(tokio_stream::iter(vec![first(), block(&good[..800])])).await.unwrap_err();
    assert_eq!(e.code(), Code::FailedPrecondition, "{e:?}");
    assert!(e.message().contains("4096") && e.message().contains("100"), "{}", e.message());
    // An empty stream.
    let e = c.extract_tones_stream(tokio_stream::iter(Vec::new())).await.unwrap_err();
    assert_eq!(e.code(), Code::InvalidArgument);
    server.stop().await;

    // One message over the server's message size limit (64 MiB of frames against a 16 MiB
    // limit): RESOURCE_EXHAUSTED, never INTERNAL. (A stream's length has no limit: see
    // long_stream_e2e.rs.)
    let limits = Limits { max_request_bytes: 16 * 1024 * 1024, ..Limits::default() };
    let server = TestServer::start_with(limits).await;
    let mut c =
        SpectrumServiceClient::new(server.channel().await).max_encoding_message_size(100 * 1024 * 1024);
    let mut q = question(Vec::new());
    q.samples = Some(raw(vec![0; 64], pb::SampleFormat::I16Le, FS, 1, Some(pascals_per_unit(0.5))));
    let msgs = vec![opening_block(q), frames_block(vec![0u8; 2 << 25])];
    let e = c.extract_tones_stream(tokio_stream::iter(msgs)).await.unwrap_err();
    assert_eq!(e.code(), Code::ResourceExhausted, "{e:?}");
    server.stop().await;
}

#[tokio::test]
async fn a_stream_in_flight_finishes_during_graceful_shutdown() {
    // Shutdown refuses new calls but lets the calls in flight finish: a block stream whose
    // first message reached the server before the shutdown still gets its whole answer.
    let mut server = TestServer::start().await;
    let ch = server.channel().await;
    let mut c = SpectrumServiceClient::new(ch.clone());
    let bytes = two_channel_frames(40_000);
    let whole = c.extract_tones(question(bytes.clone())).await.unwrap().into_inner();
    let (tx, rx) = tokio::sync::mpsc::channel::<pb::SampleBlock>(4);
    tx.send(opening_block(question(bytes[..8000].to_vec()))).await.unwrap();
    let mut streaming = SpectrumServiceClient::new(ch.clone());
    let call = tokio::spawn(async move {
        streaming.extract_tones_stream(tokio_stream::wrappers::ReceiverStream::new(rx)).await
    });
    // A unary call on the same connection answered after the stream opened: HTTP/2 delivers
    // the stream's headers first, so the stream is in flight once this answer is back.
    let mut probe = jetloop_proto::pb::info_service_client::InfoServiceClient::new(ch.clone());
    loop {
        tokio::task::yield_now().await;
        probe.server_info(pb::ServerInfoRequest {}).await.unwrap();
        if tx.capacity() == tx.max_capacity() {
            break; // the first message has been taken by the client
        }
    }
    probe.server_info(pb::ServerInfoRequest {}).await.unwrap();
    server.begin_shutdown();
    // The shutdown has begun once a new connection is refused.
    let url = server.url();
    let mut refused = false;
    for _ in 0..10_000 {
        if tonic::transport::Endpoint::from_shared(url.clone()).unwrap().connect().await.is_err() {
            refused = true;
            break;
        }
        tokio::task::yield_now().await;
    }
    assert!(refused, "the server still accepts connections after the shutdown began");
    for chunk in bytes[8000..].chunks(64 * 1024) {
        tx.send(block(chunk)).await.unwrap();
    }
    drop(tx);
    let streamed = call.await.unwrap().expect("the call in flight finishes").into_inner();
    assert_eq!(streamed.channels.len(), 2);
    for (a, b) in streamed.channels.iter().zip(&whole.channels) {
        assert!((a.rms_pa / b.rms_pa - 1.0).abs() < 1e-12);
        assert_eq!(a.tones.len(), b.tones.len());
    }
    server.stop().await;
}
