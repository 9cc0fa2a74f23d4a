//! End to end over a real socket: a flood of bare TCP connections that never speak HTTP/2
//! (its own test binary: it opens many sockets).

use jetloop_proto::pb::{self, gas_dynamics_service_client::GasDynamicsServiceClient};
use jetloop_server::config::ServeOptions;
use jetloop_server::transport::ConnectionLimits;
use jetloop_tests::TestServer;
use std::time::{Duration, Instant};
use tokio::io::AsyncReadExt;
use tonic_health::pb::{
    health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest,
};

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bare_connections_beyond_the_cap_cannot_take_the_server_down() {
    // Reproduces: nothing closed idle or handshake-stalled connections, so thousands of bare
    // TCP connections stayed open until the process ran out of file descriptors and health and
    // every call timed out. Now: at most 16 connections are kept (the rest are closed at
    // once), a connection silent for 300 ms is closed, and health and calls answer.
    let handshake = Duration::from_millis(300);
    let server = TestServer::start_with_options(ServeOptions {
        drain_notice: Duration::ZERO,
        connections: ConnectionLimits { max_connections: 16, handshake_timeout: handshake },
        ..ServeOptions::default()
    })
    .await;
    let mut bare = Vec::new();
    for _ in 0..64 {
        bare.push(tokio::net::TcpStream::connect(server.addr).await.expect("TCP connect"));
    }
    let flooded = Instant::now();
    // Every bare connection is closed by the server: beyond the cap at once, within the cap
    // after the handshake timeout (a read returns end of file, or a reset).
    // (The server's HTTP/2 preface arrives first on the connections it kept.)
    for (i, s) in bare.iter_mut().enumerate() {
        let mut sink = Vec::new();
        let r = tokio::time::timeout(Duration::from_secs(5), s.read_to_end(&mut sink)).await;
        assert!(r.is_ok(), "bare connection {i} still open after 5 s");
    }
    assert!(flooded.elapsed() < handshake + Duration::from_secs(2), "closing took {:?}", flooded.elapsed());
    // Health and a real call answer on a new connection.
    let ch = server.channel().await;
    let h = HealthClient::new(ch.clone())
        .check(HealthCheckRequest { service: String::new() })
        .await
        .expect("health answers after the flood");
    assert_eq!(h.into_inner().status, ServingStatus::Serving as i32);
    let r = GasDynamicsServiceClient::new(ch)
        .normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 2.0 })
        .await
        .expect("a call succeeds after the flood");
    assert!((r.into_inner().downstream_mach_number - 0.577_35).abs() < 1e-5); // NACA 1135
    drop(bare);
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_client_that_speaks_keeps_its_connection_past_the_handshake_timeout() {
    // The handshake timeout only closes silent connections: a client that made a call keeps
    // its connection and calls again after the timeout has passed.
    let server = TestServer::start_with_options(ServeOptions {
        drain_notice: Duration::ZERO,
        connections: ConnectionLimits { max_connections: 16, handshake_timeout: Duration::from_millis(100) },
        ..ServeOptions::default()
    })
    .await;
    let mut c = GasDynamicsServiceClient::new(server.channel().await);
    let ask = pb::NormalShockRequest { gamma: None, upstream_mach_number: 2.0 };
    c.normal_shock(ask).await.expect("first call");
    let t = Instant::now();
    while t.elapsed() < Duration::from_millis(300) {
        c.normal_shock(ask).await.expect("the connection stays open");
        tokio::task::yield_now().await;
    }
    server.stop().await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn health_and_calls_answer_while_silent_connections_hold_every_slot() {
    // Reproduces: with the cap reached by connections that never speak (and a handshake
    // timeout far away), a new client was closed at once, so health and every call failed
    // for as long as the flood lasted. Now the oldest silent connection gives up its slot.
    let server = TestServer::start_with_options(ServeOptions {
        drain_notice: Duration::ZERO,
        connections: ConnectionLimits { max_connections: 16, handshake_timeout: Duration::from_secs(60) },
        ..ServeOptions::default()
    })
    .await;
    let mut bare = Vec::new();
    for _ in 0..64 {
        bare.push(tokio::net::TcpStream::connect(server.addr).await.expect("TCP connect"));
    }
    let t = Instant::now();
    let ch = server.channel().await;
    let h = HealthClient::new(ch.clone())
        .check(HealthCheckRequest { service: String::new() })
        .await
        .expect("health answers while silent connections fill the cap");
    assert_eq!(h.into_inner().status, ServingStatus::Serving as i32);
    let r = GasDynamicsServiceClient::new(ch)
        .normal_shock(pb::NormalShockRequest { gamma: None, upstream_mach_number: 2.0 })
        .await
        .expect("a call succeeds while silent connections fill the cap");
    assert!((r.into_inner().downstream_mach_number - 0.577_35).abs() < 1e-5); // NACA 1135
    assert!(t.elapsed() < Duration::from_secs(5), "took {:?}", t.elapsed());
    drop(bare);
    server.stop().await;
}
