//! Prometheus metrics over a real socket: the endpoint is scraped and parsed after known
//! calls (answered, refused as invalid, refused without a token, shed at the limit, a stream
//! held open, samples of known size) and every counter, gauge and histogram says what happened.

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient,
    spectrum_service_client::SpectrumServiceClient,
};
use jetloop_server::config::{Limits, ServeOptions};
use jetloop_tests::samples::{track_frames, welch_segment};
use jetloop_tests::TestServer;
use std::collections::HashMap;
use std::time::Duration;
use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tonic::Code;

const TOKEN: &str = "lab-7-rig-token-0123456789";

/// `GET path` over plain HTTP/1.1: status line and body.
async fn get(addr: std::net::SocketAddr, path: &str) -> (String, String) {
    let mut s = tokio::net::TcpStream::connect(addr).await.expect("connect to metrics");
    s.write_all(format!("GET {path} HTTP/1.1\r\nHost: x\r\n\r\n").as_bytes()).await.expect("write");
    let mut text = String::new();
    s.read_to_string(&mut text).await.expect("read");
    let (head, body) = text.split_once("\r\n\r\n").expect("head and body");
    (head.lines().next().unwrap_or_default().to_string(), body.to_string())
}

/// Samples by `name{labels}` (labels as written), checking every line is a comment or a sample.
fn parse(text: &str) -> HashMap<String, f64> {
    let mut out = HashMap::new();
    for line in text.lines().filter(|l| !l.is_empty()) {
        if line.starts_with("# HELP ") || line.starts_with("# TYPE ") {
            continue;
        }
        let (key, value) = line.rsplit_once(' ').unwrap_or_else(|| panic!("not a sample line: {line}"));
        let v: f64 = value.parse().unwrap_or_else(|_| panic!("not a number in: {line}"));
        out.insert(key.to_string(), v);
    }
    out
}

fn authed<T>(msg: T) -> tonic::Request<T> {
    jetloop_tests::bearer(msg, TOKEN)
}

fn mach(m: f64) -> pb::IsentropicRatiosRequest {
    pb::IsentropicRatiosRequest {
        given: Some(pb::isentropic_ratios_request::Given::MachNumber(m)),
        ..Default::default()
    }
}

