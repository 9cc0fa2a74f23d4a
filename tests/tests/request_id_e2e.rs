//! Request ids over a real socket: the caller's x-request-id comes back in the response
//! metadata (error answers included); without one the server makes a new one per call.

use jetloop_proto::pb::{self, gas_dynamics_service_client::GasDynamicsServiceClient};
use jetloop_tests::TestServer;

fn shock(m: f64, id: Option<&str>) -> tonic::Request<pb::NormalShockRequest> {
    let mut r = tonic::Request::new(pb::NormalShockRequest { gamma: None, upstream_mach_number: m });
    if let Some(id) = id {
        r.metadata_mut().insert("x-request-id", id.parse().expect("ascii"));
    }
    r
}

#[tokio::test]
async fn request_ids_round_trip_and_are_made_when_missing() {
    let server = TestServer::start().await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    let r = c.normal_shock(shock(2.0, Some("daq-run-42/point-7"))).await.expect("answer");
    assert_eq!(r.metadata().get("x-request-id").and_then(|v| v.to_str().ok()), Some("daq-run-42/point-7"));
    let e = c.normal_shock(shock(0.5, Some("bad-point-8"))).await.expect_err("subsonic upstream");
    assert_eq!(e.metadata().get("x-request-id").and_then(|v| v.to_str().ok()), Some("bad-point-8"));
    let id = |r: &tonic::Response<pb::NormalShockResponse>| {
        r.metadata().get("x-request-id").and_then(|v| v.to_str().ok()).map(str::to_string).expect("an id")
    };
    let (a, b) = (
        c.normal_shock(shock(2.0, None)).await.expect("a"),
        c.normal_shock(shock(2.0, None)).await.expect("b"),
    );
    let (a, b) = (id(&a), id(&b));
    assert!(a.len() == 16 && a.chars().all(|ch| ch.is_ascii_hexdigit()), "{a}");
    assert_ne!(a, b);
    // An id that is too long or not visible ASCII is replaced.
    let long = "x".repeat(65);
    let r = c.normal_shock(shock(2.0, Some(&long))).await.expect("answer");
    assert_ne!(id(&r), long);
    server.stop().await;
}
