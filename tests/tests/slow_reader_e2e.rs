//! End to end over a real socket: a client that never reads its answer (a raw HTTP/2 client
//! that never opens its flow-control window).

use jetloop_proto::pb::{self, gas_dynamics_service_client::GasDynamicsServiceClient};
use jetloop_server::config::Limits;
use jetloop_tests::samples::{pascals_per_unit, raw, welch_segment};
use jetloop_tests::TestServer;
use std::time::{Duration, Instant};
use tonic::Code;

/// An ExtractTones request for 2^18 f32 samples with the PSD of 65,536-sample segments
/// attached (an answer of hundreds of kilobytes, computed in milliseconds), as a gRPC message
/// frame.
fn big_answer_request() -> bytes::Bytes {
    let n = 1 << 18;
    let data: Vec<u8> = (0..n).flat_map(|i| ((i as f32 * 0.37).sin()).to_le_bytes()).collect();
    let req = pb::ExtractTonesRequest {
        samples: Some(raw(data, pb::SampleFormat::F32Le, 51_200.0, 1, Some(pascals_per_unit(1.0)))),
        welch: Some(welch_segment(65_536)),
        psd_output: Some(pb::PsdOutputOptions { include: true, max_points: None }),
        ..Default::default()
    };
    jetloop_tests::hostile::frame(&prost::Message::encode_to_vec(&req)).into()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn an_answer_never_read_holds_its_permit_until_the_connection_is_closed_at_the_deadline() {
    // Reproduces: the admission permit and the time limit ended when the handler returned, so
    // answers a client never read piled up in memory while more calls were admitted. Now the
    // permit covers the whole answer (one call at a time here: others are refused while it is
    // unsent) and at the call's deadline (2 s) the connection is closed, freeing it.
    let server = TestServer::start_with(Limits {
        max_concurrent_requests: 1,
        request_timeout: Duration::from_secs(2),
        ..Limits::default()
    })
    .await;
    let tcp = tokio::net::TcpStream::connect(server.addr).await.unwrap();
    let (client, conn) = h2::client::Builder::new()
        .initial_window_size(0)
        .handshake::<_, bytes::Bytes>(tcp)
        .await
        .expect("HTTP/2 handshake");
    let conn = tokio::spawn(conn); // answers pings and settings, never opens the window
    let mut client = client.ready().await.unwrap();
    let req = http::Request::builder()
        .method("POST")
        .uri(format!("http://{}/jetloop.v1.SpectrumService/ExtractTones", server.addr))
        .header("content-type", "application/grpc")
        .header("te", "trailers")
        .body(())
        .unwrap();
    let (answer, mut send) = client.send_request(req, false).unwrap();
    send.send_data(big_answer_request(), true).unwrap();
    let head = answer.await.expect("answer headers (not flow-controlled) arrive");
    assert_eq!(head.status(), 200);
    assert!(
        head.headers().get("grpc-status").is_none(),
        "an error instead of an answer: {:?}",
        head.headers()
    );
    let ready = Instant::now();

    // The unread answer still holds the only slot.
    let mut gas = GasDynamicsServiceClient::new(server.channel().await);
    let ask = pb::NormalShockRequest { gamma: None, upstream_mach_number: 2.0 };
    let e = gas.normal_shock(ask).await.expect_err("the unread answer holds the only permit");
    assert_eq!(e.code(), Code::Unavailable, "{e:?}");

    // At the deadline the stalled connection is closed, and calls are admitted again.
    // (The client's connection task ends, cleanly or with an error, when the server closes it.)
    let _ =
        tokio::time::timeout(Duration::from_secs(10), conn).await.expect("the stalled connection is closed");
    let closed_after = ready.elapsed();
    assert!(closed_after < Duration::from_secs(4), "closed after {closed_after:?}");
    let mut admitted = false;
    for _ in 0..10_000 {
        match gas.normal_shock(ask).await {
            Ok(r) => {
                assert!((r.into_inner().downstream_mach_number - 0.577_35).abs() < 1e-5); // NACA 1135
                admitted = true;
                break;
            }
            Err(e) if e.code() == Code::Unavailable => tokio::task::yield_now().await,
            Err(e) => panic!("{e:?}"),
        }
    }
    assert!(admitted, "calls are still refused after the stalled answer was dropped");
    server.stop().await;
}
