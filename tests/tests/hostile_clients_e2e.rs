//! End to end over a real socket: clients a shared server meets that do not behave, and how
//! the server stops with them connected.

use jetloop_proto::pb::{self, gas_dynamics_service_client::GasDynamicsServiceClient};
use jetloop_server::config::ServeOptions;
use jetloop_tests::TestServer;
use std::time::{Duration, Instant};
use tonic::Code;
use tonic_health::pb::{
    health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest,
};

#[tokio::test]
async fn shutdown_with_an_idle_connection_says_not_serving_then_ends_within_the_drain_time() {
    // Reproduces: one bare TCP connection that never speaks HTTP/2 kept the graceful shutdown
    // waiting forever (longer than a service manager's stop timeout). Now: health answers
    // NOT_SERVING during the notice, then accepting ends, and after the drain time the idle
    // connection is closed and the server task ends.
    let notice = Duration::from_millis(300);
    let drain = Duration::from_millis(500);
    let mut server = TestServer::start_with_options(ServeOptions {
        drain_notice: notice,
        drain,
        ..ServeOptions::default()
    })
    .await;
    let idle = tokio::net::TcpStream::connect(server.addr).await.expect("bare TCP connection");
    let mut health = HealthClient::new(server.channel().await);
    let serving = |s: &str| HealthCheckRequest { service: s.to_string() };
    let status = health.check(serving("")).await.unwrap().into_inner().status;
    assert_eq!(status, ServingStatus::Serving as i32);

    let asked = Instant::now();
    server.begin_shutdown();
    // NOT_SERVING is seen on the open channel before accepting ends (no sleeping: each check
    // is a round trip).
    let mut seen = false;
    for _ in 0..100_000 {
        match health.check(serving("jetloop.v1.ToneService")).await {
            Ok(r) if r.get_ref().status == ServingStatus::NotServing as i32 => {
                seen = true;
                break;
            }
            Ok(_) => tokio::task::yield_now().await,
            Err(e) => panic!("health stopped answering before NOT_SERVING was seen: {e}"),
        }
    }
    assert!(seen, "health never answered NOT_SERVING");
    assert!(asked.elapsed() < notice, "NOT_SERVING came after the notice period");

    tokio::time::timeout(Duration::from_secs(10), server.stop())
        .await
        .expect("the server is still waiting for the idle connection");
    let took = asked.elapsed();
    assert!(took >= notice, "stopped before the notice period ended: {took:?}");
    assert!(took < notice + drain + Duration::from_secs(2), "took {took:?}");
    drop(idle);
}

#[tokio::test]
async fn reflection_can_be_switched_off() {
    use tonic_reflection::pb::v1::{
        server_reflection_client::ServerReflectionClient, server_reflection_request::MessageRequest,
        ServerReflectionRequest,
    };
    let server = TestServer::start_with_options(ServeOptions {
        reflection: false,
        drain_notice: Duration::ZERO,
        ..ServeOptions::default()
    })
    .await;
    let ch = server.channel().await;
    let req = ServerReflectionRequest {
        host: String::new(),
        message_request: Some(MessageRequest::ListServices(String::new())),
    };
    let e =
        ServerReflectionClient::new(ch.clone()).server_reflection_info(tokio_stream::iter(vec![req])).await;
    let code = match e {
        Err(s) => s.code(),
        Ok(mut r) => r.get_mut().message().await.err().map_or(Code::Ok, |s| s.code()),
    };
    assert_eq!(code, Code::Unimplemented);
    // The API itself still answers.
    let r = GasDynamicsServiceClient::new(ch)
        .normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 2.0 })
        .await
        .unwrap();
    assert!((r.get_ref().downstream_mach_number - 0.577_35).abs() < 1e-5); // NACA 1135, M1 = 2
    server.stop().await;
}

/// Sends raw bytes as the message of a unary RPC (no protobuf encoding), as a broken client
/// or a fuzzer would.
mod raw {
    use bytes::{Buf, BufMut, Bytes};
    use tonic::codec::{Codec, DecodeBuf, Decoder, EncodeBuf, Encoder};

    #[derive(Debug, Default, Clone, Copy)]
    pub struct RawCodec;

    #[derive(Debug, Default, Clone, Copy)]
    pub struct RawEncoder;

    #[derive(Debug, Default, Clone, Copy)]
    pub struct RawDecoder;

    impl Encoder for RawEncoder {
        type Item = Bytes;
        type Error = tonic::Status;

        fn encode(&mut self, item: Bytes, dst: &mut EncodeBuf<'_>) -> Result<(), tonic::Status> {
            dst.put(item);
            Ok(())
        }
    }

    impl Decoder for RawDecoder {
        type Item = Bytes;
        type Error = tonic::Status;

        fn decode(&mut self, src: &mut DecodeBuf<'_>) -> Result<Option<Bytes>, tonic::Status> {
            Ok(Some(src.copy_to_bytes(src.remaining())))
        }
    }

    impl Codec for RawCodec {
        type Encode = Bytes;
        type Decode = Bytes;
        type Encoder = RawEncoder;
        type Decoder = RawDecoder;

        fn encoder(&mut self) -> RawEncoder {
            RawEncoder
        }

        fn decoder(&mut self) -> RawDecoder {
            RawDecoder
        }
    }

    /// Calls `path` with `body` as the message.
    pub async fn call(
        ch: tonic::transport::Channel,
        path: &'static str,
        body: Bytes,
    ) -> Result<Bytes, tonic::Status> {
        let mut grpc = tonic::client::Grpc::new(ch);
        grpc.ready().await.map_err(|e| tonic::Status::unavailable(e.to_string()))?;
        grpc.unary(
            tonic::Request::new(body),
            tonic::codegen::http::uri::PathAndQuery::from_static(path),
            RawCodec,
        )
        .await
        .map(tonic::Response::into_inner)
    }
}

