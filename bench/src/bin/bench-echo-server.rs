//! The floor for capacity comparisons: a bare tonic server (no layers, no validation, no
//! physics) answering `GasDynamicsService.IsentropicRatios` by echoing the request's Mach number
//! into an otherwise empty answer; every other method is UNIMPLEMENTED. Same transport
//! settings as the jetloop server where they matter (TCP_NODELAY, HTTP/2 defaults).
//!
//! Usage: `bench-echo-server [ADDR]` (default 127.0.0.1:0); prints `listening on ADDR`.
#![forbid(unsafe_code)]

use jetloop_proto::pb::{
    self,
    gas_dynamics_service_server::{GasDynamicsService, GasDynamicsServiceServer},
};
use std::io::Write;
use tonic::{Request, Response, Status};

struct Echo;

#[tonic::async_trait]
impl GasDynamicsService for Echo {
    async fn isentropic_ratios(
        &self,
        request: Request<pb::IsentropicRatiosRequest>,
    ) -> Result<Response<pb::IsentropicRatiosResponse>, Status> {
        let mach = match request.into_inner().given {
            Some(pb::isentropic_ratios_request::Given::MachNumber(m)) => m,
            _ => 0.0,
        };
        Ok(Response::new(pb::IsentropicRatiosResponse { mach_number: mach, ..Default::default() }))
    }

    async fn normal_shock(
        &self,
        _: Request<pb::NormalShockRequest>,
    ) -> Result<Response<pb::NormalShockResponse>, Status> {
        Err(Status::unimplemented("echo server"))
    }

    async fn jet_state(
        &self,
        _: Request<pb::JetStateRequest>,
    ) -> Result<Response<pb::JetStateResponse>, Status> {
        Err(Status::unimplemented("echo server"))
    }
}

#[tokio::main]
async fn main() {
    let addr = std::env::args().nth(1).unwrap_or_else(|| "127.0.0.1:0".into());
    let listener = tokio::net::TcpListener::bind(&addr).await.expect("bind");
    println!("listening on {}", listener.local_addr().expect("address"));
    let _ = std::io::stdout().flush();
    // TCP_NODELAY on every accepted socket, as jetloop sets it (the builder's tcp_nodelay only
    // applies to listeners it binds itself).
    let incoming =
        tokio_stream::StreamExt::map(tokio_stream::wrappers::TcpListenerStream::new(listener), |s| {
            s.inspect(|s| {
                let _ = s.set_nodelay(true);
            })
        });
    tonic::transport::Server::builder()
        .add_service(GasDynamicsServiceServer::new(Echo))
        .serve_with_incoming(incoming)
        .await
        .expect("serve");
}
