//! End to end over a real socket: SpectrumService.TrackTones, the live tracking stream: a
//! tone that jumps gives one jump event at its time; configuration and frame faults end the
//! stream with the field named.

use jetloop_proto::pb::{self, spectrum_service_client::SpectrumServiceClient};
use jetloop_tests::{assert_field, TestServer};
use std::f64::consts::PI;
use tonic::Code;

fn config(fs: f64) -> pb::TrackRequest {
    pb::TrackRequest {
        item: Some(pb::track_request::Item::Config(pb::TrackConfig {
            analysis: Some(pb::ExtractTonesRequest {
                samples: Some(pb::Samples {
                    sample_rate_hz: fs,
                    data: Some(pb::samples::Data::Raw(pb::RawSamples {
                        format: pb::SampleFormat::F32Le as i32,
                        data: Vec::new().into(),
                    })),
                    ..Default::default()
                }),
                welch: Some(pb::WelchOptions {
                    segment: Some(pb::welch_options::Segment::SegmentLength(2048)),
                    ..Default::default()
                }),
                tones: Some(pb::ToneOptions { threshold_db: Some(10.0), ..Default::default() }),
                ..Default::default()
            }),
            window_s: None,
            update_interval_s: Some(0.1),
            jump_fraction: None,
        })),
    }
}

fn frames(x: &[f64]) -> pb::TrackRequest {
    pb::TrackRequest {
        item: Some(pb::track_request::Item::Frames(
            x.iter().flat_map(|v| (*v as f32).to_le_bytes()).collect(),
        )),
    }
}

#[tokio::test]
async fn a_live_stream_reports_one_jump_at_its_time() {
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    // Synthetic: 2000 Hz for 3 s, then 2300 Hz, seeded LCG noise at -40 dB.
    let fs = 25_600.0;
    let n = (5.0 * fs) as usize;
    let mut s = 7u64;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            s = s.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            let r = ((s >> 11) as f64 / (1u64 << 53) as f64) - 0.5;
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
    let tone: Vec<f64> = (0..4096).map(|i| (2.0 * PI * 1000.0 * f64::from(i) / fs).sin()).collect();
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
        (
            vec![config(fs), pb::TrackRequest { item: Some(pb::track_request::Item::Frames(vec![0u8; 6])) }],
            "frames",
        ),
    ];
    for (msgs, field) in cases {
        let mut s = c.track_tones(tokio_stream::iter(msgs)).await.unwrap().into_inner();
        let e = loop {
            match s.message().await {
                Ok(Some(_)) => continue,
                Ok(None) => panic!("the stream ended without an error for {field}"),
                Err(e) => break e,
            }
        };
        assert_field(&e, Code::InvalidArgument, field);
    }
}