#[tokio::test]
async fn the_metrics_endpoint_counts_what_happened() {
    let metrics = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind metrics");
    let maddr = metrics.local_addr().expect("addr");
    let server = TestServer::start_observed(
        ServeOptions {
            limits: Limits { max_concurrent_requests: 1, ..Limits::default() },
            tokens: vec![TOKEN.into()],
            drain_notice: Duration::ZERO,
            ..ServeOptions::default()
        },
        Some(metrics),
    )
    .await;
    let mut gas = GasDynamicsServiceClient::new(server.channel().await);
    let ok = || mach(2.0);
    // With one permit, each call waits for the previous one's permit to be let go (it is
    // held until the answer has left the server, looked at every 10 ms).
    let settle = || tokio::time::sleep(Duration::from_millis(150));
    gas.isentropic_ratios(authed(ok())).await.expect("answered");
    settle().await;
    gas.isentropic_ratios(authed(ok())).await.expect("answered");
    settle().await;
    let bad = mach(-1.0);
    assert_eq!(gas.isentropic_ratios(authed(bad)).await.unwrap_err().code(), Code::InvalidArgument);
    settle().await;
    assert_eq!(gas.isentropic_ratios(ok()).await.unwrap_err().code(), Code::Unauthenticated);

    // 4096 f64 values of a tone: 4096 samples, 32768 bytes.
    let mut spec = SpectrumServiceClient::new(server.channel().await);
    let values: Vec<f64> = (0..4096).map(|i| (i as f64 * 0.3).sin()).collect();
    let req = pb::ExtractTonesRequest {
        samples: Some(jetloop_tests::pascals(values, 48_000.0)),
        welch: Some(welch_segment(1024)),
        ..Default::default()
    };
    spec.extract_tones(authed(req)).await.expect("tones");
    settle().await;

    // A tracking stream holds the only permit; a call meanwhile is shed. 1000 f32 frames.
    let (tx, rx) = tokio::sync::mpsc::channel(4);
    tx.send(jetloop_tests::fixtures::track_config(48_000.0, 2048, 0.1)).await.expect("send config");
    tx.send(track_frames(vec![0u8; 4000])).await.expect("send frames");
    let stream = spec
        .track_tones(authed(tokio_stream::wrappers::ReceiverStream::new(rx)))
        .await
        .expect("stream opened");
    let shed = gas.isentropic_ratios(authed(ok())).await.unwrap_err();
    assert_eq!(shed.code(), Code::Unavailable, "{shed:?}");

    let (status, body) = get(maddr, "/metrics").await;
    assert!(status.contains("200"), "{status}");
    let m = parse(&body);
    let isen = "/jetloop.v1.GasDynamicsService/IsentropicRatios";
    let track = "/jetloop.v1.SpectrumService/TrackTones";
    let at = |k: &str| m.get(k).copied().unwrap_or_else(|| panic!("no {k} in\n{body}"));
    assert_eq!(at(&format!("jetloop_requests_total{{method=\"{isen}\",code=\"OK\"}}")), 2.0);
    assert_eq!(at(&format!("jetloop_requests_total{{method=\"{isen}\",code=\"INVALID_ARGUMENT\"}}")), 1.0);
    assert_eq!(at(&format!("jetloop_requests_total{{method=\"{isen}\",code=\"UNAUTHENTICATED\"}}")), 1.0);
    assert_eq!(at(&format!("jetloop_requests_total{{method=\"{isen}\",code=\"UNAVAILABLE\"}}")), 1.0);
    assert_eq!(at("jetloop_shed_total"), 1.0);
    assert_eq!(at("jetloop_streams_open"), 1.0);
    assert_eq!(at("jetloop_in_flight"), 1.0);
    // The histogram: cumulative, +Inf equals the count equals the answers of the method.
    assert_eq!(at(&format!("jetloop_request_duration_seconds_count{{method=\"{isen}\"}}")), 5.0);
    assert_eq!(at(&format!("jetloop_request_duration_seconds_bucket{{method=\"{isen}\",le=\"+Inf\"}}")), 5.0);
    let mut last = 0.0;
    for le in jetloop_server::metrics::LATENCY_BUCKETS_S {
        let c = at(&format!("jetloop_request_duration_seconds_bucket{{method=\"{isen}\",le=\"{le}\"}}"));
        assert!(c >= last, "buckets must be cumulative");
        last = c;
    }
    assert!(at(&format!("jetloop_request_duration_seconds_sum{{method=\"{isen}\"}}")) < 5.0);
    // Samples: the 4096 values (8 bytes each) and the 1000 f32 frames streamed so far (the
    // stream's frames are counted as they are read, so wait for them).
    let mut samples = at("jetloop_samples_total");
    for _ in 0..100 {
        if samples >= 5096.0 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
        samples = parse(&get(maddr, "/metrics").await.1)["jetloop_samples_total"];
    }
    assert_eq!(samples, 5096.0);
    assert_eq!(parse(&get(maddr, "/metrics").await.1)["jetloop_sample_bytes_total"], 32768.0 + 4000.0);

    // The stream ends when the client closes its side: counted once, gauges back to zero.
    drop(tx);
    let mut updates = stream.into_inner();
    while let Some(u) = updates.message().await.transpose() {
        u.expect("update");
    }
    let mut m = parse(&get(maddr, "/metrics").await.1);
    for _ in 0..100 {
        if m["jetloop_in_flight"] == 0.0 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
        m = parse(&get(maddr, "/metrics").await.1);
    }
    assert_eq!(m["jetloop_in_flight"], 0.0);
    assert_eq!(m["jetloop_streams_open"], 0.0);
    assert_eq!(m[&format!("jetloop_requests_total{{method=\"{track}\",code=\"OK\"}}")], 1.0);

    // Anything but /metrics is 404; a random gRPC path is counted as `other`, not by its name.
    assert!(get(maddr, "/").await.0.contains("404"));
    server.stop().await;
}