#[tokio::test]
async fn malformed_protobuf_is_invalid_argument_and_over_limit_is_resource_exhausted() {
    // Reproduces: tonic's default answered a body of 0xff 0xff (a varint that never ends) with
    // INTERNAL and an over-limit message with OUT_OF_RANGE.
    let limits = jetloop_server::config::Limits { max_request_bytes: 4096, ..Default::default() };
    let server = TestServer::start_with(limits).await;
    let ch = server.channel().await;
    let path = "/jetloop.v1.GasDynamicsService/NormalShock";
    let e = raw::call(ch.clone(), path, bytes::Bytes::from_static(&[0xff, 0xff])).await.unwrap_err();
    assert_eq!(e.code(), Code::InvalidArgument, "{e:?}");
    jetloop_tests::assert_field(&e, Code::InvalidArgument, "(request body)");
    // A well-formed body still works through the same path: field 2 (upstream Mach number) =
    // 2.0 as a fixed64 (tag 0x11), M2 = 0.57735 (NACA 1135).
    let mut ok = vec![0x11];
    ok.extend_from_slice(&2.0f64.to_le_bytes());
    let answer = raw::call(ch.clone(), path, ok.into()).await.unwrap();
    let r = <pb::NormalShockResponse as prost::Message>::decode(answer).unwrap();
    assert!((r.downstream_mach_number - 0.577_35).abs() < 1e-5);
    // Over the 4096-byte limit: RESOURCE_EXHAUSTED naming the limit.
    let big = vec![0u8; 10_000];
    let e = raw::call(ch, path, big.into()).await.unwrap_err();
    assert_eq!(e.code(), Code::ResourceExhausted, "{e:?}");
    assert!(e.message().contains("4096"), "{}", e.message());
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn expired_heavy_calls_leave_no_computation_running() {
    // Reproduces: a call past its deadline was answered DEADLINE_EXCEEDED but its computation
    // ran on to the end (seconds of CPU for each expired stage fit). Now the deadline sets the
    // call's cancellation flag, the fit stops at its next grid cell, and the server's gauge of
    // running computations is back to 0 within a fraction of the full run time.
    // Each call: 100,000 points, source cell searched over 1..10 and loop orders 1..50 (about
    // 3,000 grid fits of thousands of points; many seconds in a debug build, 1.1 s released).
    use jetloop_proto::pb::{
        info_service_client::InfoServiceClient, staging_service_client::StagingServiceClient,
    };
    let server = TestServer::start_with(jetloop_server::config::Limits {
        max_request_bytes: 64 << 20,
        ..Default::default()
    })
    .await;
    let ch = server.channel().await;
    let heavy = || {
        let mut r = tonic::Request::new(pb::FitStagesRequest {
            control: pb::ControlVariable::NozzlePressureRatio as i32,
            points: jetloop_tests::fixtures::pressure_sweep_points(100_000),
            jet: Some(jetloop_tests::fixtures::conditions(jetloop_tests::fixtures::round(0.0254), 3.0)),
            options: Some(pb::FitOptions { max_loop_order: Some(50), ..Default::default() }),
            stage_labels: None,
        });
        r.set_timeout(Duration::from_millis(400));
        r
    };
    let calls: Vec<_> = (0..4)
        .map(|_| {
            let mut c = StagingServiceClient::new(ch.clone()).max_decoding_message_size(64 << 20);
            let req = heavy();
            tokio::spawn(async move { c.fit_stages(req).await })
        })
        .collect();
    for call in calls {
        let e = call.await.unwrap().unwrap_err();
        assert!(matches!(e.code(), Code::DeadlineExceeded | Code::Cancelled), "{e:?}");
    }
    let answered = Instant::now();
    let mut info = InfoServiceClient::new(ch);
    let mut running = u64::MAX;
    while answered.elapsed() < Duration::from_secs(3) {
        running =
            info.server_info(pb::ServerInfoRequest {}).await.unwrap().into_inner().computations_in_flight;
        if running == 0 {
            break;
        }
        tokio::task::yield_now().await;
    }
    assert_eq!(running, 0, "computations still running {:?} after their deadlines", answered.elapsed());
    server.stop().await;
}

#[tokio::test]
async fn a_silent_connection_does_not_hold_the_shutdown_until_its_handshake_timeout() {
    // Reproduces (measured with bench/hostile_clients_probe.py): a bare TCP connection that
    // never sent a byte kept the release server's shutdown waiting until its handshake timeout
    // (9.5 s of the 10 s default). Now it is closed when accepting ends, so with a long drain
    // time and a longer handshake timeout the server still ends right after the notice.
    let notice = Duration::from_millis(200);
    let mut server = TestServer::start_with_options(ServeOptions {
        drain_notice: notice,
        drain: Duration::from_secs(20),
        connections: jetloop_server::transport::ConnectionLimits {
            max_connections: 64,
            handshake_timeout: Duration::from_secs(60),
        },
        ..ServeOptions::default()
    })
    .await;
    let silent = tokio::net::TcpStream::connect(server.addr).await.expect("bare TCP connection");
    let asked = Instant::now();
    server.begin_shutdown();
    tokio::time::timeout(Duration::from_secs(5), server.stop())
        .await
        .expect("the silent connection held the shutdown");
    assert!(asked.elapsed() < notice + Duration::from_secs(2), "took {:?}", asked.elapsed());
    drop(silent);
}
