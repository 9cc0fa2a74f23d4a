//! Bearer tokens over a real socket: with tokens configured, calls without one or with a wrong
//! one are refused with UNAUTHENTICATED, the right one passes, and health checks need none.

use jetloop_proto::pb::{self, info_service_client::InfoServiceClient};
use jetloop_server::config::ServeOptions;
use jetloop_tests::{bearer, TestServer};
use tonic::Code;
use tonic_health::pb::{
    health_check_response::ServingStatus, health_client::HealthClient, HealthCheckRequest,
};

const TOKEN: &str = "lab-7-rig-token-0123456789";

fn with_token(token: &str) -> tonic::Request<pb::ServerInfoRequest> {
    bearer(pb::ServerInfoRequest {}, token)
}

/// A call carrying `authorization: <scheme> <token>`.
fn with_scheme(scheme: &str, token: &str) -> tonic::Request<pb::ServerInfoRequest> {
    let mut r = tonic::Request::new(pb::ServerInfoRequest {});
    r.metadata_mut().insert("authorization", format!("{scheme} {token}").parse().expect("ascii"));
    r
}

#[tokio::test]
async fn calls_need_a_valid_token_and_health_checks_do_not() {
    let server = TestServer::start_with_options(ServeOptions {
        tokens: vec![TOKEN.to_string()],
        ..ServeOptions::default()
    })
    .await;
    let mut info = InfoServiceClient::new(server.channel().await);
    let e = info.server_info(pb::ServerInfoRequest {}).await.unwrap_err();
    assert_eq!(e.code(), Code::Unauthenticated, "{e:?}");
    assert!(e.message().contains("Bearer"));
    let e = info.server_info(with_token("lab-7-rig-token-0123456788")).await.unwrap_err();
    assert_eq!(e.code(), Code::Unauthenticated);
    let e = info.server_info(with_token(&TOKEN[..TOKEN.len() - 1])).await.unwrap_err();
    assert_eq!(e.code(), Code::Unauthenticated);
    assert!(info.server_info(with_token(TOKEN)).await.is_ok());
    // RFC 7235 section 2.1: the auth-scheme is a case-insensitive token, so `bearer` and
    // `BeArEr` name the same scheme as `Bearer`; the token itself is still compared exactly.
    for scheme in ["bearer", "BEARER", "BeArEr"] {
        let ok = info.server_info(with_scheme(scheme, TOKEN)).await;
        assert!(ok.is_ok(), "{scheme}: {ok:?}");
        let e = info.server_info(with_scheme(scheme, "lab-7-rig-token-0123456788")).await.unwrap_err();
        assert_eq!(e.code(), Code::Unauthenticated, "{scheme}");
    }
    let e = info.server_info(with_scheme("Basic", TOKEN)).await.unwrap_err();
    assert_eq!(e.code(), Code::Unauthenticated);
    let h = HealthClient::new(server.channel().await)
        .check(HealthCheckRequest { service: String::new() })
        .await
        .expect("health without a token")
        .into_inner();
    assert_eq!(h.status, ServingStatus::Serving as i32);
    server.stop().await;
}
