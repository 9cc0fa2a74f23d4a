//! End to end over a real socket: what the server logs about failed, expired and refused calls
//! (its own test binary, because it installs the process-wide log subscriber).

use jetloop_proto::pb::{
    self, gas_dynamics_service_client::GasDynamicsServiceClient,
    spectrum_service_client::SpectrumServiceClient, tone_service_client::ToneServiceClient,
};
use jetloop_tests::fixtures::{inch_nozzle, npr_sweep, track_config};
use jetloop_tests::samples::track_frames;
use jetloop_tests::{stream_error, TestServer};
use std::io::Write;
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tonic::Code;

/// Log lines written by the server, captured in memory.
#[derive(Clone, Default)]
struct Captured(Arc<Mutex<Vec<u8>>>);

impl Write for Captured {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.0.lock().expect("log buffer").extend_from_slice(buf);
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

impl Captured {
    fn lines(&self, needle: &str) -> Vec<String> {
        let text = String::from_utf8_lossy(&self.0.lock().expect("log buffer")).to_string();
        text.lines().filter(|l| l.contains(needle)).map(str::to_string).collect()
    }

    /// The lines containing `needle` once at least one is there, or after 5 s: the server
    /// logs an expiry when its own deadline fires, which may come just after the client's.
    async fn lines_soon(&self, needle: &str) -> Vec<String> {
        let give_up = std::time::Instant::now() + Duration::from_secs(5);
        loop {
            let l = self.lines(needle);
            if !l.is_empty() || std::time::Instant::now() > give_up {
                return l;
            }
            tokio::time::sleep(Duration::from_millis(10)).await;
        }
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn failures_and_expiries_are_logged_once_with_method_code_and_peer_and_refusals_summarized() {
    let log = Captured::default();
    let writer = log.clone();
    tracing_subscriber::fmt()
        .with_env_filter("info")
        .with_ansi(false)
        .with_writer(move || writer.clone())
        .init();
    let server = TestServer::start_with(jetloop_server::config::Limits {
        max_concurrent_requests: 1,
        ..Default::default()
    })
    .await;
    let ch = server.channel().await;

    // One failed call: one line naming the method, the code and the peer.
    let e = GasDynamicsServiceClient::new(ch.clone())
        .normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 0.5 })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::InvalidArgument);
    let failed = log.lines_soon("call failed").await;
    assert_eq!(failed.len(), 1, "{failed:?}");
    assert!(failed[0].contains("/jetloop.v1.GasDynamicsService/NormalShock"), "{}", failed[0]);
    assert!(failed[0].contains("InvalidArgument") && failed[0].contains("127.0.0.1:"), "{}", failed[0]);

    // One expired call: one line.
    let sweep = npr_sweep(inch_nozzle(3.0), 2.0, 6.0, 10_000);
    let mut req = tonic::Request::new(sweep.clone());
    req.set_timeout(Duration::from_millis(5));
    let e = ToneServiceClient::new(ch.clone()).sweep_screech(req).await.unwrap_err();
    assert!(matches!(e.code(), Code::DeadlineExceeded | Code::Cancelled), "{e:?}");
    let expired = log.lines_soon("call expired").await;
    assert_eq!(expired.len(), 1, "{expired:?}");
    assert!(expired[0].contains("/jetloop.v1.ToneService/SweepScreech") && expired[0].contains("127.0.0.1:"));
    assert_eq!(log.lines("call failed").len(), 1, "an expiry is not logged twice");

    // Sixteen calls at once against a limit of one: the refusals are summarized, not one WARN
    // line each.
    let calls: Vec<_> = (0..16)
        .map(|_| {
            let mut c = ToneServiceClient::new(ch.clone());
            let r = sweep.clone();
            tokio::spawn(async move { c.sweep_screech(r).await })
        })
        .collect();
    let mut refused = 0;
    for c in calls {
        if let Err(e) = c.await.unwrap() {
            assert_eq!(e.code(), Code::Unavailable);
            refused += 1;
        }
    }
    assert!(refused >= 2, "only {refused} refused");
    let summaries = log.lines("calls refused");
    assert!(summaries.len() == 1, "{refused} refusals gave {} lines: {summaries:?}", summaries.len());
    server.stop().await;

    // Over TLS the connection's information reaches the calls too: the failed call's line
    // names its peer, not "unknown".
    let ca = {
        let mut params = rcgen::CertificateParams::new(Vec::<String>::new()).expect("params");
        params.is_ca = rcgen::IsCa::Ca(rcgen::BasicConstraints::Unconstrained);
        rcgen::CertifiedIssuer::self_signed(params, rcgen::KeyPair::generate().expect("key")).expect("CA")
    };
    let key = rcgen::KeyPair::generate().expect("key");
    let cert = rcgen::CertificateParams::new(vec!["127.0.0.1".to_string()])
        .expect("params")
        .signed_by(&key, &ca)
        .expect("certificate");
    let tls = jetloop_server::config::TlsFiles {
        cert_pem: cert.pem().into_bytes(),
        key_pem: key.serialize_pem().into_bytes(),
        client_ca_pem: None,
    };
    let server = TestServer::start_with_options(jetloop_server::config::ServeOptions {
        tls: Some(tls),
        drain_notice: Duration::ZERO,
        ..Default::default()
    })
    .await;
    let ch = tonic::transport::Endpoint::from_shared(server.url().replace("http://", "https://"))
        .expect("url")
        .tls_config(
            tonic::transport::ClientTlsConfig::new()
                .ca_certificate(tonic::transport::Certificate::from_pem(ca.pem())),
        )
        .expect("tls")
        .connect()
        .await
        .expect("TLS connect");
    let e = GasDynamicsServiceClient::new(ch)
        .normal_shock(pb::NormalShockRequest { gamma: Some(9.0), upstream_mach_number: 2.0 })
        .await
        .unwrap_err();
    assert_eq!(e.code(), Code::InvalidArgument);
    let mut over_tls = Vec::new();
    for _ in 0..500 {
        over_tls = log.lines("call failed");
        if over_tls.len() >= 2 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    assert_eq!(over_tls.len(), 2, "{over_tls:?}");
    assert!(over_tls[1].contains("127.0.0.1:") && !over_tls[1].contains("unknown"), "{}", over_tls[1]);
    server.stop().await;

    // A live stream that fails part-way (its answer's headers already out, the status in its
    // trailers) is logged like a failed unary call: one line with the method, code and peer.
    let server = TestServer::start().await;
    let mut c = SpectrumServiceClient::new(server.channel().await);
    let msgs = vec![track_config(48_000.0, 2048, 0.1), track_frames(vec![0u8; 6])];
    let mut updates = c.track_tones(tokio_stream::iter(msgs)).await.expect("stream opens").into_inner();
    let e = stream_error(&mut updates).await.expect("the stream ended without an error");
    assert_eq!(e.code(), Code::InvalidArgument, "{e:?}");
    let mut streamed = Vec::new();
    for _ in 0..500 {
        streamed = log.lines("call failed").into_iter().filter(|l| l.contains("TrackTones")).collect();
        if !streamed.is_empty() {
            break;
        }
        tokio::time::sleep(Duration::from_millis(10)).await;
    }
    assert_eq!(streamed.len(), 1, "a stream failing part-way is logged once: {streamed:?}");
    assert!(
        streamed[0].contains("/jetloop.v1.SpectrumService/TrackTones")
            && streamed[0].contains("InvalidArgument")
            && streamed[0].contains("127.0.0.1:")
            && streamed[0].contains("frames"),
        "{}",
        streamed[0]
    );
    server.stop().await;
}
