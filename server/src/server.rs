//! Builds the tonic server: jetloop services, health, reflection and the limits around them.

use crate::admission::AdmissionLayer;
use crate::config::Limits;
use crate::service::{
    gas_dynamics::GasDynamics, info::Info, shock_cells::ShockCells, spectrum::Spectrum, staging::Staging,
    tones::Tones,
};
use jetloop_proto::pb::{
    gas_dynamics_service_server::GasDynamicsServiceServer, info_service_server::InfoServiceServer,
    shock_cell_service_server::ShockCellServiceServer, spectrum_service_server::SpectrumServiceServer,
    staging_service_server::StagingServiceServer, tone_service_server::ToneServiceServer,
};
use std::future::Future;
use tokio::net::TcpListener;
use tonic::transport::Server;

/// Error starting or running the server.
#[derive(Debug, thiserror::Error)]
pub enum ServeError {
    /// Reflection could not load the descriptor set (a build defect).
    #[error("reflection setup failed: {0}")]
    Reflection(#[from] tonic_reflection::server::Error),
    /// The transport failed.
    #[error("transport: {0}")]
    Transport(#[from] tonic::transport::Error),
}

/// Serves every jetloop service on an already bound listener until `shutdown` resolves, then
/// finishes the calls in flight.
///
/// # Errors
/// [`ServeError`] when reflection cannot be built or the transport fails.
pub async fn serve(
    listener: TcpListener,
    limits: Limits,
    shutdown: impl Future<Output = ()> + Send,
) -> Result<(), ServeError> {
    let (health_reporter, health) = tonic_health::server::health_reporter();
    health_reporter.set_serving::<GasDynamicsServiceServer<GasDynamics>>().await;
    health_reporter.set_serving::<InfoServiceServer<Info>>().await;
    health_reporter.set_serving::<ShockCellServiceServer<ShockCells>>().await;
    health_reporter.set_serving::<ToneServiceServer<Tones>>().await;
    health_reporter.set_serving::<SpectrumServiceServer<Spectrum>>().await;
    health_reporter.set_serving::<StagingServiceServer<Staging>>().await;

    let reflection_v1 = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(jetloop_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1()?;
    // Python's grpcio-reflection client still speaks v1alpha.
    let reflection_v1alpha = tonic_reflection::server::Builder::configure()
        .register_encoded_file_descriptor_set(jetloop_proto::FILE_DESCRIPTOR_SET)
        .register_encoded_file_descriptor_set(tonic_health::pb::FILE_DESCRIPTOR_SET)
        .build_v1alpha()?;

    let max = limits.max_request_bytes;
    let gas = GasDynamicsServiceServer::new(GasDynamics).max_decoding_message_size(max);
    let info = InfoServiceServer::new(Info::new(limits)).max_decoding_message_size(max);
    let cells = ShockCellServiceServer::new(ShockCells).max_decoding_message_size(max);
    let tones = ToneServiceServer::new(Tones).max_decoding_message_size(max);
    // Spectra with the PSD attached can be large: allow answers up to the request limit too.
    let spectrum =
        SpectrumServiceServer::new(Spectrum).max_decoding_message_size(max).max_encoding_message_size(max);
    let staging =
        StagingServiceServer::new(Staging).max_decoding_message_size(max).max_encoding_message_size(max);

    Server::builder()
        // A span per call, so logs carry the method path.
        .trace_fn(|req| tracing::info_span!("grpc", path = %req.uri().path()))
        // Large flow-control windows: a DAQ block of a few MB then arrives in one round trip
        // instead of many 64 KB steps (the default), which dominated upload time.
        .initial_stream_window_size(Some(16 * 1024 * 1024))
        .initial_connection_window_size(Some(32 * 1024 * 1024))
        // Calls in flight bounded server-wide (the excess refused at once with UNAVAILABLE and
        // a retry hint) and deadlines answered with DEADLINE_EXCEEDED: see `admission`.
        .layer(AdmissionLayer::new(limits.max_concurrent_requests, limits.request_timeout))
        .add_service(health)
        .add_service(reflection_v1)
        .add_service(reflection_v1alpha)
        .add_service(gas)
        .add_service(info)
        .add_service(cells)
        .add_service(tones)
        .add_service(spectrum)
        .add_service(staging)
        // TCP_NODELAY: without it Nagle's algorithm and delayed ACKs stall multi-megabyte
        // uploads for tens of milliseconds.
        .serve_with_incoming_shutdown(
            tonic::transport::server::TcpIncoming::from(listener).with_nodelay(Some(true)),
            shutdown,
        )
        .await?;
    Ok(())
}
